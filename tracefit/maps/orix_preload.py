"""Importing this module imports orix (under the machine-wide lock of :mod:`.orix_import`).

Named in a survey's worker-server preload list when a job reads orientation maps, so that
orix is compiled or loaded once, before the workers are forked, not in each of them.
"""

from tracefit.maps.orix_import import import_orix

import_orix()
