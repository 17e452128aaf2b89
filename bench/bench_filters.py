"""Time surface conditioning against an FFT round trip of the same map.

For each size, prints the best-of-N seconds of `condition_surface` with plane
removal and one Gaussian L-filter (nesting index = 1/5 of the map side), of
the single steps, and of ISO 21920-2 profile parameters along x, each as a
ratio to one scipy.fft rfft2 + irfft2 round trip of the same float64 array
(and of its float32 copy) measured in the same run, by wall time and by
process CPU time (the CPU ratio is steadier on a machine shared with other
work). Also prints the peak extra memory (tracemalloc, numpy allocations)
in multiples of the map's bytes.

    /root/venv/bin/python bench/bench_filters.py [--sizes 1024,2048,4096] [--repeat 3]
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np
import scipy.fft as sfft

from fracto.surface.filters import condition_surface, l_filter, remove_spikes, s_filter
from fracto.surface.form import remove_form
from fracto.surface.profile import areal_profile_parameters


def _best_time(fn, repeat: int) -> tuple[float, float]:
    """Best wall time and best process CPU time (all threads) of `repeat` calls."""
    wall = cpu = float("inf")
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall = min(wall, time.perf_counter() - t0)
        cpu = min(cpu, time.process_time() - c0)
    return wall, cpu


def _peak_extra(fn, nbytes: int) -> float:
    tracemalloc.start()
    tracemalloc.reset_peak()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / nbytes


def _test_map(n: int, seed: int) -> np.ndarray:
    """A rough tilted surface with 2 % missing points (invented test data)."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((n, n)).cumsum(axis=1) * 0.01
    z += np.linspace(0.0, 3.0, n)[None, :] - np.linspace(0.0, 1.0, n)[:, None]
    z[rng.random((n, n)) < 0.02] = np.nan
    return z


def _steps(z: np.ndarray, lc: float) -> dict:
    """The timed calls on map `z` with L nesting index `lc` (pixels)."""
    return {
        "condition_surface(plane, L=n/5)": lambda: condition_surface(
            z, 1.0, 1.0, form="plane", l_filter_um=lc
        ),
        "remove_form plane": lambda: remove_form(z, "plane"),
        "remove_form poly:3": lambda: remove_form(z, "poly", order=3),
        "remove_form robust": lambda: remove_form(z, "robust"),
        "l_filter n/5 (FFT path)": lambda: l_filter(z, lc, 1.0, 1.0),
        "l_filter n/5 edge_order=1": lambda: l_filter(z, lc, 1.0, 1.0, edge_order=1),
        "s_filter 5 px (direct path)": lambda: s_filter(z, 5.0, 1.0, 1.0),
        "remove_spikes 3x3": lambda: remove_spikes(z),
        "areal_profile_parameters x": lambda: areal_profile_parameters(z, 1.0, 1.0),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1024,2048,4096")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    print(
        f"{'size':>6} {'step':<34} {'wall_s':>7} {'/fft64':>7} {'/fft32':>7} "
        f"{'cpu_s':>7} {'cpu/fft64':>9} {'peak/map':>9}"
    )
    for n in sizes:
        z = _test_map(n, seed=n)
        filled = np.nan_to_num(z)
        f32 = filled.astype(np.float32)
        w64, c64 = _best_time(lambda a=filled: sfft.irfft2(sfft.rfft2(a), s=a.shape), args.repeat)
        w32, _ = _best_time(lambda a=f32: sfft.irfft2(sfft.rfft2(a), s=a.shape), args.repeat)
        print(
            f"{n:>6} {'rfft2+irfft2 float64 (float32)':<34} {w64:7.3f} {'':>7} "
            f"{'(' + format(w32, '.3f') + ')':>7} {c64:7.3f}"
        )
        for name, fn in _steps(z, n / 5.0).items():  # L nesting index in pixels
            wall, cpu = _best_time(fn, args.repeat)
            mem = _peak_extra(fn, z.nbytes)
            print(
                f"{n:>6} {name:<34} {wall:7.3f} {wall / w64:7.1f} {wall / w32:7.1f} "
                f"{cpu:7.3f} {cpu / c64:9.1f} {mem:9.1f}"
            )


if __name__ == "__main__":
    main()
