"""Benchmark of ``fracto measure``'s full parameter set (issue: foundation, §8).

Target: on a 4096×4096 float map, plane removal + one L-filter + every parameter in at
most 20× the time of one ``scipy.fft`` rfft2+irfft2 round trip of the same array measured
in the same run, and peak memory at most 8× the map's own bytes. 1024² and 2048² are
printed too, with how the cost grows with size.

Run: ``python bench/bench_measure.py [--sizes 1024,2048,4096] [--repeat 1]``
"""

from __future__ import annotations

import argparse
import itertools
import time
import tracemalloc

import numpy as np
import scipy.fft

from fracto.io.calibration import PixelSize
from fracto.surface.measure import GROUPS, measure_surface


def test_surface(n: int, seed: int = 1) -> np.ndarray:
    """A rough, noisy, tilted map: Gaussian-correlated relief plus white noise."""
    from fracto.synth.fields import gaussian_correlated_field

    z = gaussian_correlated_field((n, n), 2.0, 0.1, 0.1, rms_um=0.5, seed=seed)
    rng = np.random.default_rng(seed)
    z += 0.02 * rng.standard_normal(z.shape)
    y, x = np.mgrid[0:n, 0:n]
    z += 1e-3 * x + 2e-3 * y
    return z


def fft_round_trip_s(z: np.ndarray, repeat: int = 3, workers: int = 1) -> tuple[float, float]:
    """Best wall and CPU seconds of one rfft2 + irfft2 round trip."""
    best_wall = best_cpu = np.inf
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        scipy.fft.irfft2(scipy.fft.rfft2(z, workers=workers), s=z.shape, workers=workers)
        best_wall = min(best_wall, time.perf_counter() - t)
        best_cpu = min(best_cpu, time.process_time() - c)
    return best_wall, best_cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1024,2048,4096")
    ap.add_argument("--groups", default=",".join(GROUPS))
    args = ap.parse_args()
    ps = PixelSize.square(0.1, "benchmark")
    groups = tuple(args.groups.split(","))
    rows = []
    for n in (int(s) for s in args.sizes.split(",")):
        z = test_surface(n)
        t_fft, c_fft = fft_round_trip_s(z)
        t_fft2, _ = fft_round_trip_s(z, workers=2)
        per_group = {}
        for g in groups:
            t = time.perf_counter()
            measure_surface(z, ps, l_filter_um=0.25 * n * 0.1, groups=(g,), threads=1)
            per_group[g] = time.perf_counter() - t
        for threads in (1, 2):
            t, c = time.perf_counter(), time.process_time()
            measure_surface(z, ps, l_filter_um=0.25 * n * 0.1, groups=groups, threads=threads)
            wall, cpu = time.perf_counter() - t, time.process_time() - c
            print(f"\n{n}×{n}, threads={threads}: full measure {wall:.2f} s wall, {cpu:.2f} s CPU")
            print(
                f"  wall / fft round trip (1 worker, {t_fft * 1e3:.0f} ms) = {wall / t_fft:.1f}"
                f"   (target ≤ 20 at 4096²)"
            )
            print(
                f"  wall / fft round trip (2 workers, {t_fft2 * 1e3:.0f} ms) = {wall / t_fft2:.1f}"
            )
            print(f"  CPU / fft CPU = {cpu / c_fft:.1f}")
        tracemalloc.start()
        measure_surface(z, ps, l_filter_um=0.25 * n * 0.1, groups=groups)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        rows.append((n, t_fft, wall, peak / z.nbytes))
        print(f"  peak traced memory / map bytes = {peak / z.nbytes:.2f}  (target ≤ 8)")
        print("  per group (each alone, one thread, includes conditioning), wall ratio to fft:")
        for g, tg in per_group.items():
            print(f"    {g:<13} {tg:7.2f} s  {tg / t_fft:7.1f}×")
    if len(rows) > 1:
        print("\ngrowth of the full run with size (time ratio per 4× pixels):")
        for (n0, _, t0, _), (n1, _, t1, _) in itertools.pairwise(rows):
            print(f"  {n0}² → {n1}²: {t1 / t0:.2f}× for {(n1 / n0) ** 2:.0f}× the pixels")


if __name__ == "__main__":
    main()
