"""From observed band families to planes and systems.

The chain, one module each: observed families (:mod:`~tracefit.identify.observed`) and candidate
planes with their predicted traces (:mod:`~tracefit.identify.candidates`) -> probability
primitives, prior and "none of these" (:mod:`~tracefit.identify.likelihood`) -> joint per-grain
assignment (:mod:`~tracefit.identify.joint`, :mod:`~tracefit.identify.assign`) -> verdicts
(:mod:`~tracefit.identify.verdicts`, :mod:`~tracefit.identify.results`). Around it: map-level
surface artefacts (:mod:`~tracefit.identify.artefacts`), the frame check
(:mod:`~tracefit.identify.frame_fit`), the orientation search
(:mod:`~tracefit.identify.orient_search`), two-face analysis (:mod:`~tracefit.identify.twoface`)
and hand-measured traces (:mod:`~tracefit.identify.measured`).

Every public name of those modules is exported here (their ``__all__``), plus the load
helpers :func:`resolve_load` and :func:`rank_systems` and :func:`separation_hints`.
"""

from tracefit.identify import (
    artefacts,
    assign,
    candidates,
    frame_fit,
    joint,
    likelihood,
    measured,
    observed,
    orient_search,
    results,
    twoface,
)
from tracefit.identify.artefacts import *  # noqa: F401,F403
from tracefit.identify.assign import *  # noqa: F401,F403
from tracefit.identify.candidates import *  # noqa: F401,F403
from tracefit.identify.frame_fit import *  # noqa: F401,F403
from tracefit.identify.joint import *  # noqa: F401,F403
from tracefit.identify.likelihood import *  # noqa: F401,F403
from tracefit.identify.loading import rank_systems, resolve_load
from tracefit.identify.measured import *  # noqa: F401,F403
from tracefit.identify.observed import *  # noqa: F401,F403
from tracefit.identify.orient_search import *  # noqa: F401,F403
from tracefit.identify.results import *  # noqa: F401,F403
from tracefit.identify.twoface import *  # noqa: F401,F403
from tracefit.identify.verdicts import separation_hints

__all__ = [
    name
    for module in (observed, candidates, likelihood, joint, results, assign, artefacts, frame_fit, orient_search,
                   twoface, measured)
    for name in module.__all__
] + ["rank_systems", "resolve_load", "separation_hints"]
