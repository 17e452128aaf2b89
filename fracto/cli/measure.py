"""``fracto measure``: areal roughness and fractography ratios of one height map."""

from __future__ import annotations

import math

import click

from fracto import __version__
from fracto.io.safe import dumps_json, write_text_atomic
from fracto.units import parse_length_um


def _length_or_none(text: str | None, what: str) -> float | None:
    return None if text is None else parse_length_um(text, what=what)


def _direction(text: str) -> str | float:
    if text in ("x", "y"):
        return text
    from fracto.units import parse_angle_deg

    return parse_angle_deg(text, what="profile direction")


def format_table(result: dict) -> str:
    """Readable table (parameter, value, unit) of a measurement's ``to_dict()``."""
    lines = [f"{'parameter':<26} {'value':>14}  unit"]
    for name, p in result["parameters"].items():
        v = p["value"]
        text = "n/a" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:.6g}"
        unit = p["unit"] or "-"
        note = f"  ({p['note']})" if "note" in p and text == "n/a" else ""
        lines.append(f"{name:<26} {text:>14}  {unit}{note}")
    ps = result["pixel_size"]
    cal = (
        f"{ps['x']:.6g} × {ps['y']:.6g} µm ({ps['source']})"
        if ps["calibrated"]
        else "unknown: lateral quantities are in pixels"
    )
    lines += [
        "",
        f"valid fraction   {result['valid_fraction']:.4f}",
        f"pixel size       {cal}",
        f"form removal     {result['processing'].get('form', {})}",
    ]
    return "\n".join(lines)


@click.command("measure")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--pixel-size", help="Lateral pixel size with unit, e.g. 0.5um or 250nm.")
@click.option("--z-unit", default="um", show_default=True, help="Unit of the heights in FILE.")
@click.option(
    "--form",
    default="plane",
    show_default=True,
    help="Form removal: plane, poly:N, robust or none.",
)
@click.option("--s-filter", help="ISO 16610-61 S-filter nesting index, e.g. 2um.")
@click.option("--l-filter", help="ISO 16610-61 L-filter nesting index, e.g. 80um.")
@click.option("--despike", is_flag=True, help="Remove spikes before form removal.")
@click.option(
    "--profile-direction",
    default="x",
    show_default=True,
    help="Direction of the profile parameters: x, y or an angle such as 30deg.",
)
@click.option("--profile-cutoff", help="ISO 16610-21 profile filter cutoff, e.g. 25um.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of a table.")
@click.option("--out", type=click.Path(dir_okay=False), help="Also write the JSON to this file.")
def command(
    file: str,
    pixel_size: str | None,
    z_unit: str,
    form: str,
    s_filter: str | None,
    l_filter: str | None,
    despike: bool,
    profile_direction: str,
    profile_cutoff: str | None,
    as_json: bool,
    out: str | None,
) -> None:
    """Measure ISO 25178-2 areal parameters and fractography ratios of a height map.

    FILE may be .npy, float TIFF, a text grid or x,y,z columns, ISO 25178-71 SDF or STL.
    """
    from fracto.io import read_height_map
    from fracto.io.calibration import PixelSize
    from fracto.surface.form import parse_form
    from fracto.surface.measure import measure_surface

    method, order = parse_form(form)
    form_text = f"poly:{order}" if method == "poly" else method
    ps = PixelSize.parse(pixel_size) if pixel_size else None
    stl_px = ps.x_um if ps is not None else None
    hmap = read_height_map(file, pixel_size=ps, z_unit=z_unit, stl_pixel_size_um=stl_px)
    result = measure_surface(
        hmap.z_um,
        hmap.pixel_size,
        form=form_text,
        s_filter_um=_length_or_none(s_filter, "S-filter nesting index"),
        l_filter_um=_length_or_none(l_filter, "L-filter nesting index"),
        despike=despike,
        profile_direction=_direction(profile_direction),
        profile_cutoff_um=_length_or_none(profile_cutoff, "profile cutoff"),
    )
    doc = result.to_dict()
    doc["source"] = {"path": file, **{k: v for k, v in hmap.metadata.items() if _plain(v)}}
    doc["settings"] = {
        "pixel_size": pixel_size,
        "z_unit": z_unit,
        "form": form_text,
        "s_filter": s_filter,
        "l_filter": l_filter,
        "despike": despike,
        "profile_direction": profile_direction,
        "profile_cutoff": profile_cutoff,
    }
    doc["version"] = __version__
    text = dumps_json(doc)
    if out:
        write_text_atomic(out, text + "\n")
    click.echo(text if as_json else format_table(doc))


def _plain(v: object) -> bool:
    return isinstance(v, str | int | float | bool | type(None) | list | dict)
