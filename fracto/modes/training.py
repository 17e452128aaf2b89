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

Continuing from a base model (``fracto train --base MODEL``)
-------------------------------------------------------------
- classes: the base model's classes (``classes_``, the order ``fracto
  suggest`` numbers its mask values by) followed by any new classes, so mask
  value ``i`` means ``(base classes + new classes)[i - 1]``. New classes come
  from ``classes=`` (only the new names, or the base classes in their order
  followed by the new ones) or, for image folders, from sub-folders whose
  name is no base class (sorted).
- settings (:data:`INHERITED_SETTINGS`) are the base model's unless given
  explicitly.
- regions: the base model's stored training regions (``NAME.regions.npz``
  beside ``NAME.skops``, or the file its card names) are merged with the new
  ones; each base region weighs 1 and each new region `new_weight`
  (:data:`DEFAULT_NEW_WEIGHT`). Cross-validation stays grouped by image (each
  stored base field is one group). Without stored regions only the new
  regions are used.
- every model ``fracto train`` writes gets its own ``NAME.regions.npz`` (all
  new regions, filled up to :data:`MAX_SAVED_REGIONS` with a seeded random
  subset of the others), so an adapted model can be a base again.
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


def crop_mask_like_image(
    mask: np.ndarray, image_shape: tuple[int, int], banner: dict
) -> np.ndarray:
    """Cut the banner rows off a mask drawn on the full frame, as the reader cut the image.

    Parameters
    ----------
    mask : ndarray (ny, nx)
    image_shape : (rows, cols) of the image after the banner crop
    banner : dict
        The reader's banner info (``{"side": "top" | "bottom" | None, "rows": k}``,
        :attr:`fracto.io.sem.SemImage.banner`).

    Returns
    -------
    ndarray
        The mask unchanged unless it is exactly ``rows + k`` by ``cols``; then
        the ``k`` rows on the banner's side are removed.
    """
    k = int(banner.get("rows") or 0)
    rows, cols = image_shape
    if k and mask.shape != tuple(image_shape) and mask.shape == (rows + k, cols):
        return mask[k:] if banner.get("side") == "top" else mask[:rows]
    return mask


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
        img, ps, info = read_grey_image(img_path, banner=banner)
        mask = crop_mask_like_image(read_mask(mask_path), img.shape, info["banner"])
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
    sample_weight: np.ndarray | None = None,
    report: np.ndarray | None = None,
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
    sample_weight : array (n_regions,), optional
        Region weights for fitting (scores count regions).
    report : bool array (n_regions,), optional
        Regions also scored on their own (``new_regions``: accuracy and
        recall of the new material's regions when adapting a base model).

    Returns
    -------
    dict with ``labels``, ``confusion_matrix`` (rows = true), ``recall``,
    ``region_accuracy``, ``scheme``, ``n_splits`` (and ``new_regions``).
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
        sw = None if sample_weight is None else np.asarray(sample_weight)[tr]
        m = make_model().fit(ts.X[tr], ts.y[tr], ts.groups[tr], sample_weight=sw)
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
    out = {
        "scheme": scheme,
        "n_splits": n_done,
        "labels": order,
        "confusion_matrix": cm.tolist(),
        "recall": recall,
        "region_accuracy": acc,
        "n_regions_scored": int(done.sum()),
    }
    if report is not None:
        sel = done & np.asarray(report, dtype=bool)
        yt_n, yp_n = ts.y[sel], pred[sel].astype(str)
        out["new_regions"] = {
            "region_accuracy": float((yt_n == yp_n).mean()) if sel.any() else None,
            "n_regions_scored": int(sel.sum()),
            "recall": {
                c: float((yp_n[yt_n == c] == c).mean()) if (yt_n == c).any() else None
                for c in order
            },
        }
    return out


def heldout_permutation_importance(
    make_model,
    ts: TrainingSet,
    *,
    heldout_share: float = 0.25,
    n_repeats: int = 3,
    seed: int = 0,
    top: int | None = None,
    sample_weight: np.ndarray | None = None,
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
    sw = None if sample_weight is None else np.asarray(sample_weight)[tr]
    m = make_model().fit(ts.X[tr], ts.y[tr], ts.groups[tr], sample_weight=sw)

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
    sample_weight: np.ndarray | None = None,
    new: np.ndarray | None = None,
    regions_out: str | os.PathLike | None = None,
    fit_threads: int | None = None,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Score by grouped CV, fit on everything, save with skops and write the card.

    Parameters
    ----------
    fit_threads : int, optional
        OpenMP threads of every fit here (the boosting's histograms are summed
        feature by feature, so the thread count does not change the model); the
        saved model keeps the ``n_threads`` of `model_params` for its predictions.
        None: that ``n_threads`` for fitting too.
    sample_weight : array (n_regions,), optional
        Region weights for every fit.
    new : bool array (n_regions,), optional
        The new material's regions when adapting a base model: scored on
        their own in the cross-validation, and the only images in the
        model's held-out confusion (used by corrected fractions).
    regions_out : path, optional
        Also write the training regions there (:func:`save_training_regions`,
        new regions kept first) and name the file in the card.

    Returns
    -------
    (card dict, cross-validation scores)
    """
    import json

    from fracto.modes.model import ModeClassifier, save_model, write_model_card

    saved = {"random_state": seed, **(model_params or {})}
    params = saved if fit_threads is None else {**saved, "n_threads": fit_threads}

    def make():
        return ModeClassifier(tuple(classes), **params)

    def make_scoring():
        # region labels are the argmax, which calibration hardly moves; scoring the
        # uncalibrated booster costs one fit per fold instead of one per calibration fold
        return ModeClassifier(tuple(classes), **{**params, "calibration": "none"})

    scores = grouped_cv_scores(
        make_scoring, ts, n_splits=n_splits, seed=seed, sample_weight=sample_weight, report=new
    )
    scores["scored_model"] = "the same booster without probability calibration (argmax labels)"
    imp = (
        heldout_permutation_importance(make_scoring, ts, seed=seed, sample_weight=sample_weight)
        if importance
        else {}
    )
    score_groups = None
    if new is not None and np.any(new):
        score_groups = set(np.unique(ts.groups[np.asarray(new, bool)]).tolist())
    model = make().fit(
        ts.X,
        ts.y,
        ts.groups,
        feature_names=ts.names,
        sample_weight=sample_weight,
        score_groups=score_groups,
    )
    model.set_params(n_threads=saved.get("n_threads", model.n_threads))
    save_model(model, out)
    extra_card = dict(extra_card or {})
    if regions_out is not None:
        n_saved = save_training_regions(regions_out, ts, classes, keep=new, seed=seed)
        extra_card["saved_regions"] = {
            "file": Path(regions_out).name,
            "n_regions": n_saved,
            "selection": "every new region, then a seeded random subset "
            f"(seed {seed}) of the others, at most {MAX_SAVED_REGIONS}",
            "keys": list(REGION_KEYS),
        }
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


# ---------------------------------------------------------------- base models

#: Model settings a model trained with ``--base`` takes from its base model
#: unless they are given explicitly.
INHERITED_SETTINGS = (
    "scale_um",
    "threshold",
    "max_iter",
    "calibration",
    "n_calibration_folds",
    "learning_rate",
    "max_leaf_nodes",
    "l2_regularization",
    "class_weight",
)

#: Settings of a model trained without a base, unless given explicitly.
DEFAULT_SETTINGS: dict[str, Any] = {
    "scale_um": None,
    "threshold": 0.5,
    "max_iter": 100,
    "calibration": "isotonic",
}

#: Sample weight of each new region against 1 for each base region (common practice,
#: no source: the default model stores 10 000 regions, so a few hundred new regions
#: weigh, at 10, a good part of the base; bench/bench_learning.py measures the effect).
DEFAULT_NEW_WEIGHT = 10.0

#: Most regions written to a model's ``.regions.npz``.
MAX_SAVED_REGIONS = 10_000

#: Keys of a ``.regions.npz`` file (plain arrays, no pickle).
REGION_KEYS = ("X", "y", "groups", "feature_names", "classes", "feature_set_version")


@dataclass
class BaseModel:
    """A model to continue from: its classes, settings and stored regions."""

    path: Path
    sha256: str
    classes: list[str]
    settings: dict[str, Any]
    regions: TrainingSet | None
    regions_file: Path | None


def regions_path_for(model_path: str | os.PathLike) -> Path:
    """Stored training regions of a model: the file its card names, else ``NAME.regions.npz``."""
    import json

    from fracto.modes.model import card_path_for

    p = Path(model_path)
    card = card_path_for(p)
    if card.is_file():
        try:
            saved = json.loads(card.read_text(encoding="utf-8")).get("saved_regions") or {}
        except (json.JSONDecodeError, AttributeError, UnicodeDecodeError):
            saved = {}
        name = saved.get("file") if isinstance(saved, dict) else None
        if isinstance(name, str) and name and Path(name).name == name:
            return p.with_name(name)
    return p.with_name(p.name.removesuffix(".skops") + ".regions.npz")


def load_regions(path: str | os.PathLike, classes: Sequence[str]) -> TrainingSet:
    """Read a ``.regions.npz`` file (numpy.load without pickle) as a TrainingSet.

    Raises
    ------
    FractoInputError
        If the file is not such a file, was made for another feature-set
        version or other features, or names classes outside `classes`.
    """
    from fracto.modes.features import FEATURE_SET_VERSION

    p = Path(path)
    try:
        with np.load(p, allow_pickle=False) as z:
            missing = [k for k in REGION_KEYS if k not in z.files]
            if missing:
                raise FractoInputError(
                    f"The stored regions '{p}' lack the arrays {', '.join(missing)}."
                )
            X = np.asarray(z["X"], np.float32)
            y = np.asarray(z["y"]).astype(str)
            groups = np.asarray(z["groups"]).astype(np.int64)
            names = [str(n) for n in z["feature_names"]]
            version = str(z["feature_set_version"])
    except (OSError, ValueError) as exc:
        raise FractoInputError(f"'{p}' is not a file of stored training regions.") from exc
    if version != FEATURE_SET_VERSION:
        raise FractoInputError(
            f"The stored regions '{p}' hold feature set '{version}' but this fracto computes "
            f"'{FEATURE_SET_VERSION}'."
        )
    if names != feature_names() or X.ndim != 2 or X.shape[1] != len(names):
        raise FractoInputError(f"The stored regions '{p}' hold other features than fracto's.")
    if not (len(y) == len(X) == len(groups)):
        raise FractoInputError(f"The stored regions '{p}' have arrays of different lengths.")
    unknown = sorted(set(y) - set(classes))
    if unknown:
        raise FractoInputError(
            f"The stored regions '{p}' hold classes {unknown} the base model does not know."
        )
    _, inv = np.unique(groups, return_inverse=True)
    images = [f"{p.name}#{g}" for g in np.unique(groups)]
    counts = {c: int((y == c).sum()) for c in sorted(set(y))}
    summary = {"n_images": len(images), "n_regions": len(y), "regions_per_class": counts}
    return TrainingSet(X, y, inv.astype(np.int64), names, images, summary)


def load_base(path: str | os.PathLike, *, trust: bool = False) -> BaseModel:
    """Read a fracto model to continue training from.

    Raises
    ------
    FractoInputError
        If it is not a fracto model, was made for another feature-set version
        (:func:`fracto.modes.model.load_model`), needs height maps, or its
        stored regions cannot be used.
    """
    from fracto.modes.model import load_model, sha256_of

    p = Path(path)
    model = load_model(p, trust=trust)
    if getattr(model, "uses_height", False):
        raise FractoInputError(
            f"The base model '{p}' needs height maps; 'fracto train' continues image models only."
        )
    classes = [str(c) for c in model.classes_]
    params = model.get_params()
    settings = {k: params[k] for k in INHERITED_SETTINGS if k in params}
    rp = regions_path_for(p)
    regions = load_regions(rp, classes) if rp.is_file() else None
    return BaseModel(
        p, sha256_of(p), classes, settings, regions, rp if regions is not None else None
    )


def classes_with_base(
    base_classes: Sequence[str],
    requested: Sequence[str] | None = None,
    found: Iterable[str] = (),
) -> tuple[list[str], list[str]]:
    """All classes of a model continued from a base, and the new ones.

    Parameters
    ----------
    base_classes : the base model's classes (mask values 1..k)
    requested : names given by the user: the new classes only, or the base
        classes in their order followed by the new ones
    found : class names met in the data (image folders); those that are no
        base class are new, in sorted order, unless `requested` orders them

    Returns
    -------
    (classes, new classes)
    """
    base = list(base_classes)
    if requested:
        req = list(requested)
        if req[: len(base)] == base:
            new = req[len(base) :]
        else:
            clash = [c for c in req if c in base]
            if clash:
                raise FractoInputError(
                    f"With a base model, the classes are the base's ({', '.join(base)}) "
                    "followed by new ones; list only the new ones, or all of them in that order."
                )
            new = req
    else:
        new = sorted({c for c in found if c not in base})
    stray = sorted({c for c in found if c not in base and c not in new})
    if stray:
        raise FractoInputError(f"The folders {stray} are not among the classes {base + new}.")
    return base + new, new


def merge_with_base(
    new: TrainingSet, base: TrainingSet | None, *, new_weight: float = DEFAULT_NEW_WEIGHT
) -> tuple[TrainingSet, np.ndarray, np.ndarray]:
    """Base regions followed by new ones, with sample weights and a new-region flag.

    Groups stay whole images: base groups keep their numbers, new images
    follow them. Returns (merged set, sample weights, is_new).
    """
    if not (np.isfinite(new_weight) and new_weight > 0):
        raise FractoInputError("The weight of the new regions must be a positive number.")
    if base is None or len(base.y) == 0:
        w = np.full(len(new.y), float(new_weight))
        return new, w, np.ones(len(new.y), bool)
    nb = int(base.groups.max()) + 1
    X = np.concatenate([base.X, new.X]).astype(np.float32)
    y = np.concatenate([base.y, new.y]).astype(str)
    groups = np.concatenate([base.groups, np.asarray(new.groups) + nb])
    images = [*base.images, *new.images]
    is_new = np.r_[np.zeros(len(base.y), bool), np.ones(len(new.y), bool)]
    w = np.where(is_new, float(new_weight), 1.0)
    summary = dict(new.summary)
    summary.update(
        {
            "n_images": len(np.unique(groups)),
            "n_regions": len(y),
            "regions_per_class": {c: int((y == c).sum()) for c in sorted(set(y))},
            "n_base_regions": len(base.y),
            "n_base_images": len(np.unique(base.groups)),
            "n_new_regions": len(new.y),
            "n_new_images": len(np.unique(new.groups)),
            "new_regions_per_class": {c: int((new.y == c).sum()) for c in sorted(set(new.y))},
            "new_region_weight": float(new_weight),
            "base_region_weight": 1.0,
        }
    )
    return TrainingSet(X, y, groups, new.names, images, summary), w, is_new


def save_training_regions(
    path: str | os.PathLike,
    ts: TrainingSet,
    classes: Sequence[str],
    *,
    keep: np.ndarray | None = None,
    max_regions: int = MAX_SAVED_REGIONS,
    seed: int = 0,
) -> int:
    """Write training regions as a compressed ``.npz`` (keys :data:`REGION_KEYS`).

    The regions flagged in `keep` come first and are all written (up to
    `max_regions`); the rest are filled with a seeded random subset of the
    others. Written to a temporary name and renamed; returns the count.
    """
    from fracto.io.safe import atomic_write
    from fracto.modes.features import FEATURE_SET_VERSION

    n = len(ts.y)
    rng = np.random.default_rng(seed)
    flag = np.zeros(n, bool) if keep is None else np.asarray(keep, bool)
    first, rest = np.nonzero(flag)[0], np.nonzero(~flag)[0]
    if first.size > max_regions:
        first = rng.choice(first, size=max_regions, replace=False)
    room = max_regions - first.size
    if rest.size > room:
        rest = rng.choice(rest, size=room, replace=False)
    idx = np.sort(np.r_[first, rest]).astype(int)
    with atomic_write(path, "wb") as fh:
        np.savez_compressed(
            fh,
            X=np.asarray(ts.X[idx], np.float32),
            y=np.asarray(ts.y[idx]).astype(str),
            groups=np.asarray(ts.groups[idx], np.int64),
            feature_names=np.asarray(ts.names, dtype=str),
            classes=np.asarray(list(classes), dtype=str),
            feature_set_version=np.asarray(FEATURE_SET_VERSION),
        )
    return int(idx.size)


def resolve_settings(
    given: dict[str, Any], base: BaseModel | None
) -> tuple[dict[str, Any], dict[str, str]]:
    """Model settings: explicit ones win, then the base model's, then the defaults.

    `given` holds only the settings the user gave (a key with value None
    means "explicitly none", e.g. a scale-free model). Returns the settings
    and the source of each (``"given"``, ``"base"``, ``"default"``).
    """
    out: dict[str, Any] = {}
    source: dict[str, str] = {}
    keys = list(dict.fromkeys([*DEFAULT_SETTINGS, *(base.settings if base else {}), *given]))
    for k in keys:
        if k in given:
            out[k], source[k] = given[k], "given"
        elif base is not None and k in base.settings:
            out[k], source[k] = base.settings[k], "base"
        else:
            out[k], source[k] = DEFAULT_SETTINGS[k], "default"
    return out, source


def train_from_sources(
    out: str | os.PathLike,
    *,
    masks: str | None = None,
    image_folders: str | None = None,
    classes: Sequence[str] | None = None,
    pixel_size_um: float | None = None,
    settings: dict[str, Any] | None = None,
    banner: str = "auto",
    n_splits: int | str = 5,
    seed: int = 0,
    base: str | os.PathLike | None = None,
    new_weight: float | None = None,
    trust: bool = False,
    save_regions: bool = True,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Train from a mask list or class folders (what ``fracto train`` runs).

    Parameters
    ----------
    settings : dict, optional
        Model settings given explicitly (``scale_um``, ``threshold``,
        ``max_iter``, ``calibration``, ...); the others come from the base
        model, else :data:`DEFAULT_SETTINGS`.
    base : path, optional
        A fracto model to continue from (see the module docstring).
    new_weight : float, optional
        Sample weight of each new region (base regions weigh 1); default
        :data:`DEFAULT_NEW_WEIGHT`. Only with `base`.
    trust : bool
        Load a base model holding types fracto does not expect.
    save_regions : bool
        Write ``NAME.regions.npz`` beside the model.
    """
    given = dict(settings or {})
    if new_weight is not None and base is None:
        raise FractoInputError("A weight for the new regions needs a base model (--base).")
    bm = load_base(base, trust=trust) if base is not None else None
    params, source = resolve_settings(given, bm)
    if int(params["max_iter"]) < 1:
        raise FractoInputError("The number of boosting iterations must be at least 1.")
    if params["calibration"] not in ("isotonic", "sigmoid", "none"):
        raise FractoInputError("The calibration must be isotonic, sigmoid or none.")
    scale_um = params["scale_um"]
    new_classes: list[str] = []
    if masks:
        pairs = read_mask_list(masks)
        if bm is not None:
            cls, new_classes = classes_with_base(bm.classes, classes)
        else:
            cls = list(classes) if classes else list(MODES)
        ts = set_from_masks(
            pairs, cls, scale_um=scale_um, pixel_size_um=pixel_size_um, banner=banner
        )
    else:
        items = read_image_folders(image_folders)
        if bm is not None:
            cls, new_classes = classes_with_base(bm.classes, classes, (c for _, c in items))
        else:
            cls = classes_for((c for _, c in items), classes)
            missing = sorted({c for _, c in items} - set(cls))
            if missing:
                raise FractoInputError(f"The folders {missing} are not among the classes {cls}.")
        ts = set_from_folders(items, scale_um=scale_um, pixel_size_um=pixel_size_um, banner=banner)
    ts.summary["classes"] = list(cls)
    weights = is_new = None
    extra: dict[str, Any] = {"settings_source": source}
    if bm is not None:
        w_new = DEFAULT_NEW_WEIGHT if new_weight is None else float(new_weight)
        ts, weights, is_new = merge_with_base(ts, bm.regions, new_weight=w_new)
        ts.summary["classes"] = list(cls)
        ts.summary.setdefault("n_base_regions", 0)
        ts.summary.setdefault("n_new_regions", int(is_new.sum()))
        ts.summary.setdefault("new_region_weight", w_new)
        extra["base_model"] = {
            "model_file": bm.path.name,
            "sha256": bm.sha256,
            "classes": list(bm.classes),
            "new_classes": list(new_classes),
            "regions_file": bm.regions_file.name if bm.regions_file else None,
            "n_base_regions": int(ts.summary["n_base_regions"]),
            "n_new_regions": int(ts.summary["n_new_regions"]),
            "new_region_weight": w_new,
            "base_region_weight": 1.0,
            "settings_inherited": sorted(k for k, v in source.items() if v == "base"),
            "settings_given": sorted(k for k, v in source.items() if v == "given"),
        }
    regions_out = None
    if save_regions:
        o = Path(out)
        regions_out = o.with_name(o.name.removesuffix(".skops") + ".regions.npz")
    card, scores = train_and_save(
        ts,
        out,
        classes=cls,
        model_params=params,
        n_splits=n_splits,
        seed=seed,
        extra_card=extra,
        sample_weight=weights,
        new=is_new,
        regions_out=regions_out,
    )
    return card, scores
