"""Pictures without slip-band families give none; real micrographs against hand measurements (issue 13).

Negatives are scikit-image's sample pictures (``skimage.data``; what each shows is in
scikit-image's documentation of its data module) and two real images of
``../shared/realdata`` (origins and licences beside them). The real-image tests skip when
that folder is absent (a fresh clone has none); ``TRACEFIT_REALDATA`` names another folder.
The hand measurements are those of ``benchmarks/realdata_reference.toml`` (how they were
measured is in its header; ``benchmarks/realdata.md`` has the figures).
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from skimage import data

from tracefit.conventions import axial_difference
from tracefit.image import detect_bands, read_image
from tracefit.image.families import FAN_MAX_DEG, _fans_out
from tracefit.image.results import BandFamily, BandLine
from tracefit.image.search import _distinct_families

REPO = Path(__file__).resolve().parents[1]
REAL = Path(os.environ.get("TRACEFIT_REALDATA", REPO.parent / "shared" / "realdata"))
REFERENCE = REPO / "benchmarks" / "realdata_reference.toml"


def _grey(img):
    return img if img.ndim == 2 else img[..., :3].mean(axis=2)


# grass and gravel: natural texture; clock: motion streaks; camera, moon: photographs with long
# straight edges; cell: faint periodic fringes; text: ruled lines of a sheet photographed at an
# angle, which converge on a point (skimage.data's descriptions; no slip bands in any)
@pytest.mark.parametrize("name", ["grass", "gravel", "clock", "camera", "moon", "cell", "text"])
def test_sample_pictures_without_bands_give_no_family(name):
    res = detect_bands(_grey(getattr(data, name)()))
    assert res.families == [], [(f.angle_deg, f.n_bands) for f in res.families]
    assert res.verdict in ("not_significant", "low_contrast")


REAL_NEGATIVES = [  # (file under ../shared/realdata, origin and licence, what it shows)
    ("defdap_zircaloy_bse/irr_8bin.jpg", "MechMicroMan/DefDAP data, Apache-2.0", "pores and short hydride needles"),
    ("ebsdcorrection_in718_bse/BSE.tif", "lambjames18/EBSD-Correction, MIT", "low contrast, a square's straight edges"),
]


def _real(name: str, origin: str) -> np.ndarray:
    if not (REAL / name).is_file():
        pytest.skip(f"real image {name} ({origin}) not available")
    return read_image(str(REAL / name))[0]


@pytest.mark.parametrize("name, origin, shows", REAL_NEGATIVES, ids=["zircaloy", "in718"])
def test_real_negatives_give_no_family(name, origin, shows):
    assert detect_bands(_real(name, origin)).families == []


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
        img = _real(im["file"], f"{im['origin']}, {im['licence']}")

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
    return SimpleNamespace(point=np.array([0.0, float(offset)]), angle=float(angle), sigma=0.1)


def test_bands_that_turn_steadily_across_the_family_are_not_one_family():
    # the traces of one plane on a flat section seen head-on are parallel (common practice, no
    # source): angles rising band after band by more than FAN_MAX_DEG in all converge on a point
    normal = np.array([0.0, 1.0])
    offsets = [0, 40, 80, 120, 160]
    turn = FAN_MAX_DEG + 2.0
    steady = [_fit(100 + turn * i / 4, o) for i, o in enumerate(offsets)]
    assert _fans_out(steady, normal)
    assert _fans_out(steady[::-1], normal)  # falling the other way round, the same
    # scattered as much about a common angle (curved, wavy bands): not a steady turn
    scattered = [_fit(a, o) for a, o in zip([100, 100 + turn, 100, 100 + turn / 2, 100 + turn], offsets)]
    assert not _fans_out(scattered, normal)
    # a small steady turn (reading error, a slightly curved section) and three bands: kept
    assert not _fans_out([_fit(100 + (FAN_MAX_DEG - 1) * i / 4, o) for i, o in enumerate(offsets)], normal)
    assert not _fans_out(steady[:3], normal)
    # across 0/180 deg the turn is measured axially
    assert _fans_out([_fit((178 + turn * i / 4) % 180, o) for i, o in enumerate(offsets)], normal)


def _family(angle, lines, contrast, spacing=40.0):
    return BandFamily(angle_deg=angle, angle_sigma_deg=0.3, n_bands=len(lines), spacing_px=spacing,
                      spacing_sigma_px=2.0, spacing_um=None, strength=1.0, polarity="dark", contrast=contrast,
                      lines=lines)


def _line(angle, through, half=150.0):
    t = np.radians(angle)
    d = np.array([np.cos(t), -np.sin(t)])  # (col, row): x right, y up
    p0, p1 = np.asarray(through) - half * d, np.asarray(through) + half * d
    return BandLine(float(p0[0]), float(p0[1]), float(p1[0]), float(p1[1]), angle_deg=angle)


def test_a_family_on_the_bands_of_a_stronger_one_is_that_family_again():
    # fits of the same four bands, a few degrees apart, are one family (the stronger kept);
    # a family crossing them on bands of its own stays
    centres = [(200.0, 100.0 + 40.0 * k) for k in range(4)]
    strong = _family(156.5, [_line(156.5, c) for c in centres], contrast=-0.3)
    again = _family(160.0, [_line(160.0, (c[0] + 1.0, c[1] + 0.5)) for c in centres[1:]] + [_line(160.0, (200.0, 300.0))],
                    contrast=-0.2)
    crossing = _family(60.0, [_line(60.0, (100.0 + 40.0 * k, 200.0)) for k in range(4)], contrast=-0.1)
    kept = _distinct_families([again, crossing, strong])
    assert [f.angle_deg for f in kept if f is not crossing] == [156.5]
    assert any(f is crossing for f in kept)
    # the same lines moved off the bands by more than a quarter of the spacing: a family of its own
    apart = _family(160.0, [_line(160.0, (c[0], c[1] + 15.0)) for c in centres], contrast=-0.2)
    assert len(_distinct_families([apart, strong])) == 2
