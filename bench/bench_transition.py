"""Transition analysis: run time, AICc false-trend rate, interval coverage, demo diagnosis.

Prints measured figures (no thresholds). Usage::

    /root/venv/bin/python bench/bench_transition.py [--n-sim 100] [--no-coverage]
    /root/venv/bin/python bench/bench_transition.py --diagnose OUT_DIR

Coverage: campaigns like the demo (7 temperatures × 2 specimens × 2 fields, ductile
fraction 0.45 + 0.45·tanh((T + 50)/20), specimen scatter σ 0.03) whose fields are
*measured* with an error of σ 0.05 and report that as their 95 % interval (± 1.96 σ);
the share of campaigns whose 95 % interval of the midpoint temperature holds the truth
(−50 °C), with the bootstrap drawing the fields within their intervals and without.

``--diagnose OUT_DIR`` scores the demo campaign into OUT_DIR (resumed if it is
there), reads the true mode fractions of every field from its label image, and prints
the classifier's bias per mode and the transition temperature fitted to the
classifier's fractions and to the true ones.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import time
from pathlib import Path

import numpy as np

TEMPS = [-110.0, -85.0, -65.0, -50.0, -35.0, -15.0, 10.0]
DEMO = Path(__file__).resolve().parents[1] / "demo_images"


def false_trends(rng: np.random.Generator) -> None:
    from fracto.campaign.transition import fit_quantity

    t = np.repeat(TEMPS, 2)
    n_sim = 300
    calls = {"constant": 0, "sigmoid": 0, "gaussian": 0}
    for _ in range(n_sim):
        y = 0.3 + rng.normal(0, 0.05, t.size)
        calls[fit_quantity(t, y, rng=rng, n_boot=0)["model"]] += 1
    share = 1 - calls["constant"] / n_sim
    print(f"pure noise, 14 specimens, {n_sim} campaigns: a curve chosen in {share:.1%} {calls}")


def _rows(rng: np.random.Generator, meas_sd: float = 0.0) -> list[dict]:
    rows = []
    for temp in TEMPS:
        for s in range(2):
            d = 0.45 + 0.45 * math.tanh((temp + 50) / 20) + rng.normal(0, 0.03)
            for f in range(2):
                dd = float(np.clip(d + rng.normal(0, 0.02), 0, 1))
                m = float(np.clip(dd + rng.normal(0, meas_sd), 0, 1)) if meas_sd else dd
                rows.append(
                    {
                        "path": f"{temp}-{s}-{f}",
                        "specimen": f"{temp}-{s}",
                        "temperature_C": temp,
                        "status": "ok",
                        "ductile_fraction": m,
                        "ductile_ci95_low": max(0.0, m - 1.96 * meas_sd),
                        "ductile_ci95_high": min(1.0, m + 1.96 * meas_sd),
                        "transgranular_fraction": 1 - m,
                        "intergranular_fraction": 0.0,
                        "fatigue_fraction": 0.0,
                        "toughness_J": 20 + 150 * d,
                    }
                )
    return rows


def run_time(rng: np.random.Generator) -> None:
    from fracto.campaign.transition import analyse_campaign

    rows = _rows(rng)
    for n_boot in (200, 1000):
        t0 = time.perf_counter()
        doc = analyse_campaign(rows, transition_temperature_C=None, n_boot=n_boot, seed=0)
        dt = time.perf_counter() - t0
        print(
            f"n_boot {n_boot}: {dt:.1f} s; estimated transition "
            f"{doc['transition_temperature_C']:.1f} °C (truth -50) "
            f"{doc['transition_temperature_ci95_C']}"
        )


def coverage(n_sim: int, n_boot: int) -> None:
    from fracto.campaign.transition import (
        aggregate_by_specimen,
        field_uncertainty,
        fit_quantity,
        specimen_groups,
    )

    rng = np.random.default_rng(2026)
    hits = {"fields drawn": 0, "specimens only": 0}
    n_ok = {k: 0 for k in hits}
    widths = {k: [] for k in hits}
    t0 = time.perf_counter()
    for _ in range(n_sim):
        rows = _rows(rng, meas_sd=0.05)
        spec, _ = aggregate_by_specimen(rows, ["ductile_fraction"])
        groups = specimen_groups(rows)
        t = np.array([s["temperature_C"] for s in spec])
        y = np.array([s["ductile_fraction"] for s in spec])
        fields = [field_uncertainty(groups[s["specimen"]], "ductile_fraction") for s in spec]
        seed = int(rng.integers(2**31))
        for k, fl in (("fields drawn", fields), ("specimens only", None)):
            rec = fit_quantity(t, y, rng=np.random.default_rng(seed), n_boot=n_boot, fields=fl)
            ci = rec.get("midpoint_temperature_ci95_C")
            if rec.get("model") != "sigmoid" or not ci:
                continue
            n_ok[k] += 1
            hits[k] += ci[0] <= -50.0 <= ci[1]
            widths[k].append(ci[1] - ci[0])
    dt = time.perf_counter() - t0
    print(
        f"coverage of the 95 % midpoint interval (truth -50 °C), {n_sim} campaigns, "
        f"n_boot {n_boot}, field measurement sigma 0.05 ({dt:.0f} s):"
    )
    for k in hits:
        if n_ok[k]:
            print(
                f"  {k:<15} {hits[k] / n_ok[k]:.3f} of {n_ok[k]} sigmoid fits, "
                f"median width {np.median(widths[k]):.1f} °C"
            )


def _true_fractions(label_png: Path, classes: list[str]) -> dict[str, float]:
    from PIL import Image

    lab = np.asarray(Image.open(label_png))
    if lab.ndim == 3:
        lab = lab[..., 0]
    counts = np.bincount(lab.ravel(), minlength=len(classes))
    tot = counts[1:].sum()
    return {c: float(counts[i] / tot) for i, c in enumerate(classes) if i > 0}


def diagnose(out: Path) -> None:
    from fracto.campaign.batch import run_batch
    from fracto.campaign.transition import analyse_campaign
    from fracto.classes import MODES

    truth = json.loads((DEMO / "truth.json").read_text())
    classes = truth["classes"]
    t0 = time.perf_counter()
    s = run_batch(DEMO / "campaign.csv", out, jobs=2, report=False)
    print(f"demo batch: {s.line()} in {time.perf_counter() - t0:.0f} s")
    with open(DEMO / "campaign.csv", newline="", encoding="utf-8") as fh:
        man = list(csv.DictReader(fh))

    def fkey(specimen: str, field: str) -> tuple[str, str]:
        return specimen, f"{float(field):g}"  # images.csv writes the field number as 1.0

    labels = {
        fkey(r["specimen"], r["field"]): DEMO / r["path"] for r in man if r["kind"] == "labels"
    }
    with open(out / "images.csv", newline="", encoding="utf-8") as fh:
        rows = [r for r in csv.DictReader(fh) if r["kind"] == "sem" and r["status"] == "ok"]
    true_rows, bias = [], {m: [] for m in MODES}
    for r in rows:
        tf = _true_fractions(labels[fkey(r["specimen"], r["field"])], classes)
        t = dict(r)
        for m in MODES:
            got = float(r[f"{m}_fraction"] or "nan")
            bias[m].append(got - tf.get(m, 0.0))
            t[f"{m}_fraction"] = tf.get(m, 0.0)
            t[f"{m}_ci95_low"] = t[f"{m}_ci95_high"] = ""
        true_rows.append(t)
    print(f"classifier minus true fraction, mean over {len(rows)} demo fields:")
    for m in MODES:
        b = np.array(bias[m])
        print(f"  {m:<14} {np.nanmean(b):+.3f} (sd {np.nanstd(b, ddof=1):.3f})")
    un = [float(r.get("unclassified_fraction") or 0) for r in rows]
    print(f"  unclassified share of the classifier's fields: mean {np.mean(un):.3f}")
    for label, rr in (("classifier fractions", rows), ("true fractions", true_rows)):
        doc = analyse_campaign(rr, transition_temperature_C=None, n_boot=200, seed=0)
        b = doc["transition_basis"] or {}
        print(
            f"transition from {label:<21}: {doc['transition_temperature_C']:.1f} °C "
            f"{doc['transition_temperature_ci95_C']} ({b.get('model')} fit of the "
            f"{b.get('mode')} fraction; truth {truth['transition_temperature_C']} °C)"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n-sim", type=int, default=100, help="campaigns for the coverage")
    ap.add_argument("--n-boot", type=int, default=200, help="replicates in the coverage")
    ap.add_argument("--no-coverage", action="store_true")
    ap.add_argument("--diagnose", metavar="OUT_DIR", help="diagnose the demo's estimate")
    a = ap.parse_args()
    if a.diagnose:
        diagnose(Path(a.diagnose))
        return
    rng = np.random.default_rng(0)
    false_trends(rng)
    run_time(rng)
    if not a.no_coverage:
        coverage(a.n_sim, a.n_boot)


if __name__ == "__main__":
    main()
