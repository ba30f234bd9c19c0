"""Predicted surface traces of crystal planes, plane inclination, Schmid factors and resolved shear.

Trace of a plane with unit normal ``n`` (image/sample frame) on the surface z: its direction is
``z x n``, at the axial angle ``atan2(n_y, n_x) + 90 deg`` (mod 180). The plane's inclination to
the surface is ``arccos(|n_z|)``: 90 deg stands upright, near 0 lies almost in the surface
and leaves no usable trace (``near_surface``).

Schmid factor (uniaxial load, unit axis ``l`` in crystal coordinates): ``m = (l . n)(l . d)``.
Slip is reported as ``|m|`` (slip runs either way along ``d``). Twinning is polar: a twin system
counts only when ``(l . n)(l . d) > 0`` in tension with ``d`` its twinning direction, the sign
reversed in compression. tracefit therefore reports a twin's Schmid factor **signed** in the
sense of the load, ``m_twin = s (l . n)(l . d)`` with ``s = +1`` in tension and ``-1`` in
compression: a twin that cannot form under this load has ``schmid_factor <= 0`` (and no
activation stress).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from tracefit.conventions import fold_axial
from tracefit.errors import TracefitInputError
from tracefit.conventions import FrameSettings, apparent_angle, data_to_image_matrix
from tracefit.crystal import parse_vector

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

NEAR_SURFACE_DEG = 5.0  # below this inclination a trace is too ill-defined to use (common practice, no source)
SENSES = ("tension", "compression")
_MODE_ORDER = {"slip": 0, "twin": 1}


# ------------------------------------------------------------------ geometry
def trace_angles(normals):
    """Trace angle and inclination of planes from their normals in the image (or sample) frame.

    Parameters
    ----------
    normals : array_like, shape (..., 3)
        Plane normals (any length, any sense).

    Returns
    -------
    angle_deg : ndarray, shape (...)
        Axial trace angle in [0, 180), counterclockwise from x: ``atan2(n_y, n_x) + 90``.
    inclination_deg : ndarray, shape (...)
        Angle between the plane and the surface, ``arccos(|n_z|)``, in [0, 90].
    """
    n = np.asarray(normals, float)
    if n.shape[-1:] != (3,):
        raise TracefitInputError(f"plane normals must have 3 components, got shape {n.shape}")
    norm = np.linalg.norm(n, axis=-1)
    angle = fold_axial(np.degrees(np.arctan2(n[..., 1], n[..., 0])) + 90.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        incl = np.degrees(np.arccos(np.clip(np.abs(n[..., 2]) / norm, 0.0, 1.0)))
    return angle, incl


def plane_normals_in_image(g, normals_crystal, frame: FrameSettings | None = None) -> np.ndarray:
    """Crystal-frame plane normals expressed in the image frame.

    ``n_image = M g^T n_crystal`` with ``M`` = :func:`tracefit.conventions.data_to_image_matrix`.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (N, 3, 3)
        Orientations, ``v_crystal = g v_sample``.
    normals_crystal : array_like, shape (M, 3)
        Cartesian crystal-frame normals.

    Returns
    -------
    ndarray, shape (M, 3) or (N, M, 3)
    """
    g = np.asarray(g, float)
    n = np.atleast_2d(np.asarray(normals_crystal, float))
    if g.shape[-2:] != (3, 3) or n.shape[-1] != 3:
        raise TracefitInputError(f"need g of shape (N, 3, 3) and normals of shape (M, 3), got {g.shape} and {n.shape}")
    M = data_to_image_matrix(frame)
    # n_img = M g^T n_c; in row-vector form n_img = n_c (M g^T)^T = n_c g M^T (matmul is
    # several times faster than einsum here, and this sits in the matcher's inner loop).
    return n @ (g @ M.T)


@dataclass
class TraceTable:
    """Predicted traces of M planes for N orientations (arrays of shape (N, M)).

    ``angle_deg`` is the apparent image-frame angle (after frame rotation, flips and tilt),
    ``true_angle_deg`` the same before tilt foreshortening.
    """

    angle_deg: np.ndarray
    true_angle_deg: np.ndarray
    inclination_deg: np.ndarray
    near_surface: np.ndarray
    normals_image: np.ndarray

    def to_dict(self) -> dict:
        return {
            "angle_deg": self.angle_deg.tolist(),
            "true_angle_deg": self.true_angle_deg.tolist(),
            "inclination_deg": self.inclination_deg.tolist(),
            "near_surface": self.near_surface.tolist(),
        }


def predicted_trace_table(
    lattice,
    g_many,
    normals,
    frame: FrameSettings | None = None,
    near_surface_deg: float = NEAR_SURFACE_DEG,
    indices: bool = False,
) -> TraceTable:
    """Vectorised trace prediction for many orientations at once.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
        Used only when ``indices`` is true, to turn plane indices into normals.
    g_many : array_like, shape (N, 3, 3) or (3, 3)
        Orientations.
    normals : array_like, shape (M, 3)
        Cartesian crystal-frame plane normals (e.g. ``DeformationSystem.normal``; normalised
        here), or with
        ``indices=True`` plane indices (M, 3) / (M, 4).
    frame : FrameSettings
    near_surface_deg : float
        Inclination (deg) below which a trace counts as unusable.

    Returns
    -------
    TraceTable
        Arrays of shape (N, M) (or (M,) for one ``g``).
    """
    frame = frame or FrameSettings()
    n = np.atleast_2d(np.asarray(normals, float))
    if indices:
        n = lattice.plane_normal(n)
    else:
        n = _unit_rows(n, "plane normal")
    n_img = plane_normals_in_image(g_many, n, frame)
    true, incl = trace_angles(n_img)
    app = apparent_angle(true, frame) if frame.tilt_deg else true
    return TraceTable(
        angle_deg=np.asarray(app),
        true_angle_deg=np.asarray(true),
        inclination_deg=np.asarray(incl),
        near_surface=np.asarray(incl) < near_surface_deg,
        normals_image=n_img,
    )


# ------------------------------------------------------------------ loads and stresses
@dataclass(frozen=True)
class LoadAxis:
    """A uniaxial load: its axis (unit vector, in ``frame`` coordinates) and sense.

    ``frame`` is ``"sample"`` (needs an orientation to reach the crystal) or ``"crystal"``
    (Cartesian crystal frame; ``index`` keeps the direction indices it came from).
    """

    vector: tuple
    frame: str
    sense: str = "tension"
    label: str = ""
    index: tuple | None = None

    @property
    def sign(self) -> float:
        return 1.0 if self.sense == "tension" else -1.0

    def in_crystal(self, g=None) -> np.ndarray:
        """Unit load axis in crystal coordinates: (3,) for one g, (N, 3) for (N, 3, 3)."""
        v = np.asarray(self.vector, float)
        if self.frame == "crystal":
            return v
        if g is None:
            raise TracefitInputError(f"the load {self.label!r} is a sample axis; an orientation (e.g. --euler) is needed to place it in the crystal")
        return np.einsum("...ij,j->...i", np.asarray(g, float), v)

    def in_sample(self, g=None) -> np.ndarray:
        v = np.asarray(self.vector, float)
        if self.frame == "sample":
            return v
        if g is None:
            raise TracefitInputError("a crystal-direction load needs an orientation to place it in the sample")
        return np.einsum("...ij,i->...j", np.asarray(g, float), v)

    def to_dict(self) -> dict:
        d = {"axis": self.label, "frame": self.frame, "sense": self.sense, "vector": [float(x) for x in self.vector]}
        if self.index is not None:
            d["index"] = [_num(x) for x in self.index]
        return d


def parse_load(text: str, lattice=None, sense: str = "tension") -> LoadAxis:
    """Read a load axis.

    Accepted: a sample axis ``x``, ``y``, ``z`` (optionally signed, ``-x``), a sample vector
    ``1,0,0``, or a crystal direction in square brackets, ``[110]``, ``[1 -1 0]``, ``[11-20]``
    (four indices for hexagonal lattices; needs ``lattice``).

    Parameters
    ----------
    text : str
    lattice : tracefit.crystal.lattice.Lattice, optional
        Needed for crystal directions.
    sense : {"tension", "compression"}
    """
    if sense not in SENSES:
        raise TracefitInputError(f"load sense must be 'tension' or 'compression', got {sense!r}")
    if not isinstance(text, str) or not text.strip():
        raise TracefitInputError("empty load axis; expected x, y, z, a sample vector like 1,0,0 or a crystal direction like [110]")
    t = text.strip()
    if t.startswith("[") or t.startswith("<"):
        if lattice is None:
            raise TracefitInputError(f"the crystal-direction load {t} needs a lattice")
        idx = _parse_direction(t, lattice)
        v = np.asarray(lattice.direction_vector(idx), float)
        return LoadAxis(tuple(float(x) for x in v), "crystal", sense, t, tuple(idx))
    try:
        v = parse_vector(t, "load axis")
    except TracefitInputError:
        raise TracefitInputError(
            f"cannot read load axis {text!r}; expected x, y, z (or -x ...), a sample vector like 1,0,0, "
            "or a crystal direction like [110] or [11-20]"
        ) from None
    n = float(np.linalg.norm(v))
    if n < 1e-12:
        raise TracefitInputError(f"the load axis {text!r} has zero length")
    return LoadAxis(tuple(float(x) for x in v / n), "sample", sense, t)


def _parse_direction(t: str, lattice) -> tuple:
    from tracefit.crystal.indices import parse_index  # the project's one index reader

    try:
        idx = parse_index(t, lattice, expect="direction")
    except TracefitInputError as exc:
        raise TracefitInputError(f"cannot read the load axis {t!r} as a crystal direction: {exc}") from None
    if idx.family:
        raise TracefitInputError(f"a load axis is one direction, not a family: write [110] rather than {t}")
    return tuple(int(x) for x in idx.values)


def schmid_factor(load_crystal, n, d) -> np.ndarray:
    """Signed Schmid factor ``m = (l . n)(l . d)`` = cos(phi) cos(lambda).

    Parameters
    ----------
    load_crystal : array_like, shape (3,) or (N, 3)
        Load axis in crystal coordinates (normalised here).
    n, d : array_like, shape (3,) or (M, 3)
        Plane normals and shear directions, crystal coordinates (normalised here).

    Returns
    -------
    ndarray, shape (), (M,), (N,) or (N, M)
    """
    l = _unit_rows(load_crystal, "load axis")
    n = _unit_rows(n, "plane normal")
    d = _unit_rows(d, "shear direction")
    if n.shape != d.shape:
        raise TracefitInputError(f"plane normals and shear directions must pair up, got shapes {n.shape} and {d.shape}")
    if n.ndim == 1:
        return (l @ n) * (l @ d)
    return (l @ n.T) * (l @ d.T)


def _unit_rows(v, what: str) -> np.ndarray:
    v = np.asarray(v, float)
    if v.shape[-1:] != (3,):
        raise TracefitInputError(f"{what} must have 3 components, got shape {v.shape}")
    norm = np.linalg.norm(v, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise TracefitInputError(f"{what} has zero length")
    return v / norm


def system_schmid_factors(load: LoadAxis, g, systems) -> np.ndarray:
    """Reported Schmid factors of systems: ``|m|`` for slip, ``sense * m`` for twins (see module doc)."""
    l = load.in_crystal(g)
    n = np.array([s.normal for s in systems], float)
    d = np.array([s.dir_unit for s in systems], float)
    m = schmid_factor(l, n, d)
    twin = np.array([s.mode == "twin" for s in systems])
    return np.where(twin, load.sign * m, np.abs(m))


def stress_tensor(stress) -> np.ndarray:
    """A symmetric 3x3 stress tensor from (3, 3) or Voigt (s11, s22, s33, s23, s13, s12)."""
    s = np.asarray(stress, float)
    if s.shape == (6,):
        s11, s22, s33, s23, s13, s12 = s
        s = np.array([[s11, s12, s13], [s12, s22, s23], [s13, s23, s33]])
    if s.shape != (3, 3):
        raise TracefitInputError(f"a stress must be 3 x 3 or six Voigt values (s11, s22, s33, s23, s13, s12), got shape {s.shape}")
    if not np.all(np.isfinite(s)):
        raise TracefitInputError("stress components must be finite numbers")
    if np.abs(s - s.T).max() > 1e-9 * max(1.0, np.abs(s).max()):
        raise TracefitInputError("the stress tensor is not symmetric; expected s_ij = s_ji")
    return s


def resolved_shear(stress_sample, g, n, d) -> np.ndarray:
    """Resolved shear stress ``tau = n . sigma . d`` (signed), all in the sample frame.

    Parameters
    ----------
    stress_sample : array_like, shape (3, 3) or (6,)
        Stress in sample coordinates (any unit; ``tau`` has the same unit). Voigt order
        (s11, s22, s33, s23, s13, s12).
    g : array_like, shape (3, 3)
        Orientation, ``v_crystal = g v_sample``.
    n, d : array_like, shape (3,) or (M, 3)
        Unit plane normals and shear directions in crystal coordinates.
    """
    s = stress_tensor(stress_sample)
    g = np.asarray(g, float)
    n_s = _unit_rows(n, "plane normal") @ g  # row form of g^T n
    d_s = _unit_rows(d, "shear direction") @ g
    return np.einsum("...i,ij,...j->...", n_s, s, d_s)


def activation_stress(crss, schmid) -> float | None:
    """Applied uniaxial stress at which the system reaches its CRSS: ``sigma = CRSS / m``; None when ``m <= 0``."""
    if crss is None or schmid is None or not (schmid > 1e-9):
        return None
    return float(crss) / float(schmid)


# ------------------------------------------------------------------ per-orientation prediction
@dataclass
class SystemResult:
    """One slip or twin system on a predicted trace."""

    direction: tuple
    mode: str
    name: str
    schmid_factor: float | None = None
    resolved_shear: float | None = None
    activation_stress: float | None = None

    def to_dict(self) -> dict:
        d = {"direction": [_num(x) for x in self.direction], "mode": self.mode, "name": self.name}
        for k in ("schmid_factor", "resolved_shear", "activation_stress"):
            v = getattr(self, k)
            if v is not None:
                d[k] = float(v)
        return d


@dataclass
class PredictedTrace:
    """A distinct plane's predicted trace for one orientation.

    ``angle_deg`` is the apparent angle in the image frame (after frame rotation, flips and stage
    tilt); ``true_angle_deg`` is before tilt foreshortening. ``normal_sample`` is the unit plane
    normal in sample coordinates.
    """

    plane: tuple
    family: str
    modes: list
    angle_deg: float
    true_angle_deg: float
    inclination_deg: float
    near_surface: bool
    normal_sample: np.ndarray
    systems: list = field(default_factory=list)

    @property
    def best_schmid(self) -> float | None:
        vals = [s.schmid_factor for s in self.systems if s.schmid_factor is not None]
        return max(vals) if vals else None

    def to_dict(self) -> dict:
        d = {
            "plane": [_num(x) for x in self.plane],
            "family": self.family,
            "modes": list(self.modes),
            "angle_deg": float(self.angle_deg),
            "true_angle_deg": float(self.true_angle_deg),
            "inclination_deg": float(self.inclination_deg),
            "near_surface": bool(self.near_surface),
            "normal_sample": [float(x) for x in self.normal_sample],
            "systems": [s.to_dict() for s in self.systems],
        }
        if self.best_schmid is not None:
            d["best_schmid_factor"] = float(self.best_schmid)
        return d


def _plane_key(n: np.ndarray) -> tuple:
    # A plane and its negative give one trace: make the first clear component positive.
    n = n / np.linalg.norm(n)
    for x in n:
        if abs(x) > 1e-6:
            if x < 0:
                n = -n
            break
    return tuple(np.round(n, 6) + 0.0)


def _crss_for(crss: dict | None, s) -> float | None:
    if not crss:
        return None
    for key in (getattr(s, "name", None), getattr(s, "family", None), getattr(s, "mode", None)):
        if key is not None and key in crss:
            v = float(crss[key])
            if not (math.isfinite(v) and v > 0):
                raise TracefitInputError(f"CRSS for {key} must be a positive number, got {crss[key]!r}")
            return v
    return None


def predict_traces(
    lattice,
    g,
    systems,
    frame: FrameSettings | None = None,
    load: LoadAxis | str | None = None,
    stress=None,
    crss: dict | None = None,
    near_surface_deg: float = NEAR_SURFACE_DEG,
    sort: str = "auto",
) -> list[PredictedTrace]:
    """Predicted traces of the planes of ``systems`` for one orientation.

    Systems are grouped by distinct plane: a plane and its negative are one trace, and a slip
    and a twin system on the same plane share one trace (``modes == ["slip", "twin"]``).

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
        Crystal lattice (used to read a load given as text).
    g : array_like, shape (3, 3)
        Orientation, ``v_crystal = g v_sample``.
    systems : sequence of tracefit.crystal.systems.DeformationSystem
    frame : FrameSettings
        Data-to-image frame and stage tilt.
    load : LoadAxis or str, optional
        Uniaxial load axis (see :func:`parse_load`); gives Schmid factors.
    stress : array_like, optional
        Stress tensor (3, 3) or Voigt (6,) in sample coordinates; gives resolved shear stresses.
    crss : dict, optional
        Critical resolved shear stress per family label (e.g. ``{"{111}": 10.0}``), system name or
        mode; with ``load`` gives ``activation_stress = CRSS / m`` in the CRSS unit.
    near_surface_deg : float
        Traces of planes inclined less than this (deg) to the surface are flagged unusable.
    sort : {"auto", "angle", "schmid"}
        ``auto``: best Schmid factor first when a load is given, else by angle.

    Returns
    -------
    list of PredictedTrace
    """
    frame = frame or FrameSettings()
    g = np.asarray(g, float)
    if g.shape != (3, 3):
        raise TracefitInputError(f"predict_traces takes one orientation (3 x 3); got shape {g.shape}. Use predicted_trace_table for many")
    systems = list(systems)
    if not systems:
        raise TracefitInputError("no slip or twin systems to predict traces for")
    if isinstance(load, str):
        load = parse_load(load, lattice)
    if sort not in ("auto", "angle", "schmid"):
        raise TracefitInputError(f"sort must be auto, angle or schmid, got {sort!r}")

    schmid = system_schmid_factors(load, g, systems) if load is not None else None
    tau = None
    if stress is not None:
        n = np.array([s.normal for s in systems], float)
        d = np.array([s.dir_unit for s in systems], float)
        tau = resolved_shear(stress, g, n, d)

    groups: dict[tuple, list[int]] = {}
    for i, s in enumerate(systems):
        groups.setdefault(_plane_key(np.asarray(s.normal, float)), []).append(i)

    normals = np.array([systems[idx[0]].normal for idx in groups.values()], float)
    table = predicted_trace_table(lattice, g, normals, frame, near_surface_deg)
    n_sample = normals @ g  # row form of g^T n

    out = []
    for j, idx in enumerate(groups.values()):
        first = systems[idx[0]]
        results = []
        for i in idx:
            s = systems[i]
            m = None if schmid is None else float(schmid[i])
            t = None
            if tau is not None:
                t = float(abs(tau[i])) if s.mode != "twin" else float(tau[i])
            results.append(
                SystemResult(
                    direction=tuple(s.direction),
                    mode=s.mode,
                    name=s.name,
                    schmid_factor=m,
                    resolved_shear=t,
                    activation_stress=activation_stress(_crss_for(crss, s), m),
                )
            )
        if schmid is not None:
            results.sort(key=lambda r: -r.schmid_factor)
        modes = sorted({systems[i].mode for i in idx}, key=lambda m: (_MODE_ORDER.get(m, 9), m))
        fams = []
        for i in idx:
            if systems[i].family not in fams:
                fams.append(systems[i].family)
        out.append(
            PredictedTrace(
                plane=tuple(first.plane),
                family="/".join(fams),
                modes=modes,
                angle_deg=float(table.angle_deg[j]),
                true_angle_deg=float(table.true_angle_deg[j]),
                inclination_deg=float(table.inclination_deg[j]),
                near_surface=bool(table.near_surface[j]),
                normal_sample=n_sample[j],
                systems=results,
            )
        )
    by_schmid = sort == "schmid" or (sort == "auto" and load is not None)
    if by_schmid:
        out.sort(key=lambda t: (-(t.best_schmid if t.best_schmid is not None else -9), t.angle_deg))
    else:
        out.sort(key=lambda t: t.angle_deg)
    return out


def _num(x):
    """Whole numbers as int for JSON, others as float."""
    f = float(x)
    return int(round(f)) if abs(f - round(f)) < 1e-9 else f
