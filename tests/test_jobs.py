"""Job files: our own TOML design; bad fields are named with their line, never a traceback."""

from __future__ import annotations

from pathlib import Path

import pytest

from tracefit.errors import TracefitInputError
from tracefit.survey import key_lines, load_job, parse_job

GOOD = """\
# a survey job
title = "Coupons"

[defaults]
lattice = "fcc"
modes = ["slip"]
pixel_size_um = 0.25
frame = { rotation_deg = 12.5 }
load = { axis = "[001]", sense = "compression" }

[[image]]
name = "a"
file = "imgs/a.png"
euler_deg = [10, 20, 30]

[[image]]
name = "b"
file = "b.tif"
lattice = "hcp"
c_over_a = 1.587
modes = ["twin"]
load = "x"
labels = "b_labels.png"
orientations = "b_grains.csv"
"""


def _err(text: str) -> str:
    with pytest.raises(TracefitInputError) as ei:
        parse_job(text, "/data/job.toml")
    return str(ei.value)


def _line_of(text: str, needle: str, nth: int = 1) -> int:
    """1-based line number of the nth line containing ``needle`` (computed from the text itself)."""
    hits = [i for i, ln in enumerate(text.splitlines(), start=1) if needle in ln]
    return hits[nth - 1]


def test_good_job_resolves_defaults_overrides_and_paths():
    job = parse_job(GOOD, "/data/job.toml")
    a, b = job.images
    assert job.title == "Coupons"
    assert a.lattice == "fcc" and a.modes == ("slip",) and a.pixel_size_um == 0.25
    assert a.frame == {"rotation_deg": 12.5}
    assert (a.load, a.load_sense) == ("[001]", "compression")
    assert a.euler_deg == (10.0, 20.0, 30.0) and a.labels is None
    assert a.file == Path("/data/imgs/a.png")
    # b overrides lattice, modes and load, keeps the inherited pixel size and frame
    assert b.lattice == "hcp" and b.c_over_a == 1.587 and b.modes == ("twin",)
    assert (b.load, b.load_sense) == ("x", "tension")
    assert b.pixel_size_um == 0.25 and b.frame == {"rotation_deg": 12.5}
    assert b.labels == Path("/data/b_labels.png") and b.orientations == Path("/data/b_grains.csv")
    assert b.euler_deg is None
    assert a.line == _line_of(GOOD, "[[image]]", 1) and b.line == _line_of(GOOD, "[[image]]", 2)


def test_key_lines_track_tables_arrays_and_skip_multiline_values():
    text = (
        'title = "x"\n'  # 1
        'notes = """\n'  # 2
        "[not_a_table]\n"  # 3: inside a string
        'file = "nope"\n'  # 4: inside a string
        '"""\n'  # 5
        "[defaults]\n"  # 6
        "modes = [\n"  # 7
        '  "slip",  # [image] in a comment\n'  # 8
        "]\n"  # 9
        "frame = { rotation_deg = 3, flip_x = true }\n"  # 10
        "[[image]]\n"  # 11
        'name = "a"\n'  # 12
        "[[image]]\n"  # 13
        "\n"  # 14
        'file = "b.png"  # a comment\n'  # 15
    )
    lines = key_lines(text)
    assert lines[("notes",)] == 2 and ("not_a_table",) not in lines and ("file",) not in lines
    assert lines[("defaults", "modes")] == 7
    assert lines[("defaults", "frame", "flip_x")] == 10
    assert lines[("image", 0, "name")] == 12
    assert lines[("image", 1)] == 13 and lines[("image", 1, "file")] == 15


def test_missing_file_names_the_field_and_the_images_line():
    text = GOOD.replace('file = "b.tif"\n', "")
    msg = _err(text)
    assert "image[2].file" in msg and "is missing" in msg
    assert f"line {_line_of(text, '[[image]]', 2)}" in msg


def test_misspelt_field_is_named_with_a_suggestion_and_its_line():
    text = GOOD.replace("pixel_size_um = 0.25", "pixel_size = 0.25")
    msg = _err(text)
    assert "defaults.pixel_size" in msg and "pixel_size_um" in msg
    assert f"line {_line_of(text, 'pixel_size = 0.25')}" in msg


@pytest.mark.parametrize(
    "old, new, field, needle",
    [
        ("pixel_size_um = 0.25", 'pixel_size_um = "quarter"', "defaults.pixel_size_um", "pixel_size_um"),
        ("pixel_size_um = 0.25", "pixel_size_um = -1", "defaults.pixel_size_um", "pixel_size_um"),
        ('modes = ["twin"]', 'modes = ["glide"]', "image[2].modes", 'modes = ["glide"]'),
        ('lattice = "hcp"', 'lattice = "fcc2"', "image[2].lattice", 'lattice = "fcc2"'),
        ("euler_deg = [10, 20, 30]", "euler_deg = [10, 20]", "image[1].euler_deg", "euler_deg"),
        ('load = "x"', 'load = "sideways"', "image[2].load", 'load = "sideways"'),
        ("c_over_a = 1.587", "c_over_a = 0", "image[2].c_over_a", "c_over_a = 0"),
        ('name = "b"', 'name = "a"', "image[2].name", 'name = "a"'),
        ('name = "b"', 'name = "b/../x"', "image[2].name", 'name = "b/'),
    ],
)
def test_wrong_values_name_field_and_line(old, new, field, needle):
    text = GOOD.replace(old, new, 1)
    assert text != GOOD
    msg = _err(text)
    assert f"field '{field}'" in msg
    nth = 2 if needle == 'name = "a"' else 1
    assert f"line {_line_of(text, needle, nth)}" in msg


def test_unknown_frame_setting_is_named():
    text = GOOD.replace("frame = { rotation_deg = 12.5 }", "frame = { rotation = 12.5 }")
    msg = _err(text)
    assert "defaults.frame.rotation" in msg and "rotation_deg" in msg
    assert f"line {_line_of(text, 'frame = {')}" in msg


def test_frame_values_are_checked():
    text = GOOD.replace("frame = { rotation_deg = 12.5 }", "frame = { tilt_deg = 95 }")
    msg = _err(text)
    assert "defaults.frame" in msg and "tilt" in msg


def test_orientation_source_must_be_one_and_complete():
    no_orient = GOOD.replace("euler_deg = [10, 20, 30]\n", "")
    assert "has no orientation" in _err(no_orient)
    half = GOOD.replace('orientations = "b_grains.csv"\n', "")
    msg = _err(half)
    assert "image[2].labels" in msg and "orientations" in msg
    both = GOOD.replace("euler_deg = [10, 20, 30]", 'euler_deg = [10, 20, 30]\nlabels = "x.png"\norientations = "y.csv"')
    assert "one orientation source" in _err(both)


def test_no_images_and_image_only_field_in_defaults():
    assert "no images" in _err('title = "x"\n[defaults]\nlattice = "fcc"\n')
    msg = _err(GOOD.replace("[defaults]\n", '[defaults]\nfile = "x.png"\n'))
    assert "defaults.file" in msg and "[[image]]" in msg


def test_lattice_missing_everywhere():
    text = GOOD.replace('lattice = "fcc"\n', "")
    msg = _err(text)
    assert "image[1].lattice" in msg and "is missing" in msg


def test_toml_syntax_error_gives_the_line():
    msg = _err('title = "x"\n[defaults\nlattice = "fcc"\n')
    assert "not valid TOML" in msg and "line 2" in msg


def test_load_job_reports_a_missing_file(tmp_path):
    with pytest.raises(TracefitInputError, match="not found"):
        load_job(tmp_path / "nope.toml")


def test_cli_bad_job_file_is_one_line_and_exit_2(tmp_path, run_cli):
    p = tmp_path / "job.toml"
    p.write_text(GOOD.replace("pixel_size_um = 0.25", "pixel_size_um = []"), encoding="utf-8")
    code, out, err = run_cli("survey", str(p), "--out", str(tmp_path / "out"), "--quiet")
    assert code == 2
    assert "Traceback" not in err and err.strip().count("\n") == 0
    assert err.startswith("tracefit: error: job.toml, line 7: field 'defaults.pixel_size_um'")
    assert not (tmp_path / "out").exists()


def test_the_documented_example_is_a_valid_job():
    # docs/job-file.md's full example must stay in step with the reader.
    import re

    doc = (Path(__file__).resolve().parent.parent / "docs" / "job-file.md").read_text(encoding="utf-8")
    block = re.search(r"```toml\n(.*?)```", doc, re.S).group(1)
    job = parse_job(block, "/data/job.toml")
    assert [im.name for im in job.images] == ["coupon-A", "coupon-B", "coupon-C"]
    assert job.images[1].lattice == "bcc" and job.images[1].labels is not None
    assert job.images[2].load_sense == "compression" and job.images[0].load_sense == "tension"


def test_detect_and_match_options_must_be_known_keywords():
    ok = GOOD.replace("[[image]]", "detect = { min_bands = 4 }\nmatch = { p_none = 0.1 }\n\n[[image]]", 1)
    job = parse_job(ok, "/data/job.toml")
    assert job.images[0].detect == {"min_bands": 4} and job.images[1].match == {"p_none": 0.1}
    bad = GOOD.replace("[[image]]", "detect = { min_band = 4 }\n\n[[image]]", 1)
    msg = _err(bad)
    assert "defaults.detect.min_band" in msg and "min_bands" in msg
    assert f"line {_line_of(bad, 'detect = {')}" in msg
    reserved = GOOD.replace('euler_deg = [10, 20, 30]', 'euler_deg = [10, 20, 30]\nmatch = { lattice = "bcc" }')
    msg = _err(reserved)
    assert "image[1].match.lattice" in msg and "is an image setting" in msg


# Every detect/match setting is checked once, at the door, against the declared schema
# (tracefit.options): type and range, with the field and its line (common practice, no source).
@pytest.mark.parametrize("table,words", [
    ('detect = { min_bands = "three" }', ["detect.min_bands", "whole number"]),
    ("detect = { working_size = 0 }", ["detect.working_size", ">= 16"]),
    ("detect = { scales = [] }", ["detect.scales", "at least one"]),
    ("detect = { min_bands = 0 }", ["detect.min_bands", ">= 1"]),
    ("detect = { min_bands = -5 }", ["detect.min_bands", ">= 1"]),
    ("detect = { max_families = 0 }", ["detect.max_families", ">= 1"]),
    ("match = { p_none = 2.0 }", ["match.p_none", "[0, 1)"]),
    ("match = { orientation_sigma_deg = -1 }", ["match.orientation_sigma_deg", "[0, 45]"]),
    ("match = { allow_shared_planes = 1 }", ["match.allow_shared_planes", "true or false"]),
    ("match = { min_grain_px = 2.5 }", ["match.min_grain_px", "whole number"]),
])
def test_setting_tables_are_validated_with_their_line(table, words):
    bad = GOOD.replace("[[image]]", table + "\n\n[[image]]", 1)
    msg = _err(bad)
    for w in words:
        assert w in msg, msg
    assert f"line {_line_of(bad, table)}" in msg


def test_bad_setting_in_a_job_is_exit_2_with_one_line(tmp_path, run_cli):
    job = tmp_path / "job.toml"
    job.write_text(GOOD.replace("[[image]]", "match = { p_none = 2.0 }\n\n[[image]]", 1), encoding="utf-8")
    code, out, err = run_cli("survey", str(job), "--out", str(tmp_path / "out"))
    assert code == 2 and err.count("\n") == 1 and "p_none" in err and "Traceback" not in err
