"""Former home of the matcher, kept so that ``tracefit.identify.matching`` imports keep working.

The matcher now lives in modules that show the model; import from :mod:`tracefit.identify`:

* :mod:`tracefit.identify.observed` -- ObservedFamily, observed_from_detection;
* :mod:`tracefit.identify.likelihood` -- logsumexp, axial_logpdf, predicted_trace_sigma, the prior,
  the "none of these" density, family_log_weights;
* :mod:`tracefit.identify.joint` -- joint_marginals (no two families on one plane);
* :mod:`tracefit.identify.candidates` -- CandidateSet, candidate_set, predict_candidates;
* :mod:`tracefit.identify.results` -- SystemChoice, Candidate, FamilyIdentification, identifications_to_json;
* :mod:`tracefit.identify.assign` -- identify_families, identify_grains.
"""

from tracefit.identify.assign import (
    DEFAULT_AMBIGUITY_RATIO,
    DEFAULT_REPORT_THRESHOLD,
    identify_families,
    identify_grains,
)
from tracefit.identify.candidates import CandidateSet, candidate_set, predict_candidates
from tracefit.identify.joint import joint_marginals
from tracefit.identify.likelihood import (
    DEFAULT_P_NONE,
    axial_logpdf,
    family_log_weights,
    logsumexp,
    predicted_trace_sigma,
)
from tracefit.identify.observed import ObservedFamily, observed_from_detection
from tracefit.identify.results import Candidate, FamilyIdentification, SystemChoice, identifications_to_json
