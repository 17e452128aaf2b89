"""One call from an image (and height map), or a height map alone, to a mode map and fractions.

:func:`classify_image` takes an SEM image (with its height map when the model
uses height features); :func:`classify_height_map` takes a height map alone,
renders its SEM view with :mod:`fracto.modes.heightview` and needs a height
model (``height_only_``, built by ``python -m fracto.modes.default_model
--height``). Both return a :class:`ModeResult`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from fracto.classes import UNCLASSIFIED
from fracto.errors import FractoInputError
from fracto.modes.correction import ErrorRates, corrected_fractions
from fracto.modes.features import RegionFeatures, region_features
from fracto.modes.fractions import (
    FractionEstimate,
    block_bootstrap_fractions,
    memberships_from_labels,
)
from fracto.modes.model import ModeClassifier
from fracto.modes.quality import ImageQuality, assess_quality
from fracto.modes.regions import block_labels, paint, tiles_to_blocks

#: Default choice of training images for the error-rate resampling.
CONDITIONING: str | None = None


@dataclass(frozen=True)
class ModeResult:
    """Mode map and fractions of one image.

    Parameters
    ----------
    classes : tuple of str
        The model's classes; ``label_map`` value ``i + 1`` is ``classes[i]``,
        0 is unclassified.
    label_map : ndarray of uint8, shape of the image
        Mode label of every pixel (0 = unclassified).
    block_probabilities : ndarray, shape (rows, cols, n_classes)
        Mean calibrated probabilities of the tiles covering each block.
    block_labels : ndarray of int, shape (rows, cols)
        Class index per block, -1 = unclassified.
    fractions : FractionEstimate
        Area fractions (classes then ``unclassified``) with 95 % intervals:
        corrected for the model's held-out errors when ``correction["applied"]``
        (the corrected unclassified share is 0), else as counted.
    features : RegionFeatures
        Region features (kept for explanations).
    quality : ImageQuality
    threshold : float
    seed : int
    settings : dict
    fractions_uncorrected : FractionEstimate or None
        The counted fractions (threshold applied, unclassified kept) with their
        block-bootstrap interval.
    correction : dict
        ``applied`` and, when applied, the method, the error rates used and the
        uncorrected unclassified share; else the reason it was not applied.
    view : ndarray or None
        For a height map alone, the rendered SEM view the regions were
        classified on (what an overlay is drawn over); None for an SEM image.
    """

    classes: tuple[str, ...]
    label_map: np.ndarray
    block_probabilities: np.ndarray
    block_labels: np.ndarray
    fractions: FractionEstimate
    features: RegionFeatures
    quality: ImageQuality
    threshold: float
    seed: int
    settings: dict = field(default_factory=dict)
    fractions_uncorrected: FractionEstimate | None = None
    correction: dict = field(default_factory=dict)
    view: np.ndarray | None = None

    def to_dict(self) -> dict:
        unc = self.fractions_uncorrected or self.fractions
        return {
            "fractions": self.fractions.to_dict(),
            "fractions_uncorrected": unc.to_dict(),
            "correction": self.correction,
            "classes": list(self.classes),
            "quality": self.quality.to_dict(),
            "scale": self.features.scale.to_dict(),
            "regions": {
                "block_grid": list(self.features.block_grid),
                "block_px": self.features.block_px,
                "tile_grid": list(self.features.tile_grid),
            },
            "bootstrap": self.fractions.settings(),
            "threshold": self.threshold,
            "seed": self.seed,
        }


def classify_image(
    image: np.ndarray,
    model: ModeClassifier,
    *,
    pixel_size_um: float | None = None,
    height_um: np.ndarray | None = None,
    threshold: float | None = None,
    seed: int = 0,
    n_boot: int = 1000,
    block_regions: int | None = None,
    correction: bool = True,
    conditioning: str | None = CONDITIONING,
) -> ModeResult:
    """Classify the regions of an SEM fractograph and estimate mode fractions.

    Parameters
    ----------
    image : ndarray, shape (ny, nx)
        Grey image (any range).
    model : ModeClassifier
        A fitted model.
    pixel_size_um : float or None
        Pixel size (µm) or None when uncalibrated.
    height_um : ndarray or None
        Height map on the image grid, needed when the model uses height features.
    threshold : float or None
        Probability under which a region is unclassified (default: the model's).
    seed : int
        Seed of the bootstrap.
    n_boot : int
        Bootstrap replicates.
    block_regions : int or None
        Bootstrap block side in regions.
    correction : bool
        Correct the fractions for the model's held-out errors (adjusted
        classify and count) when the model holds its held-out confusion.
    conditioning : {None, "confidence"}
        How the training images whose error rates are resampled are chosen
        (see :func:`fracto.modes.correction.corrected_fractions`).

    Returns
    -------
    ModeResult

    References
    ----------
    Künsch (1989) for the interval, see fracto.modes.fractions; Forman (2008)
    for the correction, see fracto.modes.correction.
    """
    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2:
        raise FractoInputError("The image must be a single grey channel.")
    if is_height_model(model):
        raise FractoInputError(
            "This model classifies height maps alone (rendered views), not SEM images; "
            "give it a height map (fracto classify MAP --height-only) or use an image model."
        )
    if model.uses_height and height_um is None:
        raise FractoInputError("This model needs a height map; give --height-map.")
    thr = _threshold(model, threshold)
    quality = assess_quality(img)
    feats = region_features(
        img,
        pixel_size_um=pixel_size_um,
        scale_um=model.scale_um,
        height_um=height_um if model.uses_height else None,
    )
    return _finish(
        img,
        feats,
        quality,
        model,
        thr,
        seed=seed,
        n_boot=n_boot,
        block_regions=block_regions,
        correction=correction,
        conditioning=conditioning,
    )


def is_height_model(model: ModeClassifier) -> bool:
    """The model classifies height maps alone (trained on rendered views + height features)."""
    return bool(getattr(model, "height_only_", False))


def _threshold(model: ModeClassifier, threshold: float | None) -> float:
    thr = model.threshold if threshold is None else float(threshold)
    if not 0.0 <= thr <= 1.0:
        raise FractoInputError(f"The threshold must lie between 0 and 1, not {thr}.")
    return thr


#: Largest share of non-measured points of a height map still fit to score
#: (common practice, no source: a tenth of the field filled by nearest heights).
MAX_MISSING_FRACTION = 0.10


def classify_height_map(
    height_um: np.ndarray,
    model: ModeClassifier,
    *,
    pixel_size_um: float | None,
    threshold: float | None = None,
    seed: int = 0,
    n_boot: int = 1000,
    block_regions: int | None = None,
    correction: bool = True,
    conditioning: str | None = CONDITIONING,
) -> ModeResult:
    """Classify the regions of a height map alone (no SEM image) and estimate fractions.

    The SEM view is rendered with :func:`fracto.modes.heightview.render_view`
    (the function the height model was trained with), and the region
    features of the view and of the levelled heights go to the model.

    Parameters
    ----------
    height_um : ndarray, shape (ny, nx)
        Heights in µm (NaN = not measured).
    model : ModeClassifier
        A height model (``height_only_``).
    pixel_size_um : float or None
        Lateral pixel size in µm; required (None raises one sentence).
    threshold, seed, n_boot, block_regions, correction, conditioning :
        As for :func:`classify_image`.

    Returns
    -------
    ModeResult
        ``settings["input"]`` is ``"height map"`` and ``settings["view"]`` the
        view recipe; the quality is that of the rendered view, and a map with
        more than :data:`MAX_MISSING_FRACTION` of its points not measured is
        not fit to score.

    References
    ----------
    Reimer (1998) for the view, see fracto.modes.heightview; Künsch (1989) and
    Forman (2008) as for :func:`classify_image`.
    """
    from fracto.modes.heightview import (
        FINGERPRINT_TOLERANCE,
        HEIGHT_VIEW_VERSION,
        height_region_features,
        view_fingerprint,
    )

    if not is_height_model(model):
        raise FractoInputError(
            "This model classifies SEM images, not height maps alone; use the height model "
            "(models/fracto-height.skops) or give an SEM image."
        )
    made_with = getattr(model, "height_view_version_", None)
    if made_with != HEIGHT_VIEW_VERSION:
        raise FractoInputError(
            f"The height model was trained on views '{made_with}' but this fracto renders "
            f"'{HEIGHT_VIEW_VERSION}'; rebuild it with "
            "'python -m fracto.modes.default_model --height --out models/'."
        )
    stored = getattr(model, "height_view_fingerprint_", None)
    if stored is None or not np.allclose(
        stored, view_fingerprint(), rtol=0.0, atol=FINGERPRINT_TOLERANCE
    ):
        raise FractoInputError(
            "The height model was trained on views of another version of the SEM renderer; "
            "rebuild it with 'python -m fracto.modes.default_model --height --out models/'."
        )
    if pixel_size_um is None:
        raise FractoInputError(
            "The height map has no lateral calibration; give its pixel size with --pixel-size."
        )
    h = np.asarray(height_um, dtype=np.float64)
    thr = _threshold(model, threshold)
    view, feats = height_region_features(h, pixel_size_um, scale_um=model.scale_um)
    quality = assess_quality(view)
    missing = float(1.0 - np.isfinite(h).mean())
    if missing > MAX_MISSING_FRACTION:
        quality = replace(
            quality,
            fit_to_score=False,
            reasons=(
                *quality.reasons,
                f"{missing:.1%} of the height map is not measured "
                f"(limit {MAX_MISSING_FRACTION:.0%}).",
            ),
        )
    res = _finish(
        view,
        feats,
        quality,
        model,
        thr,
        seed=seed,
        n_boot=n_boot,
        block_regions=block_regions,
        correction=correction,
        conditioning=conditioning,
    )
    from fracto.modes.heightview import view_settings

    res.settings.update(
        {"input": "height map", "view": view_settings(), "missing_fraction": missing}
    )
    return replace(res, view=view)


def _finish(
    img: np.ndarray,
    feats: RegionFeatures,
    quality: ImageQuality,
    model: ModeClassifier,
    thr: float,
    *,
    seed: int,
    n_boot: int,
    block_regions: int | None,
    correction: bool,
    conditioning: str | None,
) -> ModeResult:
    p_tiles = model.predict_proba(feats.X)
    p_blocks = tiles_to_blocks(p_tiles, feats.tile_grid)
    labels = block_labels(p_blocks, thr)
    classes = tuple(str(c) for c in model.classes_)
    names = (*classes, UNCLASSIFIED)
    weights = feats.block_weights()
    counted = block_bootstrap_fractions(
        memberships_from_labels(labels, len(classes)),
        weights,
        names,
        block_regions=block_regions,
        n_boot=n_boot,
        seed=seed,
    )
    fractions, info = counted, {"applied": False}
    rates = ErrorRates.from_model(model) if correction else None
    if not correction:
        info["reason"] = "switched off (--no-correction)"
    elif rates is None:
        info["reason"] = (
            "the model holds no held-out confusion (made by an older fracto); "
            "retrain it to correct the fractions"
        )
    else:
        best = p_blocks.argmax(axis=2)
        conf = float((p_blocks.max(axis=2) * weights).sum() / weights.sum())
        fractions, details = corrected_fractions(
            best,
            weights,
            names,
            rates,
            conditioning=conditioning,
            image_confidence=conf,
            block_regions=counted.block_regions,
            n_boot=n_boot,
            seed=seed,
        )
        info = {
            "applied": True,
            **details,
            "unclassified_uncorrected": float(counted.value[-1]),
        }
    label_map = paint((labels + 1).astype(np.uint8), feats.block_px, img.shape)
    return ModeResult(
        classes=classes,
        label_map=label_map,
        block_probabilities=p_blocks,
        block_labels=labels,
        fractions=fractions,
        features=feats,
        quality=quality,
        threshold=thr,
        seed=seed,
        settings={
            "n_boot": n_boot,
            "block_regions": fractions.block_regions,
            "correction": bool(info["applied"]),
            "conditioning": conditioning,
            "input": "sem image",
        },
        fractions_uncorrected=counted,
        correction=info,
    )
