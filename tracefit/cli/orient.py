"""``tracefit find-orientation``: orientations consistent with two or more band families."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer

from tracefit.cli import app
from tracefit.cli.common import (
    CoverAOpt,
    FamiliesOpt,
    FlipXOpt,
    FlipYOpt,
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
from tracefit.errors import TracefitInputError


# Long only because typer declares every option as a parameter; the body parses, calls the
# library once and prints.
@app.command("find-orientation")
def find_orientation(
    image: Optional[Path] = typer.Argument(None, help="Micrograph of one grain (optional if --angle is given)."),
    angle: List[float] = typer.Option([], "--angle", help="A measured family angle (deg, image frame); repeat."),
    sigma: float = typer.Option(0.5, "--sigma", help="Uncertainty of the --angle values, degrees."),
    lattice: LatticeOpt = None,
    c_over_a: CoverAOpt = None,
    hex_setting: HexSettingOpt = "x-along-a1",
    systems_file: SystemsFileOpt = None,
    modes: ModesOpt = "slip",
    families: FamiliesOpt = None,
    direction: Optional[str] = typer.Option(None, "--direction", help="Crystal direction known to lie along --axis, e.g. '[001]'."),
    axis: str = typer.Option("x", "--axis", help="Sample axis of --direction: x, y, z or a vector 1,0,0."),
    direction_tol: float = typer.Option(3.0, "--direction-tol", help="Allowed deviation of the known direction, degrees."),
    flip_x: FlipXOpt = False,
    flip_y: FlipYOpt = False,
    tilt: TiltOpt = 0.0,
    tilt_axis: TiltAxisOpt = "x",
    samples: int = typer.Option(40000, "--samples", help="Coarse orientations tried (more = slower, safer)."),
    seed: int = typer.Option(0, "--seed", help="Random seed of the coarse search."),
    json_out: JsonOpt = False,
) -> None:
    """Crystal orientations (up to symmetry) whose traces explain the band families.

    Two families alone leave a one-parameter family of orientations; a third family or a
    known direction (e.g. a single crystal's growth axis) makes the answer discrete.
    """
    from tracefit.matching import ObservedFamily
    from tracefit.matching import search_orientations
    from tracefit.crystal import parse_vector

    with cli_warnings():
        lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        systems = build_systems(lat, file_systems, modes, families)
        frame = build_frame(0.0, flip_x, flip_y, tilt, tilt_axis)
        if sigma <= 0:
            raise TracefitInputError("--sigma must be a positive number of degrees")
        obs = [ObservedFamily(a, sigma, source="measured", label=f"A{k + 1}") for k, a in enumerate(angle)]
        notes = []
        if image is not None:
            from tracefit.pipeline import observe_image

            det, _, _, notes = observe_image(image)
            obs = det + obs
        if len(obs) < 2:
            raise TracefitInputError(f"need at least two band families (from IMAGE or --angle), got {len(obs)}")
        kd = ka = None
        if direction is not None:
            from tracefit.crystal import parse_index

            idx = parse_index(direction, lat, expect="direction")
            if idx.family:
                raise TracefitInputError(f"--direction needs one direction in square brackets, not the family {direction}")
            kd = idx.values
            a = axis.strip().lower()
            ka = {"x": (1, 0, 0), "y": (0, 1, 0), "z": (0, 0, 1), "-x": (-1, 0, 0), "-y": (0, -1, 0), "-z": (0, 0, -1)}.get(a)
            if ka is None:
                ka = tuple(parse_vector(axis, "sample axis"))
        res = search_orientations(obs, lat, systems, frame=frame, known_direction=kd, known_axis=ka,
                                  direction_tol_deg=direction_tol, n_samples=samples, seed=seed)
    if json_out:
        d = res.to_dict()
        d["families"] = [{"angle_deg": o.angle_deg, "angle_sigma_deg": o.angle_sigma_deg, "source": o.source} for o in obs]
        d["notes"] = list(d["notes"]) + list(notes)
        print_json(d)
        return
    typer.echo(f"{len(obs)} families: " + ", ".join(f"{o.angle_deg:.2f}" for o in obs) + " deg")
    for k, c in enumerate(res.candidates, 1):
        e = c.euler_deg
        p = c.partner_euler_deg
        line = (f"{k}. Euler ({e[0]:.2f}, {e[1]:.2f}, {e[2]:.2f})  [or ({p[0]:.2f}, {p[1]:.2f}, {p[2]:.2f})]  "
                f"rms {c.rms_residual_deg:.2f} deg, {c.n_explained}/{len(obs)} explained")
        u = c.uncertainty_deg
        line += ", orientation +- " + (f"{u:.1f} deg" if u == u and u != float("inf") else "unbounded")
        if c.constraint_deviation_deg is not None:
            line += f", known direction off by {c.constraint_deviation_deg:.2f} deg"
        typer.echo(line)
        for a in c.assignment:
            pl = "none" if a["plane"] is None else "(" + " ".join(str(int(x)) for x in a["plane"]) + ") " + a["mode"]
            typer.echo(f"     {a['angle_deg']:7.2f} -> {pl}")
    for n in res.notes:
        typer.echo(f"note: {n}")
