"""Size and build time of a campaign report of many fields (prints measured figures).

Thumbnails are made like the batch makes them (fracto.campaign.runner.thumbnail_jpeg,
512 px JPEG) from invented textures, so the per-field size is realistic.
Usage: /root/venv/bin/python bench/bench_campaign_report.py [N_FIELDS]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def main(n_fields: int = 1000) -> None:
    import cv2

    from fracto.campaign.report import thumbnail_budget_bytes, write_report
    from fracto.campaign.runner import thumbnail_jpeg
    from fracto.campaign.transition import analyse_campaign

    rng = np.random.default_rng(0)
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d)
        # a few distinct textures, reused (the cost is per embedded copy anyway)
        thumbs = []
        for k in range(8):
            z = cv2.GaussianBlur(rng.normal(size=(512, 512)), (0, 0), 1.5 + k)
            z += rng.normal(0, 0.2, z.shape)
            lab = cv2.resize(
                rng.integers(0, 5, (8, 8)).astype(np.uint8),
                (512, 512),
                interpolation=cv2.INTER_NEAREST,
            )
            b = thumbnail_jpeg(z, lab, ("intergranular", "transgranular", "ductile", "fatigue"))
            p = folder / f"t{k}.jpg"
            p.write_bytes(b)
            thumbs.append(p)
        temps = np.linspace(-120, 40, 10)
        rows, overlays = [], {}
        for i in range(n_fields):
            t = float(temps[i % temps.size])
            d = 0.5 + 0.45 * np.tanh((t + 40) / 20) + rng.normal(0, 0.03)
            path = f"S{i % 50}/f{i}.png"
            rows.append(
                {
                    "path": path,
                    "specimen": f"S{i % 50}",
                    "temperature_C": t,
                    "status": "ok",
                    "ductile_fraction": d,
                    "transgranular_fraction": 1 - d,
                    "intergranular_fraction": 0.0,
                    "fatigue_fraction": 0.0,
                    "Sa_um": 1 + d,
                }
            )
            overlays[path] = thumbs[i % len(thumbs)]
        tr = analyse_campaign(rows, transition_temperature_C=None, n_boot=200)
        t0 = time.perf_counter()
        out = write_report(
            folder / "out",
            images=rows,
            specimens=[],
            transition=tr,
            provenance={},
            overlays=overlays,
        )
        dt = time.perf_counter() - t0
        size = out.stat().st_size
        raw = np.mean([p.stat().st_size for p in thumbs])
        print(f"fields: {n_fields}")
        print(f"batch thumbnail (512 px JPEG q80): {raw / 1000:.1f} kB")
        print(f"per-thumbnail budget: {thumbnail_budget_bytes(n_fields) / 1000:.0f} kB")
        print(f"report size: {size / 1e6:.1f} MB ({size / n_fields / 1000:.1f} kB per field)")
        print(f"report build time: {dt:.1f} s")
        chromium = Path("/usr/bin/chromium")
        try:
            from playwright.sync_api import sync_playwright
        except ImportError:
            return
        if not chromium.exists():
            return
        args = [
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
        ]
        with sync_playwright() as pw:
            browser = pw.chromium.launch(executable_path=str(chromium), args=args)
            page = browser.new_page()
            t0 = time.perf_counter()
            page.goto(out.resolve().as_uri(), wait_until="load")
            n_ok = page.evaluate(
                "Array.from(document.images).filter(i => i.naturalWidth > 0).length"
            )
            dt = time.perf_counter() - t0
            browser.close()
        print(f"headless Chromium: {n_ok} images loaded in {dt:.1f} s")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
