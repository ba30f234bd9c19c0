"""Regenerate tracefit's bundled demo: a fictional bracket coupon study.

Scenario (invented): Harrow Lane Instruments, a fictional maker of sensor mounts, pulled
three coupons from a prototype bracket after a proof test and polished one face of each:

* coupon A: an FCC (copper-like) single crystal loaded in tension along the image's
  vertical axis, showing two slip-line families;
* coupon B: a BCC (ferritic) grain pair, with a grain label image and an orientation
  table, one slip family per grain;
* coupon C: an HCP (titanium-like, c/a = 1.587) alloy loaded in compression along the
  image's horizontal axis, showing {10-12} twins;
* coupon D: an FCC (nickel-alloy-like) polycrystal in tension along the image's vertical
  axis, with an EBSD-style orientation map (``coupon_D_scan.ang``, written with orix's own
  writer) and four control points picked in both the map and the micrograph: the grains come
  from the map, registered onto the picture, one slip family per grain.

The band angles are not typed in: each is the predicted trace of the chosen plane for the
coupon's orientation (:func:`tracefit.predict.traces.predict_traces`), so the demo truth agrees with
the geometry by construction. The images are drawn by :func:`tracefit.image.synthetic.render_micrograph`.

Run from the repository root::

    python demo_images/make_demo.py

It writes the demo into ``tracefit/data/demo/`` (bundled in the package, used by
``tracefit demo``) and copies it to ``demo_images/``. ``truth.json`` records what was drawn.
"""

from __future__ import annotations

import json
import shutil
import sys
from pathlib import Path

import cv2
import numpy as np

from tracefit.conventions import axial_difference
from tracefit.maps import write_orientation_table
from tracefit.crystal import lattice_preset
from tracefit.crystal import from_euler
from tracefit.image import BandFamilySpec, render_micrograph
from tracefit.crystal import catalogue
from tracefit.predict import parse_load, predict_traces

ROOT = Path(__file__).resolve().parent.parent
PACKAGE_DEMO = ROOT / "tracefit" / "data" / "demo"
COPY_DEMO = ROOT / "demo_images"
SHAPE = (384, 512)  # rows, columns: small on purpose (the demo must run in seconds)
PIXEL_UM = 0.5

# Orientations picked so that each drawn plane has a high Schmid factor (or twin drive) under
# the coupon's load and its trace stands clear of every other candidate's trace.
COUPONS = [
    {
        "name": "coupon-A",
        "file": "coupon_A.png",
        "lattice": "fcc", "c_over_a": None, "modes": ["slip"], "families": None,
        "load": ("y", "tension"),
        "grains": {None: {"euler": (263.0, 50.0, 135.0), "planes": [(1, 1, -1), (1, 1, 1)]}},
        "style": dict(spacing_px=34.0, width_px=2.6, contrast=-0.32),
        "notes": "Single crystal, tension along the image vertical (sample Y); two slip-line families.",
        "render": dict(illumination=0.25, noise_sigma=0.025, blur_sigma=0.7, n_scratches=0, seed=11),
    },
    {
        "name": "coupon-B",
        "file": "coupon_B.png",
        "labels": "coupon_B_labels.png",
        "orientations": "coupon_B_grains.csv",
        "lattice": "bcc", "c_over_a": None, "modes": ["slip"], "families": ["{110}<111>", "{112}<111>"],
        "load": ("y", "tension"),
        "grains": {
            1: {"euler": (116.0, 83.0, 328.0), "planes": [(1, 1, 0)]},
            2: {"euler": (320.0, 31.0, 17.0), "planes": [(0, 1, -1)]},
        },
        "style": dict(spacing_px=32.0, width_px=2.4, contrast=-0.3),
        "notes": "Ferritic grain pair; grain ids from the label image, orientations from the table.",
        "render": dict(illumination=0.2, noise_sigma=0.025, blur_sigma=0.7, seed=12),
    },
    {
        "name": "coupon-D",
        "file": "coupon_D.png",
        "orientation_map": "coupon_D_scan.ang",
        "control_points": "coupon_D_points.csv",
        "lattice": "fcc", "c_over_a": None, "modes": ["slip"], "families": None,
        "load": ("y", "tension"),
        # map grain index (Voronoi seed order) -> orientation and the plane drawn in it
        "grains": {
            0: {"euler": (15.0, 35.0, 50.0), "planes": []},
            1: {"euler": (140.0, 60.0, 20.0), "planes": []},
            2: {"euler": (260.0, 25.0, 300.0), "planes": []},
            3: {"euler": (75.0, 80.0, 160.0), "planes": []},
        },
        "style": dict(spacing_px=26.0, width_px=2.4, contrast=-0.3),
        "notes": "Nickel-alloy-like polycrystal with its orientation map and four control points; tension along the image vertical.",
        "render": dict(illumination=0.2, noise_sigma=0.025, blur_sigma=0.7, seed=14),
    },
    {
        "name": "coupon-C",
        "file": "coupon_C.png",
        "lattice": "hcp", "c_over_a": 1.587, "modes": ["twin"], "families": ["{10-12}", "{11-21}"],
        "load": ("x", "compression"),
        "grains": {None: {"euler": (250.0, 22.0, 84.0), "planes": [(1, 0, -1, -2)]}},
        "style": dict(spacing_px=46.0, width_px=6.0, contrast=-0.28, spacing_jitter=0.3),
        "notes": "Titanium-like alloy, compression along the image horizontal (sample X); {10-12} twins.",
        "render": dict(illumination=0.25, noise_sigma=0.025, blur_sigma=0.8, seed=13),
    },
]


def _trace(lattice, systems, euler, load, plane):
    g = from_euler(np.asarray(euler, float))
    traces = predict_traces(lattice, g, systems, None, load)
    key = tuple(int(x) for x in plane)
    neg = tuple(-x for x in key)
    hit = [t for t in traces if tuple(int(x) for x in t.plane) in (key, neg)]
    if not hit:
        raise SystemExit(f"plane {plane} is not among the candidates")
    t = hit[0]
    others = [o for o in traces if o is not t]
    clear = min(abs(axial_difference(t.angle_deg, o.angle_deg)) for o in others) if others else 180.0
    return t, clear


def _best_clear_plane(lattice, systems, euler, load, min_clear=8.0):
    """The plane with the highest Schmid factor whose trace stands at least ``min_clear`` deg clear of the others."""
    g = from_euler(np.asarray(euler, float))
    traces = predict_traces(lattice, g, systems, None, load)
    best = None
    for t in traces:
        clear = min(abs(axial_difference(t.angle_deg, o.angle_deg)) for o in traces if o is not t)
        if clear >= min_clear and t.inclination_deg > 30 and (best is None or t.best_schmid > best.best_schmid):
            best = t
    if best is None:
        raise SystemExit(f"no plane clear of the others for Euler {euler}")
    return tuple(int(x) for x in best.plane)


# Coupon D's map: 40 x 50 points, 1 um step; the micrograph sees it scaled 9.4x, turned 3 deg,
# shifted. Four features visible in both were "picked" as control points.
MAP_SHAPE = (40, 50)
MAP_TO_IMAGE = np.array([[9.4 * np.cos(np.radians(3)), -9.4 * np.sin(np.radians(3)), 22.0],
                         [9.4 * np.sin(np.radians(3)), 9.4 * np.cos(np.radians(3)), 6.0], [0.0, 0.0, 1.0]])


def _map_coupon(c, lattice, systems, load):
    """Write coupon D's scan (.ang, with orix) and control points; return the micrograph's grain ids and specs."""
    from orix import io as orix_io

    from tracefit.maps import (Registration, grain_quaternions, synthetic_crystal_map, voronoi_labels, warp_labels)

    map_labels = voronoi_labels(MAP_SHAPE, len(c["grains"]), seed=13)  # four grains of similar size
    euler = np.array([c["grains"][k]["euler"] for k in sorted(c["grains"])])
    cmap = synthetic_crystal_map(grain_quaternions(map_labels, euler, noise_deg=0.3, seed=4), step=1.0,
                                 phase_name="nickel")
    orix_io.save(str(PACKAGE_DEMO / c["orientation_map"]), cmap, overwrite=True)
    pixels = warp_labels(map_labels, Registration(MAP_TO_IMAGE, "affine"), SHAPE)
    map_xy = np.array([[3.0, 2.0], [46.0, 4.0], [4.0, 36.0], [45.0, 37.0]])
    img_xy = (np.column_stack([map_xy, np.ones(4)]) @ MAP_TO_IMAGE.T)[:, :2]
    img_xy += np.array([[0.3, -0.2], [-0.2, 0.3], [0.1, 0.2], [-0.3, -0.1]])  # a person's clicks are not exact
    rows = ["image_x,image_y,map_x,map_y"] + [f"{a:.1f},{b:.1f},{x:g},{y:g}" for (a, b), (x, y) in zip(img_xy, map_xy)]
    (PACKAGE_DEMO / c["control_points"]).write_text("\n".join(rows) + "\n", encoding="utf-8")
    for k, gdef in c["grains"].items():
        gdef["planes"] = [_best_clear_plane(lattice, systems, gdef["euler"], load)]
    return pixels


def _map_grain_ids(c):
    """Map grain index -> the grain id tracefit's segmentation gives it (matched by orientation)."""
    from tracefit.crystal import Orientation
    from tracefit.maps import grain_map_from_orientation_map

    gm = grain_map_from_orientation_map(PACKAGE_DEMO / c["orientation_map"], SHAPE,
                                        control_points=PACKAGE_DEMO / c["control_points"])
    lat = lattice_preset("fcc")
    out = {}
    for k, gdef in c["grains"].items():
        o = Orientation.from_euler(gdef["euler"])
        out[k] = min(gm.table, key=lambda gid: o.misorientation(Orientation.from_matrix(gm.table[gid].g), lat))
    return out


def _two_grain_labels(shape):
    h, w = shape
    rows, cols = np.mgrid[0:h, 0:w]
    # a slanted boundary from (0.42 w, top) to (0.62 w, bottom)
    x_b = 0.42 * w + (0.20 * w) * rows / (h - 1)
    return np.where(cols < x_b, 1, 2).astype(np.uint8)


def _job_toml(coupons) -> str:
    out = [
        "# tracefit survey job: the bundled demo (a fictional scenario).",
        "# Harrow Lane Instruments (fictional): bracket coupon study after a proof test.",
        "# Regenerate the images with: python demo_images/make_demo.py",
        "format = 1",
        'title = "Harrow Lane Instruments: bracket coupon study (fictional demo)"',
        'notes = "Four polished coupons from a prototype bracket (an invented scenario). Synthetic micrographs '
        'drawn by tracefit.image.synthetic from the predicted traces of known planes."',
        "",
        "[defaults]",
        f"pixel_size_um = {PIXEL_UM}",
        "frame = { rotation_deg = 0.0 }",
        "",
    ]
    for c in coupons:
        out.append("[[image]]")
        out.append(f'name = "{c["name"]}"')
        out.append(f'file = "{c["file"]}"')
        out.append(f'notes = "{c["notes"]}"')
        out.append(f'lattice = "{c["lattice"]}"')
        if c["c_over_a"]:
            out.append(f"c_over_a = {c['c_over_a']}")
        out.append("modes = [" + ", ".join(f'"{m}"' for m in c["modes"]) + "]")
        if c["families"]:
            out.append("families = [" + ", ".join(f'"{f}"' for f in c["families"]) + "]")
        out.append(f'load = {{ axis = "{c["load"][0]}", sense = "{c["load"][1]}" }}')
        if "labels" in c:
            out.append(f'labels = "{c["labels"]}"')
            out.append(f'orientations = "{c["orientations"]}"')
        elif "orientation_map" in c:
            out.append(f'orientation_map = "{c["orientation_map"]}"')
            out.append(f'control_points = "{c["control_points"]}"')
        else:
            e = c["grains"][None]["euler"]
            out.append(f"euler_deg = [{e[0]}, {e[1]}, {e[2]}]")
        out.append("")
    return "\n".join(out)


def main(argv=None) -> int:
    PACKAGE_DEMO.mkdir(parents=True, exist_ok=True)
    truth = {"scenario": "Harrow Lane Instruments (fictional): bracket coupon study", "images": {}}
    for c in COUPONS:
        lattice = lattice_preset(c["lattice"], c["c_over_a"])
        systems = catalogue(lattice, c["modes"], c["families"])
        load = parse_load(c["load"][0], lattice, c["load"][1])
        grain_specs = {}
        tgrains = []
        pixels = _map_coupon(c, lattice, systems, load) if "orientation_map" in c else None
        for gid, gdef in c["grains"].items():
            specs = []
            for plane in gdef["planes"]:
                t, clear = _trace(lattice, systems, gdef["euler"], load, plane)
                if clear < 8.0:
                    raise SystemExit(f"{c['name']}: plane {plane} trace is only {clear:.1f} deg from another candidate")
                specs.append(BandFamilySpec(angle_deg=float(t.angle_deg), **c["style"]))
                tgrains.append({"grain": gid, "euler_deg": list(gdef["euler"]), "plane": list(plane),
                                "angle_deg": round(float(t.angle_deg), 3),
                                "schmid_factor": None if t.best_schmid is None else round(float(t.best_schmid), 3),
                                "clearance_deg": round(float(clear), 2)})
                print(f"{c['name']} grain {gid}: plane {plane} trace {t.angle_deg:.2f} deg, "
                      f"m = {t.best_schmid}, clear of others by {clear:.1f} deg")
            grain_specs[gid] = specs
        kw = dict(c["render"])
        if pixels is not None:
            img, _ = render_micrograph(SHAPE, labels=np.where(pixels >= 0, pixels, 0).astype(np.int32),
                                       grain_families=grain_specs, databar=28, pixel_size_um=PIXEL_UM, **kw)
            ids = _map_grain_ids(c)  # the truth names grains as tracefit's segmentation of the map does
            for tg in tgrains:
                tg["grain"] = ids[tg["grain"]]
        elif "labels" in c:
            lab = _two_grain_labels(SHAPE)
            img, _ = render_micrograph(SHAPE, labels=lab.astype(np.int32), grain_families={k: v for k, v in grain_specs.items()},
                                       databar=28, pixel_size_um=PIXEL_UM, **kw)
            lab_out = lab.copy()
            lab_out[img.shape[0] - 28:, :] = 0  # the data bar belongs to no grain
            cv2.imwrite(str(PACKAGE_DEMO / c["labels"]), lab_out)
            write_orientation_table(PACKAGE_DEMO / c["orientations"],
                                    {gid: gdef["euler"] for gid, gdef in c["grains"].items()}, phase="bcc")
        else:
            img, _ = render_micrograph(SHAPE, families=grain_specs[None], databar=28, pixel_size_um=PIXEL_UM, **kw)
        cv2.imwrite(str(PACKAGE_DEMO / c["file"]), img, [cv2.IMWRITE_PNG_COMPRESSION, 9])
        truth["images"][c["name"]] = tgrains
    (PACKAGE_DEMO / "job.toml").write_text(_job_toml(COUPONS), encoding="utf-8")
    (PACKAGE_DEMO / "truth.json").write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
    for p in sorted(PACKAGE_DEMO.iterdir()):
        if p.is_file():
            shutil.copy2(p, COPY_DEMO / p.name)
    total = sum(p.stat().st_size for p in PACKAGE_DEMO.iterdir() if p.is_file())
    print(f"wrote {PACKAGE_DEMO} and {COPY_DEMO} ({total / 1e6:.2f} MB each)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
