"""``tracefit predict``: the surface traces a given orientation should show."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Optional

import typer

from tracefit.cli import app
from tracefit.cli.common import (
    check_output_file,
    AlignOpt,
    AxisAngleOpt,
    CompressionOpt,
    LoadFrameOpt,
    StressOpt,
    CoverAOpt,
    CrssOpt,
    EulerOpt,
    FamiliesOpt,
    FlipXOpt,
    FlipYOpt,
    FrameRotationOpt,
    HexSettingOpt,
    JsonOpt,
    LatticeOpt,
    LoadOpt,
    MatrixOpt,
    ModesOpt,
    QuaternionOpt,
    SystemsFileOpt,
    TiltAxisOpt,
    TiltOpt,
    build_frame,
    build_lattice,
    build_load,
    build_orientation,
    build_systems,
    cli_warnings,
    lattice_dict,
    parse_crss,
    print_json,
)
from tracefit.errors import TracefitInputError


@app.command("predict")
def predict(
    lattice: LatticeOpt = None,
    euler: EulerOpt = None,
    quaternion: QuaternionOpt = None,
    matrix: MatrixOpt = None,
    axis_angle: AxisAngleOpt = None,
    align: AlignOpt = None,
    c_over_a: CoverAOpt = None,
    hex_setting: HexSettingOpt = "x-along-a1",
    systems_file: SystemsFileOpt = None,
    modes: ModesOpt = "slip,twin",
    families: FamiliesOpt = None,
    load: LoadOpt = None,
    compression: CompressionOpt = False,
    load_frame: LoadFrameOpt = "image",
    stress: StressOpt = None,
    crss: CrssOpt = None,
    frame_rotation: FrameRotationOpt = 0.0,
    flip_x: FlipXOpt = False,
    flip_y: FlipYOpt = False,
    tilt: TiltOpt = 0.0,
    tilt_axis: TiltAxisOpt = "x",
    near_surface: float = typer.Option(5.0, "--near-surface", help="Planes inclined less than this (deg) to the surface leave no usable trace."),
    overlay: Optional[Path] = typer.Option(None, "--overlay", help="Draw the predicted traces on this picture (needs --out)."),
    canvas: Optional[str] = typer.Option(None, "--canvas", help="Draw on a blank canvas of WIDTHxHEIGHT pixels instead (needs --out)."),
    out: Optional[Path] = typer.Option(None, "--out", help="Drawing to write (PNG)."),
    orientation_sigma: float = typer.Option(1.0, "--orientation-sigma", help="Orientation uncertainty per sample axis, degrees (wedge width)."),
    wedge_k_sigma: float = typer.Option(2.0, "--wedge-k-sigma", help="Wedge half-width in sigmas of the predicted trace angle."),
    grains: Optional[Path] = typer.Option(None, "--grains", help="Grain label image of the --overlay picture: traces through each grain's centroid."),
    orientations: Optional[Path] = typer.Option(None, "--orientations", help="Grain orientation CSV (grain,phi1,Phi,phi2), with --grains."),
    json_out: JsonOpt = False,
) -> None:
    """Predicted trace angles (image frame, degrees ccw from the image's x axis) for one orientation.

    With --overlay IMAGE (or --canvas WxH) and --out OUT.png, also draws every predicted
    trace through the picture's centre (or each grain's centroid with --grains and
    --orientations), labelled with its plane, with a wedge of +- k sigma from the
    orientation uncertainty.
    """
    from tracefit.predict import predict_traces

    _check_drawing(overlay, canvas, out)
    if (grains is None) != (orientations is None) or (grains is not None and overlay is None):
        raise TracefitInputError("--grains and --orientations go together, with --overlay IMAGE: the picture's label image and its orientation table")
    if not (orientation_sigma >= 0):
        raise TracefitInputError("--orientation-sigma must be >= 0 degrees")
    if grains is not None:
        _predict_grains(lattice, c_over_a, hex_setting, systems_file, modes, families, (load, load_frame, stress), compression, crss,
                        frame_rotation, flip_x, flip_y, tilt, tilt_axis, near_surface, overlay, grains, orientations,
                        out, orientation_sigma, wedge_k_sigma, json_out)
        return
    with cli_warnings():
        lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        g, ori = build_orientation(lat, euler, quaternion, matrix, axis_angle, align)
        frame = build_frame(frame_rotation, flip_x, flip_y, tilt, tilt_axis)
        systems = build_systems(lat, file_systems, modes, families)
        ld = build_load(load, lat, compression, load_frame, stress)
        crss_map = parse_crss(crss, systems)
        if crss_map and ld is None:
            raise TracefitInputError("--crss gives activation stresses only with a load; add --load (e.g. --load z)")
        traces = predict_traces(lat, g, systems, frame=frame, load=ld, crss=crss_map, near_surface_deg=near_surface)
        if out is not None:
            _draw(traces, overlay, canvas, out, orientation_sigma, frame, wedge_k_sigma)
    if json_out:
        print_json(
            {
                "lattice": lattice_dict(lat),
                "orientation": ori,
                "frame": frame.to_dict(),
                "load": ld.to_dict() if ld is not None else None,
                "traces": [t.to_dict() for t in traces],
            }
        )
        return
    _print_table(lat, ori, frame, ld, traces, near_surface)


def _check_drawing(overlay, canvas, out) -> None:
    """Refuse an incomplete drawing request or an unwritable --out before any work."""
    if (overlay is not None or canvas is not None) != (out is not None):
        raise TracefitInputError("drawing needs a picture or canvas and a file: --overlay IMAGE --out OUT.png "
                                 "or --canvas WIDTHxHEIGHT --out OUT.png")
    if out is not None:
        check_output_file(out, "--out")
    if overlay is not None and canvas is not None:
        raise TracefitInputError("give --overlay IMAGE or --canvas WIDTHxHEIGHT, not both")


def _draw(traces, overlay, canvas, out, orientation_sigma, frame, k, labels=None) -> None:
    from tracefit.viz.overlay import draw_predicted, parse_canvas_size, write_overlay

    img, size = None, None
    if overlay is not None:
        from tracefit.image import read_image

        img, _ = read_image(overlay)
    else:
        size = parse_canvas_size(canvas)
    rgb = draw_predicted(traces, image=img, canvas_size=size, orientation_sigma_deg=orientation_sigma, frame=frame,
                         k_sigma=k, labels=labels)
    write_overlay(out, rgb)
    print(f"predicted-trace drawing written to {out}", file=sys.stderr)


def _predict_grains(lattice, c_over_a, hex_setting, systems_file, modes, families, load, compression, crss,
                    frame_rotation, flip_x, flip_y, tilt, tilt_axis, near_surface, overlay, grains, orientations,
                    out, orientation_sigma, k, json_out) -> None:
    """Per-grain prediction for the drawing: each grain's traces through its centroid."""
    load, load_frame, stress = load
    from tracefit.maps import read_label_image, read_orientation_table
    from tracefit.crystal import to_euler
    from tracefit.predict import predict_traces

    with cli_warnings():
        lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        frame = build_frame(frame_rotation, flip_x, flip_y, tilt, tilt_axis)
        systems = build_systems(lat, file_systems, modes, families)
        ld = build_load(load, lat, compression, load_frame, stress)
        crss_map = parse_crss(crss, systems)
        table = read_orientation_table(orientations)
        labels = read_label_image(grains)
        present = set(int(x) for x in set(labels.ravel().tolist()))
        ids = [k_ for k_ in sorted(table) if k_ in present]
        if not ids:
            raise TracefitInputError("no grain id of the orientation table occurs in the grain label image")
        per = {gid: predict_traces(lat, table[gid].g, systems, frame=frame, load=ld, crss=crss_map, near_surface_deg=near_surface)
               for gid in ids}
        _draw(per, overlay, None, out, orientation_sigma, frame, k, labels=labels)
    if json_out:
        print_json({"lattice": lattice_dict(lat), "frame": frame.to_dict(), "load": ld.to_dict() if ld is not None else None,
                    "grains": {str(gid): {"euler_deg": [float(x) for x in to_euler(table[gid].g)],
                                          "traces": [t.to_dict() for t in per[gid]]} for gid in ids}})
        return
    for gid in ids:
        typer.echo(f"grain {gid}")
        _print_table(lat, {"euler_deg": [float(x) for x in to_euler(table[gid].g)]}, frame, ld, per[gid], near_surface)


def _print_table(lat, ori, frame, ld, traces, near_surface) -> None:
    from tracefit.crystal import format_index, restate_label

    e = ori["euler_deg"]
    head = f"{lat.name}, Bunge Euler ({e[0]:.2f}, {e[1]:.2f}, {e[2]:.2f}) deg"
    if lat.is_hexagonal:
        head += f", c/a {lat.c_over_a:.4g}"
    parts = []
    if frame.rotation_deg:
        parts.append(f"frame rotation {frame.rotation_deg:g} deg")
    if frame.flip_x or frame.flip_y:
        parts.append("flipped " + "+".join(a for a, f in (("x", frame.flip_x), ("y", frame.flip_y)) if f))
    if frame.tilt_deg:
        parts.append(f"tilt {frame.tilt_deg:g} deg about image {frame.tilt_axis}")
    stress = ld is not None and ld.is_stress
    if stress:
        parts.append(f"stress {', '.join(f'{x:g}' for x in ld.to_dict()['voigt_mpa'])} MPa (Voigt, {ld.frame} frame)")
    elif ld is not None:
        parts.append(f"{ld.sense} along {ld.label}")
    typer.echo(head + ("; " + ", ".join(parts) if parts else ""))
    typer.echo("angles in the image frame, degrees counterclockwise from the image x axis (right)")
    with_m = ld is not None
    cols = f"{'angle':>7}  {'incl':>5}  {'plane':<12} {'family':<10} {'modes':<10}"
    with_sigma = with_m and any(s.activation_stress is not None for t in traces for s in t.systems)
    # A stress load ranks by resolved shear stress (MPa); an axis load by Schmid factor.
    cols += f" {'tau MPa' if stress else 'best m':>7}  best system" if with_m else "  systems"
    if with_sigma:
        cols += "  (activation stress)"
    typer.echo(cols)
    for t in traces:
        plane = format_index(t.plane, "plane")
        row = f"{t.angle_deg:7.2f}  {t.inclination_deg:5.1f}  {plane:<12} {restate_label(t.family):<10} {','.join(t.modes):<10}"
        if with_m:
            best = t.systems[0]
            value = best.resolved_shear if stress else best.schmid_factor
            row += (f" {value:7.3f}" if value is not None else f" {'-':>7}")
            row += f"  {format_index(best.direction, 'direction')} {best.mode}"
            if with_sigma and best.activation_stress is not None:
                row += f"  ({best.activation_stress:.4g})"
        else:
            row += "  " + " ".join(format_index(s.direction, "direction") for s in t.systems)
        if t.near_surface:
            row += "  (near the surface plane: no usable trace)"
        typer.echo(row)
    if frame.tilt_deg:
        typer.echo("angle = apparent angle under tilt; --json also gives true_angle_deg")
    if stress:
        typer.echo("tau: resolved shear stress on the system, MPa (twins signed: <= 0 cannot form the twin)")
    elif with_m:
        typer.echo("m: Schmid factor; slip |m|, twins signed (<= 0: this load cannot form the twin)")
