"""Whole training images for the held-out area confusion of a mode model.

:meth:`fracto.modes.model.ModeClassifier.fit` trains on the labelled, mostly
pure tiles of each image, but the fractions it is used for count *every*
block of an image, boundary blocks between modes included. To score the model
the way it is used, ``fit`` accepts one :class:`HeldOutImage` per training
image: all its tile features and the true area of each class in each block.
Each image is then predicted by the fold model that never saw it and its
area confusion (true class area in each predicted class) is stored.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from fracto.modes.regions import check_mask, mask_block_histogram, tile_labels_from_mask


@dataclass(frozen=True)
class HeldOutImage:
    """All tiles of one training image and the true class areas of its blocks.

    Parameters
    ----------
    group : object
        The image's value in the ``groups`` array given to ``fit``.
    X : ndarray, shape (n_tiles, n_features)
        Features of every tile (row-major over `tile_grid`).
    tile_grid : (rows, cols)
    block_truth : ndarray, shape (rows + 1, cols + 1, n_classes)
        Area of each class in each block, in blocks (pixels / block_px²);
        unlabelled pixels are not counted.
    """

    group: object
    X: np.ndarray
    tile_grid: tuple[int, int]
    block_truth: np.ndarray


def held_out_image(features, label_image: np.ndarray, group, n_classes: int) -> HeldOutImage:
    """A :class:`HeldOutImage` from an image's RegionFeatures and its label image.

    Parameters
    ----------
    features : fracto.modes.features.RegionFeatures
    label_image : ndarray of int
        0 = unlabelled, ``i`` = the model's ``classes[i - 1]``.
    group : object
        The image's group value.
    n_classes : int
        Number of classes of the model.
    """
    h = mask_block_histogram(
        np.asarray(label_image), features.block_grid, features.block_px, n_classes + 1
    ).astype(np.float64)
    return HeldOutImage(
        group=group,
        X=np.asarray(features.X, dtype=np.float32),
        tile_grid=tuple(features.tile_grid),
        block_truth=h[..., 1:] / float(features.block_px) ** 2,
    )


def training_data_from_arrays(
    items: Iterable[tuple[np.ndarray, np.ndarray, str]],
    classes: Sequence[str],
    *,
    pixel_size_um: float | None = None,
    scale_um: float | None = None,
    max_regions_per_image: int | None = None,
    seed: int = 0,
):
    """Training set and whole-image scoring records from (image, labels, name) triples.

    The same tiles and labels as
    :func:`fracto.modes.training.set_from_arrays`, plus one
    :class:`HeldOutImage` per image (group = the image's index), from one
    feature extraction per image.

    Returns
    -------
    (TrainingSet, list of HeldOutImage)
    """
    from fracto.modes.features import feature_names, region_features
    from fracto.modes.training import TrainingSet

    rng = np.random.default_rng(seed)
    parts, images = [], []
    n_labels = len(classes) + 1
    for img, lab_img, name in items:
        check_mask(lab_img, img.shape, n_labels, name)
        f = region_features(img, pixel_size_um=pixel_size_um, scale_um=scale_um)
        lab = tile_labels_from_mask(lab_img, f.tile_grid, f.block_px, n_labels)
        keep = np.nonzero(lab > 0)[0]
        if max_regions_per_image is not None and keep.size > max_regions_per_image:
            keep = np.sort(rng.choice(keep, size=max_regions_per_image, replace=False))
        if keep.size:
            images.append(held_out_image(f, lab_img, len(parts), len(classes)))
            parts.append((f.X[keep], np.asarray(classes)[lab[keep] - 1], name))
    ts = TrainingSet.concatenate(parts, feature_names())
    ts.summary["classes"] = list(classes)
    return ts, images
