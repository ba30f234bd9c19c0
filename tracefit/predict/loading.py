"""Loads on a crystal: a uniaxial axis with its sense, or a full stress tensor.

:func:`resolved_drive` gives one signed number per system for either kind of load (the
Schmid factor with the load's sense, or the resolved shear stress; see
:mod:`tracefit.predict.resolved` for the laws and the twin sign rule), so consumers need not
branch on the load type.

The frame of a load
-------------------
A load axis or stress given along sample axes is read in one of two frames, stated by
``Load.frame``:

* ``"image"`` (the default): the axes of the picture as a person sees it, x to the right, y up
  the screen, z toward the viewer. It is brought into the orientation data's frame with the
  inverse of the frame's data -> image rotation ``M``
  (:func:`tracefit.conventions.data_to_image_matrix`): ``l_sample = M^T l_image`` and
  ``sigma_sample = M^T sigma_image M``. The stage tilt does not enter (it is a view, not a
  turn of the sample).
* ``"sample"``: the frame of the orientation data (what every load meant before the frame was
  stated); used as given.

A crystal direction (``"[110]"``) has ``frame="crystal"`` and needs no frame. Without frame
settings (no rotation, no flips) the image and sample frames coincide.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from tracefit.conventions import FrameSettings, data_to_image_matrix
from tracefit.crystal import DeformationSystem, Lattice, Orientation, as_orientation_matrix, parse_index, parse_vector
from tracefit.errors import TracefitInputError
from tracefit.predict.resolved import reported_drive, resolved_shear, schmid_factor, stress_tensor

__all__ = [
    "Load",
    "LoadAxis",
    "parse_load",
    "as_load",
    "load_from_fields",
    "resolved_drive",
    "system_schmid_factors",
    "SENSES",
    "FRAMES",
    "DEFAULT_LOAD_FRAME",
]

SENSES = ("tension", "compression")
#: frames a load can be stated in: the picture's axes, the orientation data's axes, the crystal's
FRAMES = ("image", "sample", "crystal")
#: the frame of loads along sample axes when none is said: what a person looking at the picture means
DEFAULT_LOAD_FRAME = "image"
_AXIS_FRAMES = ("image", "sample")


@dataclass(frozen=True)
class Load:
    """A uniaxial load (axis and sense) or a stress tensor, in the image, sample or crystal frame.

    Build one with :meth:`Load.axis` or :meth:`Load.stress` (or :func:`as_load`). An axis
    load keeps the fields of the former ``LoadAxis``: ``vector`` (unit axis, in ``frame``
    coordinates), ``frame``, ``sense`` and ``label``; a crystal direction keeps its indices in
    ``index``. A stress load holds ``stress_mpa``, the symmetric tensor in MPa, in ``frame``
    coordinates.

    Parameters
    ----------
    vector : tuple of 3 float, optional
        Unit load axis (axis loads).
    frame : {"image", "sample", "crystal"}
        Frame of ``vector`` or ``stress_mpa`` (module doc): ``"image"`` (default) the picture's
        axes, ``"sample"`` the orientation data's axes, ``"crystal"`` a crystal direction.
    sense : {"tension", "compression"}
    label : str
        The axis as the user gave it.
    index : tuple of int, optional
        Direction indices of a crystal-frame axis.
    stress_mpa : tuple of 3 tuples of 3 float, optional
        Stress tensor in MPa (stress loads; then ``vector`` is None).

    Raises
    ------
    TracefitInputError
        Neither or both of ``vector`` and ``stress_mpa``, an unknown ``sense`` or ``frame``.

    Examples
    --------
    >>> ld = Load.axis("y", sense="compression")
    >>> ld.vector, ld.sign, ld.is_stress, ld.frame
    ((0.0, 1.0, 0.0), -1.0, False, 'image')
    >>> Load.stress([100, 0, 0, 0, 0, 0]).is_stress
    True
    """

    vector: tuple | None = None
    frame: str = DEFAULT_LOAD_FRAME
    sense: str = "tension"
    label: str = ""
    index: tuple | None = None
    stress_mpa: tuple | None = None

    def __post_init__(self):
        if (self.vector is None) == (self.stress_mpa is None):
            raise TracefitInputError("a Load holds either an axis vector or a stress tensor, not both or neither")
        if self.sense not in SENSES:
            raise TracefitInputError(f"sense must be 'tension' or 'compression', got {self.sense!r}")
        if self.frame not in FRAMES:
            raise TracefitInputError(f"frame must be 'image', 'sample' or 'crystal', got {self.frame!r}")
        if self.stress_mpa is not None and self.frame == "crystal":
            raise TracefitInputError("a stress load is given in the 'image' or 'sample' frame, not 'crystal'")
        if self.vector is not None and np.shape(self.vector) != (3,):
            raise TracefitInputError(f"vector must have 3 components, got shape {np.shape(self.vector)}")

    # ------------------------------------------------------------ constructors
    @classmethod
    def axis(cls, axis: str | ArrayLike, sense: str = "tension", lattice: Lattice | None = None,
             frame: str = DEFAULT_LOAD_FRAME) -> "Load":
        """A uniaxial load along ``axis``.

        Parameters
        ----------
        axis : str or array_like, shape (3,)
            An axis ``"x"``, ``"-y"``, a vector ``"1,0,0"`` or ``[1, 0, 0]`` (in ``frame``), or a
            crystal direction ``"[110]"``, ``"[11-20]"`` (needs ``lattice``; frame-free).
        sense : {"tension", "compression"}
        lattice : tracefit.crystal.Lattice, optional
            Needed for crystal directions.
        frame : {"image", "sample"}
            Frame of an axis or vector: the picture's axes (default) or the orientation data's.

        Returns
        -------
        Load

        Raises
        ------
        TracefitInputError
            Unreadable or zero axis, unknown sense, a crystal direction without a lattice.

        Examples
        --------
        >>> from tracefit.crystal import Lattice
        >>> ld = Load.axis("[001]", lattice=Lattice.fcc())
        >>> ld.frame, ld.index, ld.label
        ('crystal', (0, 0, 1), '[001]')
        >>> np.round(Load.axis([3, 4, 0], frame="sample").vector, 3).tolist()
        [0.6, 0.8, 0.0]
        """
        if isinstance(axis, str):
            return parse_load(axis, lattice, sense, frame)
        _check_axis_frame(frame)
        try:
            v = np.asarray(axis, dtype=float)
        except (TypeError, ValueError):
            raise TracefitInputError(f"axis must be text such as 'y' or '[110]', or three numbers, got {axis!r}") from None
        if v.shape != (3,) or not np.all(np.isfinite(v)):
            raise TracefitInputError(f"axis must have three finite components, got {axis!r}")
        if sense not in SENSES:
            raise TracefitInputError(f"sense must be 'tension' or 'compression', got {sense!r}")
        n = float(np.linalg.norm(v))
        if n < 1e-12:
            raise TracefitInputError("axis has zero length")
        return cls(tuple(float(x) for x in v / n), frame, sense, ",".join(f"{x:g}" for x in v))

    @classmethod
    def stress(cls, stress_mpa: ArrayLike, frame: str = DEFAULT_LOAD_FRAME) -> "Load":
        """A stress-tensor load.

        Parameters
        ----------
        stress_mpa : array_like, shape (3, 3) or (6,)
            Stress in MPa (tension positive): a symmetric 3 x 3 tensor or Voigt values in the
            order ``(s11, s22, s33, s23, s13, s12)``.
        frame : {"image", "sample"}
            Axes 1, 2, 3 are the picture's x, y, z (default) or the orientation data's.

        Returns
        -------
        Load

        Raises
        ------
        TracefitInputError
            Wrong shape, non-finite or non-symmetric.

        Examples
        --------
        >>> float(Load.stress([0, 200, 0, 0, 0, 0]).stress_tensor[1, 1])
        200.0
        """
        _check_axis_frame(frame)
        s = stress_tensor(stress_mpa)
        return cls(frame=frame, stress_mpa=tuple(tuple(float(x) for x in row) for row in s))

    # ------------------------------------------------------------ properties
    @property
    def is_stress(self) -> bool:
        """True for a stress-tensor load, False for a uniaxial axis."""
        return self.stress_mpa is not None

    @property
    def stress_tensor(self) -> np.ndarray | None:
        """The stress tensor as given, MPa, shape (3, 3), in ``frame``; None for axis loads."""
        return None if self.stress_mpa is None else np.array(self.stress_mpa, float)

    def stress_in_sample(self, frame_settings: FrameSettings | None = None) -> np.ndarray:
        """The stress tensor in the orientation data's frame, MPa.

        Parameters
        ----------
        frame_settings : tracefit.conventions.FrameSettings, optional
            The data -> image frame; an image-frame stress becomes ``M^T sigma M``.

        Returns
        -------
        ndarray, shape (3, 3)

        Raises
        ------
        TracefitInputError
            An axis load.

        Examples
        --------
        >>> from tracefit.conventions import FrameSettings
        >>> s = Load.stress([0, 100, 0, 0, 0, 0]).stress_in_sample(FrameSettings(rotation_deg=90))
        >>> np.round(s, 6).tolist()  # the picture's vertical is the data's x after a 90 deg turn
        [[100.0, 0.0, 0.0], [0.0, 0.0, 0.0], [0.0, 0.0, 0.0]]
        """
        if not self.is_stress:
            raise TracefitInputError("an axis load has no stress tensor; use in_sample for its axis")
        s = np.array(self.stress_mpa, float)
        if self.frame == "image":
            m = data_to_image_matrix(frame_settings)
            s = m.T @ s @ m
        return s

    @property
    def sign(self) -> float:
        """+1 in tension, -1 in compression (axis loads; a stress carries its sign in the tensor)."""
        self._need_axis("sign")
        return 1.0 if self.sense == "tension" else -1.0

    def _need_axis(self, what: str) -> None:
        if self.is_stress:
            raise TracefitInputError(
                f"a stress load has no single axis, so no {what}; use resolved_drive(load, g, normals, directions)"
            )

    # ------------------------------------------------------------ frames
    def in_crystal(self, g: Orientation | ArrayLike | None = None,
                   frame_settings: FrameSettings | None = None) -> np.ndarray:
        """Unit load axis in crystal coordinates.

        Parameters
        ----------
        g : Orientation or array_like, shape (3, 3) or (N, 3, 3), optional
            Needed for an image- or sample-frame axis.
        frame_settings : tracefit.conventions.FrameSettings, optional
            The data -> image frame, for an image-frame axis (default: image = sample).

        Returns
        -------
        ndarray, shape (3,) or (N, 3)

        Raises
        ------
        TracefitInputError
            A stress load, or a sample axis without ``g``.

        Examples
        --------
        >>> from tracefit.crystal import Orientation
        >>> np.round(Load.axis("x").in_crystal(Orientation.from_euler([90, 0, 0])), 6).tolist()
        [0.0, -1.0, 0.0]
        """
        self._need_axis("crystal axis")
        v = np.asarray(self.vector, float)
        if self.frame == "crystal":
            return v
        if g is None:
            raise TracefitInputError(f"the load {self.label!r} is a sample axis; an orientation g is needed to place it in the crystal")
        return np.einsum("...ij,j->...i", as_orientation_matrix(g), self.in_sample(None, frame_settings))

    def in_sample(self, g: Orientation | ArrayLike | None = None,
                  frame_settings: FrameSettings | None = None) -> np.ndarray:
        """Unit load axis in sample (orientation-data) coordinates.

        Parameters
        ----------
        g : Orientation or array_like, shape (3, 3) or (N, 3, 3), optional
            Needed for a crystal-direction axis.
        frame_settings : tracefit.conventions.FrameSettings, optional
            The data -> image frame: an image-frame axis becomes ``M^T l`` (default: image = sample).

        Returns
        -------
        ndarray, shape (3,) or (N, 3)

        Raises
        ------
        TracefitInputError
            A stress load, or a crystal direction without ``g``.

        Examples
        --------
        >>> Load.axis("-z").in_sample().tolist()
        [0.0, 0.0, -1.0]
        >>> from tracefit.conventions import FrameSettings
        >>> np.round(Load.axis("y").in_sample(frame_settings=FrameSettings(rotation_deg=90)), 6).tolist()
        [1.0, 0.0, 0.0]
        """
        self._need_axis("sample axis")
        v = np.asarray(self.vector, float)
        if self.frame == "sample":
            return v
        if self.frame == "image":
            return data_to_image_matrix(frame_settings).T @ v
        if g is None:
            raise TracefitInputError("a crystal-direction load needs an orientation g to place it in the sample")
        return np.einsum("...ij,i->...j", as_orientation_matrix(g), v)

    def to_dict(self) -> dict:
        """JSON-ready description (axis loads: the keys of the former ``LoadAxis``).

        Examples
        --------
        >>> Load.axis("y").to_dict()
        {'axis': 'y', 'frame': 'image', 'sense': 'tension', 'vector': [0.0, 1.0, 0.0]}
        >>> Load.stress([0, 50, 0, 0, 0, 0], frame="sample").to_dict()["frame"]
        'sample'
        """
        if self.is_stress:
            s = self.stress_mpa
            voigt = [s[0][0], s[1][1], s[2][2], s[1][2], s[0][2], s[0][1]]
            return {"stress_mpa": [list(row) for row in s], "voigt_mpa": voigt, "frame": self.frame}
        d = {"axis": self.label, "frame": self.frame, "sense": self.sense, "vector": [float(x) for x in self.vector]}
        if self.index is not None:
            d["index"] = [_num(x) for x in self.index]
        return d


#: the former name of an axis :class:`Load` (same fields, same behaviour)
LoadAxis = Load


def parse_load(text: str, lattice: Lattice | None = None, sense: str = "tension",
               frame: str = DEFAULT_LOAD_FRAME) -> Load:
    """Read a load axis from text.

    Accepted: an axis ``x``, ``y``, ``z`` (optionally signed, ``-x``) or a vector ``1,0,0``, both
    in ``frame``; or a crystal direction in square brackets, ``[110]``, ``[1 -1 0]``, ``[11-20]``
    (four indices for hexagonal lattices; needs ``lattice``; frame-free).

    Parameters
    ----------
    text : str
        The axis.
    lattice : tracefit.crystal.Lattice, optional
        Needed for crystal directions.
    sense : {"tension", "compression"}
    frame : {"image", "sample"}
        Frame of an axis or vector (module doc); default the picture's axes.

    Returns
    -------
    Load
        An axis load (``vector`` of unit length).

    Raises
    ------
    TracefitInputError
        Empty or unreadable text, a zero vector, a direction family, unknown sense.

    Examples
    --------
    >>> parse_load("-x").vector
    (-1.0, 0.0, 0.0)
    """
    if sense not in SENSES:
        raise TracefitInputError(f"sense must be 'tension' or 'compression', got {sense!r}")
    _check_axis_frame(frame)
    if not isinstance(text, str) or not text.strip():
        raise TracefitInputError("empty load axis; expected x, y, z, a sample vector like 1,0,0 or a crystal direction like [110]")
    t = text.strip()
    if t.startswith("[") or t.startswith("<"):
        if lattice is None:
            raise TracefitInputError(f"the crystal-direction load {t} needs a lattice")
        idx = _parse_direction(t, lattice)
        v = np.asarray(lattice.direction_vector(idx), float)
        return Load(tuple(float(x) for x in v), "crystal", sense, t, tuple(idx))
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
    return Load(tuple(float(x) for x in v / n), frame, sense, t)


def _check_axis_frame(frame) -> None:
    if frame not in _AXIS_FRAMES:
        raise TracefitInputError(f"frame must be 'image' or 'sample', got {frame!r}")


def _parse_direction(t: str, lattice) -> tuple:
    try:
        idx = parse_index(t, lattice, expect="direction")
    except TracefitInputError as exc:
        raise TracefitInputError(f"cannot read the load axis {t!r} as a crystal direction: {exc}") from None
    if idx.family:
        raise TracefitInputError(f"a load axis is one direction, not a family: write [110] rather than {t}")
    return tuple(int(x) for x in idx.values)


def as_load(x: Load | str | ArrayLike | None, lattice: Lattice | None = None, sense: str = "tension",
            frame: str = DEFAULT_LOAD_FRAME) -> Load | None:
    """Turn any accepted load form into a :class:`Load` (or None).

    Parameters
    ----------
    x : None, str, Load, array_like shape (3,), (3, 3) or (6,)
        None; an axis as text (see :func:`parse_load`); a Load (returned as is, with its own
        frame); an axis vector (3,); or a stress in MPa, (3, 3) or Voigt (6,).
    lattice : tracefit.crystal.Lattice, optional
        For crystal directions given as text.
    sense : {"tension", "compression"}
        For axes given as text or vectors.
    frame : {"image", "sample"}
        Frame of axes, vectors and stresses not given as a Load (default the picture's axes).

    Returns
    -------
    Load or None

    Raises
    ------
    TracefitInputError
        Anything else, or an unreadable axis or stress.

    Examples
    --------
    >>> as_load(None) is None
    True
    >>> as_load("z").label, as_load(np.eye(3) * 50).is_stress
    ('z', True)
    """
    if x is None or isinstance(x, Load):
        return x
    if isinstance(x, str):
        return parse_load(x, lattice, sense, frame)
    try:
        a = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise TracefitInputError(f"load must be None, text, a Load or numbers, got {type(x).__name__}") from None
    if a.shape == (3,):
        return Load.axis(a, sense, frame=frame)
    if a.shape in ((3, 3), (6,)):
        return Load.stress(a, frame)
    raise TracefitInputError(
        f"load must be an axis (text or 3 numbers) or a stress (3 x 3 or 6 Voigt values, MPa), got shape {a.shape}"
    )


def load_from_fields(axis: str | None, sense: str = "tension", frame: str = DEFAULT_LOAD_FRAME,
                     stress: ArrayLike | None = None, lattice: Lattice | None = None) -> Load | None:
    """The load of a job image's fields (``load``, ``load_sense``, ``load_frame``, ``load_stress``).

    The survey's job images and the statistics of a survey folder read their load here, so both
    mean the same by the same fields.

    Parameters
    ----------
    axis : str or None
        The axis as written (see :func:`parse_load`), or None.
    sense : {"tension", "compression"}
    frame : {"image", "sample"}
    stress : array_like, shape (6,) or (3, 3), optional
        A stress in MPa; replaces ``axis``.
    lattice : Lattice, optional
        For crystal-direction axes.

    Returns
    -------
    Load or None
        None when neither an axis nor a stress is given.

    Examples
    --------
    >>> load_from_fields("y", "compression").sign, load_from_fields(None) is None
    (-1.0, True)
    """
    if stress is not None:
        return Load.stress(list(stress), frame=frame)
    return parse_load(axis, lattice, sense, frame=frame) if axis else None


def resolved_drive(load: Load | str | ArrayLike, g: Orientation | ArrayLike | None, normals: ArrayLike, directions: ArrayLike,
                   frame: FrameSettings | None = None) -> np.ndarray:
    """Signed drive of each system under a load: Schmid factor or resolved shear stress.

    Axis loads give ``s (l . n)(l . d)`` (Schmid's law with the sense ``s = +-1``:
    dimensionless, the resolved shear per unit applied stress); stress loads give
    ``tau = n . sigma . d`` in MPa. Both are signed along ``d``: slip consumers take the
    absolute value, twins count only where it is positive.

    Parameters
    ----------
    load : Load, str or array_like
        Anything :func:`as_load` accepts except None (text here must be a sample axis).
    g : Orientation or array_like, shape (3, 3) or (N, 3, 3)
        Orientation(s); ignored for crystal-direction axes.
    normals, directions : array_like, shape (3,) or (M, 3)
        Plane normals and shear directions in crystal coordinates (normalised here).
    frame : tracefit.conventions.FrameSettings, optional
        The data -> image frame, which places an image-frame load in the sample frame
        (default: image = sample).

    Returns
    -------
    ndarray, shape (), (M,), (N,) or (N, M)

    Raises
    ------
    TracefitInputError
        No load, unreadable inputs, unpaired normals and directions.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, Orientation
    >>> lat = Lattice.fcc()
    >>> n, d = lat.plane_normal((1, 1, 1)), lat.direction_vector((-1, 0, 1))
    >>> round(float(resolved_drive(Load.axis("[001]", lattice=lat), None, n, d)), 3)
    0.408
    >>> g = Orientation.identity()
    >>> round(float(resolved_drive(Load.stress([0, 0, 100, 0, 0, 0]), g, n, d)), 2)
    40.82
    """
    ld = as_load(load)
    if ld is None:
        raise TracefitInputError("load is None: give an axis or a stress to resolve")
    if ld.is_stress:
        if g is None:
            raise TracefitInputError("a stress load needs an orientation g to resolve it")
        return resolved_shear(ld.stress_in_sample(frame), g, normals, directions)
    return ld.sign * schmid_factor(ld.in_crystal(g, frame), normals, directions)


def system_schmid_factors(load: Load, g: Orientation | ArrayLike | None, systems: Sequence[DeformationSystem],
                          frame: FrameSettings | None = None) -> np.ndarray:
    """Reported Schmid factors of systems: ``|m|`` for slip, ``sense * m`` for twins (see module doc).

    Parameters
    ----------
    load : Load
        An axis load.
    g : Orientation or array_like, shape (3, 3) or (N, 3, 3)
    systems : sequence of tracefit.crystal.DeformationSystem
    frame : tracefit.conventions.FrameSettings, optional
        The data -> image frame, for an image-frame load.

    Returns
    -------
    ndarray, shape (S,) or (N, S)

    Raises
    ------
    TracefitInputError
        A stress load (use :func:`resolved_drive`).

    Examples
    --------
    >>> from tracefit.crystal import Lattice, catalogue
    >>> lat = Lattice.fcc()
    >>> m = system_schmid_factors(Load.axis("[001]", lattice=lat), None, catalogue(lat, modes="slip"))
    >>> round(float(m.max()), 3), int((m > 0.4).sum())
    (0.408, 8)
    """
    ld = as_load(load)
    if ld is None or ld.is_stress:
        raise TracefitInputError("system_schmid_factors needs an axis load; for a stress use resolved_drive")
    drive = resolved_drive(ld, g, [s.normal for s in systems], [s.dir_unit for s in systems], frame)
    return reported_drive(drive, [s.mode for s in systems])


def _num(x):
    """Whole numbers as int for JSON, others as float."""
    f = float(x)
    return int(round(f)) if abs(f - round(f)) < 1e-9 else f
