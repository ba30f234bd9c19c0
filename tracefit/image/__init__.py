"""Image side of tracefit: reading micrographs and detecting band families.

- :mod:`tracefit.image.io` -- :func:`read_image` (PNG/TIFF/JPEG/BMP to float32 grey)
- :mod:`tracefit.image.databar` -- finds an instrument data bar to exclude
- :mod:`tracefit.image.ridges` -- background flattening and oriented-ridge enhancement
- :mod:`tracefit.image.detect` -- :func:`detect_bands`, :func:`detect_grains` and the result dataclasses
- :mod:`tracefit.image.draw` -- detection overlay (colour per family, legend of angles)
"""

from tracefit.image.detect import BandFamily, BandLine, DetectionResult, detect_bands, detect_grains
from tracefit.image.io import read_image

__all__ = ["read_image", "detect_bands", "detect_grains", "BandLine", "BandFamily", "DetectionResult"]
