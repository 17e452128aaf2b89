"""One call from an image (and height map) to a mode map and mode fractions."""

from __future__ import annotations

from dataclasses import dataclass, field

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
    if model.uses_height and height_um is None:
        raise FractoInputError("This model needs a height map; give --height-map.")
    thr = model.threshold if threshold is None else float(threshold)
    if not 0.0 <= thr <= 1.0:
        raise FractoInputError(f"The threshold must lie between 0 and 1, not {thr}.")
    quality = assess_quality(img)
    feats = region_features(
        img,
        pixel_size_um=pixel_size_um,
        scale_um=model.scale_um,
        height_um=height_um if model.uses_height else None,
    )
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
        },
        fractions_uncorrected=counted,
        correction=info,
    )
