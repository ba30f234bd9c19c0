"""Frame fit: recovers a known rotation (and mirror) between orientation data and image.

Observed traces are made independently of tracefit.predict.traces: scipy rotations give the sample-frame
normals, the known frame rotation is applied as an active turn about z (v_image = Rz(rho) v_data,
../shared/conventions.md), and the trace angle is atan2(n_y, n_x) + 90 deg.
"""

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.matching import fit_frame
from tracefit.errors import TracefitInputError
from tracefit.conventions import FrameSettings
from tracefit.crystal import lattice_preset
from tracefit.matching import ObservedFamily
from tracefit.crystal import catalogue

FCC = lattice_preset("fcc")
PLANES = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]


def make_map(rho, n_grains=25, mirror=False, seed=0, noise=0.3, scratches=0):
    rng = np.random.default_rng(seed)
    Rs = Rotation.random(n_grains, random_state=seed)
    turn = Rotation.from_euler("z", rho, degrees=True)
    flip = Rotation.from_euler("y", 180, degrees=True) if mirror else Rotation.identity()
    obs, ori = [], {}
    for k in range(n_grains):
        R = Rs[k]
        ori[k] = R.as_matrix().T  # g = R^T (sample -> crystal)
        normals = (turn * flip * R).apply(FCC.plane_normal(np.array(PLANES)))
        incl = np.degrees(np.arccos(np.abs(normals[:, 2])))
        ok = np.flatnonzero(incl > 25)
        for j in rng.choice(ok, size=min(2, len(ok)), replace=False):
            a = (math.degrees(math.atan2(normals[j, 1], normals[j, 0])) + 90.0) % 180.0
            obs.append(ObservedFamily(a + rng.normal(0, noise), 0.3, grain=k))
        for _ in range(scratches):
            obs.append(ObservedFamily(rng.uniform(0, 180), 0.3, grain=k))
    return obs, ori


@pytest.mark.parametrize("rho", [-12.0, 4.0, 37.5])
def test_fit_recovers_a_known_rotation(rho):
    obs, ori = make_map(rho, seed=int(rho * 10) % 97)
    fit = fit_frame(obs, FCC, ori, catalogue(FCC, ("slip",)), n_bootstrap=100)
    assert not fit.flip_x
    assert abs(fit.rotation_deg - rho) < max(3 * fit.rotation_sigma_deg, 0.3)
    assert fit.rotation_sigma_deg < 0.5
    assert fit.misaligned and any("off by" in w for w in fit.warnings)
    assert fit.explained_fitted > 0.95 > fit.explained_given


def test_no_warning_when_the_frame_is_right_even_with_scratches():
    obs, ori = make_map(0.0, seed=3, scratches=1)
    fit = fit_frame(obs, FCC, ori, catalogue(FCC, ("slip",)), n_bootstrap=50)
    assert abs(fit.rotation_deg) < 0.5
    assert not fit.misaligned


def test_fit_detects_a_mirrored_frame():
    obs, ori = make_map(20.0, seed=5, mirror=True)
    fit = fit_frame(obs, FCC, ori, catalogue(FCC, ("slip",)), n_bootstrap=0)
    assert fit.flip_x and fit.mirror_evidence > 5
    assert abs(fit.rotation_deg - 20.0) < 0.5
    assert any("mirrored" in w for w in fit.warnings)
    # the fitted frame, applied through tracefit's own frame code, explains the families
    assert fit.frame == FrameSettings(rotation_deg=fit.rotation_deg, flip_x=True)
    assert fit.explained_fitted > 0.95


def test_too_little_data_is_an_input_error():
    obs, ori = make_map(0.0, n_grains=1)
    with pytest.raises(TracefitInputError):
        fit_frame(obs, FCC, ori, catalogue(FCC))
