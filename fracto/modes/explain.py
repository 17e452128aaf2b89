"""Why a region got its label: the features whose typical value would lower it most.

For every feature, all tiles of the image get that feature set to its
training median (the model's ``feature_reference_``) and are predicted again;
the drop of the region's probability of its most probable class is that
feature's contribution to the region's label (an occlusion, or "reference
value", attribution). The few features with the largest drop are reported with
the region's value of the feature and the feature's training percentiles, so a
reader sees both what mattered and how unusual the value is.

References
----------
.. [1] Zeiler, M. D., Fergus, R. (2014). Visualizing and understanding convolutional
   networks. ECCV, 818-833 (occlusion: replace an input by a reference value and
   watch the prediction).
.. [2] Molnar, C. (2022). Interpretable Machine Learning, 2nd ed., ch. "Feature
   importance" (permutation and reference-value attributions; from memory).
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass

import numpy as np

from fracto.classes import UNCLASSIFIED
from fracto.errors import FractoInputError
from fracto.modes.regions import tiles_to_blocks


@dataclass(frozen=True)
class RegionExplanation:
    """Top features of every region (block) of a mode map.

    Parameters
    ----------
    classes : tuple of str
    labels : ndarray (rows, cols)
        Class index of each block, -1 = unclassified.
    best : ndarray (rows, cols)
        Most probable class of each block (the one explained).
    probability : ndarray (rows, cols)
        Probability of that class.
    features : ndarray (rows, cols, top) of int
        Feature indices, largest drop first.
    drops : ndarray (rows, cols, top)
        Drop of the probability when the feature is set to its training median.
    values : ndarray (rows, cols, top)
        The block's value of the feature (mean of the tiles covering it).
    names : list of str
        Feature names.
    quantiles : ndarray (5, n_features)
        Training percentiles of each feature.
    percentiles : tuple of float
        Which percentiles `quantiles` holds.
    block_px : float
        Block side in image pixels.
    """

    classes: tuple[str, ...]
    labels: np.ndarray
    best: np.ndarray
    probability: np.ndarray
    features: np.ndarray
    drops: np.ndarray
    values: np.ndarray
    names: list[str]
    quantiles: np.ndarray
    percentiles: tuple[float, ...]
    block_px: float

    def records(self) -> list[dict]:
        """One dict per region with its label and top features."""
        out = []
        rows, cols, top = self.features.shape
        pk = [f"p{round(p)}" for p in self.percentiles]
        for r in range(rows):
            for c in range(cols):
                lab = int(self.labels[r, c])
                feats = []
                for t in range(top):
                    f = int(self.features[r, c, t])
                    feats.append(
                        {
                            "feature": self.names[f],
                            "value": float(self.values[r, c, t]),
                            "probability_drop": float(self.drops[r, c, t]),
                            "training_percentiles": dict(
                                zip(pk, (float(v) for v in self.quantiles[:, f]), strict=True)
                            ),
                        }
                    )
                out.append(
                    {
                        "row": r,
                        "col": c,
                        "x_px": round(c * self.block_px, 1),
                        "y_px": round(r * self.block_px, 1),
                        "label": self.classes[lab] if lab >= 0 else UNCLASSIFIED,
                        "explained_class": self.classes[int(self.best[r, c])],
                        "probability": float(self.probability[r, c]),
                        "top_features": feats,
                    }
                )
        return out


def explain_regions(
    model,
    X: np.ndarray,
    tile_grid: tuple[int, int],
    labels: np.ndarray,
    *,
    top: int = 3,
    block_px: float = 0.0,
) -> RegionExplanation:
    """Top-`top` features of each block by drop of its best class's probability.

    Parameters
    ----------
    model : ModeClassifier
        Fitted, with ``feature_reference_`` (fracto models from this version on).
    X : ndarray (n_tiles, n_features)
        Tile features of the image.
    tile_grid : (rows, cols)
    labels : ndarray (rows + 1, cols + 1)
        Block labels of the mode map (-1 = unclassified).
    top : int
        Number of features per region.
    block_px : float
        Block side in image pixels (for the region positions).

    References
    ----------
    Zeiler & Fergus (2014); see the module docstring.
    """
    ref = getattr(model, "feature_reference_", None)
    if ref is None:
        raise FractoInputError(
            "The model holds no feature references (made by an older fracto); retrain it "
            "to explain regions."
        )
    X = np.asarray(X, dtype=np.float32)
    n_feat = X.shape[1]
    if not 1 <= top <= n_feat:
        raise FractoInputError(f"--explain-top must lie between 1 and {n_feat}, not {top}.")
    pb = tiles_to_blocks(model.predict_proba(X), tile_grid)
    best = pb.argmax(axis=2)
    p_best = np.take_along_axis(pb, best[..., None], axis=2)[..., 0]
    drops = np.empty((*best.shape, n_feat))
    for f in range(n_feat):
        Xf = X.copy()
        Xf[:, f] = ref[f]
        pf = tiles_to_blocks(model.predict_proba(Xf), tile_grid)
        drops[..., f] = p_best - np.take_along_axis(pf, best[..., None], axis=2)[..., 0]
    order = np.argsort(-drops, axis=2, kind="stable")[..., :top]
    vals = tiles_to_blocks(X, tile_grid)  # block value: mean of the tiles covering it
    names = list(model.feature_names_ or [f"feature_{i}" for i in range(n_feat)])
    return RegionExplanation(
        classes=tuple(str(c) for c in model.classes_),
        labels=np.asarray(labels),
        best=best,
        probability=p_best,
        features=order,
        drops=np.take_along_axis(drops, order, axis=2),
        values=np.take_along_axis(vals, order, axis=2),
        names=names,
        quantiles=np.asarray(model.feature_quantiles_),
        percentiles=tuple(getattr(model, "reference_percentiles_", (5, 25, 50, 75, 95))),
        block_px=float(block_px),
    )


def explanation_csv(expl: RegionExplanation) -> str:
    """One CSV line per region and rank."""
    pk = [f"train_p{round(p)}" for p in expl.percentiles]
    buf = io.StringIO()
    wr = csv.writer(buf, lineterminator="\n")
    wr.writerow(
        [
            "row",
            "col",
            "x_px",
            "y_px",
            "label",
            "explained_class",
            "probability",
            "rank",
            "feature",
            "value",
            "probability_drop",
            *pk,
        ]
    )
    for rec in expl.records():
        for k, f in enumerate(rec["top_features"], start=1):
            wr.writerow(
                [
                    rec["row"],
                    rec["col"],
                    rec["x_px"],
                    rec["y_px"],
                    rec["label"],
                    rec["explained_class"],
                    f"{rec['probability']:.4f}",
                    k,
                    f["feature"],
                    f"{f['value']:.6g}",
                    f"{f['probability_drop']:.4f}",
                    *(f"{v:.6g}" for v in f["training_percentiles"].values()),
                ]
            )
    return buf.getvalue()


def write_explanation(
    path: str | os.PathLike, expl: RegionExplanation, *, meta: dict | None = None
) -> None:
    """Write the explanation as CSV or JSON (by the file's suffix), atomically."""
    from fracto.io.safe import dumps_json, write_bytes_atomic

    suffix = os.path.splitext(str(path))[1].lower()
    if suffix == ".csv":
        text = explanation_csv(expl)
    elif suffix == ".json":
        text = dumps_json(
            {
                **(meta or {}),
                "method": "drop of the region's best-class probability when the feature is "
                "set to its training median",
                "regions": expl.records(),
            }
        )
    else:
        raise FractoInputError(f"The explanation file '{path}' must end in .csv or .json.")
    write_bytes_atomic(path, text.encode("utf-8"))
