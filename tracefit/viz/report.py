"""The survey report: one self-contained HTML file a failure analyst can hand on.

Everything is inside the file: figures are base64-embedded PNG, the style sheet is inline,
and there is no JavaScript and no external resource, so the report opens the same on any
machine, offline, years later. Per image it shows the labelled overlay, one candidate table
per band family (plane, mode, predicted angle, residual, probability, Schmid factor), the
stereogram(s), the rose diagram, the settings used and any warnings; at the top the tool
version, the conventions and the caution of :data:`tracefit.CAUTION`.
"""

from __future__ import annotations

import base64
import html
import json
import os
import time
from pathlib import Path
from typing import Protocol, Union

import tracefit
from tracefit.atomic import write_text
from tracefit.crystal.indices import restate_label
from tracefit.errors import TracefitInputError
from tracefit.viz.labels import direction_label, family_label, plane_label

class _ResultsLike(Protocol):
    """What the report needs of a survey result (e.g. tracefit.survey.SurveyResult): records and to_dict()."""

    records: list

    def to_dict(self) -> dict: ...


_Results = Union[_ResultsLike, dict, list]  # a survey result, its results.json content, or its image records
_PathLike = Union[str, os.PathLike]

__all__ = ["write_report", "render_report", "CONVENTIONS_SUMMARY"]

CONVENTIONS_SUMMARY = [
    "Image frame: x to the right, y up the screen; angles in degrees, counterclockwise from +x, "
    "axial (0 <= angle < 180). Pixel rows run downward.",
    "Sample frame: X = image right, Y = image up, Z = surface normal toward the viewer.",
    "Orientations: Bunge Euler angles (phi1, Phi, phi2) in degrees, passive; g maps sample to crystal "
    "coordinates, v_crystal = g v_sample.",
    "Trace of a plane with unit normal n on the surface: direction Z x n; inclination arccos(|n_z|) "
    "(90 deg = upright plane).",
    "Hexagonal lattices: Miller-Bravais indices (hkil); Cartesian setting x along a1, z along c.",
    "Frame rotation rho: v_image = Rz(rho) v_data, so predicted trace angles shift by +rho; flips act first.",
    "Stage tilt alpha about the image x axis: tan(apparent) = tan(true) cos(alpha).",
    "Schmid factor m = cos(phi) cos(lambda) for the load axis; slip reported as |m|; a twin counts only "
    "when sheared in its twinning sense.",
    "Stereograms: equal-angle (Wulff) projection of the upper hemisphere in the sample (= image) frame; "
    "a plane's great circle meets the rim at its trace angle.",
    "Probabilities are posterior probabilities over the candidate planes plus 'none of these', given the "
    "measured angle, its uncertainty and the orientation uncertainty.",
]

_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',Roboto,Helvetica,Arial,sans-serif;margin:0;color:#1b1b1b;background:#fff;line-height:1.4}
header{background:#17324d;color:#fff;padding:18px 28px}
header h1{margin:0 0 4px 0;font-size:22px}
header p{margin:2px 0;font-size:13px;color:#d7e3ef}
main{padding:10px 28px 40px 28px;max-width:1280px}
h2{border-bottom:2px solid #17324d;padding-bottom:3px;margin-top:28px;font-size:19px}
h3{font-size:15px;margin:16px 0 6px 0}
.caution{border-left:6px solid #d55e00;background:#fff4ec;padding:10px 14px;margin:16px 0;font-size:14px}
table{border-collapse:collapse;font-size:12.5px;margin:6px 0 12px 0}
th,td{border:1px solid #c9d2dc;padding:3px 7px;text-align:left;vertical-align:top}
th{background:#eef2f6}
td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.best td{background:#eaf6ee;font-weight:600}
.status-ok{color:#0a7a3a;font-weight:600}
.status-failed{color:#b00020;font-weight:600}
.verdict-unexplained{color:#b00020}
.verdict-ambiguous{color:#a15c00}
.figs{display:flex;flex-wrap:wrap;gap:14px;align-items:flex-start}
figure{margin:0}
figure img{max-width:100%;height:auto;border:1px solid #c9d2dc}
figure.overlay img{max-width:600px}
figure.stereo img{max-width:440px}
figure.rose img{max-width:340px}
figcaption{font-size:11.5px;color:#444;max-width:600px}
.error{background:#fdecee;border:1px solid #f1b0b9;padding:8px 12px;font-family:ui-monospace,monospace;font-size:12.5px;white-space:pre-wrap}
.notes{font-size:12px;color:#444}
section.image{border-top:1px solid #dde3e9;margin-top:22px}
code{font-family:ui-monospace,monospace;font-size:12px}
footer{border-top:1px solid #c9d2dc;margin-top:30px;padding-top:10px;font-size:12px;color:#444}
nav ul{columns:2;font-size:13px}
pre.jobtext{background:#f6f8fa;border:1px solid #c9d2dc;padding:8px;font-size:12px;overflow-x:auto}
"""


def _e(x) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def _num(x, nd=2) -> str:
    if x is None or x == "":
        return ""
    try:
        s = f"{float(x):.{nd}f}"
    except (TypeError, ValueError):
        return _e(x)
    return s[1:] if s.startswith("-") and float(s) == 0 else s  # no "-0.00"


def _plane(p) -> str:
    return plane_label(tuple(p)) if p is not None else ""


def _direction(d) -> str:
    return direction_label(d) if d else ""


# Embedded figures are sized for a screen, not for print: the full-resolution PNGs stay beside the
# report in images/, and the report links each one. A micrograph overlay is a photograph (JPEG);
# line drawings (stereograms, rose diagrams) stay PNG.
_EMBED_WIDTH_PX = {"overlay": 960, "stereo": 460, "rose": 420}


def _compact(data: bytes, cls: str) -> tuple[bytes, str]:
    """Figure bytes re-encoded for the report: (bytes, MIME type); the input itself when that is smaller."""
    import io

    from PIL import Image  # Pillow comes with matplotlib

    try:
        img = Image.open(io.BytesIO(data)).convert("RGB")
    except Exception:  # not an image Pillow reads: embed it as it is
        return data, "image/png"
    width = _EMBED_WIDTH_PX.get(cls, 640)
    if img.width > width:
        img = img.resize((width, max(1, round(img.height * width / img.width))), Image.LANCZOS)
    buf = io.BytesIO()
    if cls == "overlay":
        img.save(buf, "JPEG", quality=85, optimize=True)
        mime = "image/jpeg"
    else:  # line art: a 64-colour palette keeps every line and is a fraction of the size
        # zlib's default level: the same pixels, 3 % more bytes than optimize=True at a tenth of the time
        img.quantize(colors=64, method=Image.Quantize.MEDIANCUT).save(buf, "PNG")
        mime = "image/png"
    small = buf.getvalue()
    return (small, mime) if len(small) < len(data) else (data, "image/png")


def _img_tag(path: Path, alt: str, cls: str) -> str:
    try:
        data = path.read_bytes()
    except OSError:
        return f'<p class="error">figure {_e(path.name)} is missing</p>'
    small, mime = _compact(data, cls)
    b64 = base64.b64encode(small).decode("ascii")
    return (f'<a href="images/{_e(path.name)}" title="full resolution"><img class="{cls}" alt="{_e(alt)}" '
            f'src="data:{mime};base64,{b64}"></a>')


def _load_words(s: dict) -> str:
    """The image's load with the frame it is given in (Schmid factors in this report refer to it)."""
    frame = s.get("load_frame") or "image"
    if s.get("load_stress"):
        names = ("s11", "s22", "s33", "s23", "s13", "s12")
        parts = ", ".join(f"{n} = {v:g}" for n, v in zip(names, s["load_stress"]) if v) or "0"
        return f"stress {parts} MPa ({frame} frame)"
    if s.get("load"):
        return f"{s['load']} {s.get('load_sense', 'tension')} ({frame} frame)"
    return "none given"


def _settings_rows(s: dict) -> str:
    rows = []
    orient = ("Bunge Euler (deg): " + ", ".join(_num(x, 2) for x in s["euler_deg"])) if s.get("euler_deg") else (
        f"label image {Path(s['labels']).name} + table {Path(s['orientations']).name}" if s.get("labels") else "")
    items = [
        ("image file", Path(s["file"]).name if s.get("file") else ""),
        ("lattice", s.get("lattice", "") + (f", c/a = {s['c_over_a']:g}" if s.get("c_over_a") else "")),
        ("modes", ", ".join(s.get("modes") or [])),
        ("families", ", ".join(s.get("families") or []) or "all built-in"),
        ("orientation", orient),
        ("load", _load_words(s)),
        ("pixel size", f"{s['pixel_size_um']:g} um" if s.get("pixel_size_um") else "not given"),
        ("frame", ", ".join(f"{k} = {v}" for k, v in (s.get("frame") or {}).items()) or "defaults (no rotation, no flips, no tilt)"),
        ("detection options", ", ".join(f"{k} = {v}" for k, v in (s.get("detect") or {}).items()) or "defaults"),
        ("matching options", ", ".join(f"{k} = {v}" for k, v in (s.get("match") or {}).items()) or "defaults"),
        ("mask", Path(s["mask"]).name if s.get("mask") else "none"),
    ]
    for k, v in items:
        rows.append(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>")
    return "".join(rows)


def _verdict(ident: dict) -> str:
    if not ident or ident.get("unexplained") or not ident.get("candidates"):
        return '<span class="verdict-unexplained">unexplained by the candidates</span>'
    lab = _e(family_label(ident))
    if ident.get("ambiguous"):
        return f'<span class="verdict-ambiguous">{lab}</span>'
    return f"<strong>{lab}</strong>"


def _drive_head(cands: list) -> str:
    """Schmid factor, or resolved shear (MPa) when the load is a stress tensor."""
    shear = any((c.get("best_system") or {}).get("resolved_shear") is not None for c in cands)
    return "resolved shear (MPa) / CRSS" if shear else "Schmid factor"


def _drive(bs: dict) -> str:
    if bs.get("resolved_shear") is not None:
        text = _num(bs["resolved_shear"], 1)
        if bs.get("crss") is not None:
            text += f" / {_num(bs['crss'], 1)} ({'reached' if bs.get('exceeds_crss') else 'not reached'})"
        return _e(text)
    return _num(bs.get("schmid_factor"), 3)


def _mode_split(c: dict) -> str:
    """The candidate's mode, or the split between the modes on its plane ("slip 0.50 / twin 0.50")."""
    modes = c.get("modes") or []
    if len(modes) < 2:
        return c.get("mode") or ""
    return " / ".join(f"{m['mode']} {m['share']:.2f}" for m in modes)


def _candidate_table(rec: dict, fam: dict) -> str:
    ident = fam.get("identification") or {}
    cands = ident.get("candidates") or []
    fid = f"F{fam.get('index', '?')}"
    head = (
        "<tr><th>#</th><th>plane</th><th>family</th><th>mode (share)</th><th>predicted (deg)</th>"
        "<th>residual (deg)</th><th>probability</th><th>inclination (deg)</th><th>best system</th>"
        f"<th>{_drive_head(cands)}</th></tr>"
    )
    body = []
    for r, c in enumerate(cands, start=1):
        bs = c.get("best_system") or {}
        cls = ' class="best"' if r == 1 and not ident.get("unexplained") else ""
        body.append(
            f"<tr{cls}><td class=\"num\">{r}</td><td>{_e(_plane(c.get('plane')))}</td><td>{_e(restate_label(c.get('family')))}</td>"
            f"<td>{_e(_mode_split(c))}</td><td class=\"num\">{_num(c.get('predicted_deg'))}</td>"
            f"<td class=\"num\">{_num(c.get('residual_deg'))}</td><td class=\"num\">{_num(c.get('probability'), 3)}</td>"
            f"<td class=\"num\">{_num(c.get('inclination_deg'), 1)}</td><td>{_e(_direction(bs.get('direction')))}</td>"
            f"<td class=\"num\">{_drive(bs)}</td></tr>"
        )
    grain = "" if fam.get("grain") is None else f" in grain {_e(fam['grain'])}"
    spacing = f", mean spacing {_num(fam['spacing_um'], 2)} um" if fam.get("spacing_um") else (
        f", mean spacing {_num(fam['spacing_px'], 1)} px" if fam.get("spacing_px") else "")
    cap = (
        f"<h3>Family {fid}{grain}: bands at {_num(fam.get('angle_deg'))} deg "
        f"(&plusmn; {_num(fam.get('angle_sigma_deg'), 3)}), {_e(fam.get('n_bands'))} bands{spacing} "
        f"&rarr; {_verdict(ident)}</h3>"
    )
    pn = ident.get("p_none")
    extra = f'<p class="notes">Probability that none of the candidates made this family: {_num(pn, 3)}.</p>' if pn is not None else ""
    if fam.get("source") == "guided":
        extra += ('<p class="notes">Found by the search along this grain\'s predicted traces: its angle is measured '
                  "from its bands, but it was looked for within a few degrees of a predicted trace, so its agreement "
                  "with that trace is partly by construction and it does not test the orientation or frame; its "
                  "probability of being none of the candidates is weighed per trace searched.</p>")
    if ident.get("unexplained") and ident.get("nearest"):
        near = ", ".join(f"{_plane(n['plane'])} at {_num(n['predicted_deg'])} deg ({_num(n['n_sigma'], 1)} sigma)"
                         for n in ident["nearest"])
        extra += f'<p class="notes">Nearest predicted traces: {_e(near)}.</p>'
    hints = "".join(f"<li>{_e(h)}</li>" for h in (ident.get("separation") or []) + (ident.get("notes") or []))
    if hints:
        extra += f'<ul class="notes">{hints}</ul>'
    if not cands:
        table = (f'<table class="candidates" data-image="{_e(rec["name"])}" data-family="{fid}" data-rows="0">'
                 f"<thead>{head}</thead><tbody></tbody></table>"
                 '<p class="notes">No candidate above the reporting threshold.</p>')
    else:
        table = (f'<table class="candidates" data-image="{_e(rec["name"])}" data-family="{fid}" data-rows="{len(cands)}">'
                 f"<thead>{head}</thead><tbody>{''.join(body)}</tbody></table>")
    return cap + table + extra


def _image_header(rec: dict) -> list[str]:
    """Section heading, status line, notes and the settings table of one image."""
    name = rec["name"]
    out = [f'<section class="image" id="image-{_e(name)}">', f"<h2>Image {_e(name)}</h2>"]
    status = rec.get("status")
    out.append(f'<p>Status: <span class="status-{_e(status)}">{_e(status)}</span>'
               + (f" &middot; analysed in {_num(rec.get('elapsed_s'), 1)} s" if rec.get("elapsed_s") is not None else "")
               + (f" &middot; job file line {_e(rec.get('line'))}" if rec.get("line") else "") + "</p>")
    if rec.get("settings", {}).get("notes"):
        out.append(f'<p class="notes">{_e(rec["settings"]["notes"])}</p>')
    digests = "".join(f"<tr><th>SHA-256 of {_e(k if k != 'file' else 'image')}</th><td><code>{_e(v)}</code></td></tr>"
                      for k, v in (rec.get("inputs_sha256") or {}).items())
    out.append(f'<table class="settings" data-image="{_e(name)}">{_settings_rows(rec.get("settings") or {})}'
               f"{digests}</table>")
    return out


def _figures(rec: dict, img_dir: Path) -> str:
    """The image's overlay, stereogram(s) and rose diagram, embedded, with captions."""
    name = rec["name"]
    figs = rec.get("figures") or {}
    fams = rec.get("families") or []
    out = ['<div class="figs">']
    if figs.get("overlay"):
        out.append('<figure class="overlay">' + _img_tag(img_dir / figs["overlay"], f"{name}: overlay", "overlay")
                   + f"<figcaption>Detected band families drawn on the micrograph, each labelled with its identified "
                   f"plane (F1 ... F{len(fams)}; G = grain).</figcaption></figure>")
    if figs.get("grain_map"):
        out.append('<figure class="overlay">' + _img_tag(img_dir / figs["grain_map"], f"{name}: grain map", "overlay")
                   + "<figcaption>The orientation map's grains warped onto the micrograph (amber boundaries, grain "
                   "ids), with the control points (red crosses, residual in px) and where the fitted transform puts "
                   "them (green circles): check the registration here before trusting any plane.</figcaption></figure>")
    grs = rec.get("grains") or []
    with_families = {f.get("grain") for f in fams}
    for k, sname in enumerate(figs.get("stereograms") or []):
        gr = grs[k] if k < len(grs) else {}
        if gr.get("grain") not in with_families:
            continue  # a stereogram without observed traces says nothing about this image
        gtxt = f" of grain {gr['grain']}" if gr.get("grain") is not None else ""
        eul = (" (Bunge Euler " + ", ".join(_num(x, 1) for x in gr["euler_deg"]) + " deg)") if gr.get("euler_deg") else ""
        out.append('<figure class="stereo">' + _img_tag(img_dir / sname, f"{name}: stereogram {k + 1}", "stereo")
                   + f"<figcaption>Stereogram{_e(gtxt)}{_e(eul)}: every candidate plane as its great circle "
                   "(grey) and pole; matched planes in the colour of their family, with filled poles; observed "
                   "band traces dashed. Equal-angle (Wulff) projection, upper hemisphere, sample frame = image "
                   "frame.</figcaption></figure>")
    if figs.get("rose"):
        out.append('<figure class="rose">' + _img_tag(img_dir / figs["rose"], f"{name}: rose diagram", "rose")
                   + "<figcaption>Rose diagram of band angles (axial: 0-180 deg mirrored), weighted by the number of "
                   "bands.</figcaption></figure>")
    out.append("</div>")
    return "".join(out)


def _families_table(rec: dict) -> str:
    """One summary row per band family of the image: verdict, best probability and residual."""
    fams = rec.get("families") or []
    rows = []
    for fam in fams:
        ident = fam.get("identification") or {}
        cands = ident.get("candidates") or []
        b = cands[0] if cands else {}
        rows.append(
            f"<tr><td>F{_e(fam.get('index'))}{' (guided)' if fam.get('source') == 'guided' else ''}</td><td>{_e('' if fam.get('grain') is None else fam['grain'])}</td>"
            f"<td class=\"num\">{_num(fam.get('angle_deg'))}</td><td class=\"num\">{_e(fam.get('n_bands'))}</td>"
            f"<td>{_verdict(ident)}</td><td class=\"num\">{_num(b.get('probability'), 3)}</td>"
            f"<td class=\"num\">{_num(b.get('residual_deg'))}</td></tr>"
        )
    return (f'<h3>Families found: {len(fams)}</h3>'
            f'<table class="families" data-image="{_e(rec["name"])}" data-rows="{len(fams)}"><thead><tr><th>family</th>'
            "<th>grain</th><th>angle (deg)</th><th>bands</th><th>identified as</th><th>probability</th>"
            f"<th>residual (deg)</th></tr></thead><tbody>{''.join(rows)}</tbody></table>")


def _grains_table(rec: dict) -> str:
    """Every grain of a grain map: its size, the families found and, where none, why."""
    grs = [g for g in rec.get("grains") or [] if g.get("grain") is not None]
    if not grs:
        return ""
    rows = []
    for g in grs:
        n_fam = sum(1 for f in rec.get("families") or [] if f.get("grain") == g["grain"])
        rows.append(f"<tr><td>{_e(g['grain'])}</td><td class=\"num\">{_e(g.get('n_pixels'))}</td>"
                    f"<td class=\"num\">{n_fam}</td><td>{_e(g.get('status') or '')}</td><td>{_e(g.get('reason') or '')}</td></tr>")
    return (f'<details class="grains"><summary>Grains: {len(grs)}, with families: '
            f'{len({f.get("grain") for f in rec.get("families") or []})}</summary>'
            f'<table class="grains" data-image="{_e(rec["name"])}"><thead><tr><th>grain</th><th>pixels</th>'
            "<th>families</th><th>status</th><th>why none</th></tr></thead><tbody>"
            f"{''.join(rows)}</tbody></table></details>")


def _image_section(rec: dict, img_dir: Path) -> str:
    out = _image_header(rec)
    if rec.get("status") != "ok":
        out.append(f'<div class="error">This image was not analysed: {_e(rec.get("error"))}</div>')
        out.append("</section>")
        return "".join(out)
    if rec.get("warnings"):
        out.append('<ul class="notes">' + "".join(f"<li>warning: {_e(w)}</li>" for w in rec["warnings"]) + "</ul>")
    if rec.get("notes"):
        out.append('<details class="notes"><summary>Reading and detection notes</summary><ul>'
                   + "".join(f"<li>{_e(n)}</li>" for n in rec["notes"]) + "</ul></details>")
    out.append(_figures(rec, img_dir))
    out.append(_families_table(rec))
    out.append(_grains_table(rec))
    for fam in rec.get("families") or []:
        out.append(_candidate_table(rec, fam))
    out.append("</section>")
    return "".join(out)


_HOW_TO_READ = (
    '<p class="notes"><strong>How to read this report.</strong> For every family of parallel bands found '
    "in an image, tracefit lists the candidate planes whose predicted surface trace fits the measured "
    "angle, with the residual (measured minus predicted, degrees) and the probability of each, given the "
    "angle's uncertainty and the orientation's. <em>Identified</em>: one plane holds most of the "
    "probability. <em>Ambiguous</em>: a second plane holds at least a tenth of the best one's "
    "probability; other evidence is needed. <em>Unexplained</em>: \"none of these\" is the likeliest "
    "answer (a scratch, a wrong orientation or frame, or a system outside the chosen modes). The Schmid "
    "factor of the best system on a plane is given when the load is known.</p>")


def _as_payload(result) -> dict:
    if hasattr(result, "to_dict") and hasattr(result, "records"):
        return result.to_dict()
    if isinstance(result, dict):
        return result
    if isinstance(result, list):
        return {"images": result, "job": {}}
    raise TracefitInputError("result must be a SurveyResult, its to_dict(), or a list of image records, "
                             f"not {type(result).__name__}")


def _page_head(title: str, when: str, job: dict) -> list[str]:
    """Document head (inline style, no scripts), the page header and the caution box."""
    return [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        # no scripts and no external resources at all (a data: favicon stops a request for /favicon.ico)
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; style-src 'unsafe-inline'\">",
        '<link rel="icon" href="data:,">',
        f"<title>{_e(title)}: tracefit report</title><style>{_CSS}</style></head><body>",
        f"<header><h1>{_e(title)}</h1><p>Slip and twin trace survey &middot; tracefit {_e(tracefit.__version__)} "
        f"&middot; generated {_e(when)}</p>"
        + (f"<p>Job file: <code>{_e(Path(job['path']).name)}</code></p>" if job.get("path") else "")
        + "</header><main>",
        f'<div class="caution" id="caution"><strong>Caution.</strong> {_e(tracefit.CAUTION)}</div>',
    ]


def _summary_row(r: dict) -> str:
    """One image's summary row: status, family counts by verdict and its identified planes (or error)."""
    fams = r.get("families") or []
    idents = [f.get("identification") or {} for f in fams]
    n_id = sum(1 for i in idents if i.get("candidates") and not i.get("unexplained") and not i.get("ambiguous"))
    n_amb = sum(1 for i in idents if i.get("ambiguous"))
    n_un = len(fams) - n_id - n_amb
    planes = ", ".join(dict.fromkeys(
        _plane(i["candidates"][0]["plane"]) for i in idents if i.get("candidates") and not i.get("unexplained")))
    st = r.get("status")
    ok = st == "ok"
    counts = "".join(f"<td class=\"num\">{n if ok else ''}</td>" for n in (len(fams), n_id, n_amb, n_un))
    return (f'<tr><td><a href="#image-{_e(r["name"])}">{_e(r["name"])}</a></td><td class="status-{_e(st)}">{_e(st)}</td>'
            f"<td>{_e((r.get('settings') or {}).get('lattice', ''))}</td>{counts}"
            f"<td>{_e(planes) if ok else _e(r.get('error'))}</td></tr>")


def _summary(images: list) -> list[str]:
    n_ok = sum(r.get("status") == "ok" for r in images)
    return [
        f"<h2>Summary</h2><p>{len(images)} image(s): {n_ok} analysed, {len(images) - n_ok} failed.</p>",
        '<table class="summary" data-rows="%d"><thead><tr><th>image</th><th>status</th><th>lattice</th>'
        "<th>families</th><th>identified</th><th>ambiguous</th><th>unexplained</th>"
        "<th>planes / error</th></tr></thead><tbody>%s</tbody></table>" % (len(images), "".join(map(_summary_row, images))),
    ]


def _settings_and_conventions(d: dict, job: dict) -> list[str]:
    """Job defaults, the conventions, the software versions and the job file as run."""
    parts = ["<h2>Settings and conventions</h2>"]
    if job.get("defaults"):
        parts.append("<h3>Job defaults</h3><table class=\"defaults\">" + "".join(
            f"<tr><th>{_e(k)}</th><td><code>{_e(json.dumps(v))}</code></td></tr>" for k, v in job["defaults"].items())
            + "</table>")
    parts.append("<h3>Conventions</h3><ul>" + "".join(f"<li>{_e(c)}</li>" for c in CONVENTIONS_SUMMARY) + "</ul>")
    if d.get("run"):
        parts.append(_run_section(d["run"]))
    sw = d.get("software") or {}
    if sw:
        parts.append("<h3>Software</h3><table class=\"software\">"
                     + f"<tr><th>tracefit</th><td>{_e(d.get('tracefit_version', tracefit.__version__))}</td></tr>"
                     + "".join(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in sw.items()) + "</table>")
    if job.get("text"):
        parts.append("<details><summary>The job file as run</summary><pre class=\"jobtext\">"
                     f"{_e(job['text'])}</pre></details>")
    return parts


def _run_section(run: dict) -> str:
    """Where the survey ran: local processes, or a Dask scheduler with its worker count."""
    if run.get("where") == "dask":
        where = (f"Dask scheduler <code>{_e(run.get('scheduler'))}</code>"
                 + (" (a LocalCluster on this computer)" if run.get("local_cluster") else "")
                 + f", {_e(run.get('workers'))} worker(s), {_e(run.get('threads', '?'))} thread(s)")
    else:
        n = run.get("workers")
        where = "this process" if n == 1 else f"local processes, {_e(n)} worker(s)"
    rows = [("ran on", where), ("started", _e(run.get("started_utc", ""))),
            ("wall time", f"{float(run['wall_s']):.1f} s" if run.get("wall_s") is not None else ""),
            ("images run", _e(run.get("images_run", "")))]
    return ("<h3>Run</h3><table class=\"run\">" + "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows if v != "")
            + "</table>")


def _footer() -> str:
    return (
        f"<footer><p><strong>Caution.</strong> {_e(tracefit.CAUTION)}</p><p>Made with tracefit {_e(tracefit.__version__)}. "
        "Each image's full record (detection, every candidate, settings, input fingerprint) is in "
        "<code>results.json</code> beside this report; one row per family in <code>results.csv</code>.</p>"
        "</footer></main></body></html>"
    )


# An example record for the doctests: one image, one family identified as (1-11) slip.
_EXAMPLE = {"job": {"title": "Coupon X"}, "images": [{
    "name": "x1", "status": "ok", "settings": {"lattice": "fcc"},
    "families": [{"index": 1, "angle_deg": 45.0, "n_bands": 3, "identification": {
        "candidates": [{"plane": [1, -1, 1], "mode": "slip", "probability": 0.97, "residual_deg": 0.2}]}}]}]}


def render_report(result: _Results, img_dir: _PathLike, generated_utc: str | None = None) -> str:
    """The report HTML as a string (see :func:`write_report`).

    Parameters
    ----------
    result : SurveyResult, dict or list of dict
        A :class:`tracefit.survey.SurveyResult`, its ``to_dict()`` (the content of
        ``results.json``), or a list of per-image records.
    img_dir : str or Path
        Folder of the figure PNGs named in the records (they are embedded as base64).
    generated_utc : str, optional
        Time stamp printed in the header (default now, UTC).

    Returns
    -------
    str
        One self-contained HTML document.

    Raises
    ------
    TracefitInputError
        If ``result`` is none of the accepted forms.

    Examples
    --------
    >>> page = render_report(_EXAMPLE, ".", generated_utc="2024-01-01 00:00 UTC")
    >>> page.startswith("<!DOCTYPE html>"), "<strong>(1-11) slip</strong>" in page, "<script" in page
    (True, True, False)
    """
    d = _as_payload(result)
    img_dir = Path(img_dir)
    job = d.get("job") or {}
    images = d.get("images") or []
    title = job.get("title") or "tracefit survey"
    when = generated_utc or time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
    parts = _page_head(title, when, job)
    if job.get("notes"):
        parts.append(f"<p>{_e(job['notes'])}</p>")
    parts.append(_HOW_TO_READ)
    parts += _summary(images)
    parts += [_image_section(r, img_dir) for r in images]
    if d.get("statistics"):  # added by 'tracefit stats' (viz/stats_report.py)
        from tracefit.viz.stats_report import stats_section

        parts.append(stats_section(d["statistics"], img_dir.parent / "stats"))
    elif d.get("statistics_stale"):  # the survey ran again after 'tracefit stats'
        n = d["statistics_stale"]
        why = ("could not be read" if n == "unreadable" else
               f"were computed before {n} image(s) were analysed anew, so they are out of date")
        parts.append(f'<h2 id="statistics">Statistics over the grains</h2><p class="caution">The statistics in the '
                     f"folder <code>stats/</code> {why}; run <code>tracefit stats</code> on this folder again "
                     "to bring them and this section up to date.</p>")
    parts += _settings_and_conventions(d, job)
    parts.append(_footer())
    return "\n".join(parts)


def write_report(result: _Results, path: _PathLike, img_dir: _PathLike | None = None) -> Path:
    """Write the self-contained HTML report.

    Parameters
    ----------
    result : SurveyResult, dict or list of dict
        The survey's results, in any form :func:`render_report` takes.
    path : str or Path
        Output HTML file (written atomically).
    img_dir : str or Path, optional
        Folder of the figure PNGs named in the records; default ``images/`` beside ``path``.

    Returns
    -------
    Path
        The HTML file written, ``path``.

    Raises
    ------
    TracefitInputError
        As :func:`render_report`: ``result`` is not a SurveyResult, a dict or a list.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_report(_EXAMPLE, Path(d) / "report.html")
    ...     p.name, "Coupon X" in p.read_text(encoding="utf-8")
    ('report.html', True)
    """
    path = Path(path)
    img_dir = Path(img_dir) if img_dir is not None else path.parent / "images"
    return write_text(path, render_report(result, img_dir))
