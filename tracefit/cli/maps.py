"""``tracefit map-grains MAP``: summarise an orientation map, find its grains, check the registration.

Nothing is identified: the command prints the map's size, step, phases and the grains found,
and, given the micrograph, registers the map onto it and writes the check figure (the picture
with the warped grain boundaries drawn over it), and optionally the warped label image and an
orientation table for the label-image route.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Optional

import typer

from tracefit.cli import app
from tracefit.cli.common import JsonOpt, cli_warnings, print_json


def _err(msg: str) -> None:
    print(msg, file=sys.stderr)


def _grain_rows(gm) -> list[dict]:
    rows = []
    for gid, go in sorted(gm.table.items()):
        rows.append({"grain": gid, "euler_deg": [round(v, 3) for v in go.euler_deg], "spread_deg": round(go.sigma_deg, 3),
                     "map_points": go.extra["map_points"], "image_px": go.extra["image_px"],
                     "grain_x_px": round(go.extra["grain_x_px"], 1), "grain_y_px": round(go.extra["grain_y_px"], 1)})
    return rows


def _print_summary(s: dict, rows: list[dict], residuals) -> None:
    unit = s["scan_unit"]
    print(f"orientation map {s['file']}: {s['cols']} x {s['rows']} points, step {s['step_x']:g} x {s['step_y']:g} {unit}")
    for pid, ph in s["phases"].items():
        print(f"  phase {pid} {ph['name']!r}: {ph['points']} indexed points")
    print(f"phase used: {s['phase']!r} (Laue class {s['laue']}), {s['indexed_points']} indexed points")
    print(f"grains found: {s['grains_found']}")
    if s.get("registration"):
        print(f"registration: {s['registration']}" + (f"; residuals px: {' '.join(f'{r:.2f}' for r in residuals)}"
                                                       if len(residuals) else ""))
        print(f"grains in the micrograph: {s['grains_in_image']}")
    if rows:
        print(f"{'grain':>5}  {'phi1':>8} {'Phi':>8} {'phi2':>8}  {'spread deg':>10}  {'points':>6}  {'px':>8}  {'x px':>7}  {'y px':>7}")
        for r in rows:
            e = r["euler_deg"]
            print(f"{r['grain']:>5}  {e[0]:>8.2f} {e[1]:>8.2f} {e[2]:>8.2f}  {r['spread_deg']:>10.2f}  {r['map_points']:>6}  "
                  f"{r['image_px']:>8}  {r['grain_x_px']:>7.1f}  {r['grain_y_px']:>7.1f}")


def _map_only(map_path, phase, threshold, min_points):
    """Summary and grains of the map alone (no micrograph): segmentation on the map grid."""
    from tracefit.maps import read_orientation_map, segment_grains

    omap = read_orientation_map(map_path, phase)
    seg = segment_grains(omap.quaternions, omap.valid, omap.lattice, threshold, min_points)
    s = omap.summary()
    s.update(grains_found=seg.n_grains, registration=None)
    return s, omap.warnings


# Long only because typer declares every option as a parameter; the body calls the library and prints.
@app.command("map-grains")
def map_grains_command(
    orientation_map: str = typer.Argument(..., help="Orientation map: .ang, .ctf or orix HDF5 (.h5, .hdf5)."),
    image: Optional[str] = typer.Option(None, "--image", help="The micrograph the map belongs to (registration and check figure)."),
    control_points: Optional[str] = typer.Option(None, "--control-points", help="CSV with columns image_x,image_y,map_x,map_y (pixel column and row, rows down)."),
    phase: Optional[str] = typer.Option(None, "--phase", help="Phase name or id (default: the most frequent)."),
    grain_threshold_deg: float = typer.Option(5.0, "--grain-threshold-deg", help="Grain boundary misorientation, degrees."),
    min_grain_points: int = typer.Option(10, "--min-grain-points", help="Smallest grain kept, in map points."),
    registration: str = typer.Option("affine", "--registration", help="affine (3+ points) or projective (4+ points)."),
    figure: Optional[str] = typer.Option(None, "--figure", help="Check figure PNG (default MAPNAME_registration.png here, with --image)."),
    labels_out: Optional[str] = typer.Option(None, "--labels-out", help="Write the warped grain ids as a 32-bit TIFF (-1 outside)."),
    table_out: Optional[str] = typer.Option(None, "--table-out", help="Write the grains' orientation table (CSV, with sigma_deg)."),
    json_out: JsonOpt = False,
) -> None:
    """Summarise an orientation map and its grains; with --image, register it and write the check figure.

    Identifies nothing. Without --control-points the map is stretched over the whole image (with a warning).
    """
    from tracefit.errors import TracefitInputError

    if image is None and (control_points or labels_out or table_out or figure):
        raise TracefitInputError("--control-points, --figure, --labels-out and --table-out need the micrograph (--image)")
    with cli_warnings():
        if image is None:
            s, warns = _map_only(orientation_map, phase, grain_threshold_deg, min_grain_points)
            rows, residuals, notes = [], [], []
        else:
            from tracefit.image import read_image
            from tracefit.maps import grain_map_from_orientation_map
            from tracefit.viz import write_registration_figure

            gray, _ = read_image(image)
            gm = grain_map_from_orientation_map(orientation_map, gray.shape, control_points, phase, grain_threshold_deg,
                                                min_grain_points, registration)
            s, rows, residuals, notes, warns = gm.summary(), _grain_rows(gm), gm.residuals_px.tolist(), gm.notes, gm.warnings
            fig_path = Path(figure) if figure else Path(f"{Path(orientation_map).stem}_registration.png")
            write_registration_figure(fig_path, gray, gm)
            _err(f"check figure written to {fig_path}")
            _write_outputs(gm, labels_out, table_out)
    for w in warns:
        _err(f"tracefit: warning: {w}")
    for n in notes:
        _err(f"note: {n}")
    if json_out:
        print_json({"map": s, "grains": rows, "residuals_px": residuals, "notes": notes, "warnings": warns})
        return
    _print_summary(s, rows, residuals)


def _write_outputs(gm, labels_out: str | None, table_out: str | None) -> None:
    """The label-image route's two files: warped grain ids (TIFF) and the orientation table (CSV)."""
    import numpy as np

    from tracefit.maps import write_orientation_table

    if labels_out:
        import tifffile

        tifffile.imwrite(labels_out, gm.labels.astype(np.int32))
        _err(f"grain label image written to {labels_out}")
    if table_out:
        write_orientation_table(table_out, {k: v.g for k, v in gm.table.items()}, phase=None,
                                sigma_deg={k: v.sigma_deg for k, v in gm.table.items()})
        _err(f"orientation table written to {table_out}")
