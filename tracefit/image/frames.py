"""Frames of an in-situ series brought onto the first one: rotation and translation by phase correlation.

The rotation is the trial turn (scanned in 0.25 deg steps, then 0.05 deg) whose undoing gives the
highest phase-correlation peak (Kuglin & Hines 1975, phase correlation; from memory); the
translation then comes from ``skimage.registration.phase_cross_correlation`` with sub-pixel
upsampling. A frame registers when, after the move, it
correlates with the first frame over their overlap; otherwise :class:`TracefitInputError` says so.
Angles follow :mod:`tracefit.conventions` (degrees, counterclockwise as seen on the picture).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["FrameMove", "register_frame", "warp_frame", "MIN_FRAME_CORRELATION"]

#: correlation over the overlap below which a frame does not register
MIN_FRAME_CORRELATION = 0.3


@dataclass(frozen=True)
class FrameMove:
    """How a frame sits relative to the first frame of its series.

    Attributes
    ----------
    rotation_deg : float
        Counterclockwise rotation of the frame's content as seen on the picture, degrees.
    shift_px : tuple of float
        (column, row) shift of the frame's content after the rotation, pixels (rows downward).
    correlation : float
        Correlation coefficient of the two frames over their overlap, once moved back.
    shape : tuple of int
        The first frame's (rows, columns).

    Examples
    --------
    >>> FrameMove(0.5, (3.0, -2.0), 0.9, (64, 64)).to_dict()["rotation_deg"]
    0.5
    """

    rotation_deg: float
    shift_px: tuple
    correlation: float
    shape: tuple

    def to_dict(self) -> dict:
        """Plain values."""
        return {"rotation_deg": round(self.rotation_deg, 3), "shift_px": [round(float(x), 2) for x in self.shift_px],
                "correlation": round(self.correlation, 3)}


def _prepared(img: np.ndarray) -> np.ndarray:
    a = np.asarray(img, float)
    a = np.where(np.isfinite(a), a, np.nanmean(a))
    return (a - a.mean()) / (a.std() or 1.0)


def _same_size(a: np.ndarray, shape) -> np.ndarray:
    out = np.zeros(shape)
    h, w = min(a.shape[0], shape[0]), min(a.shape[1], shape[1])
    out[:h, :w] = a[:h, :w]
    return out


def _peak(fa: np.ndarray, b: np.ndarray) -> float:
    """Height of the phase-correlation peak between a spectrum ``fa`` and an image ``b``."""
    x = fa * np.conj(np.fft.fft2(b))
    return float(np.real(np.fft.ifft2(x / np.maximum(np.abs(x), 1e-12))).max())


def _rotation(ref: np.ndarray, mov: np.ndarray, max_rotation_deg: float) -> float:
    """The turn whose undoing gives the highest phase-correlation peak: a coarse scan, then a fine one."""
    from skimage.filters import window

    step = max(1, int(max(ref.shape) // 256))  # the scan runs on a reduced copy of large frames
    r, m = ref[::step, ::step], mov[::step, ::step]
    win = window("hann", r.shape)
    fr = np.fft.fft2(r * win)

    def score(a):
        return _peak(fr, warp_frame(m, FrameMove(a, (0.0, 0.0), 1.0, r.shape), fill=0.0) * win)

    coarse = np.arange(-max_rotation_deg, max_rotation_deg + 1e-9, 0.25)
    best = float(coarse[int(np.argmax([score(a) for a in coarse]))])
    fine = best + np.arange(-0.25, 0.2501, 0.05)
    return float(fine[int(np.argmax([score(a) for a in fine]))])


def warp_frame(image: np.ndarray, move: FrameMove, order: int = 1, fill: float = np.nan) -> np.ndarray:
    """A frame moved back onto the first frame's pixels (the inverse of ``move``).

    Parameters
    ----------
    image : ndarray (H, W)
        The frame (any size; it is placed at the top-left of the first frame's shape).
    move : FrameMove
    order : int
        Interpolation order (0 nearest, 1 linear).
    fill : float
        Value of pixels that the frame does not cover.

    Returns
    -------
    ndarray, ``move.shape``

    Examples
    --------
    >>> img = np.zeros((32, 32)); img[10, 12] = 1.0
    >>> out = warp_frame(img, FrameMove(0.0, (2.0, 1.0), 1.0, (32, 32)), order=0, fill=0.0)
    >>> tuple(int(v) for v in np.argwhere(out == 1.0)[0])
    (9, 10)
    """
    from skimage.transform import EuclideanTransform, warp

    h, w = move.shape
    a = _same_size(np.asarray(image, float), (h, w)) if np.asarray(image).shape != (h, w) else np.asarray(image, float)
    c = np.array([(w - 1) / 2.0, (h - 1) / 2.0])
    # forward model of the frame: turn by -theta in (col, row) (rows point down, so a CCW turn on the
    # picture is clockwise in array axes) about the centre, then shift
    t = np.radians(-move.rotation_deg)
    R = np.array([[np.cos(t), -np.sin(t)], [np.sin(t), np.cos(t)]])
    M = np.eye(3)
    M[:2, :2] = R
    M[:2, 2] = c - R @ c + np.asarray(move.shift_px, float)
    # warp() maps output (reference) coordinates to input (frame) coordinates: exactly M
    return warp(a, EuclideanTransform(matrix=M), order=order, cval=fill, preserve_range=True,
                output_shape=(h, w))


def register_frame(reference: np.ndarray, frame: np.ndarray, max_rotation_deg: float = 5.0,
                   min_correlation: float = MIN_FRAME_CORRELATION) -> FrameMove:
    """Find the rotation and translation that bring ``frame`` onto ``reference``.

    Parameters
    ----------
    reference : ndarray (H, W)
        The first frame of the series.
    frame : ndarray (h, w)
        A later frame (another size is allowed; it is compared at the top-left of ``reference``).
    max_rotation_deg : float
        The largest rotation looked for, degrees.
    min_correlation : float
        Correlation over the overlap below which the frames do not register.

    Returns
    -------
    FrameMove

    Raises
    ------
    TracefitInputError
        The frames do not register (too little correlation), or either is not a 2-D image.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> from scipy.ndimage import gaussian_filter, shift
    >>> ref = gaussian_filter(rng.normal(size=(128, 128)), 3)
    >>> mv = register_frame(ref, shift(ref, (4, -3)))
    >>> [round(v) for v in mv.shift_px], abs(mv.rotation_deg) < 0.3
    ([-3, 4], True)
    """
    from skimage.registration import phase_cross_correlation

    ref = np.asarray(reference)
    mov = np.asarray(frame)
    if ref.ndim != 2 or mov.ndim != 2 or min(ref.shape + mov.shape) < 16:
        raise TracefitInputError("frames to register must be 2-D images of at least 16 x 16 pixels")
    r = _prepared(ref)
    m = _same_size(_prepared(mov), r.shape)
    ang = _rotation(r, m, max_rotation_deg)
    unrot = warp_frame(m, FrameMove(ang, (0.0, 0.0), 1.0, r.shape), fill=0.0)
    shift = phase_cross_correlation(r, unrot, upsample_factor=10, normalization=None)[0]
    move = FrameMove(ang, (-float(shift[1]), -float(shift[0])), 0.0, r.shape)
    back = warp_frame(_prepared(mov), move)
    cover = np.isfinite(back)
    cover[min(mov.shape[0], r.shape[0]):, :] &= False
    if cover.sum() < 0.25 * r.size:
        raise TracefitInputError(f"the frames do not register: after the best shift ({move.shift_px[0]:.0f}, "
                                 f"{move.shift_px[1]:.0f}) px they overlap on under a quarter of the first frame")
    cc = float(np.corrcoef(r[cover], back[cover])[0, 1])
    if not np.isfinite(cc) or cc < min_correlation:
        raise TracefitInputError(f"the frames do not register: the best rotation and shift leave a correlation of "
                                 f"{cc:.2f} (at least {min_correlation:g} needed); are they the same field?")
    return FrameMove(ang, move.shift_px, cc, r.shape)
