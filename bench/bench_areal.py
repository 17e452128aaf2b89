"""Benchmark of the ISO 25178-2 areal parameters (fracto.surface.areal / .features).

For each map size, times every parameter function on a noisy Gaussian-correlated
float64 map and divides by the time of one scipy.fft rfft2 + irfft2 round trip of
the same array in the same run; then measures each function's tracemalloc peak
relative to the map's bytes (in a separate pass, so tracing does not slow the
timings).

Run: /root/venv/bin/python bench/bench_areal.py [--sizes 1024 2048 4096] [--repeat 3]
"""

from __future__ import annotations

import argparse
import gc
import time
import tracemalloc

import numpy as np
import scipy.fft as sfft

from fracto.surface.areal import (
    areal_parameters,
    gradient_parameters,
    height_parameters,
    material_ratio_curve,
    material_ratio_parameters,
    sk_parameters,
    spatial_parameters,
)
from fracto.surface.features import feature_parameters


def make_map(n: int, seed: int = 0, tau_px: float = 16.0, noise: float = 0.05) -> np.ndarray:
    """Gaussian-correlated field (ACF exp(-(r/τ)²)) of unit RMS plus white noise."""
    rng = np.random.default_rng(seed)
    w = rng.standard_normal((n, n), dtype=np.float32)
    f = sfft.rfft2(w)
    del w
    qy = sfft.fftfreq(n).astype(np.float32)[:, None]
    qx = sfft.rfftfreq(n).astype(np.float32)[None, :]
    sigma = tau_px / 2.0  # kernel sd: ACF of the filtered noise is exp(-r²/(4σ²))
    f *= np.exp(-2.0 * (np.pi * sigma) ** 2 * (qx * qx + qy * qy))
    z = sfft.irfft2(f, s=(n, n)).astype(np.float64)
    del f
    z /= z.std()
    z += noise * rng.standard_normal((n, n))
    return z


def best_time(fn, repeat: int) -> tuple[float, float]:
    """Best wall time and best process CPU time over `repeat` runs."""
    best, best_cpu = float("inf"), float("inf")
    for _ in range(repeat):
        gc.collect()
        c = time.process_time()
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
        best_cpu = min(best_cpu, time.process_time() - c)
    return best, best_cpu


def peak_ratio(fn, nbytes: int) -> float:
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return peak / nbytes


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096])
    ap.add_argument("--repeat", type=int, default=2)
    args = ap.parse_args()
    for n in args.sizes:
        z = make_map(n)
        curve = material_ratio_curve(z)
        cases = {
            "height_parameters": lambda z=z: height_parameters(z),
            "gradient_parameters": lambda z=z: gradient_parameters(z, 1.0, 1.0),
            "spatial_parameters": lambda z=z: spatial_parameters(z, 1.0, 1.0),
            "material_ratio_curve": lambda z=z: material_ratio_curve(z),
            "material_ratio+sk (curve)": lambda c=curve: (
                material_ratio_parameters(c),
                sk_parameters(c),
            ),
            "feature_parameters": lambda z=z: feature_parameters(z, 1.0, 1.0),
            "feature_parameters workers=2": lambda z=z: feature_parameters(z, 1.0, 1.0, workers=2),
            "areal_parameters (all)": lambda z=z: areal_parameters(z, 1.0, 1.0),
            "areal_parameters workers=2": lambda z=z: areal_parameters(z, 1.0, 1.0, workers=2),
        }

        def ref(z=z):
            return sfft.irfft2(sfft.rfft2(z), s=z.shape)

        t_ref, c_ref = best_time(ref, max(3, args.repeat))
        print(
            f"\n{n}×{n} float64 map ({z.nbytes / 2**20:.0f} MiB); one rfft2+irfft2 "
            f"round trip {t_ref:.3f} s wall, {c_ref:.3f} s CPU (scipy.fft, 1 worker)"
        )
        print(
            f"{'function':30s} {'wall s':>8s} {'× FFT':>7s} {'CPU s':>8s} {'× FFT':>7s} "
            f"{'peak/map':>9s}"
        )
        for name, fn in cases.items():
            t, c = best_time(fn, 1 if name.startswith("areal") else args.repeat)
            m = peak_ratio(fn, z.nbytes)
            print(f"{name:30s} {t:8.3f} {t / t_ref:7.2f} {c:8.3f} {c / c_ref:7.2f} {m:9.2f}")
        t_ref2, c_ref2 = best_time(ref, max(3, args.repeat))
        print(f"(round trip re-timed after the runs: {t_ref2:.3f} s wall, {c_ref2:.3f} s CPU)")
        del z, curve, cases


if __name__ == "__main__":
    main()
