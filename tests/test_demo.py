"""The bundled demo, end to end: ``tracefit demo`` finds the planes the images were drawn from.

The demo images were drawn by tracefit.image.synthetic at the traces that tracefit.predict.traces predicts for
known planes (demo_images/make_demo.py); ``truth.json`` records them. The check here reads the
results CSV that the real survey (detector + matcher) wrote and compares it with that truth.
The predicted angles themselves rest on the conventions' worked vectors, which are checked
against orix and scipy in the geometry tests.
"""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import pytest

from tracefit.demo import demo_dir, demo_job_path
from tracefit.crystal import format_index
from tracefit.survey import load_job


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    import io
    from contextlib import redirect_stderr, redirect_stdout

    from tracefit.cli import main

    out = tmp_path_factory.mktemp("demo") / "out"
    so, se = io.StringIO(), io.StringIO()
    with redirect_stdout(so), redirect_stderr(se):
        code = main(["demo", "--out", str(out), "--workers", "2"])
    return code, so.getvalue(), se.getvalue(), out


def test_demo_files_are_bundled_and_small():
    d = demo_dir()
    job = load_job(demo_job_path())
    assert len(job.images) == 4
    for im in job.images:
        assert im.file.is_file() and im.file.parent == d
        if im.labels is not None:
            assert im.labels.is_file() and im.orientations.is_file()
        if im.orientation_map is not None:  # coupon D: an orientation map and its control points
            assert im.orientation_map.is_file() and im.control_points.is_file()
    assert sum(p.stat().st_size for p in d.iterdir()) < 3_000_000
    # the top-level demo_images/ copy, when present (source tree), holds the same files
    top = Path(__file__).resolve().parent.parent / "demo_images"
    if top.is_dir():
        for p in d.iterdir():
            assert (top / p.name).read_bytes() == p.read_bytes(), p.name


def test_demo_command_runs_and_says_where_the_report_is(demo_run):
    code, out, err, folder = demo_run
    assert code == 0, err
    m = re.search(r"^report:\s+(.+)$", out, re.M)
    assert m and Path(m.group(1).strip()) == folder / "report.html"
    assert (folder / "report.html").stat().st_size > 10_000
    n = sum(len(v) for v in json.loads((demo_dir() / "truth.json").read_text())["images"].values())
    assert n == 9 and f"demo check: {n} of {n}" in out
    assert "survey [" in err  # the progress bar went to stderr, not stdout
    assert "survey [" not in out


def test_demo_identifies_the_planes_it_was_drawn_from(demo_run):
    code, out, err, folder = demo_run
    truth = json.loads((demo_dir() / "truth.json").read_text(encoding="utf-8"))
    with open(folder / "results.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert {r["status"] for r in rows} == {"ok"}
    for image, drawn in truth["images"].items():
        mine = [r for r in rows if r["image"] == image]
        assert len(mine) == len(drawn), (image, mine)
        for d in drawn:
            grain = "" if d["grain"] is None else str(d["grain"])
            hits = [r for r in mine if r["grain"] == grain and abs(float(r["angle_deg"]) - d["angle_deg"]) < 1.0]
            assert len(hits) == 1, (image, d)
            plane = tuple(d["plane"])
            assert hits[0]["plane"] in (format_index(plane, "plane"), format_index([-x for x in plane], "plane"))
            assert hits[0]["verdict"] == "identified"
            assert float(hits[0]["probability"]) > 0.9


def test_demo_report_in_the_browser(demo_run, tmp_path):
    from test_report_browser import CHROMIUM, _PAGE_STATE, Browser

    if CHROMIUM is None:
        pytest.skip("chromium is not installed (apt-get install chromium); .ci/run installs it")
    code, out, err, folder = demo_run
    b = Browser(tmp_path / "profile")
    try:
        session = b.open((folder / "report.html").resolve().as_uri())
        state = json.loads(b.evaluate(session, _PAGE_STATE))
        assert b.errors(session) == []
    finally:
        b.close()
    # per image: overlay + rose, one stereogram per grain with families, and coupon D's grain map
    records = json.loads((folder / "results.json").read_text())["images"]
    expected = sum(2 + len({f.get("grain") for f in r["families"]}) + bool(r["figures"].get("grain_map")) for r in records)
    assert expected == 17 and len(state["images"]) == expected
    assert all(i["complete"] and i["w"] > 0 for i in state["images"])
    assert [(t["image"], t["family"]) for t in state["candidates"]] == [
        ("coupon-A", "F1"), ("coupon-A", "F2"), ("coupon-B", "F1"), ("coupon-B", "F2"),
        ("coupon-D", "F1"), ("coupon-D", "F2"), ("coupon-D", "F3"), ("coupon-D", "F4"), ("coupon-C", "F1")]
    assert all(t["rows"] >= 1 for t in state["candidates"])


def test_demo_report_records_input_digests_and_software(demo_run):
    import hashlib

    code, out, err, folder = demo_run
    d = json.loads((folder / "results.json").read_text(encoding="utf-8"))
    html = (folder / "report.html").read_text(encoding="utf-8")
    for rec in d["images"]:
        digest = hashlib.sha256(Path(rec["file"]).read_bytes()).hexdigest()
        assert rec["inputs_sha256"]["file"] == digest and digest in html
    assert d["software"]["numpy"] and d["software"]["python"]
    assert "The job file as run" in html and "Harrow Lane Instruments" in d["job"]["text"]


def test_the_report_is_small_enough_to_send(demo_run):
    # Issue 16 item 10: at most 300 kB per image on the demo; figures embedded at screen size,
    # the full-resolution PNGs kept beside the report; stereograms only for grains with families.
    code, out, err, folder = demo_run
    html = (folder / "report.html").read_text(encoding="utf-8")
    job = load_job(demo_job_path())
    assert (folder / "report.html").stat().st_size <= 300_000 * len(job.images)
    records = json.loads((folder / "results.json").read_text())["images"]
    grains_with_families = sum(len({f.get("grain") for f in r["families"]}) for r in records)
    assert html.count('<figure class="stereo">') == grains_with_families
    for name in re.findall(r'href="images/([^"]+)"', html):
        assert (folder / "images" / name).is_file()


def test_the_map_coupon_shows_its_registration(demo_run):
    # Issue 12 item 5: the report shows the warped grain map of an orientation-map image.
    code, out, err, folder = demo_run
    records = {r["name"]: r for r in json.loads((folder / "results.json").read_text())["images"]}
    d = records["coupon-D"]
    assert d["figures"]["grain_map"] == "coupon-D.grain-map.png" and (folder / "images" / "coupon-D.grain-map.png").is_file()
    assert all(f["grain_x_px"] is not None and f["grain_euler_deg"] for f in d["families"])
    assert "grain map" in (folder / "report.html").read_text(encoding="utf-8")


def test_the_report_lists_every_grain_with_why_it_has_no_families(demo_run):
    # Issue 13 item 6: every grain with its size and, where it has no families, why.
    code, out, err, folder = demo_run
    html = (folder / "report.html").read_text(encoding="utf-8")
    records = {r["name"]: r for r in json.loads((folder / "results.json").read_text())["images"]}
    b = [g for g in records["coupon-B"]["grains"] if g.get("grain") is not None]
    assert {g["grain"] for g in b} >= {1, 2} and all(g.get("status") for g in b)
    assert '<table class="grains" data-image="coupon-B">' in html and "no orientation" in html


def test_demo_series_shows_onsets_and_an_estimate(demo_run):
    """The in-situ series (demo_images/make_series_demo.py): each drawn family is found switching on at
    the frame it was drawn in, through the stage drift, and the CRSS ratio it was drawn with is inside
    the interval (truth: ramp_truth.json, basal / prismatic = 225 / 150 MPa)."""
    code, out, err, folder = demo_run
    assert code == 0, err
    stats = json.loads((folder / "series" / "stats" / "statistics.json").read_text(encoding="utf-8"))
    truth = json.loads((demo_dir() / "ramp_truth.json").read_text(encoding="utf-8"))
    onsets = stats["series"][0]["onsets"]
    drawn = sorted((int(g), d["onset_frame"], tuple(d["plane"])) for g, ds in truth["grains"].items() for d in ds)
    found = sorted((o["grain"], o["onset_frame"], tuple(o["plane"])) for o in onsets)
    same = lambda a, b: a[:2] == b[:2] and (a[2] == b[2] or a[2] == tuple(-x for x in b[2]))
    assert len(found) == len(drawn) and all(same(a, b) for a, b in zip(found, drawn)), (found, drawn)
    basal = stats["crss_ratios"]["{0001}"]
    assert stats["reference"] == "{10-10}" and basal["low"] <= 1.5 <= basal["high"]
    # the drawn onset stresses: prismatic 150 MPa, basal 225 MPa (each an upper bound by one frame's step)
    summ = {r["label"]: r for r in stats["series"][0]["summary"]}
    assert 150 <= summ["{10-10}"]["rss_onset_mean_mpa"] < summ["{0001}"]["rss_onset_mean_mpa"]
    assert (folder / "series" / "stats" / "onsets.png").is_file()
    assert "in-situ series ramp" in out
