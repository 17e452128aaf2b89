"""``fracto crackpath``: crack path, tortuosity and grain-boundary coincidence in a section."""

from __future__ import annotations

import click

from fracto import __version__
from fracto.io.safe import dumps_json


def _read_grey(path: str, banner: str, pixel_size):
    """Grey image in [0, 1] and calibration; a two-valued image becomes a mask
    whose less frequent value is True."""
    import numpy as np

    from fracto.io import read_sem_image

    img = read_sem_image(path, banner=banner, pixel_size=pixel_size)
    a = np.asarray(img.image)
    vals = np.unique(a)
    if len(vals) == 2:
        hi = a == vals[1]
        a = hi if hi.mean() < 0.5 else ~hi
    return a, img.pixel_size


@click.command("crackpath")
@click.argument("image", type=click.Path(dir_okay=False))
@click.option(
    "--boundaries",
    type=click.Path(dir_okay=False),
    help="Grain-boundary image of the same field (lines, or a two-valued mask).",
)
@click.option("--pixel-size", help="Pixel size with unit, e.g. 0.5um (else from the file).")
@click.option(
    "--tolerance",
    default="2px",
    show_default=True,
    help="Distance from a boundary that still counts as along it (px or a length).",
)
@click.option(
    "--banner",
    default="auto",
    show_default=True,
    help="Information banner: auto, none, bottom:N or top:N.",
)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of a table.")
def command(
    image: str,
    boundaries: str | None,
    pixel_size: str | None,
    tolerance: str,
    banner: str,
    as_json: bool,
) -> None:
    """Main crack path in a polished cross-section IMAGE (crack darker than the material,
    or a two-valued mask in which the crack is the less frequent value)."""
    from fracto.crackpath import crack_path
    from fracto.errors import FractoInputError
    from fracto.io.calibration import PixelSize
    from fracto.units import parse_length_um

    ps = PixelSize.parse(pixel_size) if pixel_size else None
    a, cal = _read_grey(image, banner, ps)
    b = None
    if boundaries:
        b, _ = _read_grey(boundaries, banner, ps)
        if b.shape != a.shape:
            raise FractoInputError(
                "The grain-boundary image and the cross-section differ in size."
            )
    if cal.calibrated and abs(cal.x_um - cal.y_um) > 1e-6 * cal.x_um:
        raise FractoInputError("Crack paths need square pixels; give one --pixel-size value.")
    px_um = cal.x_um if cal.calibrated else None
    tol = tolerance.strip().lower()
    if tol.endswith("px"):
        tol_px = float(tol[:-2])
    else:
        if px_um is None:
            raise FractoInputError("A tolerance in µm needs the pixel size; give it in px.")
        tol_px = parse_length_um(tolerance, what="boundary tolerance") / px_um
    res = crack_path(a, pixel_size_um=px_um, boundaries=b, tolerance_px=tol_px)
    doc = res.to_dict()
    doc["pixel_size"] = cal.to_dict()
    doc["source"] = {"image": image, "boundaries": boundaries}
    doc["version"] = __version__
    if as_json:
        click.echo(dumps_json(doc))
        return
    u = doc["lateral_unit"]

    def f(v):
        return "n/a" if v is None else f"{v:.5g}"

    rows = [
        ("tortuosity (path / chord)", f(doc["tortuosity"]), ""),
        ("path length", f(doc["path_length_um"]), u),
        ("chord length", f(doc["chord_length_um"]), u),
        ("lineal roughness R_L", f(doc["lineal_roughness"]), ""),
        ("RMS deviation from chord", f(doc["deviation_rms_um"]), u),
        ("mean |deviation angle|", f(doc["mean_abs_deviation_angle_deg"]), "deg"),
    ]
    if boundaries:
        rows += [
            ("intergranular path fraction", f(doc["intergranular_path_fraction"]), ""),
            ("mean lineal intercept", f(doc["mean_lineal_intercept_um"]), u),
            ("ASTM E112 grain-size number G", f(doc["astm_e112_G"]), ""),
        ]
    lines = [f"{name:<32} {val:>12}  {unit}" for name, val, unit in rows]
    if u == "px":
        lines.append("pixel size unknown: lengths are in pixels, no ASTM E112 number.")
    click.echo("\n".join(lines))
