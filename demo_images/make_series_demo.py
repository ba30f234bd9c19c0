"""Regenerate the demo's in-situ series: a fictional tensile test imaged at four strain steps.

Scenario (invented): Harrow Lane Instruments, a fictional maker of sensor mounts, strains a strip
of a titanium-like hcp alloy (c/a = 1.587) in tension along the image vertical inside a microscope
and images one field at four steps. The stage drifts a little between frames (a few pixels and a
fraction of a degree), so the job asks for the frames to be registered onto the first.

Truth (what was drawn): prismatic <a> CRSS 150 MPa, basal <a> 225 MPa (1.5x), pyramidal <c+a>
450 MPa (3x). In each grain a family appears at the first frame whose applied stress times its
Schmid factor reaches its CRSS (with 6 % scatter per grain and family), at most two per grain,
and stays. The band angles are the predicted traces (:func:`tracefit.predict.predict_traces`).

Run from the repository root::

    python demo_images/make_series_demo.py

It writes ``ramp_*`` files and ``series.toml`` into ``tracefit/data/demo/`` and copies them to
``demo_images/``.
"""

from __future__ import annotations

import json
import shutil
import sys
import warnings
from pathlib import Path

import cv2
import numpy as np

from tracefit.conventions import axial_difference
from tracefit.crystal import catalogue, from_euler, lattice_preset
from tracefit.image import BandFamilySpec, render_micrograph
from tracefit.image.frames import FrameMove
from tracefit.image.synthetic import voronoi_labels
from tracefit.maps import write_orientation_table
from tracefit.predict import parse_load, predict_traces
from tracefit.stats import random_orientations

ROOT = Path(__file__).resolve().parent.parent
PACKAGE_DEMO = ROOT / "tracefit" / "data" / "demo"
COPY_DEMO = ROOT / "demo_images"
SHAPE = (288, 384)
N_GRAINS = 10
CRSS = {"prismatic <a>": 150.0, "basal <a>": 225.0, "pyramidal <c+a> 2nd order": 450.0}
FRAMES = [(0.0, 0.0), (0.01, 380.0), (0.02, 450.0), (0.03, 520.0)]  # (strain, applied stress MPa)
DRIFT = [(0.0, (0.0, 0.0)), (0.4, (3.0, -2.0)), (-0.3, (6.0, 1.0)), (0.6, (4.0, 5.0))]  # (deg, (col, row) px)


def _drift(img: np.ndarray, rot: float, shift) -> np.ndarray:
    """The frame as the drifted stage shows it (the inverse of tracefit.image.frames.warp_frame)."""
    from skimage.transform import EuclideanTransform, warp

    h, w = img.shape
    c = np.array([(w - 1) / 2.0, (h - 1) / 2.0])
    t = np.radians(-rot)
    R = np.array([[np.cos(t), -np.sin(t)], [np.sin(t), np.cos(t)]])
    M = np.eye(3)
    M[:2, :2], M[:2, 2] = R, c - R @ c + np.asarray(shift, float)
    FrameMove(rot, tuple(shift), 1.0, (h, w))  # the same convention as the registration
    out = warp(img.astype(float), EuclideanTransform(matrix=M).inverse, preserve_range=True, mode="edge")
    return np.clip(out, 0, 255).astype(np.uint8)


def main() -> int:
    warnings.simplefilter("ignore")
    lat = lattice_preset("hcp", 1.587)
    systems = catalogue(lat, modes=["slip"], families=["basal", "prismatic", "pyramidal-ca-2"])
    load = parse_load("y", lat)
    rng = np.random.default_rng(21)
    g = random_orientations(N_GRAINS, seed=21)
    labels = voronoi_labels(SHAPE, N_GRAINS, seed=21) + 1
    euler = {}
    onsets = {}  # grain -> list of (frame, trace angle, family name, plane)
    for i in range(N_GRAINS):
        gid = i + 1
        from tracefit.crystal import to_euler

        euler[gid] = [round(float(x), 3) for x in to_euler(g[i])]
        traces = predict_traces(lat, from_euler(euler[gid]), systems, None, load)
        cands = []
        for t in traces:
            for s in t.systems:
                m = abs(float(s.schmid_factor or 0.0))
                if m > 0.05 and t.inclination_deg > 30:
                    need = CRSS[s.name] * (1 + 0.06 * rng.standard_normal()) / m
                    cands.append((need, t, s.name))
        cands.sort(key=lambda c: c[0])
        chosen = []
        for need, t, name in cands:
            frame = next((k for k, (_, st) in enumerate(FRAMES) if st >= need), None)
            if frame is None or any(tuple(t.plane) == tuple(c[2]) for c in chosen):
                continue
            if any(abs(axial_difference(t.angle_deg, c[1])) < 15 for c in chosen):
                continue
            chosen.append((frame, float(t.angle_deg), tuple(int(x) for x in t.plane), name))
            if len(chosen) == 2:
                break
        onsets[gid] = chosen
    files = []
    for k, ((strain, stress), (rot, shift)) in enumerate(zip(FRAMES, DRIFT)):
        fams = {gid: [BandFamilySpec(a, spacing_px=13, width_px=2.5, contrast=-0.35) for f, a, _, _ in ch if f <= k]
                for gid, ch in onsets.items()}
        img, _ = render_micrograph(SHAPE, labels=labels, grain_families=fams, seed=5, noise_sigma=0.02)
        img = _drift(img, rot, shift) if k else img
        name = f"ramp_{k}.png"
        cv2.imwrite(str(PACKAGE_DEMO / name), img, [cv2.IMWRITE_PNG_COMPRESSION, 9])
        files.append(name)
    cv2.imwrite(str(PACKAGE_DEMO / "ramp_labels.png"), labels.astype(np.uint8))
    write_orientation_table(PACKAGE_DEMO / "ramp_grains.csv", euler)
    lines = ["# tracefit survey job: the demo's in-situ series (a fictional scenario).",
             "# Harrow Lane Instruments (fictional): tensile strip of a titanium-like alloy, four strain steps.",
             "# Regenerate with: python demo_images/make_series_demo.py",
             "format = 1",
             'title = "Harrow Lane Instruments: in-situ tensile series (fictional demo)"',
             'notes = "One field imaged at four strain steps; the stage drifts a little, so the frames are '
             'registered onto the first. Synthetic micrographs drawn by tracefit.image.synthetic."',
             "", "[[series]]", 'name = "ramp"', 'lattice = "hcp"', "c_over_a = 1.587", 'modes = ["slip"]',
             'families = ["basal", "prismatic", "pyramidal-ca-2"]', 'load = { axis = "y", sense = "tension" }',
             "pixel_size_um = 0.5", 'labels = "ramp_labels.png"', 'orientations = "ramp_grains.csv"', "register = true"]
    for name, (strain, stress) in zip(files, FRAMES):
        lines += ["", "[[series.frame]]", f'file = "{name}"', f"strain = {strain}", f"stress_mpa = {stress}"]
    (PACKAGE_DEMO / "series.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")
    truth = {"scenario": "in-situ tensile series (fictional)", "crss_mpa": CRSS,
             "frames": [{"strain": s, "stress_mpa": st} for s, st in FRAMES],
             "drift": [{"rotation_deg": r, "shift_px": list(sh)} for r, sh in DRIFT],
             "grains": {str(g): [{"onset_frame": f + 1, "angle_deg": round(a, 3), "plane": list(p), "system": n}
                                 for f, a, p, n in ch] for g, ch in onsets.items()}}
    (PACKAGE_DEMO / "ramp_truth.json").write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
    for p in sorted(PACKAGE_DEMO.glob("ramp_*")) + [PACKAGE_DEMO / "series.toml"]:
        shutil.copy2(p, COPY_DEMO / p.name)
    n = sum(len(c) for c in onsets.values())
    print(f"wrote the series: {len(FRAMES)} frames, {N_GRAINS} grains, {n} families drawn")
    return 0


if __name__ == "__main__":
    sys.exit(main())
