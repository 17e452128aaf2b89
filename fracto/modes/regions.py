"""Regions of the mode map: the block grid, tiles of 2 × 2 blocks, and painting.

The feature tiles (:func:`fracto.modes.features.region_features`) overlap by
half: tile ``(i, j)`` covers blocks ``(i..i+1, j..j+1)``. A block's class
probabilities are the mean of the probabilities of the (up to four) tiles
covering it; the block is the region that is labelled, counted and resampled.
"""

from __future__ import annotations

import numpy as np

from fracto.errors import FractoInputError


def tiles_to_blocks(p_tiles: np.ndarray, tile_grid: tuple[int, int]) -> np.ndarray:
    """Average tile probabilities onto the blocks they cover.

    Parameters
    ----------
    p_tiles : ndarray, shape (n_tiles, k)
        Per-tile probabilities (row-major over `tile_grid`).
    tile_grid : (rows, cols)
        Shape of the tile grid; the block grid is one larger each way.

    Returns
    -------
    ndarray, shape (rows + 1, cols + 1, k)
    """
    ty, tx = tile_grid
    p = np.asarray(p_tiles, dtype=np.float64).reshape(ty, tx, -1)
    acc = np.zeros((ty + 1, tx + 1, p.shape[2]))
    cnt = np.zeros((ty + 1, tx + 1, 1))
    for dy in (0, 1):
        for dx in (0, 1):
            acc[dy : dy + ty, dx : dx + tx] += p
            cnt[dy : dy + ty, dx : dx + tx] += 1
    return acc / cnt


def block_labels(p_blocks: np.ndarray, threshold: float) -> np.ndarray:
    """Index of the best class per block, ``-1`` where its probability < `threshold`."""
    best = p_blocks.argmax(axis=2)
    best[p_blocks.max(axis=2) < threshold] = -1
    return best


def paint(grid: np.ndarray, block_px: float, image_shape: tuple[int, int]) -> np.ndarray:
    """Paint a per-block array back onto the image grid (nearest block)."""
    ny, nx = image_shape
    iy = np.minimum((np.arange(ny) / block_px).astype(int), grid.shape[0] - 1)
    ix = np.minimum((np.arange(nx) / block_px).astype(int), grid.shape[1] - 1)
    return grid[iy[:, None], ix[None, :]]


def block_index_map(
    block_grid: tuple[int, int], block_px: float, image_shape: tuple[int, int]
) -> np.ndarray:
    """Flat block index of every image pixel."""
    idx = np.arange(block_grid[0] * block_grid[1]).reshape(block_grid)
    return paint(idx, block_px, image_shape)


def mask_block_histogram(
    mask: np.ndarray,
    block_grid: tuple[int, int],
    block_px: float,
    n_labels: int,
) -> np.ndarray:
    """Pixel counts of each mask value (0..n_labels-1) in each block.

    Returns
    -------
    ndarray, shape (rows, cols, n_labels)
    """
    m = np.asarray(mask)
    idx = block_index_map(block_grid, block_px, m.shape).reshape(-1)
    nb = block_grid[0] * block_grid[1]
    h = np.bincount(idx * n_labels + m.reshape(-1).astype(np.int64), minlength=nb * n_labels)
    return h.reshape(block_grid[0], block_grid[1], n_labels)


def tile_labels_from_mask(
    mask: np.ndarray,
    tile_grid: tuple[int, int],
    block_px: float,
    n_labels: int,
    *,
    min_labelled: float = 0.5,
    purity: float = 0.75,
) -> np.ndarray:
    """Label of each tile from a label mask (0 = unlabelled), 0 where unsure.

    A tile takes the majority label of its labelled pixels when at least
    `min_labelled` of the tile is labelled and the majority holds at least
    `purity` of the labelled pixels; otherwise it is left out (0).

    Raises
    ------
    FractoInputError
        If the mask holds values outside 0..n_labels-1.
    """
    m = np.asarray(mask)
    if m.size and (m.min() < 0 or m.max() >= n_labels):
        raise FractoInputError(
            f"The mask holds label {int(m.max())} but the model has only {n_labels - 1} classes."
        )
    ty, tx = tile_grid
    bh = mask_block_histogram(m, (ty + 1, tx + 1), block_px, n_labels).astype(np.float64)
    th = bh[:-1, :-1] + bh[1:, :-1] + bh[:-1, 1:] + bh[1:, 1:]
    th = th.reshape(ty * tx, n_labels)
    total = th.sum(axis=1)
    lab = th[:, 1:].sum(axis=1)
    best = th[:, 1:].argmax(axis=1) + 1
    bestn = th[:, 1:].max(axis=1)
    ok = (total > 0) & (lab >= min_labelled * total) & (bestn >= purity * np.maximum(lab, 1))
    return np.where(ok, best, 0)


def check_mask(mask: np.ndarray, image_shape: tuple[int, int], n_labels: int, name: str) -> None:
    """Refuse a mask of the wrong size or with unknown label values."""
    m = np.asarray(mask)
    if m.ndim != 2:
        raise FractoInputError(f"The mask '{name}' must be a single-channel indexed image.")
    if m.shape != tuple(image_shape):
        raise FractoInputError(
            f"The mask '{name}' is {m.shape[1]} x {m.shape[0]} px but its image is "
            f"{image_shape[1]} x {image_shape[0]} px."
        )
    if not np.issubdtype(m.dtype, np.integer):
        raise FractoInputError(f"The mask '{name}' must hold integer label values.")
    if m.size and (m.min() < 0 or m.max() >= n_labels):
        bad = sorted(int(v) for v in np.unique(m) if v < 0 or v >= n_labels)[:5]
        raise FractoInputError(
            f"The mask '{name}' holds label values {bad} outside 0..{n_labels - 1} "
            "(0 = unlabelled, then one value per class)."
        )
