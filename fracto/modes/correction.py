"""Mode fractions corrected for the classifier's own errors, with their interval.

A classifier that calls a share of intergranular area "transgranular" biases
the counted fractions. With the held-out confusion of the model, row
``i`` = the shares of true class ``i``'s area given to each predicted class
(``P[i, j] = P(pred j | true i)``), the counted (argmax) fractions ``q`` of
an image follow ``q = Pᵀ π`` for its true fractions ``π``. Adjusted
classify-and-count solves this for ``π``; here as non-negative least squares
with a heavily weighted sum-to-one row (so ``π`` lies on the simplex).

The interval carries three sources of error into percentile replicates:

1. the spatial spread of the regions: a circular block bootstrap of the
   image's region labels (:mod:`fracto.modes.fractions`);
2. the error rates themselves: every replicate draws each row of ``P`` from
   the held-out confusion of one training image (chosen with probability
   proportional to that class's area in it), smoothed by a Dirichlet draw on
   that image's row counts — the error rates of one image differ from the
   pooled ones far more than counting noise says;
3. optionally, the training images are restricted to those whose mean
   classifier confidence is nearest the image's (``conditioning="confidence"``),
   because images the model is sure of are also images it errs less on.

References
----------
.. [1] Forman, G. (2008). Quantifying counts and costs via classification. Data
   Mining and Knowledge Discovery 17(2), 164-206 (adjusted classify and count).
.. [2] Lawson, C. L., Hanson, R. J. (1974). Solving Least Squares Problems.
   Prentice-Hall (NNLS; scipy.optimize.nnls).
.. [3] Politis, D. N., Romano, J. P. (1992). A circular block-resampling procedure for
   stationary data. In: Exploring the Limits of Bootstrap, Wiley, 263-270.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fracto.errors import FractoInputError
from fracto.modes.fractions import (
    FractionEstimate,
    bootstrap_replicates,
    default_block_regions,
    memberships_from_labels,
)

#: Weight of the sum-to-one row in the least-squares problem.
SIMPLEX_WEIGHT = 1.0e3

#: Resampling schemes of the error rates.
SCHEMES = ("image", "pooled")


@dataclass(frozen=True)
class ErrorRates:
    """Held-out confusion of a model, per training image.

    Parameters
    ----------
    per_image : ndarray, shape (n_images, k, k)
        Area (in regions) of true class ``i`` predicted as ``j`` in each image.
    confidence : ndarray, shape (n_images,) or None
        Mean best probability of each image.
    classes : tuple of str
    source : str
        What was scored (whole images or labelled tiles).
    """

    per_image: np.ndarray
    confidence: np.ndarray | None
    classes: tuple[str, ...]
    source: str = ""

    @classmethod
    def from_model(cls, model) -> ErrorRates | None:
        """The error rates stored in a fitted model, None for older models."""
        cm = getattr(model, "confusion_per_group_", None)
        if cm is None:
            return None
        conf = getattr(model, "confidence_per_group_", None)
        return cls(
            per_image=np.asarray(cm, dtype=np.float64),
            confidence=None if conf is None else np.asarray(conf, dtype=np.float64),
            classes=tuple(str(c) for c in model.classes_),
            source=str(getattr(model, "confusion_source_", "") or ""),
        )

    @property
    def pooled(self) -> np.ndarray:
        return self.per_image.sum(axis=0)

    def rows(self, images: np.ndarray | None = None) -> np.ndarray:
        """Row-normalised confusion ``P(pred j | true i)`` pooled over `images`."""
        cm = self.per_image if images is None else self.per_image[images]
        return _normalise_rows(cm.sum(axis=0))


def _normalise_rows(cm: np.ndarray) -> np.ndarray:
    cm = np.asarray(cm, dtype=np.float64)
    tot = cm.sum(axis=-1, keepdims=True)
    k = cm.shape[-1]
    eye = np.broadcast_to(np.eye(k), cm.shape)
    return np.where(tot > 0, cm / np.where(tot > 0, tot, 1.0), eye)


def adjusted_classify_and_count(q: np.ndarray, rates: np.ndarray) -> np.ndarray:
    """True fractions from counted ones: ``argmin ‖Pᵀπ − q‖`` with π ≥ 0, Σπ = 1.

    Parameters
    ----------
    q : ndarray, shape (k,)
        Counted fractions (argmax labels), summing to 1.
    rates : ndarray, shape (k, k)
        ``rates[i, j] = P(pred j | true i)``; rows sum to 1.

    Returns
    -------
    ndarray, shape (k,)

    References
    ----------
    Forman (2008); Lawson & Hanson (1974), see the module docstring.
    """
    from scipy.optimize import nnls

    q = np.asarray(q, dtype=np.float64)
    P = np.asarray(rates, dtype=np.float64)
    k = len(q)
    A = np.vstack([P.T, np.full((1, k), SIMPLEX_WEIGHT)])
    b = np.concatenate([q, [SIMPLEX_WEIGHT]])
    x, _ = nnls(A, b)
    s = x.sum()
    return x / s if s > 0 else np.full(k, 1.0 / k)


def _image_choices(rates: ErrorRates, conditioning, confidence, min_area, n_near):
    """For each true class: candidate images and their draw probabilities."""
    area = rates.per_image.sum(axis=2)  # (n_images, k)
    out = []
    for i in range(area.shape[1]):
        idx = np.nonzero(area[:, i] >= min_area)[0]
        if idx.size == 0:
            idx = np.nonzero(area[:, i] > 0)[0]
        if (
            conditioning == "confidence"
            and confidence is not None
            and rates.confidence is not None
            and idx.size > n_near
        ):
            d = np.abs(rates.confidence[idx] - confidence)
            idx = idx[np.argsort(d, kind="stable")[:n_near]]
        p = area[idx, i] / area[idx, i].sum() if idx.size else idx.astype(float)
        out.append((idx, p))
    return out


def corrected_fractions(
    best_labels: np.ndarray,
    weights: np.ndarray,
    names: tuple[str, ...] | list[str],
    rates: ErrorRates,
    *,
    scheme: str = "image",
    conditioning: str | None = None,
    image_confidence: float | None = None,
    block_regions: int | None = None,
    n_boot: int = 1000,
    level: float = 0.95,
    seed: int = 0,
    min_area: float = 20.0,
    n_near: int | None = None,
) -> tuple[FractionEstimate, dict]:
    """Corrected area fractions with an interval counting the classifier's errors.

    Parameters
    ----------
    best_labels : ndarray of int, shape (rows, cols)
        Most probable class index of each region (no threshold).
    weights : ndarray, shape (rows, cols)
        Area of each region.
    names : sequence of str
        The classes then ``unclassified`` (its corrected share is 0).
    rates : ErrorRates
        The model's held-out confusion.
    scheme : {"image", "pooled"}
        Draw each confusion row from one training image ("image") or from a
        Dirichlet around the pooled counts ("pooled", counting noise only).
    conditioning : {None, "confidence"}
        Use only the training images of nearest mean confidence.
    image_confidence : float, optional
        Mean best probability of this image (for the conditioning).
    block_regions, n_boot, level, seed
        As :func:`fracto.modes.fractions.block_bootstrap_fractions`.
    min_area : float
        Least area (in regions) of a class in a training image for its row to
        be drawn.
    n_near : int, optional
        Number of nearest images for the conditioning (default a third of the
        images, at least 8).

    Returns
    -------
    (FractionEstimate, dict of correction details)

    References
    ----------
    Forman (2008); Politis & Romano (1992); see the module docstring.
    """
    lab = np.asarray(best_labels)
    w = np.asarray(weights, dtype=np.float64)
    k = len(rates.classes)
    if lab.shape != w.shape or len(names) != k + 1:
        raise FractoInputError("Labels, weights, classes and error rates do not match.")
    if scheme not in SCHEMES:
        raise FractoInputError(f"The error-rate scheme must be one of {SCHEMES}.")
    n_images = rates.per_image.shape[0]
    if n_near is None:
        n_near = max(8, n_images // 3)
    rows, cols = w.shape
    b = default_block_regions((rows, cols)) if block_regions is None else int(block_regions)
    b = max(1, min(b, rows, cols))
    m = memberships_from_labels(lab, k)[..., :k]
    q = (m * w[..., None]).sum(axis=(0, 1)) / w.sum()
    choices = _image_choices(rates, conditioning, image_confidence, min_area, n_near)
    used = np.unique(np.concatenate([c[0] for c in choices]))
    P_hat = rates.rows(used if conditioning else None)
    value = adjusted_classify_and_count(q, P_hat)
    rng = np.random.default_rng(seed)
    q_reps = bootstrap_replicates(m, w, b, n_boot, rng)
    reps = np.empty((n_boot, k))
    pooled = rates.pooled
    for r in range(n_boot):
        P = np.empty((k, k))
        for i in range(k):
            idx, p = choices[i]
            if scheme == "pooled" or idx.size == 0:
                counts = pooled[i]
            else:
                counts = rates.per_image[rng.choice(idx, p=p), i]
            P[i] = rng.dirichlet(counts + 0.5)
        reps[r] = adjusted_classify_and_count(q_reps[r], P)
    alpha = (1.0 - level) / 2.0
    lo, hi = np.quantile(reps, [alpha, 1.0 - alpha], axis=0)
    lo, hi = np.minimum(lo, value), np.maximum(hi, value)
    desc = {
        "image": "each confusion row drawn from one held-out training image (Dirichlet on "
        "its counts)",
        "pooled": "Dirichlet on the pooled held-out confusion rows",
    }[scheme]
    est = FractionEstimate(
        names=tuple(names),
        value=np.append(value, 0.0),
        ci_low=np.append(lo, 0.0),
        ci_high=np.append(hi, 0.0),
        level=level,
        block_regions=b,
        n_boot=n_boot,
        seed=seed,
        n_regions=int((w > 0).sum()),
        method="adjusted classify and count (Forman 2008, NNLS on the simplex); interval: "
        "two-dimensional circular block bootstrap of the regions with " + desc,
    )
    info = {
        "method": "adjusted classify and count (Forman 2008)",
        "solver": "scipy.optimize.nnls with a sum-to-one row",
        "error_rates": desc,
        "conditioning": conditioning,
        "image_confidence": image_confidence,
        "n_training_images": int(n_images),
        "n_images_used": int(used.size),
        "confusion_source": rates.source,
        "rates": {
            c: {d: float(P_hat[i, j]) for j, d in enumerate(rates.classes)}
            for i, c in enumerate(rates.classes)
        },
        "counted": {c: float(v) for c, v in zip(rates.classes, q, strict=True)},
    }
    return est, info
