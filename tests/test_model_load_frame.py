"""The frame of a load (issue 11, item 1): image frame by default, sample frame on request.

References outside tracefit: scipy.spatial.transform.Rotation for the Bunge matrix
(Rotation.from_euler("ZXZ", (phi1, Phi, phi2)) is crystal -> sample) and for the turn about z;
Schmid's law m = cos(phi) cos(lambda) = (l . n)(l . d) (Schmid & Boas, Plasticity of Crystals,
1950; the formula, not a table value) evaluated here with plain numpy.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.conventions import FrameSettings
from tracefit.crystal import catalogue, lattice_preset
from tracefit.errors import TracefitInputError
from tracefit.matching import ObservedFamily, identify_families
from tracefit.predict import Load, parse_load, predict_traces, resolved_drive, system_schmid_factors

FCC = lattice_preset("fcc")
SLIP = catalogue(FCC, ["slip"])
BUNGE = (20.0, 40.0, 10.0)


def _g(bunge):
    return Rotation.from_euler("ZXZ", bunge, degrees=True).as_matrix().T  # sample -> crystal


def _schmid_reference(l_crystal, systems):
    """|m| = |(l . n)(l . d)| per system, unit vectors, plain numpy."""
    l = np.asarray(l_crystal, float) / np.linalg.norm(l_crystal)
    out = []
    for s in systems:
        n = np.asarray(s.normal, float) / np.linalg.norm(s.normal)
        d = np.asarray(s.dir_unit, float) / np.linalg.norm(s.dir_unit)
        out.append(abs((l @ n) * (l @ d)))
    return np.array(out)


def _data_g(g_image, frame):
    """The orientation data of the same crystal when the data frame sits in the image as ``frame`` says.

    v_image = M v_data with M = Rz(rho) F (docs/conventions.md, section 5), so
    g_data = g_image M. Rz is scipy's; F the flips written out.
    """
    f = np.diag([-1.0 if frame.flip_x else 1.0, -1.0 if frame.flip_y else 1.0, 1.0])
    f[2, 2] = f[0, 0] * f[1, 1]
    m = Rotation.from_euler("z", frame.rotation_deg, degrees=True).as_matrix() @ f
    return g_image @ m


@pytest.mark.parametrize("frame", [FrameSettings(rotation_deg=90.0), FrameSettings(rotation_deg=-90.0, flip_y=True),
                                   FrameSettings(flip_x=True), FrameSettings(rotation_deg=37.0)])
def test_image_frame_load_follows_the_picture(frame):
    # One crystal, one picture; the orientation data stored in another frame. The trace angles are
    # the same (the picture did not change), and so is every Schmid factor of the picture's vertical.
    g_img = _g(BUNGE)
    g_dat = _data_g(g_img, frame)
    plain = predict_traces(FCC, g_img, SLIP, FrameSettings(), load="y", sort="angle")
    framed = predict_traces(FCC, g_dat, SLIP, frame, load="y", sort="angle")
    np.testing.assert_allclose([t.angle_deg for t in framed], [t.angle_deg for t in plain], atol=1e-9)
    for a, b in zip(plain, framed):
        assert [s.direction for s in a.systems] == [s.direction for s in b.systems]
        np.testing.assert_allclose([s.schmid_factor for s in b.systems], [s.schmid_factor for s in a.systems], atol=1e-12)
    # and against Schmid's law for the picture's vertical, l_crystal = g_image e_y
    ref = _schmid_reference(g_img @ [0.0, 1.0, 0.0], SLIP)
    np.testing.assert_allclose(system_schmid_factors(Load.axis("y"), g_dat, SLIP, frame), ref, atol=1e-12)


def test_sample_frame_load_keeps_the_former_behaviour():
    # frame="sample": the axis is the orientation data's y, whatever the frame (what every load
    # meant before issue 11); pinned against Schmid's law with l_crystal = g_data e_y.
    frame = FrameSettings(rotation_deg=90.0)
    g_dat = _data_g(_g(BUNGE), frame)
    ld = parse_load("y", frame="sample")
    ref = _schmid_reference(g_dat @ [0.0, 1.0, 0.0], SLIP)
    np.testing.assert_allclose(system_schmid_factors(ld, g_dat, SLIP, frame), ref, atol=1e-12)
    tr = predict_traces(FCC, g_dat, SLIP, frame, load=ld)
    best = max(max(s.schmid_factor for s in t.systems) for t in tr)
    assert best == pytest.approx(ref.max(), abs=1e-12)
    # and it differs from the image-frame reading here (the frame turns the data's y to the picture's -x)
    img = system_schmid_factors(parse_load("y"), g_dat, SLIP, frame)
    assert np.abs(img - ref).max() > 0.1


def test_worked_example_of_docs_conventions():
    # docs/conventions.md, section 8: fcc at Bunge (20, 40, 10), data frame turned 90 deg in the
    # picture, tension along the picture's vertical.
    frame = FrameSettings(rotation_deg=90.0)
    g = _g(BUNGE)
    l_img = Load.axis("y").in_crystal(g, frame)
    l_smp = Load.axis("y", frame="sample").in_crystal(g, frame)
    np.testing.assert_allclose(l_img, g @ [1.0, 0.0, 0.0], atol=1e-12)  # Rz(-90) e_y = e_x
    np.testing.assert_allclose(l_smp, g @ [0.0, 1.0, 0.0], atol=1e-12)
    assert np.round(l_img, 3).tolist() == [0.88, -0.421, 0.22] and np.round(l_smp, 3).tolist() == [0.462, 0.65, -0.604]
    m_img = _schmid_reference(l_img, SLIP)
    m_smp = _schmid_reference(l_smp, SLIP)
    tr = {t.plane: t for t in predict_traces(FCC, g, SLIP, frame, load="y")}
    best_img = tr[(1, -1, -1)].systems[0]
    assert best_img.direction == (1, 0, 1) and best_img.schmid_factor == pytest.approx(m_img.max(), abs=1e-12)
    assert round(m_img.max(), 3) == 0.485 and round(tr[(1, -1, -1)].angle_deg, 3) == 21.058
    trs = {t.plane: t for t in predict_traces(FCC, g, SLIP, frame, load=Load.axis("y", frame="sample"))}
    best_smp = trs[(1, -1, 1)].systems[0]
    assert best_smp.direction == (1, 1, 0) and round(m_smp.max(), 3) == 0.359 == round(best_smp.schmid_factor, 3)


def test_crystal_directions_and_tilt_do_not_depend_on_the_frame():
    g = _g(BUNGE)
    ld = parse_load("[123]", FCC)
    ref = system_schmid_factors(ld, g, SLIP)
    for fr in (FrameSettings(rotation_deg=90.0), FrameSettings(flip_y=True, tilt_deg=60.0)):
        np.testing.assert_allclose(system_schmid_factors(ld, g, SLIP, fr), ref, atol=1e-12)
    # the stage tilt is a view, not a turn of the sample: it leaves an image-frame load alone
    np.testing.assert_allclose(system_schmid_factors(Load.axis("y"), g, SLIP, FrameSettings(tilt_deg=60.0)),
                               system_schmid_factors(Load.axis("y"), g, SLIP), atol=1e-12)


def test_stress_in_the_image_frame_is_turned_into_the_sample_frame():
    # tau = n . sigma . d is frame-independent when n, d and sigma are all in one frame: the image-frame
    # stress resolved with the image-frame orientation equals the framed computation.
    frame = FrameSettings(rotation_deg=90.0, flip_x=True)
    g_img = _g(BUNGE)
    g_dat = _data_g(g_img, frame)
    voigt = [120.0, -40.0, 0.0, 15.0, 0.0, 30.0]
    n = np.array([s.normal for s in SLIP])
    d = np.array([s.dir_unit for s in SLIP])
    plain = resolved_drive(Load.stress(voigt), g_img, n, d)
    framed = resolved_drive(Load.stress(voigt), g_dat, n, d, frame)
    np.testing.assert_allclose(framed, plain, atol=1e-9)
    sample = resolved_drive(Load.stress(voigt, frame="sample"), g_dat, n, d, frame)
    s = np.array([[120.0, 30.0, 0.0], [30.0, -40.0, 15.0], [0.0, 15.0, 0.0]])
    ref = np.einsum("mi,ij,mj->m", n @ g_dat, s, d @ g_dat)  # tau = (g^T n) . sigma . (g^T d)
    np.testing.assert_allclose(sample, ref, atol=1e-9)
    assert Load.stress(voigt).to_dict()["frame"] == "image"
    assert Load.stress(voigt, frame="sample").to_dict()["voigt_mpa"] == voigt


def test_the_matcher_takes_the_frame_from_its_frame_settings():
    frame = FrameSettings(rotation_deg=90.0)
    g_img = _g(BUNGE)
    g_dat = _data_g(g_img, frame)
    obs = [ObservedFamily(111.06, 0.2), ObservedFamily(62.5, 0.2)]  # the (1-1-1) and (1-11) traces of g_img
    a = identify_families(obs, FCC, g_img, SLIP, load="y")
    b = identify_families(obs, FCC, g_dat, SLIP, frame=frame, load="y")
    ref = _schmid_reference(g_img @ [0.0, 1.0, 0.0], SLIP)
    for ra, rb, plane in zip(a, b, [(1, -1, -1), (1, -1, 1)]):
        assert ra.best.plane == rb.best.plane == plane
        assert rb.best.best_system.schmid_factor == pytest.approx(ra.best.best_system.schmid_factor, abs=1e-9)
        on_plane = [m for m, s in zip(ref, SLIP) if s.plane == plane]
        assert rb.best.best_system.schmid_factor == pytest.approx(max(on_plane), abs=1e-9)


def test_bad_frames_are_refused():
    for bad in ("crystal", "picture", None):
        with pytest.raises(TracefitInputError, match="frame"):
            parse_load("y", frame=bad)
    with pytest.raises(TracefitInputError, match="frame"):
        Load.stress([1, 0, 0, 0, 0, 0], frame="crystal")
    with pytest.raises(TracefitInputError, match="frame"):
        Load((0.0, 1.0, 0.0), "lab")


def test_every_flip_and_quarter_turn_keeps_the_picture_vertical():
    g_img = _g((63.0, 17.0, 141.0))
    ref = system_schmid_factors(Load.axis("y"), g_img, SLIP)
    for rho, fx, fy in itertools.product((0.0, 90.0, 180.0, 270.0), (False, True), (False, True)):
        fr = FrameSettings(rotation_deg=rho, flip_x=fx, flip_y=fy)
        np.testing.assert_allclose(system_schmid_factors(Load.axis("y"), _data_g(g_img, fr), SLIP, fr), ref, atol=1e-12)
