"""``tracefit detect IMAGE``: find families of parallel bands in a micrograph."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import Optional

import typer

from tracefit.cli import app
from tracefit.cli.common import check_output_file
from tracefit.errors import TracefitInputError
from tracefit.options import option


def _setting(name: str, flag: str, **kw):
    """A detector setting as a typer option: default and meaning from tracefit.options."""
    o = option(name)
    return typer.Option(o.default, flag, help=o.help[0].upper() + o.help[1:] + ".", **kw)


def _err(msg: str) -> None:
    print(msg, file=sys.stderr)


@app.command("detect")
def detect_command(
    image: str = typer.Argument(..., help="Micrograph: PNG, TIFF (8/16-bit, first page), JPEG or BMP."),
    pixel_size: Optional[float] = typer.Option(None, "--pixel-size", help="Pixel size in micrometres per pixel (spacings in um)."),
    mask: Optional[str] = typer.Option(None, "--mask", help="Binary mask image of the same size: non-zero pixels are analysed."),
    overlay: Optional[str] = typer.Option(None, "--overlay", help="Write the image with the detected bands drawn (PNG)."),
    as_json: bool = typer.Option(False, "--json", help="Print one JSON object on stdout."),
    min_depth: float = _setting("min_depth", "--min-depth"),
    min_bands: int = _setting("min_bands", "--min-bands"),
    max_families: int = _setting("max_families", "--max-families"),
    min_coverage: float = _setting("min_coverage", "--min-coverage"),
    working_size: int = _setting("working_size", "--working-size"),
    min_significance: float = _setting("min_significance", "--min-significance"),
    oversampling: int = _setting("oversampling", "--oversampling"),
    scales: str = typer.Option(",".join(f"{s:g}" for s in option("scales").default), "--scales",
                               help="Ridge-filter scales at working resolution, px, comma separated."),
    find_bar: bool = typer.Option(True, "--find-bar/--no-find-bar",
                                  help="Look for an instrument data bar and leave it out."),
) -> None:
    """Detect families of parallel straight bands (slip or twin traces) in IMAGE.

    Angles are image frame: degrees counterclockwise from the image's +x (right),
    axial 0-180. A data bar is found and left out on its own.
    """
    from tracefit.image import detect_bands
    from tracefit.image import read_image, read_mask
    from tracefit.options import OptionError, check_options

    try:
        scale_list = [float(s) for s in scales.split(",") if s.strip()]
    except ValueError:
        raise TracefitInputError(f"--scales {scales!r}: expected numbers separated by commas, e.g. 1,1.7,2.8") from None
    try:
        settings = check_options(dict(min_depth=min_depth, min_bands=min_bands, max_families=max_families,
                                      min_coverage=min_coverage, working_size=working_size, scales=scale_list,
                                      find_bar=find_bar, min_significance=min_significance,
                                      oversampling=oversampling), "detect")
    except OptionError as exc:  # the same names as the API, spelt as flags here
        raise TracefitInputError(str(exc).replace(exc.name, "--" + exc.name.replace("_", "-"), 1)) from None

    if pixel_size is not None and not (pixel_size > 0 and math.isfinite(pixel_size)):
        raise TracefitInputError(f"--pixel-size {pixel_size!r}: expected a positive number of micrometres per pixel")
    if overlay:
        check_output_file(overlay, "--overlay")
    gray, notes = read_image(image)
    m = read_mask(mask, gray.shape) if mask else None
    lo, hi = float(gray.min()), float(gray.max())
    if hi <= lo:
        raise TracefitInputError(f"{image}: the image is constant (every pixel = {lo:g}); expected a micrograph with contrast")
    _err(f"tracefit detect: {Path(image).name}: {gray.shape[1]} x {gray.shape[0]} px; detecting bands ...")
    result = detect_bands(gray, mask=m, pixel_size_um=pixel_size, path=str(image), notes=notes, **settings)
    for note in result.notes:
        _err(f"note: {note}")
    if overlay:
        from tracefit.image import write_detection_overlay

        write_detection_overlay(overlay, gray, result)
        _err(f"overlay written to {overlay}")
    if as_json:
        sys.stdout.write(json.dumps(result.to_dict()) + "\n")
        return
    if not result.families:
        reason = getattr(result, "reason", "") or ""
        print("no band families found" + (f": {reason}" if reason else ""))
        return
    um = pixel_size is not None
    head = f"{'family':>6}  {'angle deg':>10}  {'+/- deg':>8}  {'bands':>5}  {'spacing px':>10}" + (f"  {'spacing um':>10}" if um else "") + f"  {'strength':>8}  {'signif':>6}  polarity"
    print(head)
    for i, fam in enumerate(result.families, 1):
        sp = "-" if not math.isfinite(fam.spacing_px) else f"{fam.spacing_px:.1f}"
        row = f"{i:>6}  {fam.angle_deg:>10.3f}  {fam.angle_sigma_deg:>8.3f}  {fam.n_bands:>5}  {sp:>10}"
        if um:
            row += f"  {'-' if fam.spacing_um is None else f'{fam.spacing_um:.3f}':>10}"
        sig = getattr(fam, "significance", None)
        row += f"  {fam.strength:>8.2f}  {'-' if sig is None else f'{sig:.0f}':>6}  {fam.polarity}"
        print(row)
