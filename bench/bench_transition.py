"""Transition analysis: run time, and how often AICc calls pure noise a trend.

Prints measured figures (no thresholds). Usage:
/root/venv/bin/python bench/bench_transition.py
"""

from __future__ import annotations

import math
import time

import numpy as np


def main() -> None:
    from fracto.campaign.transition import analyse_campaign, fit_quantity

    temps = [-110.0, -85.0, -65.0, -50.0, -35.0, -15.0, 10.0]
    rng = np.random.default_rng(0)
    # false trends: 14 specimens (2 per temperature), constant truth plus noise
    t = np.repeat(temps, 2)
    n_sim = 300
    calls = {"constant": 0, "sigmoid": 0, "gaussian": 0}
    for _ in range(n_sim):
        y = 0.3 + rng.normal(0, 0.05, t.size)
        calls[fit_quantity(t, y, rng=rng, n_boot=0)["model"]] += 1
    share = 1 - calls["constant"] / n_sim
    print(f"pure noise, 14 specimens, {n_sim} campaigns: a curve chosen in {share:.1%} {calls}")
    # recovery and time on a 14-specimen campaign with 2 fields each
    rows = []
    for temp in temps:
        for s in range(2):
            d = 0.45 + 0.45 * math.tanh((temp + 50) / 20) + rng.normal(0, 0.03)
            for f in range(2):
                dd = float(np.clip(d + rng.normal(0, 0.02), 0, 1))
                rows.append(
                    {
                        "path": f"{temp}-{s}-{f}",
                        "specimen": f"{temp}-{s}",
                        "temperature_C": temp,
                        "status": "ok",
                        "ductile_fraction": dd,
                        "transgranular_fraction": 1 - dd,
                        "intergranular_fraction": 0.0,
                        "fatigue_fraction": 0.0,
                        "toughness_J": 20 + 150 * d,
                    }
                )
    for n_boot in (200, 1000):
        t0 = time.perf_counter()
        doc = analyse_campaign(rows, transition_temperature_C=None, n_boot=n_boot, seed=0)
        dt = time.perf_counter() - t0
        print(
            f"n_boot {n_boot}: {dt:.1f} s; estimated transition "
            f"{doc['transition_temperature_C']:.1f} °C (truth -50) "
            f"{doc['transition_temperature_ci95_C']}"
        )


if __name__ == "__main__":
    main()
