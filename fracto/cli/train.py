"""``fracto train``: a mode model from the user's labelled fractographs."""

from __future__ import annotations

import click


@click.command("train")
@click.option("--masks", type=click.Path(dir_okay=False), help="List of image,mask pairs (CSV).")
@click.option(
    "--image-folders",
    type=click.Path(file_okay=False),
    help="Folder with one sub-folder per mode.",
)
@click.option("--out", required=True, type=click.Path(dir_okay=False), help="Model file (.skops).")
@click.option(
    "--classes",
    help="Class names in mask order (mask value 1 = first), comma separated or a JSON file.",
)
@click.option("--pixel-size", help="Pixel size of all images, e.g. 0.1um.")
@click.option("--scale", "scale", help="Physical texture scale, e.g. 0.5um (default: scale-free).")
@click.option("--banner", default="auto", show_default=True, help="auto, none, bottom:N or top:N.")
@click.option("--cv", "cv_folds", type=int, default=5, show_default=True, help="Grouped folds.")
@click.option(
    "--leave-one-image-out", "loio", is_flag=True, help="Score by leave-one-image-out instead."
)
@click.option("--threshold", type=float, default=0.5, show_default=True)
@click.option("--max-iter", type=int, default=100, show_default=True, help="Boosting iterations.")
@click.option("--seed", type=int, default=0, show_default=True)
@click.option("--json", "as_json", is_flag=True, help="Print the model card as JSON.")
def command(
    masks,
    image_folders,
    out,
    classes,
    pixel_size,
    scale,
    banner,
    cv_folds,
    loio,
    threshold,
    max_iter,
    seed,
    as_json,
) -> None:
    """Train a mode model; score it by cross-validation grouped by image."""
    from fracto.errors import FractoInputError
    from fracto.io import PixelSize
    from fracto.io.safe import dumps_json
    from fracto.modes.training import format_scores, parse_classes, train_from_sources
    from fracto.units import parse_length_um

    if bool(masks) == bool(image_folders):
        raise FractoInputError("Give either --masks LIST or --image-folders DIR.")
    if not out.endswith(".skops"):
        raise FractoInputError("The model file name must end in .skops.")
    px = PixelSize.parse(pixel_size).x_um if pixel_size else None
    scale_um = parse_length_um(scale, what="texture scale") if scale else None
    card, scores = train_from_sources(
        out,
        masks=masks,
        image_folders=image_folders,
        classes=parse_classes(classes) if classes else None,
        pixel_size_um=px,
        scale_um=scale_um,
        banner=banner,
        n_splits="loio" if loio else cv_folds,
        threshold=threshold,
        max_iter=max_iter,
        seed=seed,
    )
    if as_json:
        click.echo(dumps_json(card))
    else:
        click.echo(format_scores(scores))
        area = card.get("held_out_area_confusion") or {}
        if area.get("area_accuracy") is not None:
            click.echo(
                f"held-out area accuracy (calibrated model, {area['scheme']}): "
                f"{area['area_accuracy']:.3f}"
            )
        click.echo(f"model written to {out} (card {card['card_path']})")
