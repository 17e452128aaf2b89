"""Intergranular against cleavage at small grain sizes: region accuracy by grain-size bin.

    python bench/bench_small_grains.py [--train-fields 48] [--test-fields 24]
                                       [--cache /tmp/fracto-smallgrain] [--seed 0]

Trains a small in-bench booster (the default model's settings: 100 iterations,
learning rate 0.1, 15 leaves, balanced class weights, no calibration) on the
default model's training fields (:func:`fracto.modes.default_model.training_fields`:
grains 5-150 px log-uniform, random mixtures of one to four modes, randomised
rendering, at most 500 tiles per field) and scores held-out fields with seeds
from 900000, whose mean grain sizes cycle through :data:`GRAIN_PX` (three per
bin of :data:`BINS`) and whose mixtures always hold intergranular and
transgranular plus a random subset of the two other modes, with randomised
rendering. The features are those of the current
:func:`fracto.modes.features.region_features` (scale-free: texture scale from
each image's autocorrelation).

Printed per grain-size bin: region accuracy (blocks with at least 75 % of
their pixels in one mode, labelled by the arg-max of the mean probability of
the tiles covering them, no threshold), intergranular and transgranular
recall, and the number of scored blocks; then the same over all bins.

Synthetic images and labels (not features) are cached in ``--cache`` so that
feature variants are compared on the same fields; delete it to regenerate.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from fracto.classes import MODES
from fracto.modes.default_model import synthetic_field, training_fields
from fracto.modes.features import FEATURE_SET_VERSION, region_features
from fracto.modes.regions import mask_block_histogram, tile_labels_from_mask, tiles_to_blocks

SEED_BASE = 900_000
#: Mean grain sizes of the test fields in px, cycled (three per bin).
GRAIN_PX = (5.0, 7.0, 9.0, 11.0, 14.0, 18.0, 24.0, 33.0, 45.0, 60.0, 90.0, 130.0)
#: Grain-size bins in px (lower edges inclusive).
BINS = ((0.0, 10.0), (10.0, 20.0), (20.0, 50.0), (50.0, np.inf))


def test_modes(rng: np.random.Generator) -> dict[str, float]:
    """Intergranular and transgranular always, plus a random subset of the others."""
    chosen = [0, 1] + [j for j in (2, 3) if rng.uniform() < 0.5]
    w = rng.dirichlet(np.ones(len(chosen)))
    out = {m: 0.0 for m in MODES}
    for j, v in zip(chosen, w, strict=True):
        out[MODES[j]] = float(v)
    out[MODES[chosen[-1]]] += 1.0 - sum(out.values())
    return out


def _cached(path: Path, make):
    if path.exists():
        z = np.load(path)
        return z["img"], z["lab"], float(z["grain"])
    img, lab, grain = make()
    tmp = path.with_suffix(".tmp.npz")
    np.savez(tmp, img=img, lab=lab, grain=grain)
    tmp.rename(path)
    return img, lab, grain


def train_fields(n: int, seed: int, cache: Path):
    """The default model's training fields 0..n-1 (generated once, then from the cache)."""
    paths = [cache / f"train-{10_000 + 1000 * seed + i}.npz" for i in range(n)]
    if not all(p.exists() for p in paths):
        for p, (img, lab, name) in zip(paths, training_fields(n, seed=seed), strict=True):
            grain = float(name.split("grain")[1].split("px")[0])
            _cached(p, lambda img=img, lab=lab, grain=grain: (img, lab, grain))
    for p in paths:
        yield _cached(p, None)


def test_field(i: int, cache: Path):
    seed = SEED_BASE + i
    grain = GRAIN_PX[i % len(GRAIN_PX)]

    def make():
        modes = test_modes(np.random.default_rng([seed, 3]))
        img, lab, _ = synthetic_field(seed, grain_px=grain, modes=modes)
        return img, lab, grain

    return _cached(cache / f"test-{seed}.npz", make)


def booster(seed: int):
    from sklearn.ensemble import HistGradientBoostingClassifier

    return HistGradientBoostingClassifier(
        max_iter=100,
        learning_rate=0.1,
        max_leaf_nodes=15,
        early_stopping=False,
        class_weight="balanced",
        random_state=seed,
    )


def run(n_train: int, n_test: int, cache: Path, seed: int = 0) -> dict:
    cache.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    k = len(MODES)
    t0 = time.perf_counter()
    Xs, ys = [], []
    t_feat = 0.0
    for img, lab, _ in train_fields(n_train, seed, cache):
        t = time.perf_counter()
        f = region_features(img)
        t_feat += time.perf_counter() - t
        tl = tile_labels_from_mask(lab, f.tile_grid, f.block_px, k + 1)
        keep = np.nonzero(tl > 0)[0]
        if keep.size > 500:
            keep = np.sort(rng.choice(keep, size=500, replace=False))
        Xs.append(f.X[keep])
        ys.append(tl[keep] - 1)
    X, y = np.vstack(Xs), np.concatenate(ys)
    t_train = time.perf_counter()
    clf = booster(seed).fit(X, y)
    t_train = time.perf_counter() - t_train
    conf = {b: np.zeros((k, k), int) for b in range(len(BINS))}
    for i in range(n_test):
        img, lab, grain = test_field(i, cache)
        t = time.perf_counter()
        f = region_features(img)
        t_feat += time.perf_counter() - t
        pb = tiles_to_blocks(clf.predict_proba(f.X), f.tile_grid)
        pred = pb.argmax(axis=2)
        hist = mask_block_histogram(lab, f.block_grid, f.block_px, k + 1)[..., 1:]
        tot = hist.sum(axis=2)
        clear = (tot > 0) & (hist.max(axis=2) >= 0.75 * np.maximum(tot, 1))
        b = next(j for j, (lo, hi) in enumerate(BINS) if lo <= grain < hi)
        np.add.at(conf[b], (hist.argmax(axis=2)[clear], pred[clear]), 1)
    return {
        "confusion": conf,
        "n_train_regions": len(y),
        "n_features": int(X.shape[1]),
        "feature_seconds": t_feat,
        "train_seconds": t_train,
        "seconds": time.perf_counter() - t0,
    }


def _scores(c: np.ndarray) -> tuple[float, float, float, int]:
    acc = np.trace(c) / max(c.sum(), 1)
    rec = [c[j, j] / c[j].sum() if c[j].sum() else float("nan") for j in (0, 1)]
    return acc, rec[0], rec[1], int(c.sum())


def format_result(r: dict) -> str:
    lines = [f"{'grain px':<10}{'accuracy':>9}{'IG rec':>8}{'TG rec':>8}{'blocks':>8}"]
    for j, (lo, hi) in enumerate(BINS):
        acc, ig, tg, n = _scores(r["confusion"][j])
        label = f"<{hi:g}" if lo == 0 else (f">{lo:g}" if hi == np.inf else f"{lo:g}-{hi:g}")
        lines.append(f"{label:<10}{acc:>9.3f}{ig:>8.3f}{tg:>8.3f}{n:>8d}")
    acc, ig, tg, n = _scores(sum(r["confusion"].values()))
    lines.append(f"{'all':<10}{acc:>9.3f}{ig:>8.3f}{tg:>8.3f}{n:>8d}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--train-fields", type=int, default=48)
    p.add_argument("--test-fields", type=int, default=24)
    p.add_argument("--cache", default="/tmp/fracto-smallgrain")
    p.add_argument("--seed", type=int, default=0)
    a = p.parse_args(argv)
    if a.train_fields < 4 or a.test_fields < 1:
        print("fracto: need at least 4 training fields and 1 test field.", file=sys.stderr)
        return 2
    r = run(a.train_fields, a.test_fields, Path(a.cache), a.seed)
    print(
        f"feature set {FEATURE_SET_VERSION}, {r['n_features']} features; "
        f"{a.train_fields} training fields ({r['n_train_regions']} tiles), "
        f"{a.test_fields} test fields (seeds {SEED_BASE}+), seed {a.seed}"
    )
    print(format_result(r))
    print(
        f"features {r['feature_seconds']:.0f} s, training {r['train_seconds']:.0f} s, "
        f"{r['seconds']:.0f} s in all"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
