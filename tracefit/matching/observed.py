"""What identification starts from: observed band families (detected or measured by hand)."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, Iterable

import numpy as np

from tracefit.conventions import fold_axial
from tracefit.errors import TracefitInputError, real_number

__all__ = ["ObservedFamily", "observed_from_detection", "as_observed"]

#: Sigma of a family given as a bare angle, degrees (a careful reading of a clear band; common practice, no source).
DEFAULT_ANGLE_SIGMA_DEG = 0.5


@dataclass
class ObservedFamily:
    """One observed family of parallel bands (detected in an image or measured by hand).

    Parameters
    ----------
    angle_deg : float
        Image-frame axial angle, degrees ccw from +x; folded to [0, 180).
    angle_sigma_deg : float
        One-sigma uncertainty of the angle, degrees (>= 0).
    grain : int, str or None
        Grain the family belongs to (None for a single-orientation image).
    source : str
        ``"detected"`` (the open search over every direction), ``"guided"`` (detected by the
        search along the grain's predicted traces: it agrees with one of them to a few degrees
        by construction, so it does not test the orientation or frame) or ``"measured"``.
    label : str or None
        Free label for reports (``"crack"`` marks a crack).
    n_bands, strength : optional
        Detection details, carried through to reports.
    boundary_continuation : float, optional
        Share of the family's lines that run on straight into a neighbouring grain with the
        same contrast (:func:`tracefit.maps.tables.line_continuation`); reported, not used in the
        probabilities.
    search_width_deg : float
        Width of the range of angles the family could have been found in, degrees: 180 for an
        open search or a measurement, 2 x the tolerance for a guided family (6). Lying near the
        trace it was looked for at is then no evidence of its own: identification weighs its
        "none of these" per trace searched (:func:`tracefit.matching.window_log_mass`,
        ``docs/identify.md``).
    sought_at_deg : float or None
        Centre of that window (the predicted trace a guided family was looked for at), degrees;
        needed when ``search_width_deg`` is under 180.
    sought_on : str or None
        For a guided family, what the detector judged it on (``"ridge pixels"`` or ``"line
        sums"``, :attr:`tracefit.image.BandFamily.sought_on`); named in its notes.

    Raises
    ------
    TracefitInputError
        For a non-finite angle, a negative or non-finite sigma, a search width outside (0, 180], or
        a narrower one without a finite ``sought_at_deg``.

    Examples
    --------
    >>> f = ObservedFamily(-44.8, 0.2)
    >>> round(f.angle_deg, 3), f.angle_sigma_deg, f.source
    (135.2, 0.2, 'detected')
    """

    angle_deg: float
    angle_sigma_deg: float = DEFAULT_ANGLE_SIGMA_DEG
    grain: Any = None
    source: str = "detected"
    label: str | None = None
    n_bands: int | None = None
    strength: float | None = None
    boundary_continuation: float | None = None
    search_width_deg: float = 180.0
    sought_at_deg: float | None = None
    sought_on: str | None = None

    def __post_init__(self):
        a = real_number(self.angle_deg, "angle_deg", finite=False)
        s = real_number(self.angle_sigma_deg, "angle_sigma_deg", finite=False)
        if not math.isfinite(a):
            raise TracefitInputError(f"a family angle must be a finite number of degrees, got {self.angle_deg!r}")
        if not (math.isfinite(s) and s >= 0):
            raise TracefitInputError(f"a family angle sigma must be >= 0 degrees, got {self.angle_sigma_deg!r}")
        w = real_number(self.search_width_deg, "search_width_deg", finite=False)
        if not (0.0 < w <= 180.0):
            raise TracefitInputError(f"a family's search width must be in (0, 180] degrees, got {self.search_width_deg!r}")
        if self.sought_at_deg is not None:
            c = real_number(self.sought_at_deg, "sought_at_deg", finite=False)
            if not math.isfinite(c):
                raise TracefitInputError(f"a family's sought_at_deg must be a finite angle, got {self.sought_at_deg!r}")
            self.sought_at_deg = fold_axial(c)
        elif w < 180.0:
            raise TracefitInputError("a family with a search width under 180 deg needs sought_at_deg (the window's centre)")
        if self.sought_on is not None and not isinstance(self.sought_on, str):
            raise TracefitInputError(f"a family's sought_on must be text or None, got {self.sought_on!r}")
        self.angle_deg = fold_axial(a)
        self.angle_sigma_deg = s
        self.search_width_deg = w


def observed_from_detection(result: Any, grain: Any = None, min_sigma_deg: float = 0.1) -> list[ObservedFamily]:
    """Observed families from a detection result.

    Parameters
    ----------
    result : DetectionResult or sequence of BandFamily
        :func:`tracefit.image.detect_bands` output, or its ``families``; each family needs
        ``angle_deg`` and may have ``angle_sigma_deg``, ``n_bands``, ``strength``.
    grain : optional
        Grain key given to every family (labels become ``G<grain>-F<k>``).
    min_sigma_deg : float
        Floor of the angle sigma, degrees: a detection's own sigma can be unrealistically small.

    Returns
    -------
    list of ObservedFamily
        In detection order, ``source="detected"`` (``"guided"`` for a family with a
        ``sought_at`` trace, its ``search_width_deg`` twice the detector's ``sought_within_deg``),
        labelled ``F1``, ``F2``, ...

    Raises
    ------
    TracefitInputError
        For a family with a non-finite angle or sigma.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> fams = observed_from_detection([SimpleNamespace(angle_deg=30.0, angle_sigma_deg=0.02)], grain=3)
    >>> fams[0].label, fams[0].angle_sigma_deg
    ('G3-F1', 0.1)
    """
    fams = getattr(result, "families", result)
    out = []
    for k, f in enumerate(fams):
        guided = getattr(f, "sought_at", None) is not None
        within = getattr(f, "sought_within_deg", None) if guided else None
        out.append(
            ObservedFamily(
                angle_deg=float(f.angle_deg),
                angle_sigma_deg=max(float(getattr(f, "angle_sigma_deg", DEFAULT_ANGLE_SIGMA_DEG) or 0.0), min_sigma_deg),
                grain=grain,
                source="guided" if guided else "detected",
                label=f"F{k + 1}" if grain is None else f"G{grain}-F{k + 1}",
                n_bands=getattr(f, "n_bands", None),
                strength=getattr(f, "strength", None),
                search_width_deg=180.0 if within is None else min(2.0 * float(within), 180.0),
                sought_at_deg=float(f.sought_at) if guided else None,
                sought_on=getattr(f, "sought_on", None) if guided else None,
            )
        )
    return out


def as_observed(observed: Iterable[Any], grain: Any = None) -> list[ObservedFamily]:
    """Observed families from ObservedFamily objects or bare angles.

    Parameters
    ----------
    observed : iterable of ObservedFamily or float
        Families; a bare number is an angle in degrees with sigma 0.5, ``source="measured"``.
    grain : optional
        Grain given to families that have none.

    Returns
    -------
    list of ObservedFamily
        In input order.

    Raises
    ------
    TracefitInputError
        For anything else in ``observed``.

    Examples
    --------
    >>> [(round(f.angle_deg, 1), f.grain) for f in as_observed([30, ObservedFamily(200.0)], grain=1)]
    [(30.0, 1), (20.0, 1)]
    """
    if isinstance(observed, (str, bytes)) or not hasattr(observed, "__iter__"):
        raise TracefitInputError(f"observed must be a sequence of ObservedFamily or angles, got {type(observed).__name__}")
    out = []
    for o in observed:
        if isinstance(o, ObservedFamily):
            if grain is not None and o.grain is None:
                o = replace(o, grain=grain)
            out.append(o)
        elif isinstance(o, (int, float, np.floating, np.integer)) and not isinstance(o, bool):
            out.append(ObservedFamily(float(o), DEFAULT_ANGLE_SIGMA_DEG, grain, "measured"))
        else:
            raise TracefitInputError(f"an observed family must be an angle or an ObservedFamily, got {type(o).__name__}")
    return out
