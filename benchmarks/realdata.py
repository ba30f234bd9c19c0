"""Benchmark of band detection on real micrographs against hand measurements (issue 13).

Not part of the test suite: it prints figures and exits 0 whatever they are.

The references are in ``benchmarks/realdata_reference.toml`` (measured by hand from zoomed
crops; see its header). The images themselves are not in the repository: they are read
from ``../shared/realdata`` next to the repository, or from the folder named by the
environment variable ``TRACEFIT_REALDATA``. Origins and licences (from that folder's
README.md): DefDAP test/data images (MechMicroMan/DefDAP, Apache-2.0), openECCI steel
images (IMBalENce/openECCI, GPL-3.0), EBSD-Correction IN718 image
(lambjames18/EBSD-Correction, MIT). When the folder is absent the script says so and
exits 0.

What it runs, per image:

1. ``whole``: ``detect_bands`` on the whole file, data bar included (the detector is
   supposed to find and exclude a data bar itself).
2. ``cropped`` (steel images only): the same on the rows the README says to keep.
3. ``region``: for each hand-measured family, ``detect_bands`` with a mask that keeps
   only the family's region.
4. ``negative``: for each negative region, ``detect_bands`` with that mask; the number
   of families reported should be 0.

A detected family "finds" a measured one when their axial angle difference is at most
``match_tol_deg`` (2 deg). Spurious families are detected families that match no
measured family (for a region: no family whose region overlaps it). Whole-image
spurious counts include real bands the reference leaves out (see ``unmeasured`` in the
TOML), so read them as "unmatched".

Usage::

    python benchmarks/realdata.py
    python benchmarks/realdata.py --set min_depth=0.02 --set min_significance=2
    TRACEFIT_REALDATA=/path/to/realdata python benchmarks/realdata.py
"""

from __future__ import annotations

import os
import sys
import time
import tomllib
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
REFERENCE = Path(__file__).resolve().with_name("realdata_reference.toml")


def realdata_root() -> Path:
    """Folder of the real images: $TRACEFIT_REALDATA, else ../shared/realdata of the repo."""
    env = os.environ.get("TRACEFIT_REALDATA")
    return Path(env) if env else REPO.parent / "shared" / "realdata"


def axial_diff(a_deg: float, b_deg: float) -> float:
    """Smallest difference of two axial angles, deg, in [0, 90]."""
    d = abs(a_deg - b_deg) % 180.0
    return min(d, 180.0 - d)


def box_mask(shape, region) -> np.ndarray:
    """Boolean mask (H, W) True inside the box [col0, row0, col1, row1] (end-exclusive)."""
    c0, r0, c1, r1 = region
    m = np.zeros(shape, dtype=bool)
    m[max(0, r0):min(shape[0], r1), max(0, c0):min(shape[1], c1)] = True
    return m


def boxes_overlap(a, b) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


SETTINGS: dict = {}  # detector settings from --set name=value


def run_detect(detect_bands, image, mask, pixel_size_um, path):
    """Detected family angles (deg) and the seconds taken; angles None on a refused input."""
    t0 = time.perf_counter()
    try:
        res = detect_bands(image, mask=mask, pixel_size_um=pixel_size_um, path=path, **SETTINGS)
    except ValueError as exc:  # TracefitInputError is a ValueError
        return None, time.perf_counter() - t0, str(exc)
    angles = [float(f.angle_deg) for f in res.families]
    return angles, time.perf_counter() - t0, "; ".join(res.notes[-2:])


def match(measured: list[float], detected: list[float], tol: float):
    """Greedy one-to-one matching; returns (found flags per measured, unmatched detected)."""
    used: set[int] = set()
    found = []
    for a in measured:
        best, j_best = tol + 1.0, -1
        for j, d in enumerate(detected):
            if j not in used and axial_diff(a, d) < best:
                best, j_best = axial_diff(a, d), j
        ok = j_best >= 0 and best <= tol
        if ok:
            used.add(j_best)
        found.append(ok)
    spurious = [d for j, d in enumerate(detected) if j not in used and min((axial_diff(d, a) for a in measured), default=99) > tol]
    return found, spurious


def fmt_angles(angles) -> str:
    if angles is None:
        return "refused"
    return "[" + ", ".join(f"{a:.1f}" for a in angles) + "]"


def main(argv=None) -> int:
    import argparse
    import ast

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                    help="a detect_bands setting (Python literal value), e.g. min_depth=0.02")
    ap.add_argument("--only", default=None, help="run only this image id")
    args = ap.parse_args(argv)
    for item in args.set:
        name, _, value = item.partition("=")
        SETTINGS[name.strip()] = ast.literal_eval(value.strip())
    root = realdata_root()
    if not root.is_dir():
        print(f"realdata benchmark skipped: {root} not found (set TRACEFIT_REALDATA to the folder of the real images)")
        return 0
    from tracefit.image import detect_bands, read_image

    ref = tomllib.loads(REFERENCE.read_text())
    tol = float(ref["meta"]["match_tol_deg"])
    families = ref["family"]
    negatives = ref.get("negative", [])
    summary = []  # (image, variant, n_measured, n_found, n_spurious, n_reported)
    region_rows = []  # (family id, confidence, angle, found, spurious, detected)
    neg_rows = []  # (image, region, n_reported)
    second_rows = []  # (family id, first reading, second reading length-weighted, plain mean, detected)

    for im in [i for i in ref["image"] if args.only in (None, i["id"])]:
        path = root / im["file"]
        print(f"\n=== {im['id']}  ({im['file']}; {im['origin']}, {im['licence']}; {im['role']})")
        if not path.exists():
            print(f"  missing: {path}; skipped")
            continue
        gray, _notes = read_image(path)
        px = im.get("pixel_size_um")
        fams = [f for f in families if f["image"] == im["id"]]
        measured = [f["angle_deg"] for f in fams]
        if fams:
            print("  measured: " + ", ".join(f"{f['id']} {f['angle_deg']:.1f}+-{f['sigma_deg']:.1f} ({f['confidence']})" for f in fams))
        else:
            print("  measured: no band families (negative)")

        variants = [("whole", gray)]
        if "crop_rows" in im:
            r0, r1 = im["crop_rows"]
            variants.append((f"rows {r0}-{r1 - 1}", gray[r0:r1]))
        for name, arr in variants:
            angles, dt, note = run_detect(detect_bands, arr, None, px, str(path))
            found, spurious = match(measured, angles or [], tol)
            n_rep = len(angles or [])
            print(f"  {name:>14}: detected {fmt_angles(angles)} in {dt:.1f} s")
            if fams:
                hit = [f["id"] for f, ok in zip(fams, found) if ok]
                print(f"  {'':>14}  found {sum(found)}/{len(fams)} ({', '.join(hit) or '-'}), recall {sum(found) / len(fams):.2f}, spurious {len(spurious)} {fmt_angles(spurious)}")
            else:
                print(f"  {'':>14}  families reported on a negative: {n_rep} (should be 0)")
            summary.append((im["id"], name, len(fams), sum(found), len(spurious), n_rep))

        for f in fams:
            mask = box_mask(gray.shape, f["region"])
            near = [g["angle_deg"] for g in fams if boxes_overlap(g["region"], f["region"])]
            angles, dt, note = run_detect(detect_bands, gray, mask, px, str(path))
            ok = any(axial_diff(a, f["angle_deg"]) <= tol for a in (angles or []))
            spur = [a for a in (angles or []) if min(axial_diff(a, b) for b in near) > tol]
            best = min((axial_diff(a, f["angle_deg"]) for a in (angles or [])), default=float("nan"))
            print(f"  region {f['id']:>6} {f['region']}: measured {f['angle_deg']:.1f}, detected {fmt_angles(angles)}, "
                  f"{'FOUND' if ok else 'missed'} (nearest {best:.1f} deg off), spurious {len(spur)}")
            if angles is None or (not angles and note):
                print(f"  {'':>14}  detector note: {note}")
            region_rows.append((f["id"], f["confidence"], f["angle_deg"], ok, len(spur), angles))
            if "second_angle_deg" in f:
                second_rows.append((f["id"], f["angle_deg"], f["second_angle_deg"], f["second_mean_deg"], angles or []))

        for neg in [n for n in negatives if n["image"] == im["id"]]:
            full = list(neg["region"]) == [0, 0, gray.shape[1], gray.shape[0]]
            if full:
                n_rep = next(s[5] for s in summary if s[0] == im["id"] and s[1] == "whole")
                print(f"  negative {neg['region']} (whole image, see above): {n_rep} families")
            else:
                angles, dt, note = run_detect(detect_bands, gray, box_mask(gray.shape, neg["region"]), px, str(path))
                n_rep = len(angles or [])
                print(f"  negative {neg['region']} ({neg['note'][:40]}...): detected {fmt_angles(angles)} -> {n_rep} families (should be 0)")
            neg_rows.append((im["id"], neg["region"], n_rep))

    print("\n=== summary: whole images (match within %.1f deg)" % tol)
    print(f"{'image':<12} {'variant':<14} {'measured':>8} {'found':>6} {'recall':>7} {'spurious':>9} {'reported':>9}")
    for img_id, name, n, k, s, rep in summary:
        rec = f"{k / n:.2f}" if n else "-"
        print(f"{img_id:<12} {name:<14} {n:>8} {k:>6} {rec:>7} {s:>9} {rep:>9}")

    print("\n=== summary: per hand-measured region (mask = region box)")
    for conf in ("clear", "faint"):
        rows = [r for r in region_rows if r[1] == conf]
        if rows:
            k = sum(r[3] for r in rows)
            print(f"{conf:<6} families: found {k}/{len(rows)} (recall {k / len(rows):.2f}), spurious families {sum(r[4] for r in rows)}")
    k = sum(r[3] for r in region_rows)
    if region_rows:
        print(f"all    families: found {k}/{len(region_rows)} (recall {k / len(region_rows):.2f}), spurious families {sum(r[4] for r in region_rows)}")
    print(f"negative regions: {sum(1 for r in neg_rows if r[2] == 0)}/{len(neg_rows)} with 0 families; families reported on negatives: {sum(r[2] for r in neg_rows)}")
    if second_rows:
        second_reading_summary(second_rows, tol)
    if args.only is None:
        skimage_negatives(detect_bands)
    return 0


def second_reading_summary(rows, tol: float) -> None:
    """Regions measured twice (a second observer, blind): the readings' difference and recall against each."""
    print(f"\n=== regions read twice (second reading blind to the first and to the detector; see the TOML header)")
    print(f"{'family':<7} {'first':>6} {'second':>7} {'(mean)':>7} {'differ':>7}  detected")
    hits, unmatched = [0, 0, 0], [0, 0, 0]
    for fid, first, second, plain, det in rows:
        print(f"{fid:<7} {first:>6.1f} {second:>7.1f} {plain:>7.1f} {axial_diff(first, second):>7.1f}  {fmt_angles(det)}")
        for k, ref in enumerate((first, second, plain)):
            hits[k] += any(axial_diff(a, ref) <= tol for a in det)
            unmatched[k] += sum(axial_diff(a, ref) > tol for a in det)  # this region's family only
    diffs = sorted(axial_diff(r[1], r[2]) for r in rows)
    print(f"readings differ by a median {float(np.median(diffs)):.1f} deg (largest {diffs[-1]:.1f}); found within "
          f"{tol:g} deg of the first reading {hits[0]}/{len(rows)}, of the second {hits[1]}/{len(rows)} "
          f"(of its plain mean {hits[2]}/{len(rows)}); families matching no reading of their region: "
          f"{unmatched[0]} / {unmatched[1]} / {unmatched[2]}")


SKIMAGE_NEGATIVES = ("grass", "gravel", "clock", "camera", "moon", "cell", "text", "page")


def skimage_negatives(detect_bands) -> None:
    """Families on the negatives that ship with scikit-image (skimage.data; BSD-3-Clause).

    text and page hold parallel rows of writing: straight and parallel, so a detector of
    band families may well report them; they are listed apart from the others.
    """
    from skimage import data

    print("\n=== scikit-image negatives (skimage.data, should give 0 families)")
    total = 0
    for name in SKIMAGE_NEGATIVES:
        img = getattr(data, name)()
        res = detect_bands(img, **SETTINGS)
        total += len(res.families) if name not in ("text", "page") else 0
        print(f"{name:<8} {img.shape[1]} x {img.shape[0]}: {len(res.families)} families "
              f"{fmt_angles([f.angle_deg for f in res.families])}")
    print(f"families on grass, gravel, clock, camera, moon, cell: {total}")


if __name__ == "__main__":
    sys.exit(main())
