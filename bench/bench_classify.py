"""Evaluate the mode classifier on synthetic fields it never saw, and time it.

    python bench/bench_classify.py [--model PATH] [--fields 12] [--size 512] [--no-timing]

Fields come from fracto.synth with seeds from 900000 (training uses 10000+) and
mean grain sizes from a fixed list (training draws them at random), with
randomised rendering. Printed:

- region accuracy: blocks (the mode-map regions) whose true label is clear
  (at least 75 % of the block's pixels in one mode) and whose predicted label
  equals it; unclassified blocks count as wrong;
- per-mode recall on those blocks;
- mean absolute error of each mode fraction (predicted area fraction vs the
  true pixel fraction of the field);
- the time to classify a 2048 x 2048 field against one scipy.fft rfft2 +
  irfft2 round trip of the same image (target <= 100x).

Targets (issue 4): region accuracy >= 0.90, MAE <= 0.05 per mode.
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np

from fracto.classes import MODES
from fracto.modes.default_model import synthetic_field
from fracto.modes.model import default_model_path, load_model
from fracto.modes.pipeline import classify_image
from fracto.modes.regions import mask_block_histogram

GRAIN_PX = (7.0, 12.0, 20.0, 35.0, 60.0, 100.0)
SEED_BASE = 900_000


def evaluate(model, n_fields: int, size: int) -> dict:
    """Score the image model on ``n_fields`` held-out synthetic fractographs."""

    def field(i: int, seed: int, grain: float):
        img, lab, _ = synthetic_field(seed, size=size, grain_px=grain)
        return classify_image(img, model, seed=0, n_boot=200), lab

    return score_fields(field, n_fields, word="field")


def score_fields(classify_field, n_fields: int, *, word: str) -> dict:
    """Region accuracy, per-mode recall and fraction MAE over held-out synthetic fields.

    ``classify_field(i, seed, grain_px)`` returns (ModeResult, true label image) for
    field ``i`` (seed ``SEED_BASE + i``, grain size ``GRAIN_PX[i % 6]``); ``word``
    names a field in the printed lines.
    """
    k = len(MODES)
    conf = np.zeros((k, k + 1), int)  # last column: unclassified
    abs_err = []
    for i in range(n_fields):
        seed = SEED_BASE + i
        grain = GRAIN_PX[i % len(GRAIN_PX)]
        res, lab = classify_field(i, seed, grain)
        f = res.features
        hist = mask_block_histogram(lab, f.block_grid, f.block_px, k + 1)[..., 1:]
        tot = hist.sum(axis=2)
        best = hist.argmax(axis=2)
        clear = (tot > 0) & (hist.max(axis=2) >= 0.75 * np.maximum(tot, 1))
        classes = list(res.classes)
        pred = res.block_labels  # index into res.classes, -1 unclassified
        pred_mode = np.where(
            pred < 0, k, [[MODES.index(classes[p]) if p >= 0 else k for p in row] for row in pred]
        )
        for t, p in zip(best[clear], pred_mode[clear], strict=True):
            conf[t, p] += 1
        fr = res.fractions.to_dict()
        truth = [float((lab == j + 1).mean()) for j in range(k)]
        err = [abs(fr.get(m, {"value": 0.0})["value"] - truth[j]) for j, m in enumerate(MODES)]
        abs_err.append(err)
        print(
            f"  {word} seed {seed} grain {grain:>5.0f} px: "
            + " ".join(
                f"{m[:5]} {truth[j]:.2f}->{fr.get(m, {'value': 0})['value']:.2f}"
                for j, m in enumerate(MODES)
            )
            + f"  uncl {fr['unclassified']['value']:.2f}",
            flush=True,
        )
    acc = np.trace(conf[:, :k]) / max(conf.sum(), 1)
    recall = {
        m: (conf[j, j] / conf[j].sum() if conf[j].sum() else float("nan"))
        for j, m in enumerate(MODES)
    }
    mae = dict(zip(MODES, np.mean(abs_err, axis=0), strict=True))
    return {"region_accuracy": acc, "recall": recall, "fraction_mae": mae, "confusion": conf}


def print_scores(r: dict) -> None:
    """Print what :func:`score_fields` returns, with the targets."""
    print(f"region accuracy {r['region_accuracy']:.3f}  (target >= 0.90)")
    print("per-mode recall " + ", ".join(f"{m} {v:.3f}" for m, v in r["recall"].items()))
    print(
        "fraction MAE    "
        + ", ".join(f"{m} {v:.3f}" for m, v in r["fraction_mae"].items())
        + "  (target <= 0.05 each)"
    )
    print("confusion (rows true, columns predicted + unclassified):")
    for m, row in zip(MODES, r["confusion"], strict=True):
        print(f"  {m:<14}" + "".join(f"{v:>8d}" for v in row))


def timing(model) -> tuple[float, float]:
    from scipy import fft

    img, _, _ = synthetic_field(SEED_BASE + 999, size=2048, grain_px=30.0)
    x = img.astype(np.float64)
    t_fft = min(_time(lambda: fft.irfft2(fft.rfft2(x), s=x.shape)) for _ in range(3))
    t_cls = min(_time(lambda: classify_image(img, model, n_boot=1000)) for _ in range(2))
    return t_cls, t_fft


def _time(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--model", default=None)
    p.add_argument("--fields", type=int, default=12)
    p.add_argument("--size", type=int, default=512)
    p.add_argument("--no-timing", action="store_true")
    a = p.parse_args(argv)
    path = a.model or default_model_path()
    model = load_model(path)
    print(f"model {path}")
    print_scores(evaluate(model, a.fields, a.size))
    if not a.no_timing:
        t_cls, t_fft = timing(model)
        print(
            f"2048x2048: classify {t_cls:.2f} s, rfft2+irfft2 {t_fft:.3f} s, "
            f"ratio {t_cls / t_fft:.1f}x (target <= 100x)"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
