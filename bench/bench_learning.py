"""How many labelled regions a new material needs: suggested regions vs random ones.

A base model is trained on one synthetic material (or ``--model`` is used, with
its stored regions). A new material (other grain size, randomised rendering,
another mode mix) gives a pool of labelled regions (the generator's true
labels, tiles that are mostly one class) from ``--pool`` images and held-out
images for the region accuracy. Each round adds ``--k`` regions, chosen either
by fracto.modes.suggest's ranking (margin + committee disagreement of the
current model, kept apart on each image with ``pick_apart``) or at random
(seeded), and refits on the base regions plus all regions chosen so far, the
new ones weighted ``--new-weight`` (as ``fracto train --base``). It prints the
held-out region accuracy against the number of labelled regions for both
strategies and the number needed to reach ``--target`` (or "not reached
within N").

The refits are kept cheap on purpose: ``--max-iter`` boosting iterations
(default 30), two calibration folds, no permutation importance, one thread;
so the accuracies are those of a small model, and the comparison between the
strategies, not the level, is the result.

Run: ``nice -n 10 env OMP_NUM_THREADS=1 python bench/bench_learning.py``.

References
----------
Settles, B. (2012). Active Learning. Morgan & Claypool (margin sampling,
query by committee; the pool-based learning-curve comparison).
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from fracto.classes import MODES
from fracto.modes.default_model import synthetic_field
from fracto.modes.features import region_features
from fracto.modes.model import ModeClassifier, default_model_path
from fracto.modes.regions import tile_labels_from_mask
from fracto.modes.suggest import member_probabilities, pick_apart, usefulness
from fracto.modes.training import (
    TrainingSet,
    load_base,
    merge_with_base,
    set_from_arrays,
)

BASE_MODES = {"intergranular": 0.35, "transgranular": 0.35, "ductile": 0.15, "fatigue": 0.15}
NEW_MODES = {"intergranular": 0.2, "transgranular": 0.1, "ductile": 0.4, "fatigue": 0.3}


def _pool_image(seed, size, grain_px):
    img, lab, _ = synthetic_field(
        seed, size=size, grain_px=grain_px, modes=NEW_MODES, randomise_render=True
    )
    f = region_features(img)
    t = tile_labels_from_mask(lab, f.tile_grid, f.block_px, len(MODES) + 1)
    return f, t


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--model", help="base model (.skops with .regions.npz); default: train one")
    p.add_argument("--default-model", action="store_true", help="use fracto's default model")
    p.add_argument("--base-fields", type=int, default=6)
    p.add_argument("--pool", type=int, default=6, help="new-material images in the pool")
    p.add_argument("--test", type=int, default=4, help="held-out new-material images")
    p.add_argument("--size", type=int, default=256)
    p.add_argument("--k", type=int, default=10, help="regions added per round")
    p.add_argument("--rounds", type=int, default=16)
    p.add_argument("--max-iter", type=int, default=30)
    p.add_argument("--new-weight", type=float, default=10.0)
    p.add_argument("--target", type=float, default=0.9)
    p.add_argument("--base-grain", type=float, default=10.0, help="base grain size (px)")
    p.add_argument("--new-grain", type=float, default=70.0, help="new grain size (px)")
    p.add_argument("--repeats", type=int, default=3, help="runs with other seeds (mean)")
    p.add_argument("--seed", type=int, default=0)
    a = p.parse_args(argv)
    runs = [run(a, a.seed + r) for r in range(a.repeats)]
    print(f"\nmean of {len(runs)} runs (seeds {a.seed}..{a.seed + len(runs) - 1})")
    print("regions  suggest  random")
    mean = {}
    for name in ("suggest", "random"):
        mean[name] = [(n, float(np.mean([r[name][q][1] for r in runs])))
                      for q, (n, _) in enumerate(runs[0][name])]  # fmt: skip
    for (n, s), (_, rr) in zip(mean["suggest"], mean["random"], strict=True):
        print(f"{n:7d}  {s:7.3f}  {rr:6.3f}")
    for name, c in mean.items():
        hit = next((n for n, v in c if v >= a.target), None)
        n_max = c[-1][0]
        print(
            f"{name}: {hit} regions to reach {a.target} (mean curve)"
            if hit is not None
            else f"{name}: not reached within {n_max} regions (best {max(v for _, v in c):.3f})"
        )
    load = os.getloadavg()
    print(f"load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
    return 0


def run(a, seed: int) -> dict:
    """One learning-curve comparison with seed `seed`; returns both curves."""
    print(f"\n=== seed {seed}")
    t0 = time.perf_counter()
    params = dict(max_iter=a.max_iter, n_calibration_folds=2, n_importance_repeats=0)
    # ------------------------------------------------ base regions
    if a.model or a.default_model:
        bm = load_base(a.model or default_model_path())
        base, base_name = bm.regions, str(bm.path)
        if base is None:
            raise SystemExit("the base model has no stored regions")
    else:
        items = []
        for i in range(a.base_fields):
            s = 810_000 + 100 * seed + i
            img, lab, _ = synthetic_field(
                s, size=a.size, grain_px=a.base_grain, modes=BASE_MODES, randomise_render=False
            )
            items.append((img, lab, f"base{s}"))
        base = set_from_arrays(items, MODES, max_regions_per_image=200, seed=seed)
        base_name = (
            f"{a.base_fields} fields, grain {a.base_grain:g} px, default rendering, {BASE_MODES}"
        )
    # ------------------------------------------------ new material
    seeds = [820_000 + 100 * seed + i for i in range(a.pool + a.test)]
    pool = [_pool_image(s, a.size, a.new_grain) for s in seeds[: a.pool]]
    test = [_pool_image(s, a.size, a.new_grain) for s in seeds[a.pool :]]
    Xte = np.concatenate([f.X[t > 0] for f, t in test])
    yte = np.concatenate([np.asarray(MODES)[t[t > 0] - 1] for _, t in test])
    cand = [(i, j) for i, (_, t) in enumerate(pool) for j in np.nonzero(t > 0)[0]]
    print(f"base: {base_name}; {len(base.y)} regions")
    print(
        f"new material: grain {a.new_grain:g} px, randomised rendering, {NEW_MODES}; "
        f"pool {len(cand)} labelled regions on {a.pool} images, "
        f"test {len(yte)} regions on {a.test} images"
    )
    print(f"settings: {params}, new weight {a.new_weight}, k {a.k}, seed {seed}")

    def fit(chosen):
        if chosen:
            X = np.stack([pool[i][0].X[j] for i, j in chosen])
            y = np.asarray(MODES)[[pool[i][1][j] - 1 for i, j in chosen]]
            g = np.array([i for i, _ in chosen])
            new = TrainingSet(X, y, g, base.names)
            ts, w, _ = merge_with_base(new, base, new_weight=a.new_weight)
        else:
            ts, w = base, None
        m = ModeClassifier(MODES, random_state=seed, **params)
        return m.fit(ts.X, ts.y, ts.groups, sample_weight=w)

    def acc(m):
        return float((m.predict_best(Xte) == yte).mean())

    def by_suggest(m, chosen, k):
        taken = set(chosen)
        picks = []
        for i, (f, t) in enumerate(pool):
            score, _, _ = usefulness(member_probabilities(m, f.X))
            allowed = (t > 0) & np.array([(i, j) not in taken for j in range(len(t))])
            for j in pick_apart(score, f.tile_grid, k, gap=1, allowed=allowed):
                picks.append((score[j], i, int(j)))
        picks.sort(key=lambda r: -r[0])
        return [(i, j) for _, i, j in picks[:k]]

    rng = np.random.default_rng(seed)
    order = [cand[q] for q in rng.permutation(len(cand))]
    m0 = fit([])
    curves = {"suggest": [(0, acc(m0))], "random": [(0, acc(m0))]}
    chosen_s: list = []
    m_s = m0
    for r in range(1, a.rounds + 1):
        chosen_s += by_suggest(m_s, chosen_s, a.k)
        m_s = fit(chosen_s)
        curves["suggest"].append((len(chosen_s), acc(m_s)))
        chosen_r = order[: r * a.k]
        curves["random"].append((len(chosen_r), acc(fit(chosen_r))))
        print(
            f"  {r * a.k:4d} regions: suggest {curves['suggest'][-1][1]:.3f}  "
            f"random {curves['random'][-1][1]:.3f}  ({time.perf_counter() - t0:.0f} s)",
            flush=True,
        )
    print("\nregions  suggest  random")
    for (n, s), (_, rr) in zip(curves["suggest"], curves["random"], strict=True):
        print(f"{n:7d}  {s:7.3f}  {rr:6.3f}")
    for name, c in curves.items():
        hit = next((n for n, v in c if v >= a.target), None)
        n_max = c[-1][0]
        print(
            f"{name}: {hit} regions to reach {a.target}"
            if hit is not None
            else f"{name}: not reached within {n_max} regions (best {max(v for _, v in c):.3f})"
        )
    print(f"run {time.perf_counter() - t0:.0f} s")
    return curves


if __name__ == "__main__":
    raise SystemExit(main())
