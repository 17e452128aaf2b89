"""Training data for the mode classifier: masks, image folders, synthetic surfaces.

Every source ends as a :class:`TrainingSet` of region features ``X``, class
names ``y`` and the image each region came from (``groups``), so that
cross-validation never puts regions of one image on both sides of a split.

Sources
-------
- (image, mask) pairs: masks are indexed images, 0 = unlabelled, value ``i``
  = the model's ``classes[i - 1]``; a tile takes the majority label of its
  labelled pixels when it is mostly labelled and mostly one class
  (:func:`fracto.modes.regions.tile_labels_from_mask`).
- image folders: one sub-folder per class name; every tile of an image takes
  its folder's class.
- synthetic surfaces from :mod:`fracto.synth` with their true label images.
"""

from __future__ import annotations

import csv
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from fracto.classes import MODES
from fracto.errors import FractoInputError
from fracto.modes.features import feature_names, region_features
from fracto.modes.regions import check_mask, tile_labels_from_mask

IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")


@dataclass
class TrainingSet:
    """Region features with class names and image groups."""

    X: np.ndarray
    y: np.ndarray
    groups: np.ndarray
    names: list[str]
    images: list[str] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)

    @classmethod
    def concatenate(cls, parts: Sequence[tuple[np.ndarray, np.ndarray, str]], names: list[str]):
        if not parts:
            raise FractoInputError("No labelled regions were found in the training data.")
        X = np.concatenate([p[0] for p in parts]).astype(np.float32)
        y = np.concatenate([p[1] for p in parts]).astype(str)
        groups = np.concatenate([np.full(len(p[1]), i) for i, p in enumerate(parts)])
        images = [p[2] for p in parts]
        cls_counts = {c: int((y == c).sum()) for c in sorted(set(y))}
        summary = {"n_images": len(parts), "n_regions": len(y), "regions_per_class": cls_counts}
        return cls(X, y, groups, names, images, summary)


def read_grey_image(
    path: str | os.PathLike, *, banner: str = "auto", pixel_size=None, scale_bar: str | None = None
):
    """Read an SEM image as grey [0, 1] with fracto's reader.

    Returns
    -------
    (image, PixelSize, info dict)
    """
    from fracto.io import read_sem_image

    p = Path(path)
    if not p.is_file():
        raise FractoInputError(f"The image file '{p}' does not exist.")
    sem = read_sem_image(p, banner=banner, pixel_size=pixel_size, scale_bar=scale_bar)
    return np.asarray(sem.image, dtype=np.float32), sem.pixel_size, sem.to_dict()


def read_mask(path: str | os.PathLike) -> np.ndarray:
    """Read an indexed (palette or grey) PNG mask as integer labels."""
    from PIL import Image, UnidentifiedImageError

    p = Path(path)
    if not p.is_file():
        raise FractoInputError(f"The mask file '{p}' does not exist.")
    try:
        with Image.open(p) as im:
            im.load()
            if im.mode in ("P", "L", "I", "I;16", "1"):
                a = np.asarray(im)
            else:
                raise FractoInputError(
                    f"The mask '{p}' is a {im.mode} image; save it as an indexed or grey PNG "
                    "with one value per class."
                )
    except (UnidentifiedImageError, OSError) as exc:
        raise FractoInputError(f"'{p}' is not an image fracto can read as a mask.") from exc
    return a.astype(np.int64)


def read_mask_list(path: str | os.PathLike) -> list[tuple[Path, Path]]:
    """Read a list of ``image,mask`` pairs (CSV, tab or space separated).

    Relative paths are taken relative to the list's folder; a first line
    naming columns (``image,mask``) is skipped.
    """
    p = Path(path)
    if not p.is_file():
        raise FractoInputError(f"The mask list '{p}' does not exist.")
    base = p.parent
    pairs: list[tuple[Path, Path]] = []
    text = p.read_text(encoding="utf-8-sig")
    dialect_delims = "," if "," in text else ("\t" if "\t" in text else " ")
    for i, row in enumerate(csv.reader(text.splitlines(), delimiter=dialect_delims)):
        row = [c.strip() for c in row if c.strip()]
        if not row or row[0].startswith("#"):
            continue
        if i == 0 and row[0].lower() in ("image", "image_path", "file"):
            continue
        if len(row) < 2:
            raise FractoInputError(f"Line {i + 1} of '{p}' needs an image and a mask path.")
        pairs.append(tuple((base / c) if not Path(c).is_absolute() else Path(c) for c in row[:2]))
    if not pairs:
        raise FractoInputError(f"The mask list '{p}' names no image,mask pairs.")
    return pairs  # type: ignore[return-value]


def read_image_folders(root: str | os.PathLike) -> list[tuple[Path, str]]:
    """Images sorted into one sub-folder per class; returns (path, class) pairs."""
    r = Path(root)
    if not r.is_dir():
        raise FractoInputError(f"The image folder '{r}' does not exist.")
    out: list[tuple[Path, str]] = []
    for sub in sorted(d for d in r.iterdir() if d.is_dir() and not d.name.startswith(".")):
        for f in sorted(sub.iterdir()):
            if f.suffix.lower() in IMAGE_SUFFIXES:
                out.append((f, sub.name))
    if not out:
        raise FractoInputError(
            f"No images were found in sub-folders of '{r}' (one sub-folder per mode)."
        )
    return out


def classes_for(found: Iterable[str], requested: Sequence[str] | None = None) -> list[str]:
    """Class list: the requested one, or fracto's modes followed by any others found."""
    if requested:
        return list(requested)
    found = list(dict.fromkeys(found))
    return [m for m in MODES if m in found] + sorted(c for c in found if c not in MODES)


def _features(img, pixel_size_um, scale_um, height_um=None):
    return region_features(
        img, pixel_size_um=pixel_size_um, scale_um=scale_um, height_um=height_um
    )


def _px_um(pixel_size, override_um: float | None) -> float | None:
    if override_um is not None:
        return override_um
    if pixel_size is not None and getattr(pixel_size, "calibrated", False):
        return float(pixel_size.x_um)
    return None


def set_from_masks(
    pairs: Sequence[tuple[Path, Path]],
    classes: Sequence[str],
    *,
    scale_um: float | None = None,
    pixel_size_um: float | None = None,
    banner: str = "auto",
) -> TrainingSet:
    """Region features and labels from (image, mask) pairs."""
    parts = []
    n_labels = len(classes) + 1
    for img_path, mask_path in pairs:
        img, ps, _ = read_grey_image(img_path, banner=banner)
        mask = read_mask(mask_path)
        if mask.shape != img.shape and banner == "auto":
            # the mask may have been drawn on the full frame including the banner
            raw, _, _ = read_grey_image(img_path, banner="none")
            if mask.shape == raw.shape:
                mask = mask[: img.shape[0], : img.shape[1]]
        check_mask(mask, img.shape, n_labels, str(mask_path))
        f = _features(img, _px_um(ps, pixel_size_um), scale_um)
        lab = tile_labels_from_mask(mask, f.tile_grid, f.block_px, n_labels)
        keep = lab > 0
        if keep.any():
            parts.append((f.X[keep], np.asarray(classes)[lab[keep] - 1], str(img_path)))
    ts = TrainingSet.concatenate(parts, feature_names())
    ts.summary["source"] = "image,mask pairs"
    ts.summary["classes"] = list(classes)
    return ts


def set_from_folders(
    items: Sequence[tuple[Path, str]],
    *,
    scale_um: float | None = None,
    pixel_size_um: float | None = None,
    banner: str = "auto",
) -> TrainingSet:
    """Region features from whole images sorted into class folders."""
    parts = []
    for path, cls in items:
        img, ps, _ = read_grey_image(path, banner=banner)
        f = _features(img, _px_um(ps, pixel_size_um), scale_um)
        parts.append((f.X, np.full(len(f.X), cls), str(path)))
    ts = TrainingSet.concatenate(parts, feature_names())
    ts.summary["source"] = "image folders"
    return ts


def set_from_arrays(
    items: Iterable[tuple[np.ndarray, np.ndarray, str]],
    classes: Sequence[str],
    *,
    pixel_size_um: float | None = None,
    scale_um: float | None = None,
    max_regions_per_image: int | None = None,
    seed: int = 0,
) -> TrainingSet:
    """Region features from in-memory (image, label image, name) triples.

    Label images use 0 = unlabelled and ``i`` = ``classes[i - 1]`` (as
    :data:`fracto.classes.CLASSES` for fracto's own modes). With
    `max_regions_per_image`, a seeded random subset of each image's labelled
    tiles is kept (overlapping tiles are largely redundant).
    """
    rng = np.random.default_rng(seed)
    parts = []
    n_labels = len(classes) + 1
    for img, lab_img, name in items:
        check_mask(lab_img, img.shape, n_labels, name)
        f = _features(img, pixel_size_um, scale_um)
        lab = tile_labels_from_mask(lab_img, f.tile_grid, f.block_px, n_labels)
        keep = np.nonzero(lab > 0)[0]
        if max_regions_per_image is not None and keep.size > max_regions_per_image:
            keep = np.sort(rng.choice(keep, size=max_regions_per_image, replace=False))
        if keep.size:
            parts.append((f.X[keep], np.asarray(classes)[lab[keep] - 1], name))
    ts = TrainingSet.concatenate(parts, feature_names())
    ts.summary["classes"] = list(classes)
    return ts


# ---------------------------------------------------------------- scores


def grouped_cv_scores(
    make_model,
    ts: TrainingSet,
    *,
    n_splits: int | str = 5,
    seed: int = 0,
) -> dict[str, Any]:
    """Cross-validated confusion matrix and per-class recall, grouped by image.

    Parameters
    ----------
    make_model : callable
        Returns a fresh, unfitted :class:`ModeClassifier`.
    ts : TrainingSet
    n_splits : int or "loio"
        Number of grouped folds, or ``"loio"`` for leave-one-image-out.
    seed : int
        Seed of the group shuffle (GroupKFold keeps groups whole).

    Returns
    -------
    dict with ``labels``, ``confusion_matrix`` (rows = true), ``recall``,
    ``region_accuracy``, ``scheme``, ``n_splits``.
    """
    from sklearn.metrics import confusion_matrix
    from sklearn.model_selection import GroupKFold, LeaveOneGroupOut

    n_groups = len(np.unique(ts.groups))
    if n_groups < 2:
        raise FractoInputError("Cross-validation needs regions from at least two images.")
    if n_splits == "loio":
        splitter = LeaveOneGroupOut()
        scheme = "leave-one-image-out"
    else:
        k = int(min(int(n_splits), n_groups))
        splitter = GroupKFold(k, shuffle=True, random_state=seed)
        scheme = f"{k}-fold grouped by image"
    pred = np.empty(len(ts.y), dtype=object)
    n_done = 0
    for tr, te in splitter.split(ts.X, ts.y, ts.groups):
        if len(set(ts.y[tr])) < 2:
            continue
        m = make_model().fit(ts.X[tr], ts.y[tr], ts.groups[tr])
        pred[te] = m.predict_best(ts.X[te])
        n_done += 1
    done = np.array([p is not None for p in pred])
    labels = sorted(set(ts.y))
    order = [c for c in (make_model().class_names) if c in labels] + [
        c for c in labels if c not in make_model().class_names
    ]
    yt, yp = ts.y[done], pred[done].astype(str)
    cm = confusion_matrix(yt, yp, labels=order)
    recall = {
        c: float(cm[i, i] / cm[i].sum()) if cm[i].sum() else None for i, c in enumerate(order)
    }
    acc = float((yt == yp).mean()) if len(yt) else float("nan")
    return {
        "scheme": scheme,
        "n_splits": n_done,
        "labels": order,
        "confusion_matrix": cm.tolist(),
        "recall": recall,
        "region_accuracy": acc,
        "n_regions_scored": int(done.sum()),
    }


def heldout_permutation_importance(
    make_model,
    ts: TrainingSet,
    *,
    heldout_share: float = 0.25,
    n_repeats: int = 3,
    seed: int = 0,
    top: int | None = None,
) -> dict[str, float]:
    """Permutation importance (drop in region accuracy) on held-out images.

    References
    ----------
    .. [1] Breiman, L. (2001). Random forests. Machine Learning 45, 5-32
       (permutation importance); sklearn.inspection.permutation_importance.
    """
    from sklearn.inspection import permutation_importance
    from sklearn.model_selection import GroupShuffleSplit

    if len(np.unique(ts.groups)) < 2:
        return {}
    split = GroupShuffleSplit(1, test_size=heldout_share, random_state=seed)
    tr, te = next(split.split(ts.X, ts.y, ts.groups))
    if len(set(ts.y[tr])) < 2:
        return {}
    m = make_model().fit(ts.X[tr], ts.y[tr], ts.groups[tr])

    class _Best:
        def fit(self, *a, **k):  # pragma: no cover - never refitted
            return self

        def predict(self, X):
            return m.predict_best(X)

        def score(self, X, y):
            return float((m.predict_best(X) == y).mean())

    r = permutation_importance(
        _Best(), ts.X[te], ts.y[te], n_repeats=n_repeats, random_state=seed, scoring=None
    )
    imp = dict(zip(ts.names, (float(v) for v in r.importances_mean), strict=True))
    ranked = dict(sorted(imp.items(), key=lambda kv: -kv[1]))
    if top is not None:
        ranked = dict(list(ranked.items())[:top])
    return ranked


def format_scores(scores: dict[str, Any]) -> str:
    """Confusion matrix and per-class recall as readable text."""
    labels = scores["labels"]
    cm = scores["confusion_matrix"]
    w = max(8, *(len(c) for c in labels)) + 1
    lines = [f"Cross-validation ({scores['scheme']}, {scores['n_splits']} splits)"]
    lines.append("true \\ predicted".ljust(w + 4) + "".join(c[: w - 1].rjust(w) for c in labels))
    for c, row in zip(labels, cm, strict=True):
        lines.append(c.ljust(w + 4) + "".join(str(v).rjust(w) for v in row))
    lines.append(
        "recall: "
        + ", ".join(
            f"{c} {v:.3f}" if v is not None else f"{c} n/a" for c, v in scores["recall"].items()
        )
    )
    lines.append(f"region accuracy: {scores['region_accuracy']:.3f}")
    return "\n".join(lines)


# ---------------------------------------------------------------- end to end


def parse_classes(text: str) -> list[str]:
    """Class names from ``"a,b,c"`` or a JSON file holding a list (or ``{"classes": [...]}``)."""
    import json

    p = Path(text)
    if p.suffix.lower() == ".json":
        if not p.is_file():
            raise FractoInputError(f"The classes file '{p}' does not exist.")
        try:
            obj = json.loads(p.read_text(encoding="utf-8"))
        except json.JSONDecodeError as exc:
            raise FractoInputError(f"The classes file '{p}' is not valid JSON.") from exc
        names = obj.get("classes") if isinstance(obj, dict) else obj
    else:
        names = [c.strip() for c in text.split(",")]
    if (
        not isinstance(names, list)
        or not names
        or not all(isinstance(c, str) and c.strip() for c in names)
    ):
        raise FractoInputError("The classes must be a non-empty list of names.")
    names = [c.strip() for c in names]
    if len(set(names)) != len(names):
        raise FractoInputError("The class names must be different from each other.")
    if "unclassified" in names or "unlabelled" in names:
        raise FractoInputError("'unclassified' and 'unlabelled' are reserved, not class names.")
    return names


def train_and_save(
    ts: TrainingSet,
    out: str | os.PathLike,
    *,
    classes: Sequence[str],
    model_params: dict[str, Any] | None = None,
    n_splits: int | str = 5,
    seed: int = 0,
    importance: bool = True,
    extra_card: dict[str, Any] | None = None,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Score by grouped CV, fit on everything, save with skops and write the card.

    Returns
    -------
    (card dict, cross-validation scores)
    """
    import json

    from fracto.modes.model import ModeClassifier, save_model, write_model_card

    params = {"random_state": seed, **(model_params or {})}

    def make():
        return ModeClassifier(tuple(classes), **params)

    def make_scoring():
        # region labels are the argmax, which calibration hardly moves; scoring the
        # uncalibrated booster costs one fit per fold instead of one per calibration fold
        return ModeClassifier(tuple(classes), **{**params, "calibration": "none"})

    scores = grouped_cv_scores(make_scoring, ts, n_splits=n_splits, seed=seed)
    scores["scored_model"] = "the same booster without probability calibration (argmax labels)"
    imp = heldout_permutation_importance(make_scoring, ts, seed=seed) if importance else {}
    model = make().fit(ts.X, ts.y, ts.groups, feature_names=ts.names)
    save_model(model, out)
    summary = {k: v for k, v in ts.summary.items()}
    summary["regions_per_class"] = {
        str(k): int(v) for k, v in summary.get("regions_per_class", {}).items()
    }
    card_path = write_model_card(
        out, model, training=summary, scores=scores, importance=imp, seed=seed, extra=extra_card
    )
    card = json.loads(Path(card_path).read_text(encoding="utf-8"))
    card["card_path"] = str(card_path)
    return card, scores


def train_from_sources(
    out: str | os.PathLike,
    *,
    masks: str | None = None,
    image_folders: str | None = None,
    classes: Sequence[str] | None = None,
    pixel_size_um: float | None = None,
    scale_um: float | None = None,
    banner: str = "auto",
    n_splits: int | str = 5,
    threshold: float = 0.5,
    max_iter: int = 100,
    seed: int = 0,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Train from a mask list or class folders (what ``fracto train`` runs)."""
    if max_iter < 1:
        raise FractoInputError("The number of boosting iterations must be at least 1.")
    if masks:
        pairs = read_mask_list(masks)
        cls = list(classes) if classes else list(MODES)
        ts = set_from_masks(
            pairs, cls, scale_um=scale_um, pixel_size_um=pixel_size_um, banner=banner
        )
    else:
        items = read_image_folders(image_folders)
        cls = classes_for((c for _, c in items), classes)
        missing = sorted({c for _, c in items} - set(cls))
        if missing:
            raise FractoInputError(f"The folders {missing} are not among the classes {cls}.")
        ts = set_from_folders(items, scale_um=scale_um, pixel_size_um=pixel_size_um, banner=banner)
    ts.summary["classes"] = list(cls)
    params = {"threshold": threshold, "scale_um": scale_um, "max_iter": max_iter}
    return train_and_save(ts, out, classes=cls, model_params=params, n_splits=n_splits, seed=seed)
