"""Simple invented textures with known mode labels for the classifier tests.

They stand in for the modes only as far as the tests need (different local
structure, known truth): smooth cells with bright edges (intergranular),
cells crossed by oriented fine lines (transgranular), cups with bright rims
(ductile) and parallel striations (fatigue). Label images follow
fracto.classes.CLASSES (1..4), so fracto's own model classes apply.
"""

from __future__ import annotations

import functools

import numpy as np
from scipy import ndimage


def _voronoi(shape, n, rng):
    ny, nx = shape
    pts = rng.uniform(0, 1, size=(n, 2)) * [ny, nx]
    from scipy.spatial import cKDTree

    yy, xx = np.mgrid[0:ny, 0:nx]
    d, idx = cKDTree(pts).query(np.column_stack([yy.ravel(), xx.ravel()]), k=2)
    return idx[:, 0].reshape(shape), (d[:, 1] - d[:, 0]).reshape(shape)


def texture(mode: int, shape, grain_px: float, rng) -> np.ndarray:
    """One texture in [0, 1] of the given mode label (1..4)."""
    ny, nx = shape
    n = max(4, int(ny * nx / grain_px**2))
    if mode == 1:  # smooth facets, one brightness each, bright edges
        cell, gap = _voronoi(shape, n, rng)
        tone = rng.uniform(0.25, 0.65, size=n)[cell]
        edge = np.exp(-gap / (0.06 * grain_px))
        img = tone + 0.45 * edge
    elif mode == 2:  # oriented fine lines across each cell
        cell, gap = _voronoi(shape, n, rng)
        th = rng.uniform(0, np.pi, size=n)[cell]
        yy, xx = np.mgrid[0:ny, 0:nx]
        per = 0.18 * grain_px
        lines = np.cos(2 * np.pi * (xx * np.cos(th) + yy * np.sin(th)) / per)
        tone = rng.uniform(0.3, 0.6, size=n)[cell]
        img = tone + 0.18 * lines + 0.25 * np.exp(-gap / (0.05 * grain_px))
    elif mode == 3:  # cups with bright rims
        r = 0.25 * grain_px
        m = max(4, int(ny * nx / r**2 / 3))
        cell, gap = _voronoi(shape, m, rng)
        img = 0.25 + 0.6 * np.exp(-gap / (0.12 * r)) - 0.1 * np.exp(-((gap - r) ** 2) / r**2)
    else:  # parallel striations, gently wavy
        th = rng.uniform(0, np.pi)
        yy, xx = np.mgrid[0:ny, 0:nx]
        per = 0.3 * grain_px
        u = xx * np.cos(th) + yy * np.sin(th)
        v = -xx * np.sin(th) + yy * np.cos(th)
        img = 0.45 + 0.25 * np.cos(2 * np.pi * (u + 0.3 * per * np.sin(v / grain_px)) / per)
    img = ndimage.gaussian_filter(img, 0.7) + rng.normal(0, 0.02, size=shape)
    return np.clip(img, 0, 1).astype(np.float32)


def mixed_field(size: int, grain_px: float, seed: int, modes=(1, 2, 3, 4), patch_px=None):
    """Image and label image: large patches of the given modes.

    Returns
    -------
    image : float32 (size, size) in [0, 1]
    labels : uint8 (size, size), values from `modes`
    """
    rng = np.random.default_rng(seed)
    shape = (size, size)
    patch = patch_px or size / 2.0
    n = max(len(modes), int((size / patch) ** 2))
    cell, _ = _voronoi(shape, n, rng)
    assign = np.array([modes[i % len(modes)] for i in rng.permutation(n)])
    labels = assign[cell].astype(np.uint8)
    img = np.zeros(shape, np.float32)
    for m in modes:
        sel = labels == m
        if sel.any():
            img[sel] = texture(m, shape, grain_px, rng)[sel]
    return img, labels


@functools.lru_cache(maxsize=1)
def small_training_set():
    """Region features of a few mixed texture fields (cached for the session)."""
    from fracto.classes import MODES
    from fracto.modes.training import set_from_arrays

    items = []
    for seed, grain in zip(range(8), (20, 28, 36, 44) * 2, strict=True):
        img, lab = mixed_field(256, grain, seed, patch_px=128)
        items.append((img, lab, f"tex{seed}"))
    rng = np.random.default_rng(50)
    for mode, grain in zip((1, 2, 3, 4) * 2, (24, 40, 32, 26, 38, 22, 44, 34), strict=True):
        img = texture(mode, (192, 192), grain, rng)
        items.append((img, np.full(img.shape, mode, np.uint8), f"pure{mode}-{grain}"))
    return set_from_arrays(items, MODES, max_regions_per_image=300, seed=0)


@functools.lru_cache(maxsize=1)
def small_model():
    """A small ModeClassifier trained on :func:`small_training_set` (cached)."""
    from fracto.classes import MODES
    from fracto.modes.model import ModeClassifier

    ts = small_training_set()
    return ModeClassifier(MODES, max_iter=40, random_state=0).fit(
        ts.X, ts.y, ts.groups, feature_names=ts.names
    )
