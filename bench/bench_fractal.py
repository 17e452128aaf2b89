"""Time the fractal-dimension estimators and the fractography ratios against an FFT round trip.

`fracto measure` must compute its full parameter set on a 4096² map within 20× one float32
rfft2 + irfft2 round trip of that map; each estimator here should cost a few round trips.
Prints seconds and the ratio to the round trip measured in the same run.

    /root/venv/bin/python bench/bench_fractal.py [--sizes 1024,2048,4096] [--repeat 3]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import scipy.fft as sfft

from fracto.surface.fractal import (
    fractal_dimension_cube,
    fractal_dimension_psd,
    fractal_dimension_variogram,
)
from fracto.surface.ratios import fractography_ratios
from fracto.synth.fields import self_affine_field


def _best_time(fn, repeat: int) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1024,2048,4096")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    print(f"{'size':>6} {'step':<22} {'seconds':>9} {'x round trip':>13}")
    for n in sizes:
        z = self_affine_field((n, n), 0.6, 0.5, 0.5, rms_um=float(n), seed=0)
        z32 = z.astype(np.float32)

        def round_trip(a=z32, shape=z.shape):
            sfft.irfft2(sfft.rfft2(a, workers=-1), s=shape, workers=-1)

        t_fft = _best_time(round_trip, args.repeat)
        print(f"{n:>6} {'rfft2+irfft2 (f32)':<22} {t_fft:9.3f} {1.0:13.1f}")
        steps = {
            "D_psd": fractal_dimension_psd,
            "D_variogram": fractal_dimension_variogram,
            "D_cube": fractal_dimension_cube,
            "fractography_ratios": fractography_ratios,
        }
        total = 0.0
        for name, fn in steps.items():
            t = _best_time(lambda fn=fn, z=z: fn(z, 0.5, 0.5), args.repeat)
            total += t
            print(f"{n:>6} {name:<22} {t:9.3f} {t / t_fft:13.1f}")
        print(f"{n:>6} {'sum of the four':<22} {total:9.3f} {total / t_fft:13.1f}")


if __name__ == "__main__":
    main()
