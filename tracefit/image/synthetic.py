"""Synthetic micrographs of deformed crystals with known truth.

:func:`render_micrograph` draws families of straight parallel bands (slip or twin
traces) at chosen image-frame angles, spacings, widths and contrasts, optionally per
grain of a Voronoi (or user) label image, and adds the nuisances of real images:
grain boundaries, uneven illumination, noise, blur, polishing scratches, an
instrument data bar and JPEG compression. It returns the image and a
:class:`SyntheticTruth` with everything that was drawn, so that the detector can be
scored against it. Everything is deterministic from ``seed``.

:func:`tracefit.image.suite.standard_suite` yields the
reference set of images used by the tests and by ``benchmarks/detect.py``.

Angles follow :mod:`tracefit.conventions`: image frame, x right, y up, degrees ccw from +x,
axial in [0, 180). Pixel coordinates are (column, row) with rows growing downward.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import cv2
import numpy as np

from tracefit.conventions import angle_to_pixel_direction, fold_axial
from tracefit.errors import TracefitInputError
from tracefit.image.geometry import _clip_line_to_box

__all__ = [
    "BandFamilySpec",
    "TrueFamily",
    "SyntheticTruth",
    "render_micrograph",
    "voronoi_labels",
]


@dataclass(frozen=True)
class BandFamilySpec:
    """One family of parallel bands to render.

    Parameters
    ----------
    angle_deg : float
        Image-frame axial angle of the bands, degrees.
    spacing_px : float
        Mean perpendicular distance between neighbouring bands, pixels.
    width_px : float
        Full width at half depth of one band, pixels.
    contrast : float
        Band depth relative to the local grey level; negative draws dark bands,
        positive bright ones (e.g. -0.3 darkens the band centre by 30 %).
    spacing_jitter : float
        Relative standard deviation of the individual spacings (0 = perfectly periodic).
    offset_px : float or None
        Position of the first band along the band normal, pixels; random if None.
    amplitude_jitter : float
        Relative standard deviation of the individual band contrasts.

    Examples
    --------
    >>> spec = BandFamilySpec(30.0, spacing_px=20, contrast=0.25)
    >>> spec.angle_deg, spec.spacing_px, spec.width_px
    (30.0, 20, 3.0)
    """

    angle_deg: float
    spacing_px: float = 24.0
    width_px: float = 3.0
    contrast: float = -0.3
    spacing_jitter: float = 0.15
    offset_px: float | None = None
    amplitude_jitter: float = 0.2


@dataclass
class TrueFamily:
    """A family as rendered: angle, nominal spacing and the band centre lines.

    Parameters
    ----------
    angle_deg : float
        Image-frame axial angle, degrees in [0, 180).
    spacing_px, width_px : float
        Nominal spacing and band width (FWHM), pixels.
    contrast : float
        Relative band depth (negative: dark bands).
    grain : int or None
        Grain id the family was drawn in (None: the whole image).
    lines : list of (col0, row0, col1, row1)
        Band centre lines clipped to the image (or the grain's bounding box), pixels.

    Examples
    --------
    >>> fam = TrueFamily(30.0, 20.0, 3.0, -0.3, None, [(0.0, 10.0, 50.0, 39.0)])
    >>> fam.n_bands
    1
    """

    angle_deg: float
    spacing_px: float
    width_px: float
    contrast: float
    grain: int | None
    #: band centre lines clipped to the image (or grain bounding box): (col0, row0, col1, row1), px
    lines: list[tuple[float, float, float, float]] = field(default_factory=list)

    @property
    def n_bands(self) -> int:
        """Number of band lines drawn (int)."""
        return len(self.lines)


@dataclass
class SyntheticTruth:
    """Everything :func:`render_micrograph` drew.

    Parameters
    ----------
    shape : (int, int)
        Image (rows, columns).
    families : list of TrueFamily
        Rendered band families (image frame angles in degrees).
    databar_bbox : tuple or None
        Data bar box (col0, row0, col1, row1), pixels, end-exclusive, or None.
    scratches : list of tuple
        Scratch lines (col0, row0, col1, row1), pixels.
    labels : ndarray of int, (rows, columns), or None
        Integer grain label image (0..n-1) when grains were rendered.
    pixel_size_um : float or None
        Pixel size written into the data bar (um per pixel).

    Examples
    --------
    >>> _, truth = render_micrograph((64, 64), [BandFamilySpec(45.0, 16)], seed=0)
    >>> truth.family_angles, len(truth.families_of_grain(None))
    ([45.0], 1)
    """

    shape: tuple[int, int]
    families: list[TrueFamily]
    databar_bbox: tuple[int, int, int, int] | None = None
    scratches: list[tuple[float, float, float, float]] = field(default_factory=list)
    labels: np.ndarray | None = None
    pixel_size_um: float | None = None

    @property
    def family_angles(self) -> list[float]:
        """True family angles (image frame, degrees), in drawing order."""
        return [f.angle_deg for f in self.families]

    def families_of_grain(self, grain: int | None) -> list[TrueFamily]:
        """Families rendered in one grain.

        Parameters
        ----------
        grain : int or None
            Grain id; None selects the families drawn over the whole image.

        Returns
        -------
        list of TrueFamily
        """
        return [f for f in self.families if f.grain == grain]


# --------------------------------------------------------------------------- helpers


def _clip_line(p0, d, box):
    """Clip the infinite line p0 + t d to box (c0, r0, c1, r1).

    Returns the endpoints ((c, r), (c, r)) or None when the line misses the box.
    """
    seg = _clip_line_to_box(p0, d, box)
    if seg is None:
        return None
    t_lo, t_hi = seg
    return (p0[0] + t_lo * d[0], p0[1] + t_lo * d[1]), (p0[0] + t_hi * d[0], p0[1] + t_hi * d[1])


def _band_profile(dist, width):
    # Gaussian profile with full width at half maximum = width.
    return np.exp(-4.0 * np.log(2.0) * (dist / max(width, 0.3)) ** 2, dtype=np.float32)


def voronoi_labels(shape: tuple[int, int], n_grains: int, seed: int = 0) -> np.ndarray:
    """Integer label image (0..n-1) of a Voronoi tessellation with random seeds.

    Parameters
    ----------
    shape : (int, int)
        Image (rows, columns).
    n_grains : int
        Number of grains (>= 1).
    seed : int
        Random seed.

    Returns
    -------
    ndarray of int32, shape ``shape``
        Grain id of each pixel.

    Raises
    ------
    TracefitInputError
        ``n_grains`` below 1 or a shape with a side below 1 pixel.

    Examples
    --------
    >>> lab = voronoi_labels((64, 96), 4, seed=1)
    >>> lab.shape, sorted(set(lab.ravel().tolist()))
    ((64, 96), [0, 1, 2, 3])
    """
    if int(n_grains) < 1:
        raise TracefitInputError(f"n_grains must be at least 1, got {n_grains!r}")
    if len(shape) != 2 or min(int(shape[0]), int(shape[1])) < 1:
        raise TracefitInputError(f"shape must be (rows, columns) of at least 1 pixel, got {shape!r}")
    rng = np.random.default_rng(seed)
    h, w = shape
    pts = rng.uniform((0, 0), (w, h), size=(n_grains, 2)).astype(np.float32)
    labels = np.zeros((h, w), np.int32)
    best = np.full((h, w), np.inf, np.float32)
    cols = np.arange(w, dtype=np.float32)[None, :]
    rows = np.arange(h, dtype=np.float32)[:, None]
    for i, (pc, pr) in enumerate(pts):
        d = (cols - pc) ** 2 + (rows - pr) ** 2
        closer = d < best
        best[closer] = d[closer]
        labels[closer] = i
    return labels


def _render_family(canvas, spec, region, box, rng, grain, chunk_rows=512):
    """Multiply bands of one family into ``canvas`` (in place) over ``region`` (bool or None)."""
    h, w = canvas.shape
    theta = float(fold_axial(spec.angle_deg))
    dc, dr = angle_to_pixel_direction(theta)
    nc, nr = -dr, dc  # unit normal in (col, row); perpendicular to the band direction
    c0, r0, c1, r1 = box
    corners = np.array([[c0, r0], [c1, r0], [c0, r1], [c1, r1]], float)
    s_all = corners @ np.array([nc, nr])
    s_lo, s_hi = s_all.min() - spec.width_px * 3, s_all.max() + spec.width_px * 3
    first = spec.offset_px if spec.offset_px is not None else rng.uniform(0, spec.spacing_px)
    steps = spec.spacing_px * (1.0 + spec.spacing_jitter * rng.standard_normal(int((s_hi - s_lo) / spec.spacing_px) + 8))
    steps = np.clip(steps, 0.4 * spec.spacing_px, None)
    centres = s_lo + first + np.concatenate([[0.0], np.cumsum(steps)])
    centres = centres[centres <= s_hi]
    amps = spec.contrast * np.clip(1.0 + spec.amplitude_jitter * rng.standard_normal(len(centres)), 0.3, 2.0)
    if len(centres) == 0:
        return TrueFamily(theta, spec.spacing_px, spec.width_px, spec.contrast, grain, [])
    cols = np.arange(w, dtype=np.float32)[None, :]
    for a in range(0, h, chunk_rows):
        b = min(h, a + chunk_rows)
        rows = np.arange(a, b, dtype=np.float32)[:, None]
        s = cols * np.float32(nc) + rows * np.float32(nr)
        k = np.clip(np.searchsorted(centres, s), 1, len(centres) - 1) if len(centres) > 1 else np.zeros(s.shape, int)
        mod = np.zeros(s.shape, np.float32)
        for kk in (k - 1, k) if len(centres) > 1 else (k,):
            mod += amps[kk].astype(np.float32) * _band_profile(s - centres[kk].astype(np.float32), spec.width_px)
        factor = 1.0 + mod
        if region is not None:
            factor = np.where(region[a:b], factor, np.float32(1.0))
        canvas[a:b] *= factor
    lines = []
    for s_k in centres:
        seg = _clip_line((s_k * nc, s_k * nr), (dc, dr), (c0, r0, c1 - 1, r1 - 1))
        if seg is None:
            continue
        (pa, pb) = seg
        if np.hypot(pb[0] - pa[0], pb[1] - pa[1]) < 4 * spec.width_px:
            continue
        lines.append((float(pa[0]), float(pa[1]), float(pb[0]), float(pb[1])))
    return TrueFamily(theta, spec.spacing_px, spec.width_px, spec.contrast, grain, lines)


def _draw_segment(canvas, p0, p1, width, amp):
    """Add a straight soft line (Gaussian profile) between two (col, row) points, in place."""
    h, w = canvas.shape
    pad = int(np.ceil(2 * width)) + 2
    ca, cb = int(max(0, min(p0[0], p1[0]) - pad)), int(min(w, max(p0[0], p1[0]) + pad + 1))
    ra, rb = int(max(0, min(p0[1], p1[1]) - pad)), int(min(h, max(p0[1], p1[1]) + pad + 1))
    if ca >= cb or ra >= rb:
        return
    cc = np.arange(ca, cb, dtype=np.float32)[None, :] - np.float32(p0[0])
    rr = np.arange(ra, rb, dtype=np.float32)[:, None] - np.float32(p0[1])
    d = np.array([p1[0] - p0[0], p1[1] - p0[1]], float)
    length = float(np.hypot(*d))
    d /= max(length, 1e-9)
    t = np.clip(cc * np.float32(d[0]) + rr * np.float32(d[1]), 0, length)
    dist = np.hypot(cc - t * np.float32(d[0]), rr - t * np.float32(d[1]))
    canvas[ra:rb, ca:cb] += np.float32(amp) * _band_profile(dist, width)


def _draw_databar(img, height, rng, pixel_size_um):
    """Draw an instrument-style data bar (dark strip, text, scale bar) at the bottom, in place."""
    h, w = img.shape
    r0 = h - height
    bar = np.zeros((height, w), np.uint8)
    bar[:] = int(rng.integers(0, 25))
    scale = max(0.35, height / 60.0)
    thick = max(1, int(round(scale * 1.5)))
    y = int(height * 0.62)
    label = f"HV 15.0 kV  WD {rng.uniform(5, 15):.1f} mm  MAG {int(rng.integers(100, 5000))}x  DET SE  Lab-7 specimen {int(rng.integers(1, 99))}"
    cv2.putText(bar, label, (int(0.02 * w), y), cv2.FONT_HERSHEY_SIMPLEX, scale, 235, thick, cv2.LINE_AA)
    bar_len = int(0.15 * w)
    x1 = w - int(0.04 * w)
    cv2.rectangle(bar, (x1 - bar_len, int(height * 0.25)), (x1, int(height * 0.38)), 245, -1)
    um = bar_len * (pixel_size_um or 1.0)
    cv2.putText(bar, f"{um:.0f} um", (x1 - bar_len, int(height * 0.85)), cv2.FONT_HERSHEY_SIMPLEX, scale * 0.8, 235, thick, cv2.LINE_AA)
    img[r0:, :] = bar.astype(np.float32) / 255.0
    return (0, r0, w, h)


# --------------------------------------------------------------------------- render stages
# Each stage draws into ``img`` (float32, 0..1 of full scale) in the order of
# render_micrograph; the order of the random draws is part of the seed's meaning.


def _grain_canvas(h, w, labels, base_level, grain_contrast, rng):
    """The flat starting image and the label image (None for a single crystal)."""
    img = np.full((h, w), np.float32(base_level), np.float32)
    if labels is None:
        return img, None
    lab = voronoi_labels((h, w), int(labels), seed=int(rng.integers(2**31))) if np.isscalar(labels) else np.asarray(labels)
    if lab.shape != (h, w):
        raise TracefitInputError(f"labels has shape {lab.shape}; expected the image shape {(h, w)}")
    ids = np.unique(lab)
    levels = base_level * (1.0 + grain_contrast / base_level * rng.standard_normal(ids.max() + 1)).astype(np.float32)
    return np.clip(levels[lab], 0.1, 0.9).astype(np.float32), lab


def _render_families(img, lab, families, grain_families, rng) -> list[TrueFamily]:
    """Draw the whole-image families, then each grain's, in place; their truth."""
    h, w = img.shape
    truth_families = [_render_family(img, spec, None, (0, 0, w, h), rng, None) for spec in families]
    if grain_families is None:
        return truth_families
    if lab is None:
        raise TracefitInputError("grain_families needs labels (a label image or a number of grains)")
    items = grain_families.items() if isinstance(grain_families, dict) else enumerate(grain_families)
    for gid, specs in items:
        region = lab == gid
        if not region.any():
            continue
        rr, cc = np.nonzero(region)
        box = (int(cc.min()), int(rr.min()), int(cc.max()) + 1, int(rr.max()) + 1)
        for spec in specs:
            truth_families.append(_render_family(img, spec, region, box, rng, int(gid)))
    return truth_families


def _draw_boundaries(img, lab, width, depth) -> None:
    """Darken grain boundaries as grooves (Gaussian, ``width`` px), in place."""
    h, w = img.shape
    edge = np.zeros((h, w), np.uint8)
    edge[:, 1:] |= (lab[:, 1:] != lab[:, :-1]).astype(np.uint8)
    edge[1:, :] |= (lab[1:, :] != lab[:-1, :]).astype(np.uint8)
    groove = cv2.GaussianBlur(edge.astype(np.float32), (0, 0), max(width / 2.0, 0.5))
    groove /= max(float(groove.max()), 1e-6)
    img *= 1.0 - np.float32(depth) * groove


def _draw_scratches(img, n_scratches, base_level, rng) -> list[tuple[float, float, float, float]]:
    """Draw isolated straight polishing scratches at random angles, in place; their lines."""
    h, w = img.shape
    scratches = []
    diag = float(np.hypot(h, w))
    for _ in range(int(n_scratches)):
        length = rng.uniform(0.3, 0.9) * diag
        ang = rng.uniform(0, 180)
        dc, dr = angle_to_pixel_direction(ang)
        cen = rng.uniform((0.1 * w, 0.1 * h), (0.9 * w, 0.9 * h))
        p0 = (cen[0] - 0.5 * length * dc, cen[1] - 0.5 * length * dr)
        p1 = (cen[0] + 0.5 * length * dc, cen[1] + 0.5 * length * dr)
        seg = _clip_line(p0, (dc, dr), (0, 0, w - 1, h - 1))
        if seg is None:
            continue
        # keep the segment inside its own extent
        pa = (np.clip(p0[0], 0, w - 1), np.clip(p0[1], 0, h - 1))
        pb = (np.clip(p1[0], 0, w - 1), np.clip(p1[1], 0, h - 1))
        amp = rng.choice([-1.0, 1.0]) * rng.uniform(0.15, 0.35) * base_level
        _draw_segment(img, pa, pb, rng.uniform(0.8, 1.6), amp)
        scratches.append((float(pa[0]), float(pa[1]), float(pb[0]), float(pb[1])))
    return scratches


def _illuminate(img, amount, rng) -> None:
    """Multiply in a smooth gradient (random direction) and a vignette, in place."""
    h, w = img.shape
    ang = rng.uniform(0, 2 * np.pi)
    cols = (np.arange(w, dtype=np.float32)[None, :] / w - 0.5)
    rows = (np.arange(h, dtype=np.float32)[:, None] / h - 0.5)
    ramp = np.float32(np.cos(ang)) * cols + np.float32(np.sin(ang)) * rows
    vign = cols**2 + rows**2
    img *= (1.0 + np.float32(amount) * (ramp - 0.8 * vign)).astype(np.float32)


def _to_output(img, jpeg_quality, bit_depth, rgb):
    """Clip, optionally JPEG round-trip, quantise to ``bit_depth`` bits and tint to RGB."""
    np.clip(img, 0.0, 1.0, out=img)
    if jpeg_quality is not None:
        u8 = np.round(img * 255).astype(np.uint8)
        ok, buf = cv2.imencode(".jpg", u8, [cv2.IMWRITE_JPEG_QUALITY, int(jpeg_quality)])
        img = cv2.imdecode(buf, cv2.IMREAD_GRAYSCALE).astype(np.float32) / 255.0
    full = 255.0 if bit_depth == 8 else 65535.0
    dtype = np.uint8 if bit_depth == 8 else np.uint16
    out = np.round(img * np.float32(full)).astype(dtype)
    if rgb:
        tint = np.array([1.0, 0.97, 0.9], np.float32)
        out = np.clip(out[..., None].astype(np.float32) * tint, 0, full).round().astype(dtype)
    return out


def _check_render_arguments(h, w, bit_depth, jpeg_quality) -> None:
    if h < 8 or w < 8:
        raise TracefitInputError(f"shape must be at least 8 x 8 pixels, got ({h}, {w})")
    if bit_depth not in (8, 16):
        raise TracefitInputError(f"bit_depth must be 8 or 16, got {bit_depth!r}")
    if jpeg_quality is not None and not 0 <= int(jpeg_quality) <= 100:
        raise TracefitInputError(f"jpeg_quality must be an integer from 0 to 100 or None, got {jpeg_quality!r}")


# --------------------------------------------------------------------------- main entry


def render_micrograph(
    shape: tuple[int, int] = (512, 512),
    families: Sequence[BandFamilySpec] = (),
    *,
    labels: np.ndarray | int | None = None,
    grain_families: dict[int, Sequence[BandFamilySpec]] | Sequence[Sequence[BandFamilySpec]] | None = None,
    base_level: float = 0.55,
    grain_contrast: float = 0.08,
    boundary_width: float = 2.0,
    boundary_depth: float = 0.35,
    illumination: float = 0.0,
    noise_sigma: float = 0.02,
    blur_sigma: float = 0.0,
    n_scratches: int = 0,
    databar: bool | int = False,
    jpeg_quality: int | None = None,
    bit_depth: int = 8,
    rgb: bool = False,
    pixel_size_um: float | None = None,
    seed: int = 0,
) -> tuple[np.ndarray, SyntheticTruth]:
    """Render a synthetic micrograph with band families and known truth.

    Parameters
    ----------
    shape : (int, int)
        Image (rows, columns), pixels, at least 8 x 8.
    families : sequence of BandFamilySpec
        Families drawn over the whole image (all grains).
    labels : ndarray of int, int or None
        Grain label image of ``shape`` (integer ids), or a number of Voronoi grains to
        generate, or None for a single crystal.
    grain_families : dict or sequence, optional
        Families per grain id: ``{grain_id: [BandFamilySpec, ...]}`` or a list indexed by
        grain id. Each grain's bands are drawn on that grain's pixels only.
    base_level : float
        Mean grey level, 0..1 of full scale.
    grain_contrast : float
        Standard deviation of the per-grain grey level, 0..1.
    boundary_width, boundary_depth : float
        Grain-boundary groove width (px) and relative depth.
    illumination : float
        Relative amplitude of a smooth illumination gradient and vignette (0 = even).
    noise_sigma : float
        Standard deviation of additive Gaussian noise, 0..1 of full scale.
    blur_sigma : float
        Gaussian blur (optics), pixels; 0 = none.
    n_scratches : int
        Number of isolated polishing scratches (long thin straight lines, random angles).
    databar : bool or int
        Draw an instrument data bar at the bottom; an int gives its height in pixels.
    jpeg_quality : int or None
        Compress and decompress as JPEG at this quality (0-100); None = lossless.
    bit_depth : {8, 16}
        Output sample depth.
    rgb : bool
        Return an RGB image (slightly tinted grey) instead of grayscale.
    pixel_size_um : float or None
        Pixel size for the data bar's scale text; stored in the truth.
    seed : int
        Random seed; the same arguments and seed give the same image.

    Returns
    -------
    image : ndarray of uint8 or uint16, ``shape`` or ``shape + (3,)``
        The micrograph, full scale 255 or 65535.
    truth : SyntheticTruth
        What was drawn.

    Raises
    ------
    TracefitInputError
        A shape below 8 x 8, ``bit_depth`` not 8 or 16, ``jpeg_quality`` outside 0-100,
        ``labels`` of another shape, or ``grain_families`` without ``labels``.

    Examples
    --------
    >>> img, truth = render_micrograph((128, 160), [BandFamilySpec(30.0, spacing_px=16)], seed=4)
    >>> img.shape, img.dtype.name, truth.family_angles
    ((128, 160), 'uint8', [30.0])
    >>> truth.families[0].n_bands > 5
    True
    """
    # Over 80 lines only through its docstring (numpydoc with a runnable example); the code is short.
    rng = np.random.default_rng(seed)
    h, w = int(shape[0]), int(shape[1])
    _check_render_arguments(h, w, bit_depth, jpeg_quality)
    img, lab = _grain_canvas(h, w, labels, base_level, grain_contrast, rng)
    truth_families = _render_families(img, lab, families, grain_families, rng)
    if lab is not None and boundary_depth > 0:
        _draw_boundaries(img, lab, boundary_width, boundary_depth)
    scratches = _draw_scratches(img, n_scratches, base_level, rng)
    if illumination > 0:
        _illuminate(img, illumination, rng)
    if blur_sigma > 0:
        img = cv2.GaussianBlur(img, (0, 0), float(blur_sigma))
    if noise_sigma > 0:
        img += rng.standard_normal((h, w), dtype=np.float32) * np.float32(noise_sigma)
    bbox = None
    if databar:
        height = int(databar) if not isinstance(databar, bool) else max(20, int(round(0.07 * h)))
        bbox = _draw_databar(img, min(height, h // 3), rng, pixel_size_um)
    out = _to_output(img, jpeg_quality, bit_depth, rgb)
    return out, SyntheticTruth((h, w), truth_families, bbox, scratches, lab, pixel_size_um)
