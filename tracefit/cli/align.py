"""``tracefit align-frame``: fit the rotation (and mirror) between orientation data and the image."""

from __future__ import annotations

from pathlib import Path

import typer

from tracefit.cli import app
from tracefit.options import option
from tracefit.cli.common import (
    CoverAOpt,
    FamiliesOpt,
    FlipXOpt,
    FlipYOpt,
    FrameRotationOpt,
    HexSettingOpt,
    JsonOpt,
    LatticeOpt,
    ModesOpt,
    SystemsFileOpt,
    TiltAxisOpt,
    TiltOpt,
    build_frame,
    build_lattice,
    build_systems,
    cli_warnings,
    print_json,
)


@app.command("align-frame")
def align_frame(
    image: Path = typer.Argument(..., help="Micrograph of a grain map (PNG/TIFF/JPEG/BMP)."),
    grains: Path = typer.Option(..., "--grains", help="Grain label image (integer ids, same size as IMAGE)."),
    orientations: Path = typer.Option(..., "--orientations", help="Grain orientation CSV (docs/orientation-table.md)."),
    lattice: LatticeOpt = None,
    c_over_a: CoverAOpt = None,
    hex_setting: HexSettingOpt = "x-along-a1",
    systems_file: SystemsFileOpt = None,
    modes: ModesOpt = "slip,twin",
    families: FamiliesOpt = None,
    frame_rotation: FrameRotationOpt = 0.0,
    flip_x: FlipXOpt = False,
    flip_y: FlipYOpt = False,
    tilt: TiltOpt = 0.0,
    tilt_axis: TiltAxisOpt = "x",
    orientation_sigma: float = typer.Option(1.0, "--orientation-sigma", help="Orientation uncertainty per sample axis, degrees."),
    no_mirror: bool = typer.Option(False, "--no-mirror", help="Do not try the mirrored frame."),
    min_grain_px: int = typer.Option(option("min_grain_px").default, "--min-grain-px", help="Grains with fewer pixels are skipped."),
    json_out: JsonOpt = False,
) -> None:
    """Fit the frame rotation (and a mirror) from the band families of many grains.

    The given --frame-rotation/--flip-x/--flip-y are the frame assumed so far; the command says
    whether the traces agree with it, and if not, which rotation they prefer and how sure that is.
    """
    from tracefit.matching import fit_frame
    from tracefit.pipeline import observe_image
    from tracefit.maps import read_orientation_table

    with cli_warnings():
        lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        systems = build_systems(lat, file_systems, modes, families)
        frame = build_frame(frame_rotation, flip_x, flip_y, tilt, tilt_axis)
        table = read_orientation_table(orientations)
        obs, _, _, notes = observe_image(image, grains, table, None, min_grain_px)
        fit = fit_frame(obs, lat, {k: v.g for k, v in table.items()}, systems, frame=frame,
                        orientation_sigma_deg=orientation_sigma, fit_mirror=not no_mirror)
    if json_out:
        d = fit.to_dict()
        d["frame"] = fit.frame.to_dict()
        d["notes"] = notes
        print_json(d)
        return
    typer.echo(f"{fit.n_families} band families in {fit.n_grains} grains")
    typer.echo(
        f"best frame rotation {fit.rotation_deg:+.2f} +- {fit.rotation_sigma_deg:.2f} deg"
        + (", mirrored (flip x)" if fit.flip_x else "")
        + f" (given {fit.given_rotation_deg:+.2f} deg)"
    )
    typer.echo(f"explained families: {100 * fit.explained_given:.0f} % as given, {100 * fit.explained_fitted:.0f} % fitted; "
               f"RMS residual {fit.rms_residual_deg:.2f} deg")
    if not fit.warnings:
        typer.echo("the traces agree with the given frame")
    for w in fit.warnings:
        typer.echo(f"warning: {w}")
    typer.echo(f"use: --frame-rotation {fit.rotation_deg:.2f}" + (" --flip-x" if fit.flip_x else ""))
