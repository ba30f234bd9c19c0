"""``tracefit identify``: which slip or twin system made each band family in a micrograph."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import List, Optional

import typer

from tracefit.cli import app
from tracefit.cli.common import (
    check_output_file,
    AlignOpt,
    AxisAngleOpt,
    CompressionOpt,
    CrssOpt,
    LoadFrameOpt,
    PriorOpt,
    StressOpt,
    parse_crss,
    parse_prior,
    CoverAOpt,
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
    parse_modes,
    print_json,
)
from tracefit.errors import TracefitInputError
from tracefit.options import option


# --angle / --crack values are typed as angles, so no pixel rows are involved (the CSV may hold endpoints)
TYPED_ANGLES = "degrees counterclockwise from the image's x axis, y up the screen; axial (0-180)"


def _default(name):
    return option(name).default


# Long only because typer declares every option as a parameter; the body parses, calls the
# library once and prints.
@app.command("identify")
def identify(
    image: Optional[Path] = typer.Argument(None, help="Micrograph (PNG/TIFF/JPEG/BMP); optional with --angle/--crack/--measured."),
    lattice: LatticeOpt = None,
    c_over_a: CoverAOpt = None,
    hex_setting: HexSettingOpt = "x-along-a1",
    systems_file: SystemsFileOpt = None,
    euler: EulerOpt = None,
    quaternion: QuaternionOpt = None,
    matrix: MatrixOpt = None,
    axis_angle: AxisAngleOpt = None,
    align: AlignOpt = None,
    grains: Optional[Path] = typer.Option(None, "--grains", help="Grain label image (integer ids, same size as IMAGE)."),
    orientations: Optional[Path] = typer.Option(
        None, "--orientations", help="Grain orientation CSV: grain,phi1,Phi,phi2 (docs/orientation-table.md)."
    ),
    orientation_map: Optional[Path] = typer.Option(
        None, "--orientation-map", help="Orientation map (.ang, .ctf, orix HDF5) registered onto IMAGE (docs/orientation-maps.md)."),
    control_points: Optional[Path] = typer.Option(
        None, "--control-points", help="CSV image_x,image_y,map_x,map_y for --orientation-map (at least 3 pairs)."),
    phase: Optional[str] = typer.Option(None, "--phase", help="Phase of the orientation map, by name or id."),
    grain_threshold: float = typer.Option(5.0, "--grain-threshold", help="Grain boundary misorientation in the map, degrees."),
    min_grain_points: Optional[int] = typer.Option(None, "--min-grain-points", help="Smallest grain of the map, in map points."),
    registration: str = typer.Option("affine", "--registration", help="Map-to-image transform: affine or projective."),
    modes: ModesOpt = "slip,twin",
    families: FamiliesOpt = None,
    load: LoadOpt = None,
    compression: CompressionOpt = False,
    load_frame: LoadFrameOpt = "image",
    stress: StressOpt = None,
    crss: CrssOpt = None,
    prior: PriorOpt = None,
    orientation_sigma: float = typer.Option(_default("orientation_sigma_deg"), "--orientation-sigma", help="Orientation uncertainty per sample axis, degrees; one error shared by a grain's families."),
    frame_sigma: float = typer.Option(_default("frame_sigma_deg"), "--frame-sigma", help="Uncertainty of the frame rotation, degrees."),
    frame_rotation: FrameRotationOpt = 0.0,
    flip_x: FlipXOpt = False,
    flip_y: FlipYOpt = False,
    tilt: TiltOpt = 0.0,
    tilt_axis: TiltAxisOpt = "x",
    p_none: float = typer.Option(_default("p_none"), "--p-none", help="Prior probability that a family matches no candidate (scratch, wrong data)."),
    schmid_weight: float = typer.Option(
        _default("schmid_weight"), "--schmid-weight", help="Weight planes by Schmid factor^k under --load (0 = off, 1 = mild)."
    ),
    allow_shared_planes: bool = typer.Option(_default("allow_shared_planes"), "--allow-shared-planes", help="Let two families of one grain take the same plane."),
    pixel_size: Optional[float] = typer.Option(None, "--pixel-size", help="Pixel size in micrometres (for band spacings)."),
    min_grain_px: int = typer.Option(_default("min_grain_px"), "--min-grain-px", help="Grains with fewer pixels are skipped."),
    overlay: Optional[Path] = typer.Option(None, "--overlay", help="Write the image with observed and identified traces (PNG)."),
    angle: Optional[List[str]] = typer.Option(
        None, "--angle", help="A hand-measured trace angle, deg ccw from image x: 37.5, 37.5+-0.5 or 37.5:0.5 (repeatable)."
    ),
    crack: Optional[List[str]] = typer.Option(
        None, "--crack", help="A measured crack trace angle, as --angle; reports the planes it is consistent with (repeatable)."
    ),
    measured: Optional[Path] = typer.Option(
        None, "--measured", help="CSV of hand-measured lines: angles or pixel endpoints (docs/measured-traces.md)."
    ),
    crack_k_sigma: float = typer.Option(_default("crack_k_sigma"), "--crack-k-sigma", help="A crack is consistent with a plane within this many sigma."),
    no_frame_check: bool = typer.Option(False, "--no-frame-check", help="Skip the automatic frame-alignment check on grain maps."),
    no_artefacts: bool = typer.Option(
        False, "--no-artefacts", help="On grain maps, skip the surface-artefact test (one image angle continuing across grains)."
    ),
    no_guided_search: bool = typer.Option(
        False, "--no-guided-search",
        help="Find families by the open search over every direction only, not also along each grain's predicted traces.",
    ),
    json_out: JsonOpt = False,
) -> None:
    """Identify the slip or twin system behind each band family, with probabilities.

    Every family gets its candidate planes (most probable first), a probability that no
    candidate explains it (scratch, wrong orientation, wrong frame), and a plain statement
    when several planes fit equally well. Without IMAGE, hand-measured traces (--angle,
    --crack, --measured) are identified the same way; cracks get the planes they are
    consistent with.
    """
    from tracefit.matching import is_crack, MEASURED_CONVENTION, parse_angle_option, read_measured_csv
    from tracefit.pipeline import analyse_image

    with cli_warnings():
        lat, file_systems = build_lattice(lattice, c_over_a, hex_setting, systems_file)
        systems = build_systems(lat, file_systems, modes, families)
        frame = build_frame(frame_rotation, flip_x, flip_y, tilt, tilt_axis)
        ld = build_load(load, lat, compression, load_frame, stress)
        m_notes: list = []
        m_obs = [parse_angle_option(t, notes=m_notes) for t in (angle or [])]
        m_obs += [parse_angle_option(t, label="crack", notes=m_notes, option="--crack") for t in (crack or [])]
        if measured is not None:
            m_obs += read_measured_csv(measured, notes=m_notes)
        for n in m_notes:
            print(f"tracefit: note: {n}", file=sys.stderr)
        if image is None and grains is not None:
            raise TracefitInputError("--grains is the label image of IMAGE; without IMAGE the grain ids come from the "
                                     "measured CSV's grain column (give --orientations only)")
        per_grain = grains is not None or orientations is not None
        one = any(v is not None for v in (euler, quaternion, matrix, axis_angle, align))
        if orientation_map is not None:
            if per_grain or one:
                raise TracefitInputError("--orientation-map replaces --euler/--grains/--orientations: give one source")
            if image is None:
                raise TracefitInputError("--orientation-map is registered onto IMAGE: give the micrograph too")
            per_grain = True  # the map's grains
        elif control_points is not None:
            raise TracefitInputError("--control-points goes with --orientation-map")
        if per_grain and one:
            raise TracefitInputError("give either one orientation (--euler ...) or --grains with --orientations, not both")
        if per_grain and image is not None and orientation_map is None and (grains is None or orientations is None):
            raise TracefitInputError("--grains and --orientations go together: a label image and its orientation table")
        if not per_grain and not one:
            raise TracefitInputError("no orientation: give --euler phi1,Phi,phi2 (or --quaternion, --matrix, --axis-angle, --align), "
                                     "or --grains LABELS --orientations TABLE.csv; without one, `tracefit detect` measures "
                                     "the bands and `tracefit find-orientation` searches orientations that fit them")
        if image is None and not m_obs:
            raise TracefitInputError("no image and no measured traces: give IMAGE, or --angle A[+-S], --crack A[+-S] "
                                     "or --measured FILE.csv")
        if image is None and overlay is not None:
            raise TracefitInputError("--overlay draws on IMAGE; without an image use tracefit predict --canvas WxH --out OUT.png")
        if overlay is not None:
            check_output_file(overlay, "--overlay")
        if per_grain and m_obs and any(o.grain is None for o in m_obs):
            raise TracefitInputError("with --orientations every measured trace needs a grain id (the CSV's grain column); "
                                     "--angle and --crack give none")
        extra = {}
        g = None
        if not per_grain:
            g, extra["orientation"] = build_orientation(lat, euler, quaternion, matrix, axis_angle, align)
        map_kw = {}
        if orientation_map is not None:
            ms = {"threshold_deg": grain_threshold, "registration": registration.strip().lower()}
            if phase is not None:
                ms["phase"] = int(phase) if phase.strip().lstrip("-").isdigit() else phase
            if min_grain_points is not None:
                ms["min_grain_points"] = min_grain_points
            map_kw = dict(orientation_map=orientation_map, control_points=control_points, map_settings=ms)
        res = analyse_image(image, lat, orientation=g, labels=grains, orientations=orientations, systems=systems,
                            **map_kw,
                            modes=parse_modes(modes), frame=frame, load=ld, pixel_size_um=pixel_size, measured=m_obs,
                            orientation_sigma_deg=orientation_sigma, frame_sigma_deg=frame_sigma, p_none=p_none,
                            schmid_weight=schmid_weight, allow_shared_planes=allow_shared_planes,
                            crack_k_sigma=crack_k_sigma, min_grain_px=min_grain_px, artefacts=not no_artefacts,
                            prior=parse_prior(prior), crss=parse_crss(crss, systems),
                            frame_check=not no_frame_check, guided_search=not no_guided_search)
        for w in res.warnings:
            hint = " (see tracefit align-frame)" if w.startswith("frame check:") else ""
            print(f"tracefit: warning: {w}{hint}", file=sys.stderr)
        if m_obs:
            extra["measured"] = {"convention": MEASURED_CONVENTION if measured is not None else TYPED_ANGLES,
                                 "n_families": len(m_obs),
                                 "n_cracks": sum(is_crack(o) for o in m_obs),
                                 "file": str(measured) if measured is not None else None}
        if any(is_crack(o) for o in m_obs):
            from tracefit import CAUTION

            extra["caution"] = CAUTION
        if overlay is not None:
            _write_overlay(overlay, res.image, res.families, res.labels)
    if json_out:
        d = res.to_dict()
        d["notes"] = list(d["notes"]) + m_notes
        d.update(extra)
        print_json(d)
        return
    _print_text(res.families, lat, ld)
    for gs in res.grains:  # every grain of a grain map says what happened to it
        if gs.grain is not None and gs.n_families == 0:
            typer.echo(f"grain {gs.grain} ({gs.n_pixels} px): {gs.status}" + (f": {gs.reason}" if gs.reason else ""))
    if "measured" in extra:
        typer.echo(f"measured traces read as: {extra['measured']['convention']}")
    if "caution" in extra:
        typer.echo(extra["caution"])


def _print_text(results, lat, ld) -> None:
    from tracefit.crystal import format_index, restate_label
    from tracefit.results import load_text

    if not results:
        typer.echo("no band families detected")
        return
    nc = sum(getattr(r, "consistent_planes", None) is not None for r in results)
    nb = len(results) - nc
    what = f"{nb} band famil{'y' if nb == 1 else 'ies'}" + (f", {nc} crack{'' if nc == 1 else 's'}" if nc else "")
    typer.echo(f"{what}; angles in degrees ccw from the image x axis")
    if ld is not None:
        typer.echo(f"load: {load_text(ld)} (Schmid factor m and resolved shear tau refer to it)")
    for r in results:
        where = f"grain {r.grain}, " if r.grain is not None else ""
        what = "crack" if getattr(r, "consistent_planes", None) is not None else "family"
        src = f" [measured{', ' + r.label if r.label and r.label != 'crack' else ''}]" if r.source == "measured" else (
            " [guided: found along a predicted trace]" if r.source == "guided" else "")
        head = f"{where}{what} at {r.angle_deg:.2f} +- {r.angle_sigma_deg:.2f} deg{src}"
        pa = getattr(r, "p_artefact", 0.0)
        if r.unexplained and pa > r.p_none and getattr(r, "artefact_angle_deg", None) is not None:
            head += f": UNEXPLAINED, {r.unexplained_reason} (p_artefact {pa:.2f}, p_none {r.p_none:.2f})"
        elif r.unexplained:
            head += f": UNEXPLAINED (p_none {r.p_none:.2f})"
        elif r.ambiguous:
            head += ": AMBIGUOUS"
        typer.echo(head)
        for c in r.candidates:
            bs = ""
            b = c.best_system
            if b is not None and b.schmid_factor is not None:
                bs = f"  best {format_index(b.direction, 'direction')} m={b.schmid_factor:.3f}"
            elif b is not None and getattr(b, "resolved_shear", None) is not None:
                bs = f"  best {format_index(b.direction, 'direction')} tau={b.resolved_shear:.1f} MPa"
                if getattr(b, "crss", None) is not None:
                    bs += f" ({'reaches' if b.exceeds_crss else 'below'} CRSS {b.crss:g})"
            split = getattr(c, "modes", None) or []
            modes = "" if len(split) < 2 else "  modes " + " / ".join(f"{m.mode} {m.share:.2f}" for m in split)
            typer.echo(
                f"   p={c.probability:5.3f}  {format_index(c.plane, 'plane'):<12} {restate_label(c.family):<8} {c.mode:<4} "
                f"predicted {c.predicted_deg:7.2f} (resid {c.residual_deg:+5.2f}, sigma {c.sigma_deg:4.2f}, incl {c.inclination_deg:4.1f}){bs}{modes}"
            )
        if what == "crack":
            k = r.k_sigma

            def _pl(q):
                flag = ", near surface" if q.near_surface else ""
                return f"{format_index(q.plane, 'plane')} {'/'.join(q.modes)} (resid {q.residual_deg:+.2f}, {k:g} sigma {k * q.sigma_deg:.2f}{flag})"

            cons = "; ".join(_pl(q) for q in r.consistent_planes) or "none"
            typer.echo(f"   crack consistent within {k:g} sigma with: {cons}")
            inc = ", ".join(format_index(q.plane, "plane") for q in r.inconsistent_planes) or "none"
            typer.echo(f"   not consistent with: {inc}")
        if r.unexplained and getattr(r, "nearest", None):
            near = ", ".join(f"{format_index(n['plane'], 'plane')} at {n['predicted_deg']:.2f} deg ({n['n_sigma']:.1f} sigma)"
                             for n in r.nearest)
            typer.echo(f"   nearest predicted traces: {near}")
        for h in r.separation:
            typer.echo(f"   - {h}")
        for n in r.notes:
            typer.echo(f"   note: {n}")


def _write_overlay(path: Path, img, results, labels) -> None:
    from tracefit.viz.overlay import draw_identified, write_overlay

    write_overlay(path, draw_identified(img, results, labels))
    print(f"overlay written to {path}", file=sys.stderr)
