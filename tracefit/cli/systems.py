"""``tracefit systems``: list a lattice's slip and twin systems, with Schmid factors under a load."""

from __future__ import annotations

import typer

from tracefit.cli import app
from tracefit.cli.common import (
    AlignOpt,
    AxisAngleOpt,
    CompressionOpt,
    LoadFrameOpt,
    StressOpt,
    CoverAOpt,
    EulerOpt,
    FamiliesOpt,
    HexSettingOpt,
    JsonOpt,
    LatticeOpt,
    LoadOpt,
    MatrixOpt,
    ModesOpt,
    QuaternionOpt,
    SystemsFileOpt,
    build_lattice,
    build_load,
    build_orientation,
    build_systems,
    cli_warnings,
    lattice_dict,
    print_json,
)


# Long only because typer declares every option as a parameter; the body parses, calls the
# library once and prints.
@app.command("systems")
def systems_command(
    lattice: LatticeOpt = None,
    c_over_a: CoverAOpt = None,
    hex_setting: HexSettingOpt = "x-along-a1",
    systems_file: SystemsFileOpt = None,
    modes: ModesOpt = "slip,twin",
    families: FamiliesOpt = None,
    load: LoadOpt = None,
    compression: CompressionOpt = False,
    load_frame: LoadFrameOpt = "image",
    stress: StressOpt = None,
    euler: EulerOpt = None,
    quaternion: QuaternionOpt = None,
    matrix: MatrixOpt = None,
    axis_angle: AxisAngleOpt = None,
    align: AlignOpt = None,
    json_out: JsonOpt = False,
) -> None:
    """The slip and twin systems of a lattice; with --load, Schmid factors, best first.

    A crystal-direction load ([110]) needs no orientation; a sample-axis load (x, 1,0,0) needs one (--euler, --align, ...).
    """
    from tracefit.crystal import restate_label
    from tracefit.predict import system_schmid_factors

    with cli_warnings():
        lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        systems = build_systems(lat, file_systems, modes, families)
        ld = build_load(load, lat, compression, load_frame, stress)
        g, ori = None, None
        if any(v is not None for v in (euler, quaternion, matrix, axis_angle, align)):
            g, ori = build_orientation(lat, euler, quaternion, matrix, axis_angle, align)
        if ld is not None and ld.frame != "crystal" and g is None:
            from tracefit.errors import TracefitInputError

            raise TracefitInputError(
                f"the load {ld.label!r} is a sample axis: give the orientation too (--euler p1,P,p2), or a crystal direction such as [001]"
            )
        m = system_schmid_factors(ld, g, systems, None) if ld is not None else None  # no frame options here: identity
    rows = []
    for i, s in enumerate(systems):
        r = {
            "name": s.name,
            "mode": s.mode,
            "family": restate_label(s.family),
            "direction_family": restate_label(s.direction_family),
            "plane": [int(x) for x in s.plane],
            "direction": [int(x) for x in s.direction],
            "plane_label": s.plane_label,
            "direction_label": s.direction_label,
            "shear": s.shear,
        }
        if m is not None:
            r["schmid_factor"] = float(m[i])
        rows.append(r)
    if m is not None:
        rows.sort(key=lambda r: -r["schmid_factor"])  # stable: catalogue order among ties
    if json_out:
        print_json(
            {
                "lattice": lattice_dict(lat),
                "load": ld.to_dict() if ld is not None else None,
                "orientation": ori,
                "systems": rows,
            }
        )
        return
    head = f"{len(rows)} systems of {lat.name}" + (f" (c/a {lat.c_over_a:.4g})" if lat.is_hexagonal else "")
    if ld is not None:
        head += f"; Schmid factors for {ld.sense} along {ld.label}"
        if ori is not None:
            e = ori["euler_deg"]
            head += f", Bunge Euler ({e[0]:.2f}, {e[1]:.2f}, {e[2]:.2f}) deg"
    typer.echo(head)
    w = max(len(r["name"]) for r in rows)
    cols = f"{'system':<{w}}  {'mode':<4}  {'plane':<12} {'direction':<14} {'shear':>6}"
    if m is not None:
        cols += f"  {'m':>7}"
    typer.echo(cols)
    for r in rows:
        shear = f"{r['shear']:6.3f}" if r["shear"] is not None else f"{'-':>6}"
        line = f"{r['name']:<{w}}  {r['mode']:<4}  {r['plane_label']:<12} {r['direction_label']:<14} {shear}"
        if m is not None:
            line += f"  {r['schmid_factor']:7.3f}"
        typer.echo(line)
    if m is not None:
        typer.echo("m: Schmid factor; slip |m|, twins signed (<= 0: this load cannot form the twin)")
