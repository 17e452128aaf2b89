"""``fracto facets``: orientation, size and angles of the planar facets of a height map."""

from __future__ import annotations

import math

import click

from fracto import __version__
from fracto.io.safe import dumps_json


def _fmt(v: object, spec: str = ".4g") -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "n/a"
    return format(v, spec) if isinstance(v, int | float) else str(v)


def format_summary(doc: dict, max_rows: int = 20) -> str:
    """Readable summary table of the ``--json`` document."""
    s = doc["summary"]
    u = s["lateral_unit"]
    lines = [
        f"{'quantity':<34} {'value':>12}  unit",
        f"{'area-weighted tilt':<34} {_fmt(s['area_weighted_tilt_deg']):>12}  deg",
        f"{'facet area-weighted tilt':<34} {_fmt(s['facet_area_weighted_tilt_deg']):>12}  deg",
        f"{'facets':<34} {_fmt(s['facet_count']):>12}",
        f"{'mean facet diameter':<34} {_fmt(s['mean_facet_diameter_um']):>12}  {u}",
        f"{'median facet diameter':<34} {_fmt(s['median_facet_diameter_um']):>12}  {u}",
        f"{'faceted fraction of the area':<34} {_fmt(s['faceted_fraction']):>12}",
        f"{'median dihedral angle':<34} {_fmt(s['median_dihedral_angle_deg']):>12}  deg",
    ]
    if s.get("grain_size_um") is not None:
        lines += [
            f"{'grain size (given)':<34} {_fmt(s['grain_size_um']):>12}  {u}",
            f"{'facet diameter / grain size':<34} {_fmt(s['facet_to_grain_size_ratio']):>12}",
        ]
    facets = sorted(doc["facets"], key=lambda f: -f["area_um2"])[:max_rows]
    if facets:
        lines += [
            "",
            f"largest facets (of {s['facet_count']}):",
            f"{'area ' + u + '²':>12} {'tilt deg':>9} {'azimuth deg':>12} "
            f"{'x ' + u:>10} {'y ' + u:>10}",
        ]
        for f in facets:
            lines.append(
                f"{f['area_um2']:>12.4g} {f['tilt_deg']:>9.2f} {f['azimuth_deg']:>12.1f} "
                f"{f['centroid_x_um']:>10.4g} {f['centroid_y_um']:>10.4g}"
            )
    if u == "px":
        lines += [
            "",
            "pixel size unknown: lateral quantities are in pixels (heights must be too).",
        ]
    return "\n".join(lines)


@click.command("facets")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--pixel-size", help="Lateral pixel size with unit, e.g. 0.5um or 250nm.")
@click.option("--z-unit", default="um", show_default=True, help="Unit of the heights in FILE.")
@click.option("--scale", help="Lateral scale of the normals (Gaussian window sigma), e.g. 1um.")
@click.option("--grain-size", help="Known grain size to compare the facet size with, e.g. 5um.")
@click.option("--tolerance", default="5deg", show_default=True, help="Planarity tolerance.")
@click.option("--min-area", default=50, show_default=True, help="Smallest facet in pixels.")
@click.option(
    "--form",
    default="plane",
    show_default=True,
    help="Form removed before measuring tilts: plane or none.",
)
@click.option(
    "--projection",
    type=click.Path(dir_okay=False),
    help="Write the equal-area projection of the normals to this PNG.",
)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of a table.")
def command(
    file: str,
    pixel_size: str | None,
    z_unit: str,
    scale: str | None,
    grain_size: str | None,
    tolerance: str,
    min_area: int,
    form: str,
    projection: str | None,
    as_json: bool,
) -> None:
    """Facet tilts, azimuths, sizes and dihedral angles of a height map.

    Tilts are against the mean plane (--form plane) or the map's own xy plane
    (--form none). Without a pixel size, lateral results are in pixels and the
    heights are assumed to be in pixels too (use --pixel-size for true angles).
    """
    import numpy as np

    from fracto.errors import FractoInputError
    from fracto.io import read_height_map
    from fracto.io.calibration import PixelSize
    from fracto.surface.facets import (
        facet_analysis,
        lambert_projection_density,
        plot_lambert_projection,
    )
    from fracto.units import parse_angle_deg, parse_length_um

    ps = PixelSize.parse(pixel_size) if pixel_size else None
    hmap = read_height_map(file, pixel_size=ps, z_unit=z_unit)
    z = np.asarray(hmap.z_um, dtype=np.float64)
    if form not in ("plane", "none"):
        raise FractoInputError(f"Unknown form '{form}' for facets; use plane or none.")
    dx, dy = hmap.pixel_size.spacing()
    if form == "plane":
        from fracto.surface.form import remove_form

        z = remove_form(z, "plane", dx=dx, dy=dy).residual
    tol = parse_angle_deg(tolerance, what="planarity tolerance")
    scale_um = parse_length_um(scale, what="normal scale") if scale else None
    grain_um = parse_length_um(grain_size, what="grain size") if grain_size else None
    if not hmap.pixel_size.calibrated and (scale_um or grain_um):
        raise FractoInputError(
            "A --scale or --grain-size in µm needs the pixel size (--pixel-size)."
        )
    res = facet_analysis(
        z,
        dx,
        dy,
        scale_um=scale_um,
        planarity_tol_deg=tol,
        min_area_px=min_area,
        grain_size_um=grain_um,
        lateral_unit=hmap.pixel_size.lateral_unit,
    )
    if projection:
        dens, extent = lambert_projection_density(res.normals)
        plot_lambert_projection(dens, extent, projection)
    doc = res.to_dict()
    doc["pixel_size"] = hmap.pixel_size.to_dict()
    doc["processing"] = {
        "form": form,
        "z_unit": z_unit,
        "scale": scale,
        "tolerance_deg": tol,
        "min_area_px": min_area,
        "projection": projection,
        **doc.pop("settings"),
    }
    doc["source"] = {"path": file}
    doc["version"] = __version__
    click.echo(dumps_json(doc) if as_json else format_summary(doc))
