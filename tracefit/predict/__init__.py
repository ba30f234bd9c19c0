"""Predictions from geometry alone: trace angles of candidate planes in the image, their
inclination and tilt slope (:mod:`~tracefit.predict.traces`), loads (:mod:`~tracefit.predict.loading`)
and the Schmid factors and resolved shear they give (:mod:`~tracefit.predict.resolved`).
"""

from tracefit.predict import loading as _loading
from tracefit.predict import resolved as _resolved
from tracefit.predict import traces as _traces
from tracefit.predict.loading import DEFAULT_LOAD_FRAME, FRAMES, SENSES, Load, LoadAxis, as_load, load_from_fields, parse_load, resolved_drive, system_schmid_factors
from tracefit.predict.resolved import activation_stress, crss_of, reported_drive, resolved_shear, schmid_factor, stress_tensor
from tracefit.predict.traces import (
    NEAR_SURFACE_DEG,
    PredictedTrace,
    SystemResult,
    TraceTable,
    plane_normals_in_image,
    predict_traces,
    predicted_trace_table,
    tilt_slope,
    trace_angles,
    trace_rotation_gradient,
)

__all__ = [*_traces.__all__, *_loading.__all__, *_resolved.__all__]
