"""tracefit: identify the slip or twin system behind straight bands in micrographs.

One flat namespace over small packages (``docs/architecture.md``)::

    import tracefit as tf

    image, notes = tf.read_image("coupon.png")
    result = tf.analyse_image("coupon.png", tf.Lattice.fcc(),
                              orientation=tf.Orientation.from_euler([10, 20, 30], degrees=True),
                              load=tf.Load.axis("y"))
    result.to_frame()          # one row per band family

Names load on first use, so ``import tracefit`` and the command line start fast.
Conventions (image frame, Bunge angles, hexagonal settings) are fixed in
:mod:`tracefit.conventions` and ``docs/conventions.md``.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.2.0.dev0"

CAUTION = (
    "tracefit supports, and never replaces, qualified investigation. Where a result "
    "feeds a failure analysis of a part in service, defer to local codes, standards "
    "and licensed engineering practice."
)

# Public name -> the module that defines it (imported on first use).
_LAZY = {
    # the chain
    "analyse_image": "tracefit.pipeline",
    "identify": "tracefit.pipeline",
    "detect_families": "tracefit.pipeline",
    "read_grain_map": "tracefit.pipeline",
    "ImageResult": "tracefit.pipeline",
    "run_survey": "tracefit.survey",
    "load_job": "tracefit.survey",
    "survey_statistics": "tracefit.stats",
    # images
    "read_image": "tracefit.image",
    "detect_bands": "tracefit.image",
    "detect_grains": "tracefit.image",
    "render_micrograph": "tracefit.image",
    # crystals and geometry
    "Lattice": "tracefit.crystal",
    "Orientation": "tracefit.crystal",
    "catalogue": "tracefit.crystal",
    "parse_index": "tracefit.crystal",
    "format_index": "tracefit.crystal",
    "index_notation": "tracefit.crystal",
    "restate_label": "tracefit.crystal",
    "predict_traces": "tracefit.predict",
    "Load": "tracefit.predict",
    "FrameSettings": "tracefit.conventions",
    # identification pieces for work that starts half-way
    "ObservedFamily": "tracefit.matching",
    "fit_frame": "tracefit.matching",
    "search_orientations": "tracefit.matching",
    "plane_from_two_traces": "tracefit.matching",
    "read_measured_csv": "tracefit.matching",
    "read_orientation_table": "tracefit.maps",
    "TracefitInputError": "tracefit.errors",
}

__all__ = ["CAUTION", "__version__", *_LAZY]


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'tracefit' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))
