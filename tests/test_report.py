"""The HTML report, parsed with the standard library's html.parser: self-contained, complete."""

from __future__ import annotations

import base64
import json
from html.parser import HTMLParser

import pytest

import tracefit
from tracefit.survey import parse_job
from tracefit.viz.report import render_report, write_report
from tracefit.survey import run_survey
from test_survey import fake_analyse


class _Page(HTMLParser):
    """Collects tags with attributes, table rows per table and the visible text."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.tables: list[dict] = []
        self._stack: list[dict] = []
        self._in_tbody = False
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "table":
            t = {"attrs": a, "rows": []}
            self.tables.append(t)
            self._stack.append(t)
        elif tag == "tbody":
            self._in_tbody = True
        elif tag == "tr" and self._stack and self._in_tbody:
            self._stack[-1]["rows"].append([])
        elif tag in ("td",) and self._stack and self._in_tbody and self._stack[-1]["rows"]:
            self._stack[-1]["rows"][-1].append("")

    def handle_endtag(self, tag):
        if tag == "table" and self._stack:
            self._stack.pop()
        elif tag == "tbody":
            self._in_tbody = False

    def handle_data(self, data):
        self.text.append(data)
        if self._stack and self._in_tbody and self._stack[-1]["rows"] and self._stack[-1]["rows"][-1]:
            self._stack[-1]["rows"][-1][-1] += data


JOB = """title = "Report <test> & check"
notes = "Coupon notes with <b>markup</b> that must stay text."
[defaults]
lattice = "fcc"
load = "y"
[[image]]
name = "one"
file = "one.png"
euler_deg = [0, 0, 0]
[[image]]
name = "bad-two"
file = "two.png"
euler_deg = [0, 0, 0]
"""


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    job = parse_job(JOB, tmp / "job.toml")
    return run_survey(job, tmp / "out", workers=1, progress=False, analyse=fake_analyse)


@pytest.fixture(scope="module")
def page(survey):
    p = _Page()
    p.feed(survey.report_path.read_text(encoding="utf-8"))
    return p


def test_report_carries_the_caution_version_and_conventions(page):
    text = " ".join(" ".join(page.text).split())
    assert text.count(tracefit.CAUTION) == 2  # at the top and in the footer
    assert f"tracefit {tracefit.__version__}" in text
    assert "Bunge Euler angles" in text and "Wulff" in text and "axial" in text


def test_report_is_self_contained(page):
    srcs = [a.get("src") for t, a in page.tags if t == "img"]
    # figures are embedded (data: URIs), as PNG, or as JPEG for a micrograph overlay when that is smaller
    assert srcs and all(s.startswith(("data:image/png;base64,", "data:image/jpeg;base64,")) for s in srcs)
    magic = {"image/png": b"\x89PNG\r\n\x1a\n", "image/jpeg": b"\xff\xd8\xff"}
    for s in srcs:  # every embedded figure is a real image of the type its URI names
        mime = s[len("data:"): s.index(";")]
        assert base64.b64decode(s.split(",", 1)[1]).startswith(magic[mime])
    assert any(s.startswith("data:image/png;") for s in srcs)  # the stereograms and rose diagrams
    assert not [t for t, a in page.tags if t == "script"]
    for t, a in page.tags:
        for k in ("src", "href"):
            v = a.get(k) or ""
            assert not v.startswith(("http:", "https:", "//", "file:")), (t, a)
        if t == "link":
            assert a.get("rel") == "icon" and a.get("href", "").startswith("data:")


def test_candidate_tables_hold_one_row_per_candidate(survey, page):
    ok = [r for r in survey.records if r["status"] == "ok"]
    cand_tables = [t for t in page.tables if t["attrs"].get("class") == "candidates"]
    expect = [(r["name"], f"F{f['index']}", f["identification"]["candidates"]) for r in ok for f in r["families"]]
    assert len(cand_tables) == len(expect) == 2
    from tracefit.crystal import format_index

    for t, (name, fid, cands) in zip(cand_tables, expect):
        assert (t["attrs"]["data-image"], t["attrs"]["data-family"]) == (name, fid)
        assert len(t["rows"]) == len(cands)
        # columns: rank, plane, family, mode, predicted, residual, probability, ...
        for row, c in zip(t["rows"], cands):
            assert row[1] == format_index(c["plane"], "plane")
            assert float(row[4]) == pytest.approx(c["predicted_deg"], abs=0.006)
            assert float(row[6]) == pytest.approx(c["probability"], abs=0.0006)


def test_summary_lists_every_image_and_the_failure(survey, page):
    summary = next(t for t in page.tables if t["attrs"].get("class") == "summary")
    assert [r[0] for r in summary["rows"]] == ["one", "bad-two"]
    assert summary["rows"][1][1] == "failed" and "deliberately unreadable" in summary["rows"][1][-1]
    text = " ".join(page.text)
    assert "This image was not analysed" in text


def test_user_text_is_escaped(survey):
    html = survey.report_path.read_text(encoding="utf-8")
    assert "<b>markup</b>" not in html and "&lt;b&gt;markup&lt;/b&gt;" in html
    assert "Report &lt;test&gt; &amp; check" in html


def test_report_from_results_json_equals_report_from_result(survey, tmp_path):
    # write_report takes the results.json content too (re-render a report later, elsewhere)
    d = json.loads(survey.json_path.read_text(encoding="utf-8"))
    a = render_report(d, survey.out_dir / "images", generated_utc="T")
    b = render_report(survey, survey.out_dir / "images", generated_utc="T")
    assert a == b
    out = write_report(d, tmp_path / "again.html", img_dir=survey.out_dir / "images")
    assert out.read_text(encoding="utf-8").count('<table class="candidates"') == a.count('<table class="candidates"') == 2


def test_report_keeps_the_job_file_as_run(survey, page):
    pre = "".join(page.text)
    assert 'name = "bad-two"' in pre  # the job text, shown verbatim (escaped)
    html = survey.report_path.read_text(encoding="utf-8")
    assert 'title = &quot;Report &lt;test&gt; &amp; check&quot;' in html


def test_report_needs_neither_the_survey_nor_matplotlib():
    # The report renders plain records: importing and running it must not pull in the survey
    # (that was an import cycle) nor matplotlib (heavy). A fresh interpreter shows what loads.
    import subprocess
    import sys

    code = (
        "import sys\n"
        "from tracefit.viz.report import render_report, _EXAMPLE\n"
        "render_report(_EXAMPLE, '.', generated_utc='T')\n"
        "print(sorted(m for m in sys.modules if m.startswith(('tracefit.survey', 'matplotlib'))))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize(
    "values, kind, text",
    [
        # Bracket notation of the trade: () one plane, [] one direction, a bar written as a minus
        # sign; four indices for hexagonal Miller-Bravais (common practice, no source).
        ((1, -1, 1), "plane", "(1-11)"),
        ((1, 0, -1, 2), "plane", "(10-12)"),
        ((1, 0, -1, 12), "plane", "(1 0 -1 12)"),
        ((-1, 1, 0), "direction", "[-110]"),
        ((1, 1, -2, 0), "direction", "[11-20]"),
    ],
)
def test_labels_print_indices_in_bracket_notation(values, kind, text):
    from tracefit.viz import direction_label, plane_label

    assert (plane_label(values) if kind == "plane" else direction_label(values)) == text


def test_verdict_label_names_the_best_plane_or_both_when_ambiguous(survey):
    from tracefit.viz import family_label

    ok = next(r for r in survey.records if r["status"] == "ok")
    ident = ok["families"][0]["identification"]
    best, planes = ident["candidates"][0], [tuple(c["plane"]) for c in ident["candidates"]]
    assert family_label({**ident, "ambiguous": False}) == f"{plane_label_of(best['plane'])} {best['mode']}"
    second = next(p for p in planes if plane_label_of(p) != plane_label_of(planes[0]))
    assert family_label({**ident, "ambiguous": True}) == (
        f"{plane_label_of(planes[0])} or {plane_label_of(second)} (ambiguous)")
    assert family_label({**ident, "unexplained": True}) == "unexplained"
    assert family_label({}) == "not identified"


def plane_label_of(p):
    """The plane as the trade writes it, spelled out here without tracefit (common practice, no source)."""
    body = "".join(str(int(x)) for x in p) if all(abs(int(x)) < 10 for x in p) else " ".join(str(int(x)) for x in p)
    return f"({body})"
