"""Predictions from geometry alone: trace angles of candidate planes in the image, their
inclination, Schmid factors and resolved shear under a load.
"""


from tracefit.predict.traces import (
    trace_angles,
    plane_normals_in_image,
    PredictedTrace,
    SystemResult,
    TraceTable,
    LoadAxis,
    predict_traces,
    predicted_trace_table,
    parse_load,
    schmid_factor,
    system_schmid_factors,
    resolved_shear,
    stress_tensor,
    activation_stress,
    NEAR_SURFACE_DEG,
)

__all__ = [
    "trace_angles",
    "plane_normals_in_image",
    "PredictedTrace",
    "SystemResult",
    "TraceTable",
    "LoadAxis",
    "predict_traces",
    "predicted_trace_table",
    "parse_load",
    "schmid_factor",
    "system_schmid_factors",
    "resolved_shear",
    "stress_tensor",
    "activation_stress",
    "NEAR_SURFACE_DEG",
]
