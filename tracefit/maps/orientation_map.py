"""Orientation maps (EBSD scans) read through orix: one phase on a regular grid.

orix reads ``.ang``, ``.ctf`` and its own HDF5 (``orix.io.load``). The Euler angles are taken
as stored: orix builds its rotations from them with the Bunge convention, and the quaternion
orix keeps for a point is the quaternion of our ``g`` (sample -> crystal, passive; checked in
``tests/test_maps_read.py``). Where the map's sample frame sits in the micrograph is said with
the frame settings (rotation, flips) of docs/conventions.md, section 5, as for any orientation.

orix is imported lazily: its first import compiles code with numba and takes seconds.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tracefit.crystal import Lattice, from_quaternion, to_euler
from tracefit.errors import TracefitInputError

__all__ = ["OrientationMap", "read_orientation_map", "lattice_for_laue"]

MAP_SUFFIXES = (".ang", ".ctf", ".h5", ".hdf5", ".h5oina", ".h5ebsd")

# A cell of each Laue class, used for its symmetry only when the map's own cell does not fit
# the class (files often omit lattice constants). Lengths are arbitrary.
_GENERIC_CELLS = {
    "m-3m": (1, 1, 1, 90, 90, 90), "m-3": (1, 1, 1, 90, 90, 90),
    "6/mmm": (1, 1, 1.633, 90, 90, 120), "6/m": (1, 1, 1.633, 90, 90, 120),
    "-3m": (1, 1, 1.633, 90, 90, 120), "-3": (1, 1, 1.633, 90, 90, 120),
    "4/mmm": (1, 1, 1.5, 90, 90, 90), "4/m": (1, 1, 1.5, 90, 90, 90),
    "mmm": (1, 1.2, 1.5, 90, 90, 90), "2/m": (1, 1.2, 1.5, 90, 100, 90), "-1": (1, 1.2, 1.5, 80, 100, 110),
}
_AXIAL = ("6/mmm", "6/m", "-3m", "-3", "4/mmm", "4/m")


@dataclass
class OrientationMap:
    """One phase of an orientation map on its regular grid.

    Parameters
    ----------
    quaternions : ndarray, shape (rows, cols, 4)
        Unit quaternion of ``g`` (sample -> crystal, scalar first, q0 >= 0) at every grid
        point; the identity where ``valid`` is False.
    valid : ndarray of bool, shape (rows, cols)
        Indexed points of the chosen phase.
    lattice : tracefit.crystal.Lattice
        The phase's cell; its Laue class gives the symmetry for misorientations.
    step : (float, float)
        Grid step (x, y) along columns and rows, in ``scan_unit``.
    phase_name : str
    phase_id : int
        The phase's id in the file.
    phases : dict
        Every phase of the map: id -> (name, number of indexed points).
    scan_unit : str
    c_over_a : float or None
        The phase's c/a from the file (hexagonal, trigonal and tetragonal cells).
    path : str or None
        The file read.
    warnings : list of str
        Things the user should know (e.g. a phase chosen for them).

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> q = np.zeros((2, 3, 4)); q[..., 0] = 1.0
    >>> m = OrientationMap(q, np.ones((2, 3), bool), Lattice.fcc(), (0.5, 0.5), "ni", 1)
    >>> m.shape, m.n_valid, m.g.shape
    ((2, 3), 6, (2, 3, 3, 3))
    """

    quaternions: np.ndarray
    valid: np.ndarray
    lattice: Lattice
    step: tuple
    phase_name: str
    phase_id: int
    phases: dict = field(default_factory=dict)
    scan_unit: str = "um"
    c_over_a: float | None = None
    path: str | None = None
    warnings: list = field(default_factory=list)

    @property
    def shape(self) -> tuple[int, int]:
        """Grid size (rows, cols) in map points."""
        return tuple(int(n) for n in self.valid.shape)

    @property
    def n_valid(self) -> int:
        """Number of indexed points of the chosen phase."""
        return int(np.count_nonzero(self.valid))

    @property
    def g(self) -> np.ndarray:
        """Orientation matrices g (sample -> crystal), shape (rows, cols, 3, 3)."""
        return from_quaternion(self.quaternions.reshape(-1, 4)).reshape(self.shape + (3, 3))

    def euler_deg(self) -> np.ndarray:
        """Bunge Euler angles (phi1, Phi, phi2) in degrees, shape (rows, cols, 3); NaN where not valid.

        Examples
        --------
        >>> from tracefit.crystal import Lattice
        >>> q = np.zeros((1, 2, 4)); q[..., 0] = 1.0
        >>> m = OrientationMap(q, np.array([[True, False]]), Lattice.fcc(), (1.0, 1.0), "ni", 1)
        >>> np.round(m.euler_deg(), 3).tolist()
        [[[0.0, 0.0, 0.0], [nan, nan, nan]]]
        """
        e = to_euler(self.g.reshape(-1, 3, 3)).reshape(self.shape + (3,))
        e[~self.valid] = np.nan
        return e

    def summary(self) -> dict:
        """Plain facts for printing: file, size, step, phases, the chosen phase.

        Examples
        --------
        >>> from tracefit.crystal import Lattice
        >>> q = np.zeros((2, 3, 4)); q[..., 0] = 1.0
        >>> m = OrientationMap(q, np.ones((2, 3), bool), Lattice.fcc(), (0.5, 0.5), "ni", 1, {1: ("ni", 6)})
        >>> s = m.summary(); s["rows"], s["cols"], s["phase"], s["indexed_points"]
        (2, 3, 'ni', 6)
        """
        return {
            "file": self.path,
            "rows": self.shape[0],
            "cols": self.shape[1],
            "step_x": float(self.step[0]),
            "step_y": float(self.step[1]),
            "scan_unit": self.scan_unit,
            "phases": {int(k): {"name": v[0], "points": int(v[1])} for k, v in self.phases.items()},
            "phase": self.phase_name,
            "phase_id": int(self.phase_id),
            "laue": self.lattice.laue,
            "indexed_points": self.n_valid,
        }

    @classmethod
    def from_file(cls, path: str | Path, phase: int | str | None = None, lattice: Lattice | None = None) -> "OrientationMap":
        """Read one phase of an orientation map file (.ang, .ctf, orix HDF5) with ``orix.io.load``.

        Parameters
        ----------
        path : str or Path
        phase : int or str, optional
            Phase id or name (case-insensitive). Default: the only indexed phase, or the one with
            the most indexed points (with a warning) when there are several.
        lattice : tracefit.crystal.Lattice, optional
            Symmetry to use instead of the point group stored in the file.

        Returns
        -------
        OrientationMap

        Raises
        ------
        TracefitInputError
            A missing or unreadable file, a map with no indexed points, an unknown phase, or a
            phase without symmetry information.

        Examples
        --------
        >>> OrientationMap.from_file("no_such_scan.ang")
        Traceback (most recent call last):
        ...
        tracefit.errors.TracefitInputError: orientation map 'no_such_scan.ang' not found
        """
        return read_orientation_map(path, phase, lattice)

    @classmethod
    def from_crystal_map(cls, xmap, phase: int | str | None = None, lattice: Lattice | None = None,
                         path: str | None = None) -> "OrientationMap":
        """One phase of an ``orix.crystal_map.CrystalMap`` (arguments as :meth:`from_file`).

        Examples
        --------
        >>> from orix.crystal_map import CrystalMap
        >>> from tracefit.crystal import Lattice
        >>> m = OrientationMap.from_crystal_map(CrystalMap.empty((2, 3)), lattice=Lattice.fcc())
        >>> m.shape, m.n_valid
        ((2, 3), 6)
        """
        return _from_crystal_map(xmap, phase, lattice, path)


def read_orientation_map(path: str | Path, phase: int | str | None = None, lattice: Lattice | None = None) -> OrientationMap:
    """Read one phase of an orientation map file; see :meth:`OrientationMap.from_file`.

    Examples
    --------
    >>> read_orientation_map("scan.txt")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: orientation map 'scan.txt' must be an .ang, .ctf or orix HDF5 (.h5, .hdf5) file
    """
    p = Path(path)
    if p.suffix.lower() not in MAP_SUFFIXES:
        raise TracefitInputError(f"orientation map {str(p)!r} must be an .ang, .ctf or orix HDF5 (.h5, .hdf5) file")
    if not p.is_file():
        raise TracefitInputError(f"orientation map {str(p)!r} not found")
    import contextlib
    import io
    import warnings

    from tracefit.maps.orix_import import import_orix

    import_orix()
    from orix import io as orix_io

    try:
        # orix prints notes (e.g. renamed phases) on stdout and warns; keep the output clean.
        with contextlib.redirect_stdout(io.StringIO()), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            xmap = orix_io.load(str(p))
    except Exception as exc:  # orix raises many kinds for a malformed file
        raise TracefitInputError(f"orientation map {str(p)!r} could not be read by orix: {' '.join(str(exc).split())}") from None
    return _from_crystal_map(xmap, phase, lattice, str(p))


def lattice_for_laue(laue: str, abc_angles: tuple | None = None, name: str = "phase") -> tuple[Lattice, float | None]:
    """A Lattice of the given Laue class, from the map's cell when that cell fits the class.

    Parameters
    ----------
    laue : str
        Laue class name as orix writes it (``"m-3m"``, ``"6/mmm"``, ...).
    abc_angles : sequence of 6 float, optional
        a, b, c, alpha, beta, gamma (degrees) from the file.
    name : str
        Label for the lattice.

    Returns
    -------
    lattice : Lattice
    c_over_a : float or None
        c/a of the file's cell for axial classes (hexagonal, trigonal, tetragonal), else None.

    Raises
    ------
    TracefitInputError
        An unknown Laue class.

    Examples
    --------
    >>> lat, coa = lattice_for_laue("6/mmm", (2.95, 2.95, 4.68, 90, 90, 120), "ti")
    >>> lat.laue, round(coa, 3)
    ('6/mmm', 1.586)
    >>> lattice_for_laue("6/mmm", (1, 1, 1, 90, 90, 90))[0].gamma  # cell unfit: generic one
    120
    """
    if laue not in _GENERIC_CELLS:
        raise TracefitInputError(f"Laue class {laue!r} is not known; expected one of {', '.join(_GENERIC_CELLS)}")
    if abc_angles is not None:
        try:
            lat = Lattice(*[float(v) for v in abc_angles], name=name, laue=laue)
            lat.proper_rotations()  # raises when the cell lacks the class's symmetry
            coa = lat.c / lat.a if laue in _AXIAL else None
            return lat, coa
        except TracefitInputError:
            pass
    return Lattice(*_GENERIC_CELLS[laue], name=name, laue=laue), None


def _phase_table(xmap) -> dict:
    """id -> (name, indexed points) for every phase of the map with a non-negative id."""
    ids = np.asarray(xmap.phase_id)
    out = {}
    for pid, ph in xmap.phases:
        if int(pid) < 0:
            continue
        out[int(pid)] = (str(ph.name), int(np.count_nonzero((ids == pid) & np.asarray(xmap.is_indexed))))
    return out


def _choose_phase(table: dict, phase, where: str) -> tuple[int, list]:
    """The chosen phase id, and warnings."""
    listing = "; ".join(f"{k} {v[0]!r} ({v[1]} points)" for k, v in table.items())
    if phase is None:
        populated = {k: v for k, v in table.items() if v[1] > 0}
        if not populated:
            raise TracefitInputError(f"orientation map {where} has no indexed points")
        best = max(populated, key=lambda k: populated[k][1])
        warn = [] if len(populated) == 1 else [
            f"orientation map {where} has {len(populated)} phases ({listing}); using {table[best][0]!r}, "
            f"the most frequent; choose with phase"]
        return best, warn
    key = str(phase).strip()
    by_id = [k for k in table if key.lstrip("-").isdigit() and k == int(key)]
    by_name = [k for k, v in table.items() if v[0].lower() == key.lower()]
    found = by_id or by_name
    if not found:
        raise TracefitInputError(f"phase {phase!r} is not in orientation map {where}; its phases are {listing or 'none'}")
    if table[found[0]][1] == 0:
        raise TracefitInputError(f"phase {phase!r} has no indexed points in orientation map {where}")
    return found[0], []


def _grid_indices(xmap) -> tuple[np.ndarray, np.ndarray, tuple[int, int]]:
    """Row and column of every point in the data, and the grid shape."""
    shape = tuple(int(n) for n in xmap.shape)
    if len(shape) == 1:
        shape = (1, shape[0])
    row = np.asarray(xmap.row) if xmap.row is not None else np.zeros(xmap.size, int)
    col = np.asarray(xmap.col) if xmap.col is not None else np.arange(xmap.size)
    return row.astype(np.int64), col.astype(np.int64), shape


def _from_crystal_map(xmap, phase, lattice: Lattice | None, path: str | None) -> OrientationMap:
    where = repr(path) if path else "(in memory)"
    table = _phase_table(xmap)
    if not table or not any(v[1] for v in table.values()):
        raise TracefitInputError(f"orientation map {where} has no indexed points")
    pid, warns = _choose_phase(table, phase, where)
    name = table[pid][0]
    ph = xmap.phases[pid]
    coa = None
    if lattice is None:
        pg = ph.point_group
        if pg is None:
            raise TracefitInputError(f"phase {name!r} of orientation map {where} has no point group; give lattice")
        lattice, coa = lattice_for_laue(pg.laue.name, ph.structure.lattice.abcABG(), name)
    row, col, shape = _grid_indices(xmap)
    data = np.asarray(xmap.rotations.data, float)
    if data.ndim == 3:  # several matches per point: the first is the best
        data = data[:, 0]
    sel = (np.asarray(xmap.phase_id) == pid) & np.asarray(xmap.is_indexed)
    q = np.zeros(shape + (4,))
    q[..., 0] = 1.0
    valid = np.zeros(shape, bool)
    qs = data[sel] / np.linalg.norm(data[sel], axis=1, keepdims=True)
    qs *= np.where(qs[:, :1] < 0, -1.0, 1.0)  # q and -q are one rotation; keep q0 >= 0
    q[row[sel], col[sel]] = qs
    valid[row[sel], col[sel]] = True
    step = (float(xmap.dx or 1.0), float(xmap.dy or 1.0))
    return OrientationMap(q, valid, lattice, step, name, int(pid), table, str(xmap.scan_unit), coa, path, warns)
