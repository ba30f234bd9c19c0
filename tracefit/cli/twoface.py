"""``tracefit two-face``: plane normals from traces on two faces, indexed against the candidates."""

from __future__ import annotations

import re
from typing import List, Optional

import typer

from tracefit.cli import app
from tracefit.cli.common import (
    AlignOpt,
    AxisAngleOpt,
    CoverAOpt,
    EulerOpt,
    FamiliesOpt,
    FlipXOpt,
    FlipYOpt,
    FrameRotationOpt,
    HexSettingOpt,
    JsonOpt,
    LatticeOpt,
    MatrixOpt,
    ModesOpt,
    QuaternionOpt,
    SystemsFileOpt,
    build_frame,
    build_lattice,
    build_orientation,
    build_systems,
    cli_warnings,
    print_json,
)
from tracefit.errors import TracefitInputError


def _pair(text: str):
    m = re.fullmatch(r"\s*([-+]?\d+(?:\.\d*)?)\s*[:/]\s*([-+]?\d+(?:\.\d*)?)\s*", text)
    if not m:
        raise TracefitInputError(f"cannot read --pair {text!r}; expected FACE1_DEG:FACE2_DEG, e.g. 45:135")
    return float(m.group(1)), float(m.group(2))


@app.command("two-face")
def two_face(
    pair: List[str] = typer.Option(..., "--pair", help="Trace angles of one plane on face 1 and face 2, 'A1:A2' (deg); repeat for more planes."),
    edge_angle: float = typer.Option(0.0, "--edge-angle", help="Direction of the common edge in face 1's image, degrees."),
    dihedral: float = typer.Option(90.0, "--dihedral", help="Interior angle between the two faces, degrees."),
    sigma: float = typer.Option(0.5, "--sigma", help="Uncertainty of each measured angle, degrees."),
    lattice: LatticeOpt = None,
    c_over_a: CoverAOpt = None,
    hex_setting: HexSettingOpt = "x-along-a1",
    systems_file: SystemsFileOpt = None,
    euler: EulerOpt = None,
    quaternion: QuaternionOpt = None,
    matrix: MatrixOpt = None,
    axis_angle: AxisAngleOpt = None,
    align: AlignOpt = None,
    modes: ModesOpt = "slip,twin",
    families: FamiliesOpt = None,
    frame_rotation: FrameRotationOpt = 0.0,
    flip_x: FlipXOpt = False,
    flip_y: FlipYOpt = False,
    orientation_sigma: float = typer.Option(1.0, "--orientation-sigma", help="Orientation uncertainty, degrees."),
    json_out: JsonOpt = False,
) -> None:
    """Plane normals from traces on two faces that share an edge.

    Face 2 lies to the right of the edge direction as seen on face 1; its angles are read in
    its own view, x along the edge (docs: tracefit.matching.twoface).

    With an orientation the normal is indexed against the candidate planes; without one, the
    angle between two measured normals is compared with the lattice's interplanar angles.
    """
    from tracefit.matching import FaceGeometry, index_two_face, interplanar_pairs

    with cli_warnings():
        pairs = [_pair(p) + (sigma,) for p in pair]
        geom = FaceGeometry(float(edge_angle), float(dihedral))
        lat, file_systems = (None, None)
        if lattice is not None or systems_file is not None:
            lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        has_ori = any(v is not None for v in (euler, quaternion, matrix, axis_angle, align))
        g, systems, ori = None, None, None
        if has_ori:
            if lat is None:
                raise TracefitInputError("indexing against an orientation needs --lattice")
            g, ori = build_orientation(lat, euler, quaternion, matrix, axis_angle, align)
            systems = build_systems(lat, file_systems, modes, families)
        frame = build_frame(frame_rotation, flip_x, flip_y)
        res = index_two_face(pairs, geom, lat, g, systems, frame=frame, orientation_sigma_deg=orientation_sigma, sigma_deg=sigma)
        inter = None
        if not has_ori and lat is not None and len(res) >= 2:
            from tracefit.crystal import catalogue

            # one representative per family name
            reps, seen = [], set()
            for s in catalogue(lat):
                if s.family not in seen:
                    seen.add(s.family)
                    reps.append(tuple(int(x) for x in s.plane))
            meas, rows = interplanar_pairs([res[0].normal_sample, res[1].normal_sample], lat, reps, tol_deg=max(2.0, 3 * sigma))
            inter = {"measured_deg": meas, "matches": [{"family_a": list(a), "family_b": list(b), "plane_a": list(pa), "plane_b": list(pb), "angle_deg": round(ang, 3)} for a, b, pa, pb, ang in rows]}
    if json_out:
        print_json({"geometry": {"edge_angle_deg": geom.edge_angle_deg, "dihedral_deg": geom.dihedral_deg},
                    "orientation": ori, "planes": [r.to_dict() for r in res], "interplanar": inter})
        return
    for r in res:
        n = r.normal_sample
        typer.echo(f"traces {r.face1_deg:.2f} / {r.face2_deg:.2f} deg -> normal ({n[0]:+.4f}, {n[1]:+.4f}, {n[2]:+.4f}) "
                   f"+- {r.sigma_deg:.2f} deg, inclination {r.inclination_deg:.1f} deg to face 1")
        for m in r.matches:
            typer.echo(f"   p={m.probability:5.3f}  ({' '.join(str(int(x)) for x in m.plane)}) {m.family} {m.mode}, {m.angle_deg:.2f} deg away")
        if r.unexplained:
            typer.echo(f"   UNEXPLAINED (p_none {r.p_none:.2f})")
        for note in r.notes:
            typer.echo(f"   note: {note}")
    if inter is not None:
        typer.echo(f"angle between the first two normals: {inter['measured_deg']:.2f} deg")
        for m in inter["matches"][:5]:
            typer.echo(f"   fits {tuple(m['family_a'])} / {tuple(m['family_b'])} at {m['angle_deg']:.2f} deg")
