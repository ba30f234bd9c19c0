"""The one analysis chain: read -> detect -> predict -> identify -> results.

Every entry point runs this chain with the same defaults: ``tracefit identify`` on one
image, ``tracefit survey`` on a job that holds it, and :func:`analyse_image` in a notebook
give the same planes and probabilities for the same settings. The stages are public too,
for work that starts half-way (families measured by hand, a detection done elsewhere):

1. :func:`read_grain_map` -- a grain label image and its orientation table, checked together;
2. :func:`detect_families` -- band families per grain (or in the whole image), as
   :class:`~tracefit.matching.ObservedFamily` objects, with the status of every grain;
3. :func:`identify` -- candidate planes and systems with probabilities (artefact test,
   joint per-grain assignment, line continuation carried through, frame check);
4. :func:`analyse_image` -- all of the above for one micrograph, returning an
   :class:`ImageResult` that tables, figures, the report and ``--json`` all read.

Settings and their defaults are declared once in :mod:`tracefit.options`.
"""

from tracefit.pipeline.chain import analyse_image, detect_families, identify, observe_image, resolve_settings
from tracefit.pipeline.grainmap import orientation_table, read_grain_map, read_label_map
from tracefit.results import FamilyDetection, GrainStatus, Identification, ImageResult

__all__ = [
    "GrainStatus",
    "FamilyDetection",
    "Identification",
    "ImageResult",
    "orientation_table",
    "read_label_map",
    "read_grain_map",
    "observe_image",
    "detect_families",
    "identify",
    "analyse_image",
    "resolve_settings",
]
