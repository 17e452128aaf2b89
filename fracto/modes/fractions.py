"""Area fractions of the modes and their spatial block-bootstrap interval.

Neighbouring regions of a fractograph are not independent (a grain, a dimple
field or a striated plateau covers many regions), so the interval resamples
*blocks* of neighbouring regions with replacement: the two-dimensional
circular block bootstrap. Each replicate draws as many b × b blocks of regions
(from all positions in the region grid, wrapping around its edges) as it takes to tile the grid and
takes the area fractions of the drawn regions; the interval is the percentile
interval of the replicates.

The regions may carry hard labels (one class each) or soft memberships
(probabilities), so corrected or probability-weighted fractions can use the
same resampling.

References
----------
.. [1] Künsch, H. R. (1989). The jackknife and the bootstrap for general stationary
   observations. Annals of Statistics 17(3), 1217-1241.
.. [2] Politis, D. N., Romano, J. P. (1992). A circular block-resampling procedure for
   stationary data. In: Exploring the Limits of Bootstrap, Wiley, 263-270.
.. [3] Lahiri, S. N. (2003). Resampling Methods for Dependent Data. Springer,
   ch. 12 (block bootstrap for spatial data; block side growing like n^(1/(d+2)),
   from memory).
.. [4] Efron, B., Tibshirani, R. J. (1993). An Introduction to the Bootstrap.
   Chapman & Hall (percentile interval).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fracto.errors import FractoInputError


@dataclass(frozen=True)
class FractionEstimate:
    """Area fractions with percentile intervals.

    Parameters
    ----------
    names : tuple of str
        Class names, the last one ``"unclassified"``.
    value : ndarray
        Point estimates (sum to 1).
    ci_low, ci_high : ndarray
        Lower and upper ends of the interval.
    level : float
        Interval level (0.95).
    block_regions : int
        Side of the bootstrap blocks in regions.
    n_boot : int
        Number of bootstrap replicates.
    seed : int
        Seed of the resampling.
    n_regions : int
        Number of regions (blocks) with positive area.
    """

    names: tuple[str, ...]
    value: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    level: float
    block_regions: int
    n_boot: int
    seed: int
    n_regions: int
    method: str = "two-dimensional moving block bootstrap over regions (Künsch 1989)"

    def to_dict(self) -> dict:
        key = f"ci{round(self.level * 100)}"
        return {
            n: {"value": float(v), key: [float(lo), float(hi)]}
            for n, v, lo, hi in zip(self.names, self.value, self.ci_low, self.ci_high, strict=True)
        }

    def settings(self) -> dict:
        return {
            "method": self.method,
            "level": self.level,
            "block_regions": self.block_regions,
            "n_boot": self.n_boot,
            "seed": self.seed,
            "n_regions": self.n_regions,
        }


def memberships_from_labels(labels: np.ndarray, n_classes: int) -> np.ndarray:
    """One-hot memberships (rows, cols, n_classes + 1); label -1 -> last column."""
    lab = np.asarray(labels)
    idx = np.where(lab < 0, n_classes, lab)
    return np.eye(n_classes + 1)[idx]


def area_fractions(memberships: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Area fraction of each column of `memberships`, regions weighted by area."""
    w = np.asarray(weights, dtype=np.float64)
    tot = w.sum()
    if not tot > 0:
        raise FractoInputError("There is no area to compute fractions over.")
    return (memberships * w[..., None]).sum(axis=(0, 1)) / tot


def default_block_regions(grid_shape: tuple[int, int]) -> int:
    """Block side b ≈ (rows · cols)^(1/4), at least 2, at most the shorter side."""
    r, c = grid_shape
    return int(max(1, min(min(r, c), max(2, round((r * c) ** 0.25)))))


def block_sums(
    memberships: np.ndarray, weights: np.ndarray, b: int, *, circular: bool = True
) -> tuple[np.ndarray, np.ndarray, int]:
    """Weighted class sums and areas of every b × b block position of the region grid.

    Circular blocks wrap around the grid edges (Politis & Romano 1992), so every
    region is drawn equally often; moving blocks stay inside the grid.

    Returns
    -------
    (block class sums (n_positions, k), block areas (n_positions,), blocks per replicate)
    """
    m = np.asarray(memberships, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    rows, cols = w.shape
    wm = m * w[..., None]
    if circular:
        wm = np.pad(wm, ((0, b - 1), (0, b - 1), (0, 0)), mode="wrap")
        w = np.pad(w, ((0, b - 1), (0, b - 1)), mode="wrap")
    # integral images: sums over every b × b block position in O(1) each
    ii = np.zeros((wm.shape[0] + 1, wm.shape[1] + 1, m.shape[2]))
    ii[1:, 1:] = wm.cumsum(0).cumsum(1)
    iw = np.zeros((w.shape[0] + 1, w.shape[1] + 1))
    iw[1:, 1:] = w.cumsum(0).cumsum(1)
    bs = ii[b:, b:] - ii[:-b, b:] - ii[b:, :-b] + ii[:-b, :-b]
    bw = iw[b:, b:] - iw[:-b, b:] - iw[b:, :-b] + iw[:-b, :-b]
    n_draw = int(np.ceil(rows / b) * np.ceil(cols / b))
    return bs.reshape(-1, m.shape[2]), bw.reshape(-1), n_draw


def bootstrap_replicates(
    memberships: np.ndarray,
    weights: np.ndarray,
    b: int,
    n_boot: int,
    rng: np.random.Generator,
    *,
    circular: bool = True,
) -> np.ndarray:
    """Area fractions of `n_boot` block-bootstrap replicates, shape (n_boot, k)."""
    bs, bw, n_draw = block_sums(memberships, weights, b, circular=circular)
    reps = np.empty((n_boot, bs.shape[1]))
    chunk = max(1, 200_000 // n_draw)
    for start in range(0, n_boot, chunk):
        stop = min(n_boot, start + chunk)
        pick = rng.integers(0, len(bw), size=(stop - start, n_draw))
        num = bs[pick].sum(axis=1)
        den = bw[pick].sum(axis=1)
        reps[start:stop] = num / np.maximum(den, 1e-300)[:, None]
    return reps


def block_bootstrap_fractions(
    memberships: np.ndarray,
    weights: np.ndarray,
    names: tuple[str, ...] | list[str],
    *,
    block_regions: int | None = None,
    n_boot: int = 1000,
    level: float = 0.95,
    seed: int = 0,
    circular: bool = True,
) -> FractionEstimate:
    """Area fractions with a spatial block-bootstrap percentile interval.

    Parameters
    ----------
    memberships : ndarray, shape (rows, cols, k)
        Share of each region in each class (one-hot for hard labels; the last
        class is ``unclassified`` by convention). Rows sum to 1.
    weights : ndarray, shape (rows, cols)
        Area of each region (edge regions are partial).
    names : sequence of str, length k
    block_regions : int, optional
        Side of the resampled blocks in regions (default
        :func:`default_block_regions`).
    n_boot : int
        Bootstrap replicates.
    level : float
        Interval level.
    seed : int
        Seed of the NumPy generator.
    circular : bool
        Circular blocks (wrapping around the grid) instead of moving blocks.

    Returns
    -------
    FractionEstimate

    References
    ----------
    Künsch (1989); Politis & Romano (1992); Lahiri (2003); see the module docstring.
    """
    m = np.asarray(memberships, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    if m.ndim != 3 or m.shape[:2] != w.shape or m.shape[2] != len(names):
        raise FractoInputError("Memberships, weights and class names do not match.")
    rows, cols = w.shape
    b = default_block_regions((rows, cols)) if block_regions is None else int(block_regions)
    b = max(1, min(b, rows, cols))
    value = area_fractions(m, w)
    reps = bootstrap_replicates(m, w, b, n_boot, np.random.default_rng(seed), circular=circular)
    alpha = (1.0 - level) / 2.0
    lo, hi = np.quantile(reps, [alpha, 1.0 - alpha], axis=0)
    kind = "circular" if circular else "moving"
    return FractionEstimate(
        names=tuple(names),
        value=value,
        ci_low=lo,
        ci_high=hi,
        level=level,
        block_regions=b,
        n_boot=n_boot,
        seed=seed,
        n_regions=int((w > 0).sum()),
        method=f"two-dimensional {kind} block bootstrap over regions (Künsch 1989)",
    )
