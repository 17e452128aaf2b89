"""Evaluate the height model on synthetic height maps it never saw, and time it.

    python bench/bench_classify_height.py [--model PATH] [--fields 12] [--size 512]
                                          [--clean] [--no-timing]

Height maps come from fracto.synth with seeds from 900000 (the height model's
training uses 20000+, the image model's 10000+) and mean grain sizes from a
fixed list (training draws them at random, log-uniform), at 0.1 µm pixels,
with the same measurement nuisances as in training (tilt, white height noise,
dropped-out points; ``--clean`` switches them off). Each map is classified
with :func:`fracto.modes.pipeline.classify_height_map` (rendered view + height
features). Printed, as bench/bench_classify.py prints them for the image model:

- region accuracy: blocks whose true label is clear (at least 75 % of the
  block's pixels in one mode) and whose predicted label equals it;
  unclassified blocks count as wrong;
- per-mode recall on those blocks;
- mean absolute error of each mode fraction (reported fraction vs the true
  pixel fraction of the map);
- the time to classify a 2048 x 2048 map against one scipy.fft rfft2 + irfft2
  round trip of the same map.

Targets (the image model's, issue 4): region accuracy >= 0.90, MAE <= 0.05 per mode.
"""

from __future__ import annotations

import argparse
import os
import sys

import numpy as np
from bench_classify import SEED_BASE, _time, print_scores, score_fields

from fracto.modes.default_model import synthetic_height_field
from fracto.modes.heightview import default_height_model_path
from fracto.modes.model import load_model
from fracto.modes.pipeline import classify_height_map

PIXEL_UM = 0.1


def evaluate(model, n_fields: int, size: int, *, nuisance: bool = True) -> dict:
    """Score the height model on ``n_fields`` held-out synthetic height maps."""

    def field(i: int, seed: int, grain: float):
        z, lab, _ = synthetic_height_field(
            seed, size=size, grain_px=grain, pixel_size_um=PIXEL_UM, nuisance=nuisance
        )
        return classify_height_map(z, model, pixel_size_um=PIXEL_UM, seed=0, n_boot=200), lab

    return score_fields(field, n_fields, word="map")


def timing(model) -> tuple[float, float]:
    from scipy import fft

    z, _, _ = synthetic_height_field(
        SEED_BASE + 999, size=2048, grain_px=30.0, pixel_size_um=PIXEL_UM
    )
    x = np.nan_to_num(z)
    t_fft = min(_time(lambda: fft.irfft2(fft.rfft2(x), s=x.shape)) for _ in range(3))
    t_cls = min(
        _time(lambda: classify_height_map(z, model, pixel_size_um=PIXEL_UM, n_boot=1000))
        for _ in range(2)
    )
    return t_cls, t_fft


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--model", default=None)
    p.add_argument("--fields", type=int, default=12)
    p.add_argument("--size", type=int, default=512)
    p.add_argument("--clean", action="store_true", help="no measurement nuisances")
    p.add_argument("--no-timing", action="store_true")
    a = p.parse_args(argv)
    path = a.model or default_height_model_path()
    model = load_model(path)
    print(f"model {path}; load average {os.getloadavg()[0]:.2f}")
    print(f"maps: {a.fields} x {a.size} px, seeds {SEED_BASE}+, nuisances {not a.clean}")
    print_scores(evaluate(model, a.fields, a.size, nuisance=not a.clean))
    if not a.no_timing:
        t_cls, t_fft = timing(model)
        print(
            f"2048x2048: classify {t_cls:.2f} s, rfft2+irfft2 {t_fft:.3f} s, "
            f"ratio {t_cls / t_fft:.1f}x"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
