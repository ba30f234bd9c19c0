"""Band families grain by grain: :func:`detect_grains` runs :func:`detect_bands` on each grain's pixels."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from tracefit.image.detect import detect_bands
from tracefit.image.pergrain import _run_grains
from tracefit.image.results import DetectionResult

__all__ = ["detect_grains"]


def detect_grains(image: np.ndarray, labels: np.ndarray, mask: np.ndarray | None = None, pixel_size_um: float | None = None,
                  *, path: str | None = None, min_pixels: int = 300, grains: Iterable[int] | None = None,
                  **kwargs) -> dict[int, DetectionResult]:
    """Run :func:`detect_bands` on every grain of a label image, each on its own pixels.

    Each grain is cropped to its bounding box (plus 8 px) and analysed with the other
    grains masked out; a data bar is looked for once, on the whole image.

    Parameters
    ----------
    image : ndarray, (H, W) or (H, W, 3|4)
        Grey (any units) or RGB(A) image.
    labels : ndarray of int, (H, W)
        Grain ids; every id is a grain (pass ``grains`` to choose some).
    mask : ndarray of bool, (H, W), optional
        Pixels to analyse, combined with each grain.
    pixel_size_um : float, optional
        Micrometres per pixel (> 0).
    path : str, optional
        Source file name, carried into the results.
    min_pixels : int
        Grains with fewer analysable pixels are skipped, with a note in their result (>= 0);
        in an image enlarged ``k`` times (``oversampling``) they are counted in the
        original's points (``min_pixels * k**2`` of this image's).
    grains : iterable of int, optional
        Grain ids to analyse (default: all ids of ``labels``).
    **kwargs
        Options of :func:`detect_bands`: ``find_bar, min_bands, max_families,
        working_size, scales, min_coverage, min_depth, min_significance,
        oversampling, notes``. An ``oversampling`` of 0 (the default) is estimated once,
        on the whole image. ``predicted_traces`` here is a dict: integer grain id -> that
        grain's trace angles (degrees, image frame); grains without an entry get none.

    Returns
    -------
    dict of int -> DetectionResult
        One result per grain id (``grain`` set); band lines in whole-image pixels.

    Raises
    ------
    TracefitInputError
        A bad option, image, mask or label image (as :func:`detect_bands`), or a grain id
        that is not an integer or does not occur in ``labels``.
    TypeError
        A keyword that :func:`detect_bands` does not take.

    Examples
    --------
    >>> import numpy as np
    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> labels = np.zeros((256, 256), int)
    >>> labels[:, 128:] = 1
    >>> img, _ = render_micrograph((256, 256), labels=labels, seed=2,
    ...     grain_families={0: [BandFamilySpec(30.0, 16)], 1: [BandFamilySpec(120.0, 16)]})
    >>> out = detect_grains(img, labels)
    >>> {g: [round(f.angle_deg, 1) for f in r.families] for g, r in out.items()}
    {0: [30.0], 1: [120.0]}
    """
    return _run_grains(detect_bands, image, labels, mask, pixel_size_um, path, min_pixels, grains, kwargs)
