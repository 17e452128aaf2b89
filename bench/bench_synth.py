"""Benchmark: one 1024² synthetic fracture surface with its SEM rendering.

Target (issue 3): at most 10 s on 2 cores. Prints the total and the time of
each stage, for the default settings (Poisson–Voronoi 2 µm grains, half
intergranular, half transgranular), a mixed four-mode surface and a bimodal
(two-level) polycrystal.

Run: ``/root/venv/bin/python bench/bench_synth.py``
"""

from __future__ import annotations

import time

from fracto.synth import GrainSize, make_surface

TARGET_S = 10.0


def run(label: str, **kw) -> float:
    prof: dict[str, float] = {}
    t0 = time.perf_counter()
    make_surface(size=1024, seed=1, profile=prof, **kw)
    total = time.perf_counter() - t0
    print(
        f"{label}: {total:.2f} s for 1024² (target ≤ {TARGET_S:.0f} s; "
        f"ratio {total / TARGET_S:.2f} of the target)"
    )
    for stage, sec in prof.items():
        print(f"    {stage:<16} {sec:6.2f} s")
    return total


if __name__ == "__main__":
    import os

    print(f"load average before the run: {os.getloadavg()[0]:.1f} (2 cores shared)")
    run("default (IG/TG 50/50, 2 µm grains)")
    run(
        "four modes",
        modes={"intergranular": 0.3, "transgranular": 0.3, "ductile": 0.3, "fatigue": 0.1},
    )
    run("bimodal 1.5 µm / 8 µm, coarse 0.35", grain_size=GrainSize.parse("bimodal:1.5um,8um,0.35"))
