"""Scale-bar reading: how often the label is read right, per font and overall.

Banners are drawn by tests/test_scalebar.py (OpenCV Hershey fonts and DejaVu
Sans through matplotlib), with several bar lengths, labels, both polarities and
JPEG compression. Prints the read rate (right value in µm and bar length within
1 px or 1 %), the worst bar-length error and the misread cases.

    /root/venv/bin/python bench/bench_scalebar.py [--repeats 3]
"""

from __future__ import annotations

import argparse
import shutil
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from test_scalebar import FONTS, LABELS_UM, make_banner

from fracto.io.scalebar import find_scale_bar


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--repeats", type=int, default=3, help="cases per font and label")
    ap.add_argument("--seed", type=int, default=11)
    args = ap.parse_args()
    if shutil.which("tesseract") is None:
        print("tesseract is not installed; only bar lengths are measured")
    rng = np.random.default_rng(args.seed)
    per: dict[str, list[bool]] = {f: [] for f in FONTS}
    worst = 0.0
    bad = []
    t0 = time.perf_counter()
    n = 0
    wrong = 0
    for font in FONTS:
        for label, um in LABELS_UM.items():
            for _ in range(args.repeats):
                bar_px = float(rng.uniform(50, 400))
                pol = str(rng.choice(["bright", "dark"]))
                jq = int(rng.integers(60, 95)) if rng.uniform() < 0.5 else None
                ticks = bool(rng.uniform() < 0.3)
                rows = int(rng.integers(40, 90))
                img, true = make_banner(
                    font=font,
                    bar_px=bar_px,
                    label=label,
                    polarity=pol,
                    jpeg_quality=jq,
                    ticks=ticks,
                    rows=rows,
                )
                bar = find_scale_bar(img)
                n += 1
                if bar is None:
                    per[font].append(False)
                    bad.append((font, label, "no bar"))
                    continue
                err = abs(bar.length_px - true)
                worst = max(worst, err / max(1.0, 0.01 * true))
                ok = (
                    bar.label_um is not None
                    and abs(bar.label_um - um) <= 1e-9 * um
                    and err <= max(1.0, 0.01 * true)
                )
                per[font].append(ok)
                if bar.label_um is not None and abs(bar.label_um - um) > 1e-9 * um:
                    wrong += 1
                if not ok:
                    bad.append((font, label, repr(bar.label_text), pol, jq, rows, bar.note))
    dt = time.perf_counter() - t0
    print(f"{n} banners in {dt:.1f} s ({1000 * dt / n:.0f} ms each)")
    for f, v in per.items():
        print(f"  {f:8s} read rate {np.mean(v):.3f} ({sum(v)}/{len(v)})")
    allv = [x for v in per.values() for x in v]
    print(f"  overall  read rate {np.mean(allv):.3f} ({sum(allv)}/{len(allv)})")
    print(f"wrong value accepted (silent misreading): {wrong}/{len(allv)}")
    print(f"worst bar-length error / tolerance (1 px or 1 %): {worst:.3f}")
    for b in bad:
        print("  misread:", *b)


if __name__ == "__main__":
    main()
