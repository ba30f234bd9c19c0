"""Result types of band detection: one band line, one band family, one image (or grain).

Angles are image-frame, axial, degrees counterclockwise from +x
(:mod:`tracefit.conventions`); pixel coordinates are (column, row), rows down.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

__all__ = ["BandLine", "BandFamily", "DetectionResult"]


def _num(x, nd):
    """``x`` rounded to ``nd`` decimals, or None when it is missing or not finite."""
    return None if x is None or not math.isfinite(x) else round(float(x), nd)


@dataclass
class BandLine:
    """One detected band: its fitted centre line between two pixel endpoints.

    Parameters
    ----------
    col0, row0, col1, row1 : float
        Endpoints in pixels (column right, row down) of the part where the band was seen.
    angle_deg : float
        Image-frame axial angle of this band's fitted line, degrees in [0, 180).
    angle_sigma_deg : float
        Standard uncertainty of that angle, degrees (nan when unknown).
    snr : float
        Median band contrast-to-noise ratio along the line (dimensionless).

    Examples
    --------
    >>> line = BandLine(10.0, 50.0, 40.0, 10.0, angle_deg=53.13)
    >>> print(round(line.length_px, 3))
    50.0
    >>> line.to_dict()["angle_deg"]
    53.13
    """

    col0: float
    row0: float
    col1: float
    row1: float
    angle_deg: float
    angle_sigma_deg: float = float("nan")
    snr: float = float("nan")

    @property
    def length_px(self) -> float:
        """Length of the seen part, pixels (float)."""
        return float(math.hypot(self.col1 - self.col0, self.row1 - self.row0))

    def to_dict(self) -> dict:
        """JSON-ready dict of the endpoints (px, 2 decimals) and the angle (deg, 4 decimals).

        Returns
        -------
        dict
            Keys ``col0, row0, col1, row1, angle_deg``.
        """
        return {
            "col0": round(self.col0, 2), "row0": round(self.row0, 2),
            "col1": round(self.col1, 2), "row1": round(self.row1, 2),
            "angle_deg": round(self.angle_deg, 4),
        }


@dataclass
class BandFamily:
    """A family of parallel bands (one slip or twin trace direction).

    Parameters
    ----------
    angle_deg : float
        Image-frame axial angle, degrees, 0 <= angle < 180, ccw from +x.
    angle_sigma_deg : float
        Standard uncertainty of the angle, degrees.
    n_bands : int
        Number of bands fitted.
    spacing_px : float
        Mean perpendicular distance between neighbouring bands, pixels (nan if < 2 bands).
    spacing_sigma_px : float
        Standard deviation of those distances, pixels.
    spacing_um : float or None
        ``spacing_px`` times the pixel size, micrometres, when the pixel size is known.
    strength : float
        Sum over bands of (seen length / image diagonal) x band contrast-to-noise ratio.
    polarity : {"dark", "bright"}
        Whether the bands are darker or brighter than their surroundings.
    contrast : float
        Median relative grey level of the band centres against the local median
        background (negative for dark bands), e.g. -0.2 = 20 % darker.
    lines : list of BandLine
        The fitted bands, ordered across the family.
    log10_nfa : float
        log10 of the family's a contrario number of false alarms: how many families at
        least this strong texture alone would give in a picture of this size (see
        :mod:`tracefit.image.significance`); nan when not computed. A family found on line sums
        along a predicted trace carries a bound of its own kind there
        (:mod:`tracefit.image.traceprofile`).
    sought_at : float or None
        None for a family found by the open search over every direction; else the
        predicted trace angle (degrees, image frame) it was looked for at and found near
        (a guided search, see ``predicted_traces`` of :func:`tracefit.image.detect_bands`).
    sought_within_deg : float or None
        For a guided family, how far from ``sought_at`` its fitted angle was allowed to lie
        (degrees): it could only be found in that window, which identification weighs
        (:attr:`tracefit.matching.ObservedFamily.search_width_deg`). None otherwise.
    sought_on : str or None
        For a guided family, what it was judged on: ``"ridge pixels"`` (the family built along the
        trace from ridge pixels, as the open search's) or ``"line sums"`` (the trace tested on line
        sums of the band response, :mod:`tracefit.image.traceprofile`; its ``log10_nfa`` is a bound
        on those sums, a different count). None otherwise.

    Examples
    --------
    >>> fam = BandFamily(30.0, 0.01, 5, 24.0, 1.5, 12.0, 3.2, log10_nfa=-12.5)
    >>> d = fam.to_dict(with_lines=True)
    >>> d["angle_deg"], d["n_bands"], d["spacing_um"], d["significance"]
    (30.0, 5, 12.0, 12.5)
    """

    angle_deg: float
    angle_sigma_deg: float
    n_bands: int
    spacing_px: float
    spacing_sigma_px: float
    spacing_um: float | None
    strength: float
    polarity: str = "dark"
    contrast: float = float("nan")
    lines: list[BandLine] = field(default_factory=list)
    log10_nfa: float = float("nan")
    sought_at: float | None = None
    sought_within_deg: float | None = None
    sought_on: str | None = None

    @property
    def significance(self) -> float:
        """``-log10_nfa``: 0 at one false alarm expected, 3 at one in a thousand (nan when unknown)."""
        return -float(self.log10_nfa)

    def to_dict(self, with_lines: bool = False) -> dict:
        """JSON-ready dict of the family (numbers rounded, non-finite values as None).

        Parameters
        ----------
        with_lines : bool
            Add ``significance`` (``-log10_nfa``), ``spacing_sigma_px``, ``polarity``,
            ``contrast``, ``sought_at_deg`` (the predicted trace a family was looked for at,
            None for the open search), ``sought_within_deg``, ``sought_on`` and the band ``lines``.

        Returns
        -------
        dict
            Keys ``angle_deg, angle_sigma_deg, n_bands, spacing_px, spacing_um, strength``
            (and the extra ones with ``with_lines``).
        """
        d = {
            "angle_deg": round(float(self.angle_deg), 4),
            "angle_sigma_deg": round(float(self.angle_sigma_deg), 4),
            "n_bands": int(self.n_bands),
            "spacing_px": _num(self.spacing_px, 3),
            "spacing_um": None if self.spacing_um is None or not math.isfinite(self.spacing_um) else round(float(self.spacing_um), 4),
            "strength": round(float(self.strength), 3),
        }
        if with_lines:
            d["significance"] = _num(self.significance, 2)
            d["spacing_sigma_px"] = _num(self.spacing_sigma_px, 3)
            d["polarity"] = self.polarity
            d["contrast"] = _num(self.contrast, 4)
            d["lines"] = [ln.to_dict() for ln in self.lines]
            d["sought_at_deg"] = None if self.sought_at is None else round(float(self.sought_at), 4)
            d["sought_within_deg"] = None if self.sought_within_deg is None else float(self.sought_within_deg)
            d["sought_on"] = self.sought_on
        return d


@dataclass
class DetectionResult:
    """Result of :func:`tracefit.image.detect_bands` for one image (or one grain of it).

    Parameters
    ----------
    path : str or None
        Source file, when known.
    width, height : int
        Image size, pixels.
    excluded : list of dict
        Regions left out: ``{"kind": "databar" | "mask", "bbox": [c0, r0, c1, r1], "note": str}``
        (end-exclusive pixel box).
    families : list of BandFamily
        Strongest first; empty when no bands were found.
    notes : list of str
        What was done and found, for the user.
    pixel_size_um : float or None
        Micrometres per pixel, when known.
    grain : int or None
        Grain id when the detection ran on one grain of a label image.
    verdict : str
        One word for the outcome: ``"found"`` (families), ``"too_small"`` (too few
        analysable pixels), ``"no_pixels"`` (nothing left after masking),
        ``"low_contrast"`` (no band-like structure above the noise),
        ``"not_significant"`` (candidates, none significant or holding up as a family),
        ``"not_run"`` (not analysed yet).
    reason : str
        One line saying why, for the user (e.g. "no band families: 3 candidate
        directions, none significant").

    Examples
    --------
    >>> res = DetectionResult(path="a.png", width=64, height=48)
    >>> res.to_dict()
    {'image': {'path': 'a.png', 'width': 64, 'height': 48, 'excluded': []}, 'families': [], 'verdict': 'not_run', 'reason': ''}
    """

    path: str | None
    width: int
    height: int
    excluded: list[dict] = field(default_factory=list)
    families: list[BandFamily] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    pixel_size_um: float | None = None
    grain: int | None = None
    verdict: str = "not_run"
    reason: str = ""

    def to_dict(self, with_lines: bool = False) -> dict:
        """The JSON object of ``tracefit detect --json``.

        Parameters
        ----------
        with_lines : bool
            Include each family's band lines and extra fields (see :meth:`BandFamily.to_dict`).

        Returns
        -------
        dict
            ``{"image": {"path", "width", "height", "excluded"}, "families": [...], "verdict", "reason"}``.
        """
        return {
            "image": {"path": self.path, "width": int(self.width), "height": int(self.height), "excluded": list(self.excluded)},
            "families": [f.to_dict(with_lines=with_lines) for f in self.families],
            "verdict": self.verdict,
            "reason": self.reason,
        }
