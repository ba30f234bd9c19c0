"""Plane normals from traces on two faces of known relative geometry (two-surface analysis).

The trace of one plane on two non-parallel faces gives two lines of the plane, so its
normal is their cross product n = t1 x t2 (the classic two-surface trace analysis;
common practice, no source).

Geometry (our convention). Face 1 is the main surface: sample frame X right, Y up,
Z toward the viewer (the image frame of face 1). Face 2 shares an edge with face 1:

* ``edge_angle_deg`` (phi): direction of the common edge in face 1's image, e = (cos phi, sin phi, 0);
* face 2 lies on the right-hand side of e as seen on face 1 (for phi = 0: the front face
  below face 1's bottom edge), and ``dihedral_deg`` is the interior angle between the two
  faces (90 for the edge of a block);
* face 2's outward normal is face 1's normal turned about e by 180 - dihedral; face 2's image
  has x2 = e and y2 = n2 x e (for a block: x2 = X, y2 = Z, looking at the front face with
  face 1 at the top).

Angles on face 2 are read in face 2's own image frame (axial, ccw from x2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Sequence

import numpy as np
from scipy.spatial.transform import Rotation

from tracefit.conventions import FrameSettings, data_to_image_matrix, fold_axial
from tracefit.errors import TracefitInputError, real_number
from tracefit.matching.candidates import CandidateSet, as_candidate_set
from tracefit.matching.checks import check_fraction, check_sigma, orientation_matrix
from tracefit.matching.likelihood import DEFAULT_P_NONE, candidate_log_prior, logsumexp, none_log_density

__all__ = ["FaceGeometry", "TwoFacePlane", "PlaneMatch", "plane_from_two_traces", "index_two_face",
           "interplanar_pairs", "trace_on_face"]


@dataclass(frozen=True)
class FaceGeometry:
    """Relative geometry of face 2 with respect to face 1 (see module doc).

    Attributes
    ----------
    edge_angle_deg : float
        Direction of the common edge in face 1's image, degrees ccw from +x.
    dihedral_deg : float
        Interior angle between the faces, degrees in [5, 175] (90 for a block's edge).

    Raises
    ------
    TracefitInputError
        For a non-finite angle or a dihedral outside [5, 175] degrees.

    Examples
    --------
    >>> e, y2, n2 = FaceGeometry().basis()
    >>> np.round(e, 3) + 0.0, np.round(y2, 3) + 0.0, np.round(n2, 3) + 0.0
    (array([1., 0., 0.]), array([0., 0., 1.]), array([ 0., -1.,  0.]))
    """

    edge_angle_deg: float = 0.0
    dihedral_deg: float = 90.0

    def __post_init__(self):
        for k in ("edge_angle_deg", "dihedral_deg"):
            v = getattr(self, k)
            if not (isinstance(v, (int, float)) and math.isfinite(v)):
                raise TracefitInputError(f"face geometry {k} must be a finite number of degrees, got {v!r}")
        if not (5.0 <= self.dihedral_deg <= 175.0):
            raise TracefitInputError(f"the dihedral angle between the faces must be 5-175 deg, got {self.dihedral_deg:g}")

    def basis(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(e, y2, n2): face 2's x axis, y axis and outward normal, unit (3,) in face 1's sample frame."""
        phi = math.radians(self.edge_angle_deg)
        e = np.array([math.cos(phi), math.sin(phi), 0.0])
        # Turn face 1's normal about e by 180 - dihedral: for phi = 0 and 90 deg this gives -Y.
        n2 = Rotation.from_rotvec(e * math.radians(180.0 - self.dihedral_deg)).apply([0.0, 0.0, 1.0])
        y2 = np.cross(n2, e)
        return e, y2, n2


def _t1(theta1):
    t = math.radians(theta1)
    return np.array([math.cos(t), math.sin(t), 0.0])


def _t2(theta2, geom):
    e, y2, _ = geom.basis()
    t = math.radians(theta2)
    return math.cos(t) * e + math.sin(t) * y2


def trace_on_face(normal_sample: Sequence[float], geom: FaceGeometry | None = None) -> tuple[float, float]:
    """Trace angles of a plane with this sample-frame normal on face 1 and on face 2.

    Parameters
    ----------
    normal_sample : array_like, shape (3,)
        Plane normal in face 1's sample frame (any length > 0).
    geom : FaceGeometry, optional
        Geometry of face 2 (default: block edge along x, dihedral 90 deg).

    Returns
    -------
    face1_deg, face2_deg : float
        Axial trace angles in each face's own image frame, degrees in [0, 180).

    Raises
    ------
    TracefitInputError
        For a zero or non-finite normal.

    Examples
    --------
    >>> a1, a2 = trace_on_face([1.0, 1.0, 1.0])
    >>> round(a1, 3), round(a2, 3)
    (135.0, 135.0)
    """
    geom = geom or FaceGeometry()
    n = np.asarray(normal_sample, float)
    if n.shape != (3,) or not np.all(np.isfinite(n)) or not np.linalg.norm(n) > 0:
        raise TracefitInputError(f"normal_sample must be a finite non-zero 3-vector, got {normal_sample!r}")
    n = n / np.linalg.norm(n)
    e, y2, n2 = geom.basis()
    t1 = np.cross([0.0, 0.0, 1.0], n)
    t2 = np.cross(n2, n)
    a1 = fold_axial(math.degrees(math.atan2(t1[1], t1[0])))
    a2 = fold_axial(math.degrees(math.atan2(t2 @ y2, t2 @ e)))
    return a1, a2


@dataclass
class PlaneMatch:
    """A candidate plane's distance to a two-face normal.

    Attributes
    ----------
    plane : tuple of int
        Plane indices.
    family, mode : str
        Plane family and ``"slip"`` or ``"twin"``.
    angle_deg : float
        Angle between the measured normal and the plane normal, degrees.
    probability : float
        Posterior probability of this candidate.

    Examples
    --------
    >>> PlaneMatch((1, 1, 1), "{111}", "slip", 0.41234, 0.98).to_dict()["angle_deg"]
    0.412
    """

    plane: tuple
    family: str
    mode: str
    angle_deg: float
    probability: float

    def to_dict(self) -> dict:
        """JSON form (angle to 3 decimals, probability to 6)."""
        return {"plane": list(self.plane), "family": self.family, "mode": self.mode,
                "angle_deg": round(float(self.angle_deg), 3), "probability": round(float(self.probability), 6)}


@dataclass
class TwoFacePlane:
    """The plane normal from one pair of traces, and its indexing.

    Attributes
    ----------
    face1_deg, face2_deg : float
        The two trace angles, axial degrees.
    normal_sample : ndarray, shape (3,)
        Unit plane normal in face 1's sample (image) frame, n_z >= 0.
    sigma_deg : float
        One-sigma angular uncertainty of the normal, degrees.
    inclination_deg : float
        Angle between the plane and face 1, degrees.
    normal_crystal : ndarray, shape (3,), or None
        The normal in the crystal frame (with an orientation).
    matches : list of PlaneMatch
        Candidate planes, most probable first (with an orientation).
    p_none : float or None
        Posterior probability of "none of these".
    unexplained : bool or None
        p_none >= 0.5.
    notes : list of str

    Examples
    --------
    >>> n, s = plane_from_two_traces(135.0, 135.0)
    >>> TwoFacePlane(135.0, 135.0, n, s, 54.7356).to_dict()["normal_sample"]
    [0.57735, 0.57735, 0.57735]
    """

    face1_deg: float
    face2_deg: float
    normal_sample: np.ndarray
    sigma_deg: float
    inclination_deg: float
    normal_crystal: np.ndarray | None = None
    matches: list = field(default_factory=list)
    p_none: float | None = None
    unexplained: bool | None = None
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """JSON form, with the indexing as ``candidates``."""
        d = {
            "face1_deg": round(self.face1_deg, 4),
            "face2_deg": round(self.face2_deg, 4),
            "normal_sample": [round(float(x), 6) for x in self.normal_sample],
            "sigma_deg": round(float(self.sigma_deg), 4),
            "inclination_deg": round(float(self.inclination_deg), 4),
            "normal_crystal": None if self.normal_crystal is None else [round(float(x), 6) for x in self.normal_crystal],
            "candidates": [m.to_dict() for m in self.matches],
            "p_none": None if self.p_none is None else round(float(self.p_none), 6),
            "unexplained": self.unexplained,
            "notes": list(self.notes),
        }
        return d


def plane_from_two_traces(face1_deg: float, face2_deg: float, geom: FaceGeometry | None = None,
                          sigma1_deg: float = 0.5, sigma2_deg: float = 0.5) -> tuple[np.ndarray, float]:
    """Unit plane normal (face 1 sample frame) from its traces on two faces.

    Parameters
    ----------
    face1_deg, face2_deg : float
        Trace angles on face 1 and face 2, each in its own image frame, degrees.
    geom : FaceGeometry
    sigma1_deg, sigma2_deg : float
        One-sigma uncertainty of the two angles, degrees.

    Returns
    -------
    normal : ndarray (3,)
        Unit normal, sense chosen with n_z >= 0.
    sigma_deg : float
        One-sigma angular uncertainty of the normal (RMS of the two first-order cones), degrees.

    Raises
    ------
    TracefitInputError
        For non-finite angles or sigmas, or traces (nearly) parallel to the common edge.

    Examples
    --------
    The (1 1 1) plane of a cube-oriented crystal seen on the top and the front face of a block:

    >>> n, s = plane_from_two_traces(135.0, 135.0)
    >>> np.round(n, 3).tolist(), round(s, 3)
    ([0.577, 0.577, 0.577], 0.667)
    """
    # Trace angles are axial: fold them, so huge values keep their meaning (and +0.1 deg below stays a step).
    face1_deg = fold_axial(real_number(face1_deg, "face1_deg"))
    face2_deg = fold_axial(real_number(face2_deg, "face2_deg"))
    sigma1_deg, sigma2_deg = real_number(sigma1_deg, "sigma1_deg"), real_number(sigma2_deg, "sigma2_deg")
    for name, v in (("sigma1_deg", sigma1_deg), ("sigma2_deg", sigma2_deg)):
        if not 0 <= v <= 90:
            raise TracefitInputError(f"{name} must be between 0 and 90 degrees, got {v!r}")
    if geom is not None and not isinstance(geom, FaceGeometry):
        raise TracefitInputError(f"geom must be a FaceGeometry, got {type(geom).__name__}")
    geom = geom or FaceGeometry()
    t1, t2 = _t1(face1_deg), _t2(face2_deg, geom)
    n = np.cross(t1, t2)
    s = float(np.linalg.norm(n))
    if s < math.sin(math.radians(2.0)):
        raise TracefitInputError(
            "the two traces are (nearly) parallel to the common edge, so they do not fix the plane; "
            "a plane whose trace runs along the edge needs a third face"
        )
    n = n / s
    if n[2] < 0:
        n = -n
    devs = []
    for k, (sg, f) in enumerate(((sigma1_deg, lambda a: np.cross(_t1(a), t2)), (sigma2_deg, lambda a: np.cross(t1, _t2(a, geom))))):
        base = face1_deg if k == 0 else face2_deg
        m = f(base + 0.1)
        m = m / np.linalg.norm(m)
        ang = math.degrees(math.acos(min(1.0, abs(float(m @ n))))) / 0.1
        devs.append(ang * sg)
    sigma = math.sqrt(devs[0] ** 2 + devs[1] ** 2)
    return n, sigma


def _index_normal(tp: TwoFacePlane, cands: CandidateSet, g: np.ndarray, frame, orientation_sigma_deg: float,
                  p_none: float, threshold: float) -> None:
    """Compare a two-face normal with every candidate plane; fills ``tp`` in place."""
    n_data = data_to_image_matrix(frame).T @ tp.normal_sample
    nc = g @ n_data
    tp.normal_crystal = nc
    ang = np.degrees(np.arccos(np.clip(np.abs(cands.normals @ nc), 0.0, 1.0)))
    s2 = math.radians(math.hypot(tp.sigma_deg, orientation_sigma_deg)) ** 2
    # Gaussian on the sphere (small angles): exp(-a^2 / 2 s^2) / (2 pi s^2) per steradian
    log_lik = -np.radians(ang) ** 2 / (2 * s2) - math.log(2 * math.pi * s2)
    log_w = np.append(candidate_log_prior(cands.plane_ids, p_none) + log_lik, none_log_density(p_none, 2 * math.pi))
    post_all = np.exp(log_w - logsumexp(log_w))
    post = post_all[:-1]
    tp.p_none = float(post_all[-1])
    tp.unexplained = tp.p_none >= 0.5
    for c in np.argsort(-post):
        if post[c] < threshold and tp.matches:
            break
        tp.matches.append(PlaneMatch(cands.planes[c], cands.families[c], cands.modes[c], float(ang[c]), float(post[c])))
    if tp.unexplained:
        tp.notes.append("no candidate plane lies near this normal: check the face geometry, the orientation and the modes")


def index_two_face(pairs: Iterable[Sequence[float]], geom: FaceGeometry | None = None, lattice: Any = None,
                   g: Any = None, systems: Any = None, frame: FrameSettings | None = None,
                   orientation_sigma_deg: float = 1.0, p_none: float = DEFAULT_P_NONE,
                   sigma_deg: float = 0.5, threshold: float = 0.01) -> list[TwoFacePlane]:
    """Plane normals from trace pairs, indexed against the candidate planes of a known orientation.

    Parameters
    ----------
    pairs : sequence of (face1_deg, face2_deg) or (face1_deg, face2_deg, sigma_deg)
        Trace angles of one plane on the two faces, each in its face's image frame, degrees.
    geom : FaceGeometry, optional
        Geometry of face 2 (default: block edge along x, dihedral 90 deg).
    lattice : tracefit.crystal.Lattice, optional
        Not needed by the indexing; kept for a uniform call.
    g : ndarray (3, 3) or orientation with ``as_matrix()``, optional
        Orientation, v_crystal = g v_sample.
    systems : iterable of DeformationSystem or CandidateSet, optional
        With ``g``, each normal is compared with every candidate plane: likelihood
        exp(-a^2 / 2 s^2) / (2 pi s^2) over the angle a between normals
        (s^2 = sigma_normal^2 + sigma_orient^2), "none of these" uniform 1 / (2 pi) on the
        half sphere with prior ``p_none``.
    frame : FrameSettings, optional
        Data -> image frame of face 1 (the normal is turned back into the data frame).
    orientation_sigma_deg : float
        Orientation uncertainty, degrees (>= 0).
    p_none : float
        Prior of "none of these", in [0, 1).
    sigma_deg : float
        Angle sigma of pairs given without one, degrees.
    threshold : float
        Candidates below this posterior are not listed (the best one always is).

    Returns
    -------
    list of TwoFacePlane
        One per pair, in input order.

    Raises
    ------
    TracefitInputError
        For a malformed pair, traces along the common edge, or a bad argument.

    Examples
    --------
    The (1 1 1) plane of an fcc crystal at Euler (0, 0, 0) on a block (face 2 the front face):

    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> a1, a2 = trace_on_face(np.ones(3) / np.sqrt(3))
    >>> round(a1, 1), round(a2, 1)
    (135.0, 135.0)
    >>> fcc = lattice_preset("fcc")
    >>> tp = index_two_face([(a1, a2)], lattice=fcc, g=np.eye(3), systems=catalogue(fcc, ["slip"]))[0]
    >>> tp.matches[0].plane, round(tp.matches[0].probability, 3), tp.unexplained
    ((1, 1, 1), 1.0, False)
    """
    geom = geom or FaceGeometry()
    check_sigma(orientation_sigma_deg, "orientation_sigma_deg")
    check_sigma(sigma_deg, "sigma_deg")
    check_fraction(p_none, "p_none")
    cands = None
    if g is not None and systems is not None:
        g = orientation_matrix(g, "g")
        cands = as_candidate_set(systems)
    out = []
    for p in pairs:
        p = tuple(p)
        if len(p) not in (2, 3):
            raise TracefitInputError(f"a two-face trace pair needs (face1_deg, face2_deg[, sigma_deg]), got {p!r}")
        s_in = float(p[2]) if len(p) == 3 else sigma_deg
        n, sig = plane_from_two_traces(float(p[0]), float(p[1]), geom, s_in, s_in)
        incl = math.degrees(math.acos(min(1.0, abs(n[2]))))
        tp = TwoFacePlane(fold_axial(float(p[0])), fold_axial(float(p[1])), n, sig, incl)
        if cands is not None:
            _index_normal(tp, cands, g, frame, orientation_sigma_deg, p_none, threshold)
        out.append(tp)
    return out


def interplanar_pairs(normals_sample: Sequence[Sequence[float]], lattice: Any, families: Sequence[Sequence[int]],
                      tol_deg: float = 2.0, max_index: int = 3) -> tuple[float, list[tuple]]:
    """Without an orientation: which pairs of plane families have the measured interplanar angle.

    The angle between two measured normals does not depend on the orientation, so it can be
    compared with the angles between members of candidate families.

    Parameters
    ----------
    normals_sample : array_like, shape (2, 3)
        Two plane normals (any frame, the same for both; any length > 0).
    lattice : tracefit.crystal.Lattice
        The crystal lattice.
    families : sequence of plane indices, e.g. [(1, 1, 1), (1, 1, 0)]
        Representative of each family (variants are generated with the lattice symmetry).
    tol_deg : float
        Largest accepted difference between measured and tabulated angle, degrees.
    max_index : int
        Unused; kept for callers that pass it.

    Returns
    -------
    measured_deg : float
        Angle between the two measured normals, degrees in [0, 90].
    pairs : list of (family_a, family_b, plane_a, plane_b, angle_deg)
        Family pairs with a member pair at the measured angle within ``tol_deg``, closest first.

    Raises
    ------
    TracefitInputError
        When ``normals_sample`` is not two finite non-zero 3-vectors.

    Examples
    --------
    Two {111} normals of fcc meet at 70.53 deg:

    >>> from tracefit.crystal import lattice_preset
    >>> meas, pairs = interplanar_pairs([[1, 1, 1], [1, -1, 1]], lattice_preset("fcc"), [(1, 1, 1), (1, 1, 0)])
    >>> round(meas, 2), [(p[0], p[1], round(p[4], 2)) for p in pairs]
    (70.53, [((1, 1, 1), (1, 1, 1), 70.53)])
    """
    from tracefit.crystal import plane_variants

    ns = np.asarray(normals_sample, float)
    if ns.shape != (2, 3) or not np.all(np.isfinite(ns)) or not np.all(np.linalg.norm(ns, axis=1) > 0):
        raise TracefitInputError(f"normals_sample must be two finite non-zero 3-vectors, shape (2, 3), got {normals_sample!r}")
    a, b = (v / np.linalg.norm(v) for v in ns)
    meas = math.degrees(math.acos(min(1.0, abs(float(a @ b)))))
    rows = []
    fams = [tuple(f) for f in families]
    for i, fa in enumerate(fams):
        for fb in fams[i:]:
            na = lattice.plane_normal(fa)
            best = None
            for vb in plane_variants(lattice, fb):
                nb = lattice.plane_normal(vb)
                ang = math.degrees(math.acos(min(1.0, abs(float(na @ nb)))))
                if ang < 1e-6:
                    continue
                d = abs(ang - meas)
                if d <= tol_deg and (best is None or d < best[-1]):
                    best = (fa, fb, tuple(fa), tuple(vb), ang, d)
            if best:
                rows.append(best[:5])
    rows.sort(key=lambda r: abs(r[4] - meas))
    return meas, rows
