"""Which regions of an image a user should label next (active learning).

A region is worth labelling when the model is unsure of it (small margin
between its two most probable classes) and when the members of the model's
calibration ensemble disagree about it (query by committee). The chosen tiles
are kept apart from each other so that a handful of labels covers the field
rather than one patch of it.

References
----------
Settles, B. (2012). *Active Learning*. Synthesis Lectures on Artificial
Intelligence and Machine Learning, Morgan & Claypool — margin sampling
(section 2.3) and query by committee (section 3.1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fracto.errors import FractoInputError


@dataclass(frozen=True)
class Suggestion:
    """Tiles proposed for labelling, best first.

    Parameters
    ----------
    tiles : ndarray of int, shape (n,)
        Flat tile indices (row-major over the tile grid).
    rows, cols : ndarray of int, shape (n,)
        Tile grid row and column of each.
    score : ndarray, shape (n,)
        Combined usefulness score (higher = label it first).
    margin : ndarray, shape (n,)
        Best minus second-best probability of the model.
    disagreement : ndarray, shape (n,)
        Mean total-variation distance of the ensemble members from their mean.
    guess : ndarray of int, shape (n,)
        The model's most probable class index for the tile.
    boxes : ndarray of int, shape (n, 4)
        ``(y0, x0, y1, x1)`` pixel box of each tile in the image (end exclusive).
    """

    tiles: np.ndarray
    rows: np.ndarray
    cols: np.ndarray
    score: np.ndarray
    margin: np.ndarray
    disagreement: np.ndarray
    guess: np.ndarray
    boxes: np.ndarray

    def __len__(self) -> int:
        return len(self.tiles)


def member_probabilities(model, X: np.ndarray) -> np.ndarray:
    """Probabilities of each member of a model's calibration ensemble.

    Parameters
    ----------
    model : ModeClassifier
        A fitted model.
    X : ndarray, shape (n, n_features)

    Returns
    -------
    ndarray, shape (n_members, n, n_classes)
        Columns in the order of ``model.classes_``; a model without an
        ensemble gives one member.
    """
    X = np.asarray(X, dtype=np.float32)
    est = model.estimator_
    members = getattr(est, "calibrated_classifiers_", None)
    if not members:
        return model.predict_proba(X)[None]
    order = [list(est.classes_).index(c) for c in model.classes_]
    return np.stack([m.predict_proba(X)[:, order] for m in members])


def usefulness(
    p_members: np.ndarray, *, disagreement_weight: float = 1.0
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Score of each region for labelling from its ensemble probabilities.

    Parameters
    ----------
    p_members : ndarray, shape (n_members, n, n_classes)
    disagreement_weight : float
        Weight of committee disagreement against uncertainty (margin).

    Returns
    -------
    score, margin, disagreement : ndarrays of shape (n,)
        ``score = (1 - margin) + disagreement_weight * disagreement``.
    """
    p = np.asarray(p_members, dtype=np.float64)
    if p.ndim != 3:
        raise ValueError("p_members must have shape (n_members, n, n_classes).")
    mean = p.mean(axis=0)
    top2 = np.sort(mean, axis=1)[:, -2:] if mean.shape[1] > 1 else np.c_[mean * 0, mean]
    margin = top2[:, 1] - top2[:, 0]
    disagreement = 0.5 * np.abs(p - mean[None]).sum(axis=2).mean(axis=0)
    return (1.0 - margin) + disagreement_weight * disagreement, margin, disagreement


def pick_apart(
    score: np.ndarray,
    grid: tuple[int, int],
    n: int,
    *,
    gap: int = 1,
    allowed: np.ndarray | None = None,
) -> np.ndarray:
    """Greedy best-first choice of `n` cells at least ``gap + 1`` cells apart.

    Parameters
    ----------
    score : ndarray, shape (rows * cols,)
        Score per cell (row-major).
    grid : (rows, cols)
    n : int
        Number of cells wanted (fewer are returned when the grid is full).
    gap : int
        Cells left free between two chosen cells (Chebyshev distance > gap).
    allowed : bool ndarray, shape (rows * cols,), optional
        Cells that may be chosen.

    Returns
    -------
    ndarray of int
        Chosen flat indices, best first.
    """
    rows, cols = grid
    s = np.asarray(score, dtype=np.float64)
    if s.shape != (rows * cols,):
        raise ValueError("score must have one value per grid cell.")
    free = np.ones((rows, cols), bool) if allowed is None else allowed.reshape(rows, cols).copy()
    chosen: list[int] = []
    for idx in np.argsort(-s, kind="stable"):
        if len(chosen) >= n:
            break
        r, c = divmod(int(idx), cols)
        if not free[r, c]:
            continue
        chosen.append(int(idx))
        free[max(r - gap, 0) : r + gap + 1, max(c - gap, 0) : c + gap + 1] = False
    return np.asarray(chosen, dtype=int)


def tile_boxes(
    tiles: np.ndarray, tile_grid: tuple[int, int], block_px: float, image_shape: tuple[int, int]
) -> np.ndarray:
    """Pixel boxes ``(y0, x0, y1, x1)`` of tiles; tile (i, j) covers blocks i..i+1, j..j+1."""
    r, c = np.divmod(np.asarray(tiles, dtype=int), tile_grid[1])
    y0 = np.floor(r * block_px).astype(int)
    x0 = np.floor(c * block_px).astype(int)
    y1 = np.minimum(np.floor((r + 2) * block_px).astype(int), image_shape[0])
    x1 = np.minimum(np.floor((c + 2) * block_px).astype(int), image_shape[1])
    return np.stack([y0, x0, y1, x1], axis=1)


def suggest_regions(
    features,
    model,
    *,
    n_regions: int = 24,
    gap: int = 1,
    disagreement_weight: float = 1.0,
    exclude: np.ndarray | None = None,
) -> Suggestion:
    """Propose the tiles of one image whose labels would help the model most.

    Parameters
    ----------
    features : RegionFeatures
        Region features of the image (:func:`fracto.modes.features.region_features`).
    model : ModeClassifier
        The model to adapt.
    n_regions : int
        How many tiles to propose.
    gap : int
        Tiles left free between two proposals (overlapping tiles share blocks,
        so ``gap >= 1`` keeps proposals from sharing pixels).
    disagreement_weight : float
        Weight of ensemble disagreement against the probability margin.
    exclude : bool ndarray of the image shape, optional
        Pixels already labelled; tiles touching them are not proposed.

    Returns
    -------
    Suggestion

    References
    ----------
    Settles (2012), see the module docstring.
    """
    if n_regions < 1:
        raise FractoInputError("Ask for at least one region to label.")
    if gap < 0:
        raise FractoInputError("The gap between proposed regions cannot be negative.")
    pm = member_probabilities(model, features.X)
    score, margin, dis = usefulness(pm, disagreement_weight=disagreement_weight)
    grid = features.tile_grid
    n_tiles = grid[0] * grid[1]
    allowed = None
    if exclude is not None:
        ex = np.asarray(exclude, dtype=bool)
        if ex.shape != tuple(features.image_shape):
            raise FractoInputError(
                f"The exclusion mask ({ex.shape[1]} x {ex.shape[0]} px) does not match the "
                f"image ({features.image_shape[1]} x {features.image_shape[0]} px)."
            )
        boxes = tile_boxes(np.arange(n_tiles), grid, features.block_px, features.image_shape)
        allowed = np.array([not ex[y0:y1, x0:x1].any() for y0, x0, y1, x1 in boxes])
    chosen = pick_apart(score, grid, n_regions, gap=gap, allowed=allowed)
    rows, cols = np.divmod(chosen, grid[1])
    return Suggestion(
        tiles=chosen,
        rows=rows,
        cols=cols,
        score=score[chosen],
        margin=margin[chosen],
        disagreement=dis[chosen],
        guess=pm.mean(axis=0)[chosen].argmax(axis=1),
        boxes=tile_boxes(chosen, grid, features.block_px, features.image_shape),
    )


def mask_template(
    suggestion: Suggestion,
    image_shape: tuple[int, int],
    *,
    prefill: bool = False,
    to_label: int = 255,
) -> np.ndarray:
    """Indexed mask with the proposed boxes marked for the user to fill in.

    Every proposed box holds `to_label` (a value no class uses, so a template
    that was not filled in is refused by ``fracto train``), or with `prefill`
    the model's guess as a mask index (class ``i`` → ``i + 1``) for the user
    to correct; everything else is 0 (unlabelled).
    """
    m = np.zeros(image_shape, dtype=np.uint8)
    for k, (y0, x0, y1, x1) in enumerate(suggestion.boxes):
        m[y0:y1, x0:x1] = suggestion.guess[k] + 1 if prefill else to_label
    return m
