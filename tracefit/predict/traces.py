"""Predicted surface traces of crystal planes and their inclination, for one or many orientations.

Trace of a plane with unit normal ``n`` (image/sample frame) on the surface z: its direction is
``z x n``, at the axial angle ``atan2(n_y, n_x) + 90 deg`` (mod 180). The plane's inclination to
the surface is ``arccos(|n_z|)``: 90 deg stands upright, near 0 lies almost in the surface
and leaves no usable trace (``near_surface``).

Frame rotation, flips and stage tilt come from :mod:`tracefit.conventions`; loads, Schmid
factors and resolved shear from :mod:`tracefit.predict.loading`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from tracefit.conventions import FrameSettings, apparent_angle, axial_difference, data_to_image_matrix, fold_axial
from tracefit.crystal import DeformationSystem, Lattice, Orientation, as_orientation_matrix, restate_label
from tracefit.errors import TracefitInputError, real_number
from tracefit.predict.loading import Load, _num, as_load, resolved_drive
from tracefit.predict.resolved import _unit_rows, activation_stress, crss_of, reported_drive, resolved_shear

__all__ = [
    "trace_angles",
    "plane_normals_in_image",
    "PredictedTrace",
    "SystemResult",
    "TraceTable",
    "predict_traces",
    "predicted_trace_table",
    "tilt_slope",
    "trace_rotation_gradient",
    "NEAR_SURFACE_DEG",
]

NEAR_SURFACE_DEG = 5.0  # below this inclination a trace is too ill-defined to use (common practice, no source)
SLOPE_STEP_DEG = 0.05  # central-difference step of the tilt slope (the identify package's value)
_MODE_ORDER = {"slip": 0, "twin": 1}


# ------------------------------------------------------------------ geometry
def trace_angles(normals: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
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

    Raises
    ------
    TracefitInputError
        Not three components.

    Examples
    --------
    >>> angle, incl = trace_angles([1.0, 1.0, 1.0])
    >>> round(float(angle), 3), round(float(incl), 3)
    (135.0, 54.736)
    """
    n = np.asarray(normals, float)
    if n.shape[-1:] != (3,):
        raise TracefitInputError(f"normals must have 3 components, got shape {n.shape}")
    norm = np.linalg.norm(n, axis=-1)
    angle = fold_axial(np.degrees(np.arctan2(n[..., 1], n[..., 0])) + 90.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        incl = np.degrees(np.arccos(np.clip(np.abs(n[..., 2]) / norm, 0.0, 1.0)))
    return angle, incl


def trace_rotation_gradient(normals_image: ArrayLike) -> np.ndarray:
    """First-order change of a trace angle per small rotation of the crystal about each image axis.

    A small rotation ``delta`` (a rotation vector, image axes) turns a plane normal ``n`` into
    ``n + delta x n``; the trace angle ``atan2(n_y, n_x) + 90 deg`` then moves by
    ``grad . delta`` with ``grad = (-n_x n_z, -n_y n_z, n_x^2 + n_y^2) / (n_x^2 + n_y^2)``
    (differentiating atan2; |grad| = 1 / sin(inclination)). A turn about the surface normal
    moves every trace 1:1.

    Parameters
    ----------
    normals_image : array_like, shape (..., 3)
        Plane normals in the image frame (any length; planes lying in the surface give a
        very large, finite gradient).

    Returns
    -------
    ndarray, shape (..., 3)
        d(trace angle) / d(rotation about image x, y, z), degrees per degree.

    Raises
    ------
    TracefitInputError
        Not three components.

    Examples
    --------
    >>> np.round(trace_rotation_gradient([1.0, 0.0, 1.0]), 6).tolist()
    [-1.0, -0.0, 1.0]
    """
    n = np.asarray(normals_image, float)
    if n.shape[-1:] != (3,):
        raise TracefitInputError(f"normals_image must have 3 components, got shape {n.shape}")
    n = n / np.linalg.norm(n, axis=-1, keepdims=True)
    h2 = np.maximum(n[..., 0] ** 2 + n[..., 1] ** 2, 1e-12)  # planes in the surface: large but finite
    return np.stack([-n[..., 0] * n[..., 2], -n[..., 1] * n[..., 2], n[..., 0] ** 2 + n[..., 1] ** 2], axis=-1) / h2[..., None]


def plane_normals_in_image(g: Orientation | ArrayLike, normals_crystal: ArrayLike, frame: FrameSettings | None = None) -> np.ndarray:
    """Crystal-frame plane normals expressed in the image frame.

    ``n_image = M g^T n_crystal`` with ``M`` = :func:`tracefit.conventions.data_to_image_matrix`.

    Parameters
    ----------
    g : Orientation or array_like, shape (3, 3) or (N, 3, 3)
        Orientations, ``v_crystal = g v_sample``.
    normals_crystal : array_like, shape (M, 3)
        Cartesian crystal-frame normals.
    frame : FrameSettings, optional

    Returns
    -------
    ndarray, shape (M, 3) or (N, M, 3)

    Raises
    ------
    TracefitInputError
        Wrong shapes.

    Examples
    --------
    >>> from tracefit.conventions import FrameSettings
    >>> n = plane_normals_in_image(np.eye(3), [[1.0, 0, 0]], FrameSettings(rotation_deg=90.0))
    >>> np.round(n, 6).tolist()
    [[0.0, 1.0, 0.0]]
    """
    g = as_orientation_matrix(g)
    n = np.atleast_2d(np.asarray(normals_crystal, float))
    if n.shape[-1] != 3:
        raise TracefitInputError(f"normals_crystal must have shape (M, 3), got {n.shape}")
    M = data_to_image_matrix(frame)
    # n_img = M g^T n_c; in row-vector form n_img = n_c (M g^T)^T = n_c g M^T (matmul is
    # several times faster than einsum here, and this sits in the matcher's inner loop).
    return n @ (g @ M.T)


def tilt_slope(true_deg: ArrayLike, frame: FrameSettings | None = None) -> np.ndarray:
    """d(apparent angle)/d(true angle) under the frame's stage tilt (1 without tilt).

    A central difference of :func:`tracefit.conventions.apparent_angle` with a step of
    0.05 deg (the computation the identify package has used, kept so results stay equal).

    Parameters
    ----------
    true_deg : array_like
        True image-frame trace angles, degrees.
    frame : FrameSettings, optional

    Returns
    -------
    ndarray
        Same shape as ``true_deg``; dimensionless.

    Examples
    --------
    >>> from tracefit.conventions import FrameSettings
    >>> round(float(tilt_slope(0.0, FrameSettings(tilt_deg=60.0))), 4)  # cos 60 deg along x
    0.5
    """
    true = np.asarray(true_deg, float)
    fr = frame or FrameSettings()
    if float(fr.tilt_deg) == 0.0:
        return np.ones_like(true)
    h = SLOPE_STEP_DEG
    d = axial_difference(apparent_angle(true + h, fr), apparent_angle(true - h, fr)) / (2 * h)
    return np.asarray(d, float)


@dataclass
class TraceTable:
    """Predicted traces of M planes for N orientations (arrays of shape (N, M), or (M,) for one).

    Attributes
    ----------
    angle_deg : ndarray
        Apparent image-frame angle (after frame rotation, flips and tilt), degrees.
    true_angle_deg : ndarray
        The same before tilt foreshortening, degrees.
    inclination_deg : ndarray
        Plane inclination to the surface, degrees.
    near_surface : ndarray of bool
        Inclination below the near-surface limit (trace unusable).
    normals_image : ndarray, shape (..., 3)
        Unit plane normals in the image frame.
    slope : ndarray
        d(apparent)/d(true) under the stage tilt; 1 without tilt.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> t = predicted_trace_table(Lattice.fcc(), np.eye(3), [(1, 1, 1)], indices=True)
    >>> sorted(t.to_dict())
    ['angle_deg', 'inclination_deg', 'near_surface', 'slope', 'true_angle_deg']
    """

    angle_deg: np.ndarray
    true_angle_deg: np.ndarray
    inclination_deg: np.ndarray
    near_surface: np.ndarray
    normals_image: np.ndarray
    slope: np.ndarray | None = None

    def __post_init__(self):
        if self.slope is None:
            self.slope = np.ones_like(np.asarray(self.true_angle_deg, float))

    def to_dict(self) -> dict:
        """JSON-ready lists (normals left out)."""
        return {
            "angle_deg": self.angle_deg.tolist(),
            "true_angle_deg": self.true_angle_deg.tolist(),
            "inclination_deg": self.inclination_deg.tolist(),
            "near_surface": self.near_surface.tolist(),
            "slope": np.asarray(self.slope).tolist(),
        }


def predicted_trace_table(
    lattice: Lattice,
    g_many: Orientation | ArrayLike,
    normals: ArrayLike,
    frame: FrameSettings | None = None,
    near_surface_deg: float = NEAR_SURFACE_DEG,
    indices: bool = False,
) -> TraceTable:
    """Vectorised trace prediction for many orientations at once.

    Parameters
    ----------
    lattice : tracefit.crystal.Lattice
        Used only when ``indices`` is true, to turn plane indices into normals.
    g_many : Orientation or array_like, shape (N, 3, 3) or (3, 3)
        Orientations.
    normals : array_like, shape (M, 3)
        Cartesian crystal-frame plane normals (e.g. ``DeformationSystem.normal``; normalised
        here), or with ``indices=True`` plane indices (M, 3) / (M, 4).
    frame : FrameSettings
    near_surface_deg : float
        Inclination (deg) below which a trace counts as unusable.
    indices : bool
        ``normals`` holds plane indices.

    Returns
    -------
    TraceTable
        Arrays of shape (N, M) (or (M,) for one ``g``), with the tilt slope.

    Raises
    ------
    TracefitInputError
        Bad orientation, normals or indices.

    Examples
    --------
    >>> from tracefit.conventions import FrameSettings
    >>> from tracefit.crystal import Lattice, Orientation
    >>> t = predicted_trace_table(Lattice.fcc(), Orientation.from_euler([0, 0, 0]), [(1, 1, 1), (1, -1, 1)],
    ...                           FrameSettings(tilt_deg=60.0), indices=True)
    >>> np.round(t.true_angle_deg, 3).tolist(), np.round(t.angle_deg, 3).tolist()
    ([135.0, 45.0], [153.435, 26.565])
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
        slope=tilt_slope(true, frame),
    )


# ------------------------------------------------------------------ per-orientation prediction
@dataclass
class SystemResult:
    """One slip or twin system on a predicted trace.

    Attributes
    ----------
    direction : tuple of int
        Slip or twinning direction indices.
    mode : {"slip", "twin"}
    name : str
        System family name.
    schmid_factor : float or None
        Reported Schmid factor (axis loads): ``|m|`` for slip, signed for twins.
    resolved_shear : float or None
        Resolved shear stress (stress loads, unit of the stress): ``|tau|`` for slip, signed for twins.
    activation_stress : float or None
        ``CRSS / m`` in the CRSS unit, when a CRSS and a positive ``m`` are known.
    crss : float or None
        The CRSS given for this system (the unit of the stress, MPa), if any.
    exceeds_crss : bool or None
        Under a stress with a CRSS: ``resolved_shear >= crss`` (twins: signed, so a twin sheared
        against its sense never reaches it); None otherwise.

    Examples
    --------
    >>> SystemResult((1, -1, 0), "slip", "{111}<110> slip", schmid_factor=0.4).to_dict()["schmid_factor"]
    0.4
    """

    direction: tuple
    mode: str
    name: str
    schmid_factor: float | None = None
    resolved_shear: float | None = None
    activation_stress: float | None = None
    crss: float | None = None
    exceeds_crss: bool | None = None

    def to_dict(self) -> dict:
        """JSON-ready dict; quantities that are None are left out."""
        d = {"direction": [_num(x) for x in self.direction], "mode": self.mode, "name": self.name}
        for k in ("schmid_factor", "resolved_shear", "activation_stress", "crss"):
            v = getattr(self, k)
            if v is not None:
                d[k] = float(v)
        if self.exceeds_crss is not None:
            d["exceeds_crss"] = bool(self.exceeds_crss)
        return d


@dataclass
class PredictedTrace:
    """A distinct plane's predicted trace for one orientation.

    Attributes
    ----------
    plane : tuple of int
        Plane indices as in the catalogue.
    family : str
        Plane family label(s), joined by "/" when a slip and a twin family share the plane.
    modes : list of str
        ``["slip"]``, ``["twin"]`` or ``["slip", "twin"]``.
    angle_deg, true_angle_deg : float
        Apparent image-frame angle (after frame rotation, flips and stage tilt), and before
        tilt foreshortening, degrees.
    inclination_deg : float
        Plane inclination to the surface, degrees.
    near_surface : bool
        Trace too ill-defined to use.
    normal_sample : ndarray, shape (3,)
        Unit plane normal in sample coordinates.
    systems : list of SystemResult
        The systems on the plane (best drive first under a load).

    Examples
    --------
    >>> from tracefit.crystal import Lattice, Orientation, catalogue
    >>> lat = Lattice.fcc()
    >>> tr = predict_traces(lat, Orientation.from_euler([0, 0, 0]), catalogue(lat, modes="slip"), load="[001]")
    >>> round(tr[0].best_schmid, 3), tr[0].modes
    (0.408, ['slip'])
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
        """Largest reported Schmid factor of the plane's systems (None without an axis load)."""
        vals = [s.schmid_factor for s in self.systems if s.schmid_factor is not None]
        return max(vals) if vals else None

    def to_dict(self) -> dict:
        """JSON-ready dict (``best_schmid_factor`` only under an axis load)."""
        d = {
            "plane": [_num(x) for x in self.plane],
            "family": restate_label(self.family),
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


_crss_for = crss_of  # the former private name


def _loads(lattice, load, stress, frame) -> tuple[Load | None, np.ndarray | None]:
    """(axis load or None, sample-frame stress tensor or None) from the two ways predict_traces takes them."""
    ld = as_load(load, lattice)
    if ld is not None and ld.is_stress:
        if stress is not None:
            raise TracefitInputError("give the stress once: as load=Load.stress(...) or as stress=, not both")
        return None, ld.stress_in_sample(frame)
    if stress is not None:
        st = stress if isinstance(stress, Load) else Load.stress(stress)
        return ld, st.stress_in_sample(frame)
    return ld, None


def _system_results(systems, idx, schmid, tau, crss) -> list[SystemResult]:
    results = []
    for i in idx:
        s = systems[i]
        m = None if schmid is None else float(schmid[i])
        t = None if tau is None else float(tau[i])
        c = _crss_for(crss, s)
        results.append(SystemResult(direction=tuple(s.direction), mode=s.mode, name=s.name, schmid_factor=m,
                                    resolved_shear=t, activation_stress=activation_stress(c, m), crss=c,
                                    exceeds_crss=None if (c is None or t is None) else bool(t >= c)))
    if schmid is not None:
        results.sort(key=lambda r: -r.schmid_factor)
    return results


def _traces_by_plane(lattice, g, systems, frame, near_surface_deg, results_for) -> list[PredictedTrace]:
    """One PredictedTrace per distinct plane (a plane and its negative are one), unsorted."""
    groups: dict[tuple, list[int]] = {}
    for i, s in enumerate(systems):
        groups.setdefault(_plane_key(np.asarray(s.normal, float)), []).append(i)
    normals = np.array([systems[idx[0]].normal for idx in groups.values()], float)
    table = predicted_trace_table(lattice, g, normals, frame, near_surface_deg)
    n_sample = normals @ g  # row form of g^T n
    out = []
    for j, idx in enumerate(groups.values()):
        out.append(PredictedTrace(
            plane=tuple(systems[idx[0]].plane),
            family="/".join(dict.fromkeys(systems[i].family for i in idx)),
            modes=sorted({systems[i].mode for i in idx}, key=lambda m: (_MODE_ORDER.get(m, 9), m)),
            angle_deg=float(table.angle_deg[j]),
            true_angle_deg=float(table.true_angle_deg[j]),
            inclination_deg=float(table.inclination_deg[j]),
            near_surface=bool(table.near_surface[j]),
            normal_sample=n_sample[j],
            systems=results_for(idx),
        ))
    return out


def predict_traces(
    lattice: Lattice,
    g: Orientation | ArrayLike,
    systems: Sequence[DeformationSystem],
    frame: FrameSettings | None = None,
    load: Load | str | ArrayLike | None = None,
    stress: ArrayLike | None = None,
    crss: dict | None = None,
    near_surface_deg: float = NEAR_SURFACE_DEG,
    sort: str = "auto",
) -> list[PredictedTrace]:
    """Predicted traces of the planes of ``systems`` for one orientation.

    Systems are grouped by distinct plane: a plane and its negative are one trace, and a slip
    and a twin system on the same plane share one trace (``modes == ["slip", "twin"]``).

    Parameters
    ----------
    lattice : tracefit.crystal.Lattice
        Crystal lattice (used to read a load given as text).
    g : Orientation or array_like, shape (3, 3)
        One orientation, ``v_crystal = g v_sample``.
    systems : sequence of tracefit.crystal.DeformationSystem
    frame : FrameSettings
        Data-to-image frame and stage tilt.
    load : Load, str or array_like, optional
        Anything :func:`tracefit.predict.as_load` accepts: an axis gives Schmid factors, a
        stress resolved shear stresses.
        Axes and stresses along the picture's axes (``frame="image"``, the default of
        :class:`tracefit.predict.Load`) are placed in the orientation data's frame with
        ``frame``'s rotation and flips, so the Schmid factors follow what the picture shows.
    stress : array_like or Load, optional
        Stress tensor (3, 3) or Voigt (6,) in MPa, image frame (a ``Load.stress(..., frame="sample")``
        for the data's frame); gives resolved shear stresses.
    crss : dict, optional
        Critical resolved shear stress per family label (e.g. ``{"{111}": 10.0}``), system name or
        mode; with an axis load gives ``activation_stress = CRSS / m`` in the CRSS unit, with a
        stress the check ``resolved_shear >= crss`` (``SystemResult.exceeds_crss``).
    near_surface_deg : float
        Traces of planes inclined less than this (deg) to the surface are flagged unusable.
    sort : {"auto", "angle", "schmid"}
        ``auto``: best Schmid factor first when an axis load is given, else by angle.

    Returns
    -------
    list of PredictedTrace

    Raises
    ------
    TracefitInputError
        Not one orientation, no systems, an unreadable load, an unknown ``sort``.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, Orientation, catalogue
    >>> lat = Lattice.fcc()
    >>> tr = predict_traces(lat, Orientation.from_euler([0, 0, 0]), catalogue(lat, modes="slip"))
    >>> [round(t.angle_deg, 3) for t in tr]
    [45.0, 45.0, 135.0, 135.0]
    """
    # Over 80 lines only through its numpydoc docstring; the code is 22 lines.
    frame = frame or FrameSettings()
    g = as_orientation_matrix(g)
    if g.shape != (3, 3):
        raise TracefitInputError(f"predict_traces takes one orientation g (3 x 3); got shape {g.shape}. Use predicted_trace_table for many")
    systems = list(systems)
    if not systems:
        raise TracefitInputError("no slip or twin systems to predict traces for")
    load, stress = _loads(lattice, load, stress, frame)
    if not isinstance(sort, str) or sort not in ("auto", "angle", "schmid"):
        raise TracefitInputError(f"sort must be auto, angle or schmid, got {sort!r}")
    near_surface_deg = real_number(near_surface_deg, "near_surface_deg")
    if not 0 <= near_surface_deg <= 90:
        raise TracefitInputError(f"near_surface_deg must be between 0 and 90 degrees, got {near_surface_deg!r}")

    normals_all = np.array([s.normal for s in systems], float)
    dirs_all = np.array([s.dir_unit for s in systems], float)
    modes_all = [s.mode for s in systems]
    schmid = reported_drive(resolved_drive(load, g, normals_all, dirs_all, frame), modes_all) if load is not None else None
    tau = reported_drive(resolved_shear(stress, g, normals_all, dirs_all), modes_all) if stress is not None else None
    out = _traces_by_plane(lattice, g, systems, frame, near_surface_deg,
                           lambda idx: _system_results(systems, idx, schmid, tau, crss))
    if sort == "schmid" or (sort == "auto" and load is not None):
        out.sort(key=lambda t: (-(t.best_schmid if t.best_schmid is not None else -9), t.angle_deg))
    else:
        out.sort(key=lambda t: t.angle_deg)
    return out
