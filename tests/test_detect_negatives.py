"""Pictures without slip-band families give none; real micrographs against hand measurements (issue 13).

Negatives are scikit-image's sample pictures (``skimage.data``; what each shows is in
scikit-image's documentation of its data module) and two real images of
``../shared/realdata`` (origins and licences beside them). The real-image tests skip when
that folder is absent (a fresh clone has none); ``TRACEFIT_REALDATA`` names another folder.
The hand measurements are those of ``benchmarks/realdata_reference.toml`` (how they were
measured is in its header; ``benchmarks/realdata.md`` has the figures).
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from skimage import data

from tracefit.conventions import axial_difference
from tests.realdata import real_image
from tracefit.image import detect_bands
from tracefit.image.families import FAN_MAX_DEG, _fans_out
from tracefit.image.results import BandFamily, BandLine
from tracefit.image.search import _distinct_families

REPO = Path(__file__).resolve().parents[1]
REFERENCE = REPO / "benchmarks" / "realdata_reference.toml"


def _grey(img):
    return img if img.ndim == 2 else img[..., :3].mean(axis=2)


# what each picture shows, as we see it (scikit-image's data module documents where they come
# from): grass and gravel, natural texture; clock, motion streaks; camera and moon, photographs
# with long straight edges; cell, faint periodic fringes; text, handwriting on ruled paper
# photographed at an angle, whose ruled lines converge on a point. No slip bands in any.
@pytest.mark.parametrize("name", ["grass", "gravel", "clock", "camera", "moon", "cell", "text"])
def test_sample_pictures_without_bands_give_no_family(name):
    res = detect_bands(_grey(getattr(data, name)()))
    assert res.families == [], [(f.angle_deg, f.n_bands) for f in res.families]
    assert res.verdict in ("not_significant", "low_contrast")


REAL_NEGATIVES = [  # (file under ../shared/realdata, origin and licence, what it shows)
    ("defdap_zircaloy_bse/irr_8bin.jpg", "MechMicroMan/DefDAP data, Apache-2.0", "pores and short hydride needles"),
    ("ebsdcorrection_in718_bse/BSE.tif", "lambjames18/EBSD-Correction, MIT", "low contrast, a square's straight edges"),
]


@pytest.mark.parametrize("name, origin, shows", REAL_NEGATIVES, ids=["zircaloy", "in718"])
def test_real_negatives_give_no_family(name, origin, shows):
    assert detect_bands(real_image(name, origin)).families == []


def test_hand_measured_real_regions():
    # per hand-measured region of the real micrographs (DefDAP Ti optical, Apache-2.0; openECCI
    # steel, GPL-3.0; origins in the TOML): the detector's figure at the time of writing is a
    # floor here (11 of 17 within 2 deg; the issue asks more), and the regions the TOML
    # names as holding no band family give none
    ref = tomllib.loads(REFERENCE.read_text())
    tol = float(ref["meta"]["match_tol_deg"])
    found = regions = 0
    for im in ref["image"]:
        fams = [f for f in ref["family"] if f["image"] == im["id"]]
        negs = [n for n in ref.get("negative", []) if n["image"] == im["id"]]
        if not fams and not negs:
            continue
        img = real_image(im["file"], f"{im['origin']}, {im['licence']}")

        def angles(region):
            c0, r0, c1, r1 = region
            mask = np.zeros(img.shape, bool)
            mask[max(r0, 0):r1, max(c0, 0):c1] = True
            return [f.angle_deg for f in detect_bands(img, mask=mask, pixel_size_um=im.get("pixel_size_um")).families]

        for f in fams:
            regions += 1
            found += any(abs(axial_difference(a, f["angle_deg"])) <= tol for a in angles(f["region"]))
        for n in negs:
            if list(n["region"]) != [0, 0, img.shape[1], img.shape[0]]:  # whole images: the test above
                assert angles(n["region"]) == [], (im["id"], n["region"])
    assert regions == 17
    assert found >= 11


def _fit(angle, offset):
    """A band fit as _fans_out reads it: a point on the line and the line's angle."""
    return SimpleNamespace(point=np.array([0.0, float(offset)]), angle=float(angle))


def test_bands_that_turn_steadily_across_the_family_are_not_one_family():
    # the traces of one plane on a flat section seen head-on are parallel (common practice, no
    # source): angles rising band after band by more than FAN_MAX_DEG in all converge on a point
    normal = np.array([0.0, 1.0])
    offsets = [0, 40, 80, 120, 160]
    turn = FAN_MAX_DEG + 2.0
    steady = [_fit(100 + turn * i / 4, o) for i, o in enumerate(offsets)]
    assert _fans_out(steady, normal)
    assert _fans_out(steady[::-1], normal)  # falling the other way round, the same
    assert _fans_out([steady[k] for k in (3, 0, 4, 1, 2)], normal)  # judged in order across the family
    # the same angles in list order but at other offsets: no steady turn across the family
    assert not _fans_out([_fit(f.angle, o) for f, o in zip(steady, [0, 80, 40, 160, 120])], normal)
    # scattered as much about a common angle (curved, wavy bands): not a steady turn
    scattered = [_fit(a, o) for a, o in zip([100, 100 + turn, 100, 100 + turn / 2, 100 + turn], offsets)]
    assert not _fans_out(scattered, normal)
    # a small steady turn (reading error, a slightly curved section) and three bands: kept
    assert not _fans_out([_fit(100 + (FAN_MAX_DEG - 1) * i / 4, o) for i, o in enumerate(offsets)], normal)
    assert not _fans_out(steady[:3], normal)
    # across 0/180 deg the turn is measured axially
    assert _fans_out([_fit((178 + turn * i / 4) % 180, o) for i, o in enumerate(offsets)], normal)


def _family(angle, lines, contrast=-0.2, spacing=40.0):
    return BandFamily(angle_deg=angle, angle_sigma_deg=0.3, n_bands=len(lines), spacing_px=spacing,
                      spacing_sigma_px=2.0, spacing_um=None, strength=1.0, polarity="dark", contrast=contrast,
                      lines=lines)


def _line(angle, through, half=150.0, sigma=0.2):
    t = np.radians(angle)
    d = np.array([np.cos(t), -np.sin(t)])  # (col, row): x right, y up
    p0, p1 = np.asarray(through) - half * d, np.asarray(through) + half * d
    return BandLine(float(p0[0]), float(p0[1]), float(p1[0]), float(p1[1]), angle_deg=angle, angle_sigma_deg=sigma)


# four bands fanning a little, as the ruled lines of scikit-image's text do (155.4 ... 162.4 deg)
FAN = [(155.4, (200.0, 100.0)), (158.5, (200.0, 140.0)), (161.3, (200.0, 180.0)), (162.4, (200.0, 220.0))]


def _kept(*fams):
    return [f.angle_deg for f in _distinct_families(list(fams))]


def test_a_family_on_the_bands_of_a_stronger_one_is_that_family_again():
    strong = _family(156.5, [_line(a, c) for a, c in FAN], contrast=-0.3)
    # three of its bands fitted again (half a pixel off) and one band of its own, at another family angle
    again = _family(158.9, [_line(a, (c[0] + 0.5, c[1] + 0.5)) for a, c in FAN[1:]] + [_line(157.0, (150.0, 320.0))])
    assert _kept(again, strong) == [156.5]
    # exactly half of its bands (two of four) on the stronger family's: still that family again
    half = _family(158.9, [_line(a, c) for a, c in FAN[:2]] + [_line(158.9, (150.0, 320.0)), _line(158.9, (150.0, 360.0))])
    assert _kept(half, strong) == [156.5]


@pytest.mark.parametrize("case", ["turned", "uncertain", "crossing", "beyond", "beside", "one band"])
def test_a_family_on_bands_of_its_own_stays(case):
    strong = _family(156.5, [_line(a, c) for a, c in FAN], contrast=-0.3)
    if case == "turned":  # a distinct family 4 deg away through the same middles: its bands leave the others' lines
        lines = [_line(a + 4.0, c) for a, c in FAN]
    elif case == "uncertain":  # the same, 5 deg away, with angles too uncertain to tell: the lines' ends tell
        lines = [_line(a + 5.0, c, sigma=3.0) for a, c in FAN]
    elif case == "crossing":  # short bands crossing the others at their middles (the ends lie near the lines)
        lines = [_line(60.0, c, half=4.0) for _, c in FAN]
    elif case == "beyond":  # on the others' lines, but past their ends
        lines = [_line(a, np.asarray(c) + 400.0 * np.array([np.cos(np.radians(a)), -np.sin(np.radians(a))])) for a, c in FAN]
    elif case == "beside":  # 5 px beside each band, in a family of 8-px spacing (a quarter of the smaller spacing: 2 px)
        lines = [_line(a, (c[0], c[1] + 5.0)) for a, c in FAN]
    else:  # four bands along one band of the other family: one band, not four
        lines = [_line(FAN[0][0], FAN[0][1], half=30.0 + 10 * k) for k in range(4)]
    other = _family(160.0, lines, spacing=8.0 if case == "beside" else 40.0)  # more than SAME_FAMILY_DEG away
    assert sorted(_kept(other, strong)) == [156.5, 160.0]


def test_a_coarser_look_does_not_add_the_family_of_the_first_look_again(monkeypatch):
    # the coarser looks (copies reduced 2x, 4x) add only families that repeat none found
    import copy

    import tracefit.image.detect as detect_module
    from tracefit.image import BandFamilySpec, render_micrograph

    img, _ = render_micrograph((800, 800), [BandFamilySpec(37.0, 40, 4, -0.3)], seed=5, noise_sigma=0.02)
    first = detect_bands(img).families
    assert len(first) == 1
    seen_again = copy.deepcopy(first[0])
    seen_again.angle_deg = first[0].angle_deg + 3.0  # the same bands fitted 3 deg off
    other = copy.deepcopy(first[0])
    other.angle_deg = first[0].angle_deg + 60.0
    for ln in other.lines:
        ln.angle_deg = (ln.angle_deg + 60.0) % 180.0
        ln.col0, ln.row0 = ln.col1 + 100.0, ln.row1 + 50.0  # lines of its own
    for extra, expected in ((seen_again, 1), (other, 2)):
        monkeypatch.setattr(detect_module, "_rescaled_outcome",
                            lambda *a, extra=extra, **k: detect_module._Outcome([copy.deepcopy(extra)], "found", "", []))
        assert len(detect_bands(img).families) == expected
