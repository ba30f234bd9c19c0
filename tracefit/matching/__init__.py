"""From observed band families to planes and systems.

The chain, one module each: observed families (:mod:`~tracefit.matching.observed`) and candidate
planes with their predicted traces (:mod:`~tracefit.matching.candidates`) -> probability
primitives, prior and "none of these" (:mod:`~tracefit.matching.likelihood`) -> joint per-grain
assignment (:mod:`~tracefit.matching.joint`, :mod:`~tracefit.matching.assign`) -> verdicts
(:mod:`~tracefit.matching.verdicts`, :mod:`~tracefit.matching.results`). Around it: map-level
surface artefacts (:mod:`~tracefit.matching.artefacts`), the frame check
(:mod:`~tracefit.matching.frame_fit`), the orientation search
(:mod:`~tracefit.matching.orient_search`), two-face analysis (:mod:`~tracefit.matching.twoface`)
and hand-measured traces (:mod:`~tracefit.matching.measured`).

Every public name of those modules is exported here (their ``__all__``), plus the load
helpers :func:`resolve_load` and :func:`rank_systems` and :func:`separation_hints`.
"""

from tracefit.matching import (
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
from tracefit.matching.artefacts import *  # noqa: F401,F403
from tracefit.matching.assign import *  # noqa: F401,F403
from tracefit.matching.candidates import *  # noqa: F401,F403
from tracefit.matching.frame_fit import *  # noqa: F401,F403
from tracefit.matching.joint import *  # noqa: F401,F403
from tracefit.matching.likelihood import *  # noqa: F401,F403
from tracefit.matching.loading import rank_systems, resolve_load
from tracefit.matching.measured import *  # noqa: F401,F403
from tracefit.matching.observed import *  # noqa: F401,F403
from tracefit.matching.orient_search import *  # noqa: F401,F403
from tracefit.matching.results import *  # noqa: F401,F403
from tracefit.matching.twoface import *  # noqa: F401,F403
from tracefit.matching.verdicts import separation_hints

__all__ = [
    name
    for module in (observed, candidates, likelihood, joint, results, assign, artefacts, frame_fit, orient_search,
                   twoface, measured)
    for name in module.__all__
] + ["rank_systems", "resolve_load", "separation_hints"]
