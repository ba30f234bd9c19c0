"""Orientation maps through the one chain: the map route gives what the label-image route gives.

A synthetic scan of known grains is written with orix's own writer (.ang); a micrograph is
drawn from the same grains under a known affine transform, each grain with bands along its
predicted (1-11)-type trace (predicted here with scipy's Rotation, the outside check of the
convention: ../shared/conventions.md). The map route (API, job file, CLI) must equal the
label-image route fed with the same registered grains, and find the drawn planes.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import math

import cv2
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import tracefit as tf
from tracefit.image import BandFamilySpec, render_micrograph
from tracefit.maps import (Registration, grain_map_from_orientation_map, grain_quaternions, synthetic_crystal_map,
                           voronoi_labels, warp_labels)

SHAPE = (300, 400)
# pairwise misorientations 13 to 45 deg under cubic symmetry: four distinct grains
EULER = np.array([[10.0, 20.0, 30.0], [200.0, 40.0, 75.0], [95.0, 65.0, 15.0], [130.0, 80.0, 300.0]])
PLANES = [(1, -1, 1), (1, 1, 1), (1, 1, -1), (-1, 1, 1)]


def _trace_deg(euler, plane):
    n = Rotation.from_euler("ZXZ", euler, degrees=True).apply(np.array(plane, float) / math.sqrt(3))
    return (math.degrees(math.atan2(n[1], n[0])) + 90.0) % 180.0


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    d = tmp_path_factory.mktemp("mapchain")
    map_labels = voronoi_labels((40, 50), 4, seed=7)
    ids = sorted(int(i) for i in np.unique(map_labels))
    euler = {g: EULER[k] for k, g in enumerate(ids)}
    eul_arr = np.array([euler[g] for g in ids])
    cmap = synthetic_crystal_map(grain_quaternions(map_labels, eul_arr, noise_deg=0.2, seed=1), step=1.0,
                                 phase_name="copper")
    from orix import io as orix_io

    orix_io.save(str(d / "scan.ang"), cmap)
    t = np.array([[7.6, -0.3, 12.0], [0.3, 7.6, 4.0], [0.0, 0.0, 1.0]])  # map (col, row) -> image (col, row)
    pixels = warp_labels(map_labels, Registration(t, "affine"), SHAPE)
    fams = {g: [BandFamilySpec(_trace_deg(euler[g], PLANES[k]), spacing_px=14)] for k, g in enumerate(ids)}
    img, _ = render_micrograph(SHAPE, labels=np.where(pixels >= 0, pixels, 0), grain_families=fams, seed=2)
    cv2.imwrite(str(d / "micrograph.png"), np.clip(img * 255, 0, 255).astype(np.uint8))
    map_xy = np.array([[2.0, 2.0], [47.0, 3.0], [3.0, 37.0], [46.0, 36.0]])
    img_xy = (np.column_stack([map_xy, np.ones(4)]) @ t.T)[:, :2]
    with open(d / "points.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["image_x", "image_y", "map_x", "map_y"])
        w.writerows(np.column_stack([img_xy, map_xy]).round(3).tolist())
    return d, euler, ids


def _probabilities(families):
    return [(f["grain"], round(f["angle_deg"], 6), tuple(c["plane"]), round(c["probability"], 12))
            for f in families for c in f["candidates"]]


def test_the_map_route_equals_the_label_route_and_finds_the_drawn_planes(scene):
    d, euler, ids = scene
    by_map = tf.analyse_image(d / "micrograph.png", "fcc", orientation_map=d / "scan.ang",
                              control_points=d / "points.csv", modes=["slip"])
    gm = grain_map_from_orientation_map(d / "scan.ang", SHAPE, control_points=d / "points.csv")
    table = {k: dataclasses.replace(v, sigma_deg=max(v.sigma_deg, 1.0)) for k, v in gm.table.items()}
    by_labels = tf.analyse_image(d / "micrograph.png", "fcc", labels=gm.labels, orientations=table, modes=["slip"])
    a = _probabilities([f.to_dict() for f in by_map.families])
    assert a and a == _probabilities([f.to_dict() for f in by_labels.families])
    # the drawn families are found and explained by a plane whose predicted trace is the drawn one
    # (the drawn angles come from scipy's Rotation, independent of tracefit)
    drawn = [_trace_deg(euler[g], PLANES[k]) for k, g in enumerate(ids)]
    assert len(by_map.grains) == len(ids)
    found = [f for f in by_map.families if not f.unexplained
             and min(abs((f.best.predicted_deg - a + 90) % 180 - 90) for a in drawn) < 0.5]
    assert len(found) >= len(ids) - 1
    recs = by_map.family_records()
    assert all(r["grain_x_px"] is not None and r["grain_euler_deg"] for r in recs)


def test_job_file_and_cli_take_the_map(scene, tmp_path, run_cli):
    d, _, _ = scene
    job = tmp_path / "job.toml"
    job.write_text(f'[defaults]\nlattice = "fcc"\nmodes = ["slip"]\n\n[[image]]\nname = "m"\nfile = "{d / "micrograph.png"}"\n'
                   f'orientation_map = "{d / "scan.ang"}"\ncontrol_points = "{d / "points.csv"}"\nphase = "copper"\n',
                   encoding="utf-8")
    res = tf.run_survey(tf.load_job(job), tmp_path / "out", workers=1, progress=False, figures=False, report=False)
    assert res.exit_code == 0, res.records[0].get("error")
    survey = _probabilities([f["identification"] for f in res.records[0]["families"]])
    code, out, err = run_cli("identify", str(d / "micrograph.png"), "--lattice", "fcc", "--modes", "slip",
                             "--orientation-map", str(d / "scan.ang"), "--control-points", str(d / "points.csv"),
                             "--json")
    assert code == 0, err
    assert survey == _probabilities(json.loads(out)["families"]) and survey
    rows = list(csv.DictReader(open(tmp_path / "out" / "results.csv", newline="")))
    assert rows and all(r["grain_x_px"] and r["grain_euler_deg"] for r in rows)


@pytest.mark.parametrize("extra,words", [
    (["--phase", "zinc"], ["phase"]),
    (["--control-points", "{few}"], ["control point"]),
])
def test_bad_map_input_is_one_line(scene, tmp_path, run_cli, extra, words):
    d, _, _ = scene
    few = tmp_path / "few.csv"
    few.write_text("image_x,image_y,map_x,map_y\n1,2,3,4\n5,6,7,8\n")
    args = [a.replace("{few}", str(few)) for a in extra]
    if "--control-points" not in args:
        args += ["--control-points", str(d / "points.csv")]
    code, out, err = run_cli("identify", str(d / "micrograph.png"), "--lattice", "fcc",
                             "--orientation-map", str(d / "scan.ang"), *args)
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    for w in words:
        assert w in err.lower()
