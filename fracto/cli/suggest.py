"""``fracto suggest``: the regions of an image worth labelling next."""

from __future__ import annotations

import click


def _preview_png(img, suggestion, classes) -> bytes:
    """The image with each proposed box outlined and numbered (1 = most useful)."""
    import io

    import numpy as np
    from PIL import Image, ImageDraw

    g = np.asarray(img, dtype=np.float64)
    lo, hi = np.percentile(g, [0.5, 99.5])
    g8 = (255 * np.clip((g - lo) / max(hi - lo, 1e-12), 0, 1)).astype(np.uint8)
    im = Image.fromarray(g8, mode="L").convert("RGB")
    draw = ImageDraw.Draw(im)
    width = max(1, round(min(g.shape) / 400))
    for k, (y0, x0, y1, x1) in enumerate(suggestion.boxes):
        draw.rectangle([x0, y0, x1 - 1, y1 - 1], outline=(230, 159, 0), width=width)
        label = f"{k + 1}"
        draw.text((x0 + 2 * width, y0 + 2 * width), label, fill=(255, 255, 255))
    buf = io.BytesIO()
    im.save(buf, format="PNG")
    return buf.getvalue()


def _regions_csv(suggestion, classes) -> str:
    import csv
    import io

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(
        [
            *("number", "y0_px", "x0_px", "y1_px", "x1_px"),
            *("model_guess", "guess_mask_value", "margin", "disagreement", "score"),
        ]
    )
    for k in range(len(suggestion)):
        y0, x0, y1, x1 = (int(v) for v in suggestion.boxes[k])
        g = int(suggestion.guess[k])
        w.writerow(
            [
                *(k + 1, y0, x0, y1, x1, classes[g], g + 1),
                *(f"{v:.4f}" for v in (suggestion.margin[k], suggestion.disagreement[k])),
                f"{suggestion.score[k]:.4f}",
            ]
        )
    return buf.getvalue()


@click.command("suggest")
@click.argument("image", type=click.Path(dir_okay=False))
@click.option(
    "--out",
    required=True,
    type=click.Path(dir_okay=False),
    help="Mask template to write (.png); a preview and a region list are written beside it.",
)
@click.option(
    "--model", "model_path", type=click.Path(dir_okay=False), help="Model file (.skops)."
)
@click.option("--trust", is_flag=True, help="Load a model holding types fracto does not expect.")
@click.option("--regions", "n_regions", type=int, default=24, show_default=True)
@click.option(
    "--gap", type=int, default=1, show_default=True, help="Tiles kept free between proposals."
)
@click.option(
    "--disagreement-weight",
    type=float,
    default=1.0,
    show_default=True,
    help="Weight of ensemble disagreement against the probability margin.",
)
@click.option(
    "--exclude",
    type=click.Path(dir_okay=False),
    help="A mask already labelled for this image; its labelled pixels are not proposed again.",
)
@click.option(
    "--prefill", is_flag=True, help="Fill each box with the model's guess instead of 255."
)
@click.option("--pixel-size", help="Pixel size, e.g. 0.1um (overrides the file's calibration).")
@click.option("--banner", default="auto", show_default=True, help="auto, none, bottom:N or top:N.")
@click.option("--scale-bar", help="Length of the banner's scale bar, e.g. 10um.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
def command(
    image,
    out,
    model_path,
    trust,
    n_regions,
    gap,
    disagreement_weight,
    exclude,
    prefill,
    pixel_size,
    banner,
    scale_bar,
    as_json,
) -> None:
    """Propose the regions of IMAGE whose labels would teach the model most.

    Writes OUT (an indexed mask template: each proposed box holds 255, to be
    painted with its class's mask value, 1 = first class; 0 = unlabelled),
    OUT.preview.png (numbered boxes, 1 = most useful) and OUT.regions.csv (box,
    the model's guess, margin, disagreement). The filled mask goes into
    ``fracto train --masks LIST --base MODEL``.
    """
    from pathlib import Path

    from fracto import __version__
    from fracto.errors import FractoInputError
    from fracto.io import PixelSize
    from fracto.io.safe import dumps_json, write_bytes_atomic, write_text_atomic
    from fracto.modes.features import region_features
    from fracto.modes.model import default_model_path, load_model, sha256_of
    from fracto.modes.overlay import label_png
    from fracto.modes.suggest import mask_template, suggest_regions
    from fracto.modes.training import read_grey_image, read_mask

    if not out.lower().endswith(".png"):
        raise FractoInputError("The mask template name must end in .png.")
    outp = Path(out)
    if not outp.parent.is_dir():
        raise FractoInputError(f"The folder '{outp.parent}' for the mask template does not exist.")
    ps_given = PixelSize.parse(pixel_size) if pixel_size else None
    mpath = model_path or default_model_path()
    model = load_model(mpath, trust=trust)
    img, ps, _ = read_grey_image(image, banner=banner, pixel_size=ps_given, scale_bar=scale_bar)
    if model.uses_height:
        raise FractoInputError("This model needs height maps; suggest works with image models.")
    ex = read_mask(exclude) > 0 if exclude else None
    feats = region_features(
        img, pixel_size_um=ps.x_um if ps.calibrated else None, scale_um=model.scale_um
    )
    sug = suggest_regions(
        feats,
        model,
        n_regions=n_regions,
        gap=gap,
        disagreement_weight=disagreement_weight,
        exclude=ex,
    )
    classes = [str(c) for c in model.classes_]
    stem = str(outp)[:-4]
    write_bytes_atomic(outp, label_png(mask_template(sug, img.shape, prefill=prefill), classes))
    write_bytes_atomic(stem + ".preview.png", _preview_png(img, sug, classes))
    write_text_atomic(stem + ".regions.csv", _regions_csv(sug, classes))
    d = {
        "image": str(image),
        "mask_template": str(outp),
        "preview": stem + ".preview.png",
        "regions_csv": stem + ".regions.csv",
        "n_regions": len(sug),
        "mask_values": {c: i + 1 for i, c in enumerate(classes)},
        "to_label_value": None if prefill else 255,
        "model": {"path": str(mpath), "sha256": sha256_of(mpath)},
        "settings": {
            "regions": n_regions,
            "gap": gap,
            "disagreement_weight": disagreement_weight,
            "prefill": prefill,
            "exclude": exclude,
            "banner": banner,
            "pixel_size_um": ps.x_um if ps.calibrated else None,
        },
        "version": __version__,
    }
    if as_json:
        click.echo(dumps_json(d))
    else:
        values = ", ".join(f"{v} = {c}" for c, v in d["mask_values"].items())
        click.echo(f"{len(sug)} regions proposed; mask template {outp}")
        click.echo(f"paint each box with its mask value ({values}); 0 stays unlabelled.")
        click.echo(f"preview {d['preview']}, list {d['regions_csv']}")
