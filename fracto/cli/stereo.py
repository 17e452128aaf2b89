"""``fracto stereo``: a height map from two SEM images at two eucentric tilts."""

from __future__ import annotations

import click

from fracto import __version__
from fracto.io.safe import dumps_json


@click.command("stereo")
@click.argument("left", type=click.Path(dir_okay=False))
@click.argument("right", type=click.Path(dir_okay=False))
@click.option("--tilt-difference", required=True, help="Difference of the stage tilts, e.g. 8deg.")
@click.option("--pixel-size", help="Image pixel size with unit, e.g. 0.1um (else from the files).")
@click.option(
    "-o",
    "--output",
    required=True,
    type=click.Path(dir_okay=False),
    help="Height map to write: .npy (µm), .tif (float) or .sdf.",
)
@click.option(
    "--one-at-zero", is_flag=True, help="LEFT was taken at 0°, RIGHT at the tilt difference."
)
@click.option(
    "--flip-parallax",
    is_flag=True,
    help="Higher points appear further LEFT (-x) in RIGHT than in LEFT.",
)
@click.option(
    "--tilt-axis",
    type=click.Choice(["vertical", "horizontal"]),
    default="vertical",
    show_default=True,
    help="Direction of the tilt axis in the image.",
)
@click.option(
    "--banner",
    default="auto",
    show_default=True,
    help="Information banner: auto, none, bottom:N or top:N.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the summary as one JSON object.")
def command(
    left: str,
    right: str,
    tilt_difference: str,
    pixel_size: str | None,
    output: str,
    one_at_zero: bool,
    flip_parallax: bool,
    tilt_axis: str,
    banner: str,
    as_json: bool,
) -> None:
    """Heights from the SEM stereo pair LEFT (lower tilt) and RIGHT, written to OUTPUT."""
    from fracto.errors import FractoInputError
    from fracto.io import read_sem_image, write_height_map
    from fracto.io.calibration import PixelSize
    from fracto.stereo import stereo_height
    from fracto.units import parse_angle_deg

    ps = PixelSize.parse(pixel_size) if pixel_size else None
    a = read_sem_image(left, banner=banner, pixel_size=ps)
    b = read_sem_image(right, banner=banner, pixel_size=ps)
    cal = a.pixel_size if a.pixel_size.calibrated else b.pixel_size
    if not cal.calibrated:
        raise FractoInputError("Stereo heights need the image pixel size; give --pixel-size.")
    if abs(cal.x_um - cal.y_um) > 1e-6 * cal.x_um:
        raise FractoInputError("Stereo needs square pixels; give one --pixel-size value.")
    if not output.lower().endswith((".npy", ".tif", ".tiff", ".sdf")):
        raise FractoInputError("The output must end in .npy, .tif or .sdf.")
    res = stereo_height(
        a.image,
        b.image,
        tilt_difference_deg=parse_angle_deg(tilt_difference, what="tilt difference"),
        pixel_size_um=cal.x_um,
        tilt_axis=tilt_axis,
        mode="one-at-zero" if one_at_zero else "symmetric",
        flip_parallax=flip_parallax,
    )
    write_height_map(output, res.height_um, res.pixel_size)
    doc = res.to_dict()
    doc["output"] = output
    doc["inputs"] = {"left": left, "right": right}
    doc["version"] = __version__
    if as_json:
        click.echo(dumps_json(doc))
        return

    def f(v):
        return "n/a" if v is None else f"{v:.4g}"

    click.echo(
        "\n".join(
            [
                f"height map        {output} ({doc['shape'][1]} x {doc['shape'][0]} points, "
                f"pixel {cal.x_um:.4g} µm)",
                f"valid fraction    {doc['valid_fraction']:.4f}",
                f"height range      {f(doc['height_range_um'])} µm "
                f"({f(doc['height_min_um'])} to {f(doc['height_max_um'])} µm, relative)",
                f"height RMS        {f(doc['height_rms_um'])} µm",
                f"geometry          {doc['settings']['mode']}, tilt difference "
                f"{doc['settings']['tilt_difference_deg']:g}°, axis {tilt_axis}"
                + (", parallax flipped" if flip_parallax else ""),
            ]
        )
    )
