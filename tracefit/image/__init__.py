"""Image side of tracefit: reading micrographs and detecting band families.

- :mod:`tracefit.image.io` -- :func:`read_image` (PNG/TIFF/JPEG/BMP to float32 grey), masks
- :mod:`tracefit.image.detect` -- :func:`detect_bands`, :func:`detect_grains`: the
  detector's stages in order, each in its own module:

  - :mod:`~tracefit.image.options` -- the options, their types, ranges and defaults
  - :mod:`~tracefit.image.prepare` -- checked input, data bar, reduced working copy
  - :mod:`~tracefit.image.databar` -- finds an instrument data bar to exclude
  - :mod:`~tracefit.image.ridges` -- background flattening, oriented-ridge enhancement, noise
  - :mod:`~tracefit.image.depth` -- depth of a band against the local median grey
  - :mod:`~tracefit.image.hough` -- Hough line candidates, angle clusters, Radon refinement
  - :mod:`~tracefit.image.families` -- one family from a candidate (band fits and tests)
  - :mod:`~tracefit.image.bandfit` -- one band's line fitted at full resolution
  - :mod:`~tracefit.image.results` -- :class:`BandLine`, :class:`BandFamily`, :class:`DetectionResult`
  - :mod:`~tracefit.image.geometry` -- pixel geometry shared by detector and renderer
  - :mod:`~tracefit.image.projection` -- families of short bands in small regions, by projection
  - :mod:`~tracefit.image.sampling` -- :func:`estimate_oversampling`: how much an image was enlarged
  - :mod:`~tracefit.image.pergrain` -- grain by grain, for :func:`detect_grains` and :func:`detect_bands`
- :mod:`tracefit.image.continuation` -- whether a band line runs on into the neighbouring grain
- :mod:`tracefit.image.draw` -- detection overlay (colour per family, legend of angles)
- :mod:`tracefit.image.synthetic` -- synthetic micrographs with known truth (tests, benchmarks, demo)
- :mod:`tracefit.image.suite` -- the standard synthetic suite of the tests and benchmarks
"""

from tracefit.image.continuation import line_continuation
from tracefit.image.detect import detect_bands
from tracefit.image.grains import detect_grains
from tracefit.image.draw import FAMILY_COLOURS, draw_detection, write_detection_overlay
from tracefit.image.io import IMAGE_SUFFIXES, read_image, read_mask, to_gray
from tracefit.image.options import DETECT_OPTIONS, check_detect_options
from tracefit.image.results import BandFamily, BandLine, DetectionResult
from tracefit.image.sampling import Oversampling, estimate_oversampling
from tracefit.image.suite import SuiteCase, standard_suite
from tracefit.image.synthetic import (
    BandFamilySpec,
    SyntheticTruth,
    TrueFamily,
    render_micrograph,
    voronoi_labels,
)

__all__ = [
    "read_image", "read_mask", "to_gray", "IMAGE_SUFFIXES",
    "detect_bands", "detect_grains", "BandLine", "BandFamily", "DetectionResult",
    "DETECT_OPTIONS", "check_detect_options", "estimate_oversampling", "Oversampling",
    "line_continuation",
    "FAMILY_COLOURS", "draw_detection", "write_detection_overlay",
    "BandFamilySpec", "TrueFamily", "SyntheticTruth", "render_micrograph", "voronoi_labels", "standard_suite", "SuiteCase",
]
