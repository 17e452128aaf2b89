"""``fracto classify``: mode map and mode fractions of an SEM fractograph or a height map.

A height map given alone (``--height-only``, or a file that is a height map:
``.npy``, ``.sdf``, ``.stl``, text grids, floating-point TIFF) is classified
through its rendered SEM view with the height model
(:func:`fracto.modes.pipeline.classify_height_map`); the JSON's ``input``
says which path was taken and why.
"""

from __future__ import annotations

import click

from fracto.classes import MODES, UNCLASSIFIED


def _result_dict(
    res, *, image_path, image_info, model_path, sha, model, pixel_size, settings, input_info
):
    from fracto import CAUTION, __version__

    order = (*MODES, *[c for c in res.classes if c not in MODES], UNCLASSIFIED)

    def _ordered(fr):
        return {n: fr.get(n, {"value": 0.0, "ci95": [0.0, 0.0]}) for n in order}

    fractions = _ordered(res.fractions.to_dict())
    unc = res.fractions_uncorrected or res.fractions
    fractions_uncorrected = _ordered(unc.to_dict())
    q = res.quality.to_dict()
    ps = pixel_size.to_dict()
    ps["scale"] = res.features.scale.to_dict()
    return {
        "input": input_info,
        "fractions": fractions,
        "fractions_uncorrected": fractions_uncorrected,
        "correction": res.correction,
        "model": {
            "path": str(model_path),
            "sha256": sha,
            "feature_set_version": model.feature_set_version_,
            "classes": list(res.classes),
        },
        "image": {
            "path": str(image_path),
            "shape": list(image_info.get("shape", res.label_map.shape)),
            "banner": image_info.get("banner"),
        },
        "pixel_size": ps,
        "quality": q,
        "regions": res.to_dict()["regions"],
        "settings": {
            **settings,
            "bootstrap": res.fractions.settings(),
            "bootstrap_uncorrected": unc.settings(),
        },
        "seed": res.seed,
        "version": __version__,
        "caution": CAUTION,
    }


def format_table(d: dict) -> str:
    lines = [f"{d['image']['path']}  ({d['image']['shape'][1]} x {d['image']['shape'][0]} px)"]
    applied = d["correction"].get("applied", False)
    head = "corrected" if applied else "fraction"
    lines.append(f"{'mode':<16}{head:>10}   95 % interval       counted   95 % interval")
    for name, v in d["fractions"].items():
        lo, hi = v["ci95"]
        u = d["fractions_uncorrected"][name]
        ulo, uhi = u["ci95"]
        lines.append(
            f"{name:<16}{v['value']:>10.3f}   [{lo:.3f}, {hi:.3f}]   "
            f"{u['value']:>8.3f}   [{ulo:.3f}, {uhi:.3f}]"
        )
    if applied:
        lines.append(
            "corrected for the model's held-out errors (adjusted classify and count); the "
            "interval counts them too"
        )
    else:
        lines.append(f"not corrected: {d['correction'].get('reason', '')}")
    q = d["quality"]
    verdict = "fit to score" if q["fit_to_score"] else "NOT fit to score"
    lines.append(
        f"quality: {verdict}; focus {q['focus_laplacian_variance']:.3g}, "
        f"clipped {q['clipped_fraction']:.1%}, noise {q['noise_sigma']:.3f}"
    )
    lines.extend(f"  - {r}" for r in q["reasons"])
    lines.append(f"input: {d['input']['kind']} ({d['input']['chosen_by']})")
    lines.append(f"scale: {d['pixel_size']['scale']['note']}")
    lines.append(f"model: {d['model']['path']} (sha256 {d['model']['sha256'][:12]}...)")
    lines.append(d["caution"])
    return "\n".join(lines)


@click.command("classify")
@click.argument("image", type=click.Path(dir_okay=False))
@click.option(
    "--height-map", type=click.Path(dir_okay=False), help="Height map of the same field."
)
@click.option(
    "--height-only",
    is_flag=True,
    help="IMAGE is a height map without an SEM image: classify its rendered view with the "
    "height model (also chosen when IMAGE is a height-map file).",
)
@click.option("--pixel-size", help="Pixel size, e.g. 0.1um (overrides the file's calibration).")
@click.option("--banner", default="auto", show_default=True, help="auto, none, bottom:N or top:N.")
@click.option(
    "--scale-bar",
    help="Length of the banner's scale bar, e.g. 10um (else its label is read by OCR).",
)
@click.option(
    "--model", "model_path", type=click.Path(dir_okay=False), help="Model file (.skops)."
)
@click.option("--trust", is_flag=True, help="Load a model holding types fracto does not expect.")
@click.option("--overlay", type=click.Path(dir_okay=False), help="Write an overlay PNG here.")
@click.option("--labels", type=click.Path(dir_okay=False), help="Write the label PNG here.")
@click.option("--threshold", type=float, help="Probability below which a region is unclassified.")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the bootstrap.")
@click.option("--n-boot", type=int, default=1000, show_default=True, help="Bootstrap replicates.")
@click.option(
    "--no-correction",
    is_flag=True,
    help="Report counted fractions, not corrected for the model's errors.",
)
@click.option(
    "--explain",
    "explain_path",
    type=click.Path(dir_okay=False),
    help="Write each region's deciding features here (.csv or .json).",
)
@click.option("--explain-top", type=int, default=3, show_default=True, help="Features per region.")
@click.option(
    "--overlay-confidence", is_flag=True, help="Shade the overlay colours by confidence."
)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
def command(
    image,
    height_map,
    height_only,
    pixel_size,
    banner,
    scale_bar,
    model_path,
    trust,
    overlay,
    labels,
    threshold,
    seed,
    n_boot,
    no_correction,
    explain_path,
    explain_top,
    overlay_confidence,
    as_json,
) -> None:
    """Mode map and area fractions with 95 % intervals of IMAGE.

    The fractions are corrected for the model's own held-out errors and the
    interval counts both those errors and the spatial spread of the regions.
    """
    import numpy as np

    from fracto.errors import FractoInputError
    from fracto.io import PixelSize, read_height_map
    from fracto.io.safe import dumps_json
    from fracto.modes.model import default_model_path, load_model, sha256_of
    from fracto.modes.overlay import write_labels, write_overlay
    from fracto.modes.pipeline import classify_image
    from fracto.modes.training import read_grey_image

    if explain_path and not explain_path.lower().endswith((".csv", ".json")):
        raise FractoInputError(f"The explanation file '{explain_path}' must end in .csv or .json.")
    ps_given = PixelSize.parse(pixel_size) if pixel_size else None
    input_info = _input_path(image, height_only=height_only, height_map=height_map)
    view = None
    if input_info["kind"] == "height map":
        from fracto.modes.heightview import default_height_model_path
        from fracto.modes.pipeline import classify_height_map

        mpath = model_path or default_height_model_path()
        model = load_model(mpath, trust=trust)
        hm = read_height_map(image, pixel_size=ps_given)
        ps = hm.pixel_size
        height = np.asarray(hm.z_um, dtype=np.float64)
        res = classify_height_map(
            height,
            model,
            pixel_size_um=ps.x_um if ps.calibrated else None,
            threshold=threshold,
            seed=seed,
            n_boot=n_boot,
            correction=not no_correction,
        )
        info = {"shape": list(height.shape), "banner": None}
        input_info["valid_fraction"] = hm.valid_fraction
        input_info["view"] = res.settings["view"]
        view = res.view
    else:
        mpath = model_path or default_model_path()
        model = load_model(mpath, trust=trust)
        img, ps, info = read_grey_image(
            image, banner=banner, pixel_size=ps_given, scale_bar=scale_bar
        )
        height = None
        if height_map:
            hm = read_height_map(height_map, pixel_size=ps_given)
            height = np.asarray(hm.z_um, dtype=np.float64)
            if not ps.calibrated and hm.pixel_size.calibrated:
                ps = hm.pixel_size
            if height.shape != img.shape:
                raise FractoInputError(
                    f"The height map ({height.shape[1]} x {height.shape[0]} px) and the image "
                    f"({img.shape[1]} x {img.shape[0]} px) must cover the same grid."
                )
        res = classify_image(
            img,
            model,
            pixel_size_um=ps.x_um if ps.calibrated else None,
            height_um=height,
            threshold=threshold,
            seed=seed,
            n_boot=n_boot,
            correction=not no_correction,
        )
        view = img
    settings = {
        "threshold": res.threshold,
        "banner": banner,
        "scale_bar": scale_bar,
        "height_map": height_map,
        "n_boot": n_boot,
        "correction": not no_correction,
    }
    d = _result_dict(
        res,
        image_path=image,
        image_info=info,
        model_path=mpath,
        sha=sha256_of(mpath),
        model=model,
        pixel_size=ps,
        settings=settings,
        input_info=input_info,
    )
    if explain_path:
        from fracto.modes.explain import explain_regions, write_explanation

        expl = explain_regions(
            model,
            res.features.X,
            res.features.tile_grid,
            res.block_labels,
            top=explain_top,
            block_px=res.features.block_px,
        )
        meta = {k: d[k] for k in ("image", "model", "seed", "version")}
        write_explanation(explain_path, expl, meta=meta)
    if overlay:
        from fracto.modes.regions import paint

        fr = {k: v["value"] for k, v in d["fractions"].items()}
        conf = None
        if overlay_confidence:
            conf = paint(res.block_probabilities.max(axis=2), res.features.block_px, view.shape)
        corrected = bool(d["correction"].get("applied"))
        note = "corrected fractions" if corrected else "counted fractions"
        mapped = (
            {k: v["value"] for k, v in d["fractions_uncorrected"].items()} if corrected else None
        )
        write_overlay(
            overlay,
            view,
            res.label_map,
            res.classes,
            fractions=fr,
            title=str(image),
            confidence=conf,
            fractions_note=note,
            map_fractions=mapped,
        )
    if labels:
        write_labels(labels, res.label_map, res.classes)
    click.echo(dumps_json(d) if as_json else format_table(d))


def _input_path(image: str, *, height_only: bool, height_map: str | None) -> dict:
    """Which path classifies IMAGE (SEM image or height map alone) and why."""
    from pathlib import Path

    from fracto.campaign.manifest import kind_of_file
    from fracto.errors import FractoInputError

    kind = None
    if Path(image).is_file():
        try:
            kind = kind_of_file(image)
        except FractoInputError:
            kind = None  # left to the SEM reader, which names the problem
    if height_only:
        if height_map:
            raise FractoInputError(
                "With --height-only the height map is the input file itself; "
                "leave out --height-map."
            )
        if kind == "sem":
            raise FractoInputError(
                f"'{image}' is an SEM image, not a height map; leave out --height-only."
            )
        return {"kind": "height map", "chosen_by": "--height-only"}
    if kind == "height":
        if height_map:
            raise FractoInputError(
                f"'{image}' is a height map, not an SEM image; give it alone (the height "
                "model classifies its rendered view) or give the SEM image with --height-map."
            )
        return {
            "kind": "height map",
            "chosen_by": "the file is a height map (extension or floating-point TIFF)",
        }
    return {"kind": "sem image", "chosen_by": "the file is an image"}
