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
    help="Class names in mask order (mask value 1 = first), comma separated or a JSON file; "
    "with --base, the new classes that follow the base model's.",
)
@click.option(
    "--base",
    "base",
    type=click.Path(dir_okay=False),
    help="Continue from this model: its classes (mask values 1..k, new classes after them), "
    "its settings and its stored training regions (NAME.regions.npz beside it).",
)
@click.option(
    "--new-weight",
    type=float,
    help="With --base: sample weight of each new region, base regions weigh 1 [default: 10].",
)
@click.option(
    "--trust", is_flag=True, help="Load a base model holding types fracto does not expect."
)
@click.option("--pixel-size", help="Pixel size of all images, e.g. 0.1um.")
@click.option(
    "--scale",
    "scale",
    help="Physical texture scale, e.g. 0.5um, or 'none' for scale-free "
    "[default: the base model's, else scale-free].",
)
@click.option("--banner", default="auto", show_default=True, help="auto, none, bottom:N or top:N.")
@click.option("--cv", "cv_folds", type=int, default=5, show_default=True, help="Grouped folds.")
@click.option(
    "--leave-one-image-out", "loio", is_flag=True, help="Score by leave-one-image-out instead."
)
@click.option("--threshold", type=float, help="[default: the base model's, else 0.5]")
@click.option(
    "--max-iter", type=int, help="Boosting iterations [default: the base model's, else 100]."
)
@click.option(
    "--calibration",
    type=click.Choice(["isotonic", "sigmoid", "none"]),
    help="Probability calibration [default: the base model's, else isotonic].",
)
@click.option("--seed", type=int, default=0, show_default=True)
@click.option("--json", "as_json", is_flag=True, help="Print the model card as JSON.")
def command(
    masks,
    image_folders,
    out,
    classes,
    base,
    new_weight,
    trust,
    pixel_size,
    scale,
    banner,
    cv_folds,
    loio,
    threshold,
    max_iter,
    calibration,
    seed,
    as_json,
) -> None:
    """Train a mode model; score it by cross-validation grouped by image.

    With --base MODEL the new model continues from MODEL: mask value i means
    class i of MODEL's classes followed by the new classes of --classes;
    settings not given here are MODEL's; MODEL's stored training regions are
    merged with the new ones, each new region weighing --new-weight.
    """
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
    given = {}
    if scale is not None:
        free = scale.strip().lower() in ("none", "free")
        given["scale_um"] = None if free else parse_length_um(scale, what="texture scale")
    for key, value in (("threshold", threshold), ("max_iter", max_iter)):
        if value is not None:
            given[key] = value
    if calibration is not None:
        given["calibration"] = calibration
    card, scores = train_from_sources(
        out,
        masks=masks,
        image_folders=image_folders,
        classes=parse_classes(classes) if classes else None,
        pixel_size_um=px,
        settings=given,
        banner=banner,
        n_splits="loio" if loio else cv_folds,
        seed=seed,
        base=base,
        new_weight=new_weight,
        trust=trust,
    )
    if as_json:
        click.echo(dumps_json(card))
    else:
        click.echo(format_scores(scores))
        new = scores.get("new_regions")
        if new and new.get("region_accuracy") is not None:
            click.echo(
                f"region accuracy on the new regions: {new['region_accuracy']:.3f} "
                f"({new['n_regions_scored']} regions)"
            )
        area = card.get("held_out_area_confusion") or {}
        if area.get("area_accuracy") is not None:
            click.echo(
                f"held-out area accuracy (calibrated model, {area['scheme']}): "
                f"{area['area_accuracy']:.3f}"
            )
        b = card.get("base_model")
        if b:
            click.echo(
                f"continued from {b['model_file']}: {b['n_base_regions']} base regions "
                f"+ {b['n_new_regions']} new (weight {b['new_region_weight']:g})"
                + (f"; new classes {', '.join(b['new_classes'])}" if b["new_classes"] else "")
            )
        click.echo(f"model written to {out} (card {card['card_path']})")
