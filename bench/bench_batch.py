"""Benchmark: batch throughput on 1024×1024 SEM images, local processes and a LocalCluster.

Targets (issue 5, §7): at least 2 images/s with ``--jobs 2`` on 2 cores, and 2
workers at least 1.8× the throughput of 1, locally and on a Dask LocalCluster.

Images: ``--base`` synthetic 1024² fractographs from :func:`fracto.synth.make_surface`
(fixed seeds), each also written rotated by 90°, 180° and 270° so that
``4 × base`` distinct files (distinct content hashes) are scored without paying
for 4 × base surface syntheses. Each configuration scores all of them into a
fresh output folder (nothing skipped) through :func:`fracto.campaign.batch.run_batch`
on the folder (no temperatures, so the transition fit is skipped) without the report.

Printed per configuration: wall time of the whole call, throughput (images/s)
over the whole call, and the steady throughput between the first and last
finished image (worker start-up and model loading excluded); then the ratios.

Run: ``/root/venv/bin/python bench/bench_batch.py [--base 4] [--model PATH] [--keep DIR]``
The machine is shared with other work: the load average is printed beside the figures.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np


def make_images(folder: Path, n_base: int) -> list[Path]:
    from PIL import Image

    from fracto.synth import GrainSize, make_surface

    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i in range(n_base):
        names = [folder / f"field{i:02d}_r{k}.png" for k in range(4)]
        if not all(p.is_file() for p in names):
            t0 = time.perf_counter()
            s = make_surface(
                size=1024,
                pixel_size_um=0.1,
                modes={"intergranular": 0.4, "transgranular": 0.3, "ductile": 0.3},
                grain_size=GrainSize(mean_um=3.0),
                seed=700 + i,
            )
            sem = np.asarray(s.sem, dtype=np.float64)[:1024, :1024]
            a = np.clip(np.round(sem * 255), 0, 255).astype(np.uint8)
            for k, p in enumerate(names):
                Image.fromarray(np.ascontiguousarray(np.rot90(a, k))).save(p)
            print(f"  made base image {i + 1}/{n_base} in {time.perf_counter() - t0:.1f} s")
        out += names
    return out


def run(label: str, folder: Path, model: str, **kw) -> dict:
    from fracto.campaign.batch import run_batch

    stamps: list[float] = []
    with tempfile.TemporaryDirectory(prefix="fracto-bench-out-") as d:
        t0 = time.perf_counter()
        s = run_batch(
            folder,
            Path(d) / "out",
            model_path=model,
            report=False,
            progress=lambda *_: stamps.append(time.perf_counter()),
            **kw,
        )
        wall = time.perf_counter() - t0
    n = s.scored
    steady = (
        (n - 1) / (stamps[-1] - stamps[0]) if n > 1 and stamps[-1] > stamps[0] else float("nan")
    )
    r = {
        "label": label,
        "n": n,
        "failed": s.failed,
        "wall": wall,
        "ips": n / wall,
        "steady": steady,
    }
    print(
        f"{label:<22} {n} images, {s.failed} failed, wall {wall:6.1f} s, "
        f"{r['ips']:.2f} images/s overall, {steady:.2f} images/s steady "
        f"(load {os.getloadavg()[0]:.1f})"
    )
    return r


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--base", type=int, default=4, help="base images (4 files each)")
    ap.add_argument("--model", help="model file (default: fracto's default model)")
    ap.add_argument("--keep", help="folder to keep the generated images in (reused)")
    ap.add_argument("--no-dask", action="store_true")
    a = ap.parse_args()
    from fracto.modes.model import default_model_path

    model = a.model or str(default_model_path())
    print(
        f"load average before the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores "
        "(shared with other work)"
    )
    tmp = None
    if a.keep:
        folder = Path(a.keep)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="fracto-bench-img-")
        folder = Path(tmp.name)
    make_images(folder, a.base)
    files = sorted(folder.glob("*.png"))  # a reused --keep folder may hold more
    print(f"{len(files)} SEM images of 1024 x 1024 px in {folder}; model {model}")
    res = {}
    res["jobs1"] = run("local --jobs 1", folder, model, jobs=1)
    res["jobs2"] = run("local --jobs 2", folder, model, jobs=2)
    if not a.no_dask:
        from distributed import Client, LocalCluster

        for w in (1, 2):
            with (
                LocalCluster(
                    n_workers=w, threads_per_worker=1, processes=True, dashboard_address=None
                ) as cl,
                Client(cl) as c,
            ):
                res[f"dask{w}"] = run(f"LocalCluster {w} worker(s)", folder, model, client=c)
    print()
    print(
        f"target: >= 2 images/s with --jobs 2: overall {res['jobs2']['ips']:.2f}, "
        f"steady {res['jobs2']['steady']:.2f}"
    )
    for a1, a2, name in (("jobs1", "jobs2", "local"), ("dask1", "dask2", "LocalCluster")):
        if a1 in res and a2 in res:
            print(
                f"{name}: 2 workers / 1 worker = {res[a2]['ips'] / res[a1]['ips']:.2f} overall, "
                f"{res[a2]['steady'] / res[a1]['steady']:.2f} steady (target >= 1.8)"
            )
    if tmp is not None:
        tmp.cleanup()


if __name__ == "__main__":
    main()
