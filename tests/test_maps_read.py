"""Reading orientation maps through orix: conventions, file round trips, phases, bad input.

Outside checks: orix (its Bunge conversion, its .ang and HDF5 writers and its readers) and
scipy's Rotation (the active crystal -> sample rotation of docs/conventions.md, section 4).
"""

from __future__ import annotations

import numpy as np
import pytest

from tracefit.crystal import from_euler, from_quaternion
from tracefit.errors import TracefitInputError
from tracefit.maps import OrientationMap, grain_quaternions, lattice_for_laue, read_orientation_map, synthetic_crystal_map

orix_io = pytest.importorskip("orix.io")


def _random_euler(n, seed=3):
    rng = np.random.default_rng(seed)
    return rng.uniform([0, 0, 0], [360, 180, 360], size=(n, 3))


def test_orix_rotation_is_our_g():
    # Outside check (orix): orix's Rotation.from_euler (Bunge, "lab2crystal") gives the matrix
    # g (sample -> crystal) of tracefit.crystal.from_euler, for random angles.
    from orix.quaternion import Rotation

    e = _random_euler(50)
    g_orix = Rotation.from_euler(np.radians(e)).to_matrix()
    assert np.allclose(g_orix, from_euler(e), atol=1e-12)
    # Outside check (scipy): g^T is scipy's active ZXZ rotation from crystal to sample.
    from scipy.spatial.transform import Rotation as R

    assert np.allclose(np.swapaxes(g_orix, 1, 2), R.from_euler("ZXZ", e, degrees=True).as_matrix(), atol=1e-12)


def test_crystal_map_rotations_equal_our_g_after_reading(tmp_path):
    # A CrystalMap written by orix and read back: the g of each point equals our Bunge g of
    # the Euler angles written (orix .ang writer and reader; 5 decimals in radians on file).
    e = _random_euler(12).reshape(3, 4, 3)
    lab = np.arange(12).reshape(3, 4)
    q = grain_quaternions(lab, e.reshape(-1, 3))
    xm = synthetic_crystal_map(q, step=0.5)
    orix_io.save(str(tmp_path / "m.ang"), xm)
    m = OrientationMap.from_file(tmp_path / "m.ang")
    assert m.shape == (3, 4) and m.n_valid == 12
    assert np.allclose(m.g, from_euler(e.reshape(-1, 3)).reshape(3, 4, 3, 3), atol=5e-5)
    # orix's own matrices of what it read, point by point in its row order
    xr = orix_io.load(str(tmp_path / "m.ang"))
    g_orix = xr.rotations.to_matrix()
    assert np.allclose(m.g[xr.row, xr.col], g_orix, atol=1e-12)


def _two_phase_map():
    from diffpy.structure import Lattice as DL
    from diffpy.structure import Structure
    from orix.crystal_map import CrystalMap, PhaseList
    from orix.quaternion import Rotation

    e = _random_euler(20, seed=5)
    pid = np.array([0] * 12 + [1] * 6 + [-1] * 2)
    pl = PhaseList(names=["austenite", "alpha_ti"], point_groups=["m-3m", "6/mmm"],
                   structures=[Structure(lattice=DL(3.6, 3.6, 3.6, 90, 90, 90)),
                               Structure(lattice=DL(2.95, 2.95, 4.68, 90, 90, 120))])
    rr, cc = np.divmod(np.arange(20), 5)
    return CrystalMap(Rotation.from_euler(np.radians(e)), phase_id=pid, x=cc * 1.0, y=rr * 1.0, phase_list=pl,
                      prop={"iq": np.ones(20), "ci": np.where(pid >= 0, 1.0, -1.0)}, scan_unit="um"), e, pid


@pytest.mark.parametrize("suffix", [".h5", ".ang"])
def test_multiphase_pick_by_name_or_id(tmp_path, suffix):
    xm, e, pid = _two_phase_map()
    path = tmp_path / f"two{suffix}"
    orix_io.save(str(path), xm)
    ti = read_orientation_map(path, phase="ALPHA_TI")
    assert ti.phase_name == "alpha_ti" and ti.lattice.laue == "6/mmm"
    assert ti.n_valid == 6 and ti.valid.ravel().tolist() == (pid == 1).tolist()
    assert ti.c_over_a == pytest.approx(4.68 / 2.95, rel=1e-6)
    assert np.allclose(ti.g.reshape(-1, 3, 3)[pid == 1], from_euler(e[pid == 1]), atol=5e-5)
    by_id = read_orientation_map(path, phase=ti.phase_id)
    assert by_id.phase_name == "alpha_ti"
    # no phase given: the most frequent, with a warning naming the choice
    default = read_orientation_map(path)
    assert default.phase_name == "austenite" and default.n_valid == 12
    assert default.warnings and "austenite" in default.warnings[0]


def test_unknown_phase_is_one_clear_error(tmp_path):
    xm, _, _ = _two_phase_map()
    orix_io.save(str(tmp_path / "two.h5"), xm)
    with pytest.raises(TracefitInputError, match=r"phase 'ferrite' is not in orientation map .*austenite"):
        read_orientation_map(tmp_path / "two.h5", phase="ferrite")


def test_map_without_indexed_points_is_rejected(tmp_path):
    q = grain_quaternions(np.zeros((3, 4), int), [[10, 20, 30]])
    xm = synthetic_crystal_map(q, valid=np.zeros((3, 4), bool))
    orix_io.save(str(tmp_path / "empty.h5"), xm)  # orix's HDF5 writer keeps the unindexed points
    with pytest.raises(TracefitInputError, match="has no indexed points"):
        read_orientation_map(tmp_path / "empty.h5")
    with pytest.raises(TracefitInputError, match="has no indexed points"):
        OrientationMap.from_crystal_map(xm)


def test_missing_and_unsupported_files(tmp_path):
    with pytest.raises(TracefitInputError, match="not found"):
        read_orientation_map(tmp_path / "none.ctf")
    (tmp_path / "scan.txt").write_text("1 2 3\n")
    with pytest.raises(TracefitInputError, match=r"\.ang, \.ctf or orix HDF5"):
        read_orientation_map(tmp_path / "scan.txt")
    (tmp_path / "bad.ang").write_text("# not a map\nhello world\n")
    with pytest.raises(TracefitInputError, match="could not be read by orix"):
        read_orientation_map(tmp_path / "bad.ang")


def _write_ctf(path, euler_deg, phase, shape, step):
    """A minimal channel text file as orix's reader expects it (Euler angles in degrees)."""
    rows, cols = shape
    lines = ["Channel Text File", "Prj\tinvented.cpr", "Author\t[Unknown]", "JobMode\tGrid",
             f"XCells\t{cols}", f"YCells\t{rows}", f"XStep\t{step}", f"YStep\t{step}",
             "AcqE1\t0", "AcqE2\t0", "AcqE3\t0", "Euler angles refer to Sample Coordinate system (CS0)!",
             "Phases\t1", "3.520;3.520;3.520\t90.000;90.000;90.000\tNickel\t11\t225",
             "Phase\tX\tY\tBands\tError\tEuler1\tEuler2\tEuler3\tMAD\tBC\tBS"]
    for i, (p1, P, p2) in enumerate(euler_deg):
        r, c = divmod(i, cols)
        lines.append(f"{phase[i]}\t{c * step:.4f}\t{r * step:.4f}\t8\t0\t{p1:.4f}\t{P:.4f}\t{p2:.4f}\t0.5\t150\t200")
    path.write_text("\n".join(lines) + "\n")


def test_ctf_is_read_with_angles_as_stored(tmp_path):
    # Outside check: orix's .ctf reader; phase 0 rows are unindexed by the format's rule.
    e = _random_euler(6, seed=11)
    phase = [1, 1, 0, 1, 1, 1]
    _write_ctf(tmp_path / "scan.ctf", e, phase, (2, 3), 0.25)
    m = read_orientation_map(tmp_path / "scan.ctf")
    assert m.phase_name == "Nickel" and m.lattice.laue == "m-3m" and m.step == (0.25, 0.25)
    assert m.valid.ravel().tolist() == [p == 1 for p in phase]
    ok = np.array(phase) == 1
    assert np.allclose(m.g.reshape(-1, 3, 3)[ok], from_euler(e[ok]), atol=1e-6)


def test_lattice_for_laue_falls_back_to_a_cell_of_the_class():
    lat, coa = lattice_for_laue("6/mmm", (1, 1, 1, 90, 90, 90))
    assert lat.laue == "6/mmm" and coa is None and len(lat.proper_rotations()) == 12
    with pytest.raises(TracefitInputError, match="Laue class"):
        lattice_for_laue("7/m")


def test_quaternions_kept_with_positive_scalar_part(tmp_path):
    q = grain_quaternions(np.zeros((2, 2), int), [[200, 170, 300]])
    m = OrientationMap.from_crystal_map(synthetic_crystal_map(-q))  # same rotations, q0 < 0
    assert np.all(m.quaternions[..., 0] >= 0)
    assert np.allclose(from_quaternion(m.quaternions.reshape(-1, 4)), from_euler([200, 170, 300]), atol=1e-12)
