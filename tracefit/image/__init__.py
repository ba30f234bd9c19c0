"""Image side of tracefit: reading micrographs and detecting band families.

- :mod:`tracefit.image.io` -- :func:`read_image` (PNG/TIFF/JPEG/BMP to float32 grey), masks
- :mod:`tracefit.image.databar` -- finds an instrument data bar to exclude
- :mod:`tracefit.image.ridges` -- background flattening and oriented-ridge enhancement
- :mod:`tracefit.image.detect` -- :func:`detect_bands`, :func:`detect_grains` and the result dataclasses
- :mod:`tracefit.image.continuation` -- whether a band line runs on into the neighbouring grain
- :mod:`tracefit.image.draw` -- detection overlay (colour per family, legend of angles)
- :mod:`tracefit.image.synthetic` -- synthetic micrographs with known truth (tests, benchmarks, demo)
"""

from tracefit.image.continuation import line_continuation
from tracefit.image.detect import BandFamily, BandLine, DetectionResult, detect_bands, detect_grains
from tracefit.image.draw import FAMILY_COLOURS, draw_detection, write_detection_overlay
from tracefit.image.io import IMAGE_SUFFIXES, read_image, read_mask, to_gray
from tracefit.image.synthetic import (
    BandFamilySpec,
    SuiteCase,
    SyntheticTruth,
    TrueFamily,
    render_micrograph,
    standard_suite,
    voronoi_labels,
)

__all__ = [
    "read_image", "read_mask", "to_gray", "IMAGE_SUFFIXES",
    "detect_bands", "detect_grains", "BandLine", "BandFamily", "DetectionResult",
    "line_continuation",
    "FAMILY_COLOURS", "draw_detection", "write_detection_overlay",
    "BandFamilySpec", "TrueFamily", "SyntheticTruth", "render_micrograph", "voronoi_labels", "standard_suite", "SuiteCase",
]
