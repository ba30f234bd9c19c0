"""Hexagonal planes and directions printed with four or three indices (a display setting).

The conversion (hkil) -> (hkl) and [uvtw] -> [u-t, v-t, w] is the standard one (Frank, F. C.
(1965), "On Miller-Bravais indices and four-dimensional vectors", Acta Cryst. 18, 862-866;
from memory); the checks below also test it against the lattice geometry itself: a plane and
its three-index form must give the same plane normal, a direction and its three-index form
the same (parallel) vector on the a1, a2, c cell.
"""

import json

import numpy as np
import pytest

from tracefit.crystal import format_index, index_notation, lattice_preset, restate_label
from tracefit.crystal.indices import current_index_notation
from tracefit.errors import TracefitInputError


@pytest.mark.parametrize("four, three, kind", [
    ((0, 0, 0, 1), "(001)", "plane"),        # basal (common practice, no source)
    ((1, 0, -1, 0), "(100)", "plane"),       # prism (common practice, no source)
    ((1, 0, -1, 2), "(102)", "plane"),       # tensile twin plane
    ((2, -1, -1, 0), "[100]", "direction"),  # 1/3<2-1-10> = a1 (common practice, no source)
    ((1, 1, -2, 3), "[111]", "direction"),   # 1/3[11-23] = a1 + a2 + c, the <c+a> vector
    ((-1, 0, 1, 1), "[-2-11]", "direction"),
])
def test_three_index_forms(four, three, kind):
    assert format_index(four, kind, notation="three") == three
    with index_notation("three"):
        assert format_index(four, kind) == three
    assert format_index(four, kind) == format_index(four, kind, notation="four")


def _four_index_vector(lat, uvtw):
    # u a1 + v a2 + t a3 + w c, written out from the cell vectors (not through the conversion)
    a1, a2, c = (np.asarray(v, float) for v in np.asarray(lat.direct_matrix, float).T)
    a3 = -(a1 + a2)
    u, v, t, w = uvtw
    return u * a1 + v * a2 + t * a3 + w * c


@pytest.mark.parametrize("setting", ["x-along-a1", "x-along-a1-reciprocal"])
def test_three_index_forms_are_the_same_geometry(setting):
    from tracefit.crystal import parse_index

    lat = lattice_preset("hcp", 1.587, hex_setting=setting)
    rng = np.random.default_rng(3)
    for four in [(1, 0, -1, 2), (1, 1, -2, 2), (1, 0, -1, 1), (2, -1, -1, 2), (0, 0, 0, 1)]:
        three = parse_index(format_index(four, "plane", notation="three"), lat, hex_three_index=True).values
        n3 = np.asarray(lat.plane_normal(three), float)
        # directions in the plane by the four-index zone law h u + k v + i t + l w = 0
        for _ in range(20):
            u, v, w = rng.integers(-4, 5, size=3)
            t = -(u + v)
            h, k, i, l = four
            if h * u + k * v + i * t + l * w != 0 or (u, v, w) == (0, 0, 0):
                continue
            d = _four_index_vector(lat, (u, v, t, w))
            assert abs(n3 @ d) / np.linalg.norm(d) < 1e-12, (four, three, (u, v, t, w))
    for four in [(1, 1, -2, 3), (-1, 0, 1, 1), (2, -1, -1, 0), (1, -2, 1, 6)]:
        three = parse_index(format_index(four, "direction", notation="three"), lat, hex_three_index=True).values
        a, b = _four_index_vector(lat, four), np.asarray(lat.direction_vector(three), float)
        cos = (a @ b) / np.linalg.norm(a) / np.linalg.norm(b)
        assert cos == pytest.approx(1.0, abs=1e-12), (four, three)  # parallel and the same sense


def test_setting_nests_restores_and_refuses_unknown_names():
    assert current_index_notation() == "four"
    with index_notation("three"):
        with index_notation("four"):
            assert format_index((1, 0, -1, 1)) == "(10-11)"
        assert format_index((1, 0, -1, 1)) == "(101)"
    assert current_index_notation() == "four"
    with pytest.raises(TracefitInputError, match="notation must be one of four, three"):
        with index_notation("3"):
            pass
    with pytest.raises(TracefitInputError):
        format_index((1, 0, -1, 1), notation="two")
    # three-index (cubic) input is printed as given in either notation
    assert format_index((1, -1, 1), notation="three") == "(1-11)"


def test_labels_are_restated_but_names_untouched():
    assert restate_label("{10-12}<-1011> twin", "three") == "{102}<-2-11> twin"
    assert restate_label("basal <a>", "three") == "basal <a>"
    assert restate_label("{111}<110>", "three") == "{111}<110>"
    assert restate_label("{10-12}", "four") == "{10-12}"


def test_catalogue_keys_stay_four_index_under_the_three_index_setting():
    # the setting is for display: stored family labels (keys of priors, CRSS tables) never change
    from tracefit.crystal import catalogue

    lat = lattice_preset("hcp", 1.587)
    with index_notation("three"):
        fams = {s.family for s in catalogue(lat, modes=("slip", "twin"))}
    assert "{10-12}" in fams and "{102}" not in fams


def test_cli_flag_prints_three_indices_everywhere(run_cli):
    args = ("predict", "--lattice", "hcp", "--c-over-a", "1.587", "--euler", "10,40,20")
    code, four, err = run_cli(*args)
    assert code == 0, err
    code, three, err = run_cli("--hex-indices", "three", *args)
    assert code == 0, err
    assert "(0001)" in four and "{10-12}" in four
    assert "(001)" in three and "{102}" in three and "{10-12}" not in three and "(0001)" not in three
    code, out, err = run_cli("--hex-indices", "three", *args, "--json")
    data = json.loads(out)
    # JSON keeps the stored four indices as numbers and prints labels in the chosen notation
    assert all(len(t["plane"]) == 4 for t in data["traces"])
    assert any(t["family"] == "{102}" for t in data["traces"])
    # the setting lasts one command only
    code, again, err = run_cli(*args)
    assert again == four
    code, out, err = run_cli("--hex-indices", "3", *args)
    assert code == 2 and "--hex-indices must be four or three" in err and "Traceback" not in err


@pytest.mark.parametrize("workers", ["1", "2"])
def test_survey_writes_every_label_in_the_chosen_notation(run_cli, tmp_path, workers):
    # the demo's titanium-like coupon (hcp, {10-12} twins), alone in a job, in worker processes too
    import shutil

    from tracefit.demo import demo_job_path

    src = demo_job_path().parent
    shutil.copy(src / "coupon_C.png", tmp_path / "coupon_C.png")
    image = ('file = "coupon_C.png"\nlattice = "hcp"\nc_over_a = 1.587\n'
             'modes = ["twin"]\nfamilies = ["{10-12}", "{11-21}"]\nload = { axis = "x", sense = "compression" }\n'
             'euler_deg = [250.0, 22.0, 84.0]\n')
    # two images, so that two workers really run in processes of their own
    (tmp_path / "job.toml").write_text(f'format = 1\n[[image]]\nname = "coupon-C"\n{image}[[image]]\nname = "again"\n{image}')
    out = tmp_path / "out"
    code, _, err = run_cli("--hex-indices", "three", "survey", str(tmp_path / "job.toml"), "--out", str(out),
                           "--workers", workers, "--quiet")
    assert code in (0, 1), err
    record = json.loads((out / "images" / "coupon-C.json").read_text())
    idents = [f.get("identification") or {} for f in record["families"]]
    fams = {c["family"] for i in idents for c in i.get("candidates", []) + i.get("nearest", [])}
    assert "{102}" in fams and fams <= {"{102}", "{111}"}, fams  # {10-12} -> {102}, {11-21} -> {111}
    csv_text = (out / "results.csv").read_text()
    assert "{10-12}" not in csv_text and "{11-21}" not in csv_text
