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
finished image (worker start-up and model loading excluded), and the CPU time of
this (the calling) process per image — its share competes with the workers for the
two cores; then the ratios.

Then the CPU time of one image's work, in this process under one thread
(``time.process_time``, much less sensitive to other load on the machine than the
wall times): the whole :func:`fracto.campaign.runner.score_task` over ``--profile``
images, and its stages (reading, quality, region features, prediction, bootstrap and
painting, striations, thumbnail) timed one by one on the same images.

With ``--repeat R`` the runs of a pair alternate (1 worker, 2 workers, 1, 2, ...) R
times and the medians are printed with each pair's overall ratio: on a shared machine
one run's ratio moves by about ±0.2.

Run: ``/root/venv/bin/python bench/bench_batch.py [--base 4] [--model PATH] [--keep DIR]
[--profile 3] [--only-profile] [--repeat 1]``
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
        c0 = time.process_time()
        s = run_batch(
            folder,
            Path(d) / "out",
            model_path=model,
            report=False,
            progress=lambda *_: stamps.append(time.perf_counter()),
            **kw,
        )
        wall = time.perf_counter() - t0
        main_cpu = time.process_time() - c0
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
        "main_cpu_per_image": main_cpu / max(n, 1),
    }
    print(
        f"{label:<22} {n} images, {s.failed} failed, wall {wall:6.1f} s, "
        f"{r['ips']:.2f} images/s overall, {steady:.2f} images/s steady "
        f"(load {os.getloadavg()[0]:.1f}); this process {r['main_cpu_per_image']:.3f} s CPU "
        "per image"
    )
    return r


def profile_stages(files: list[Path], model_path: str) -> None:
    """CPU seconds per image of score_task and of its stages (one thread, this process)."""
    from fracto.campaign.runner import (
        ModelSpec,
        ScoreTask,
        _striation,
        one_thread,
        remember_model,
        score_task,
        thumbnail_jpeg,
    )
    from fracto.io import read_sem_image
    from fracto.modes.features import region_features
    from fracto.modes.fractions import block_bootstrap_fractions, memberships_from_labels
    from fracto.modes.model import load_model, sha256_of
    from fracto.modes.quality import assess_quality
    from fracto.modes.regions import block_labels, paint, tiles_to_blocks

    c0 = time.process_time()
    model = load_model(model_path)
    print(f"model load: {time.process_time() - c0:.2f} s CPU (once per worker)")
    spec = ModelSpec(sha256=sha256_of(model_path), path=model_path)
    remember_model(spec, model)
    st = {"seed": 0, "n_boot": 1000, "threshold": None, "banner": "auto", "thumbnail_px": 512}
    stages: dict[str, float] = {}

    def tick(name: str, c: float) -> float:
        now = time.process_time()
        stages[name] = stages.get(name, 0.0) + now - c
        return now

    with one_thread():
        score_task(ScoreTask("w", "sem", files[0].name, str(files[0]), settings=st), spec)
        c0 = time.process_time()
        for f in files:
            r = score_task(ScoreTask("k", "sem", f.name, str(f), settings=st), spec)
            assert r["status"] == "ok", r["error"]
        whole = (time.process_time() - c0) / len(files)
        for f in files:
            c = time.process_time()
            sem = read_sem_image(f)
            img = np.asarray(sem.image, dtype=np.float32)
            c = tick("read", c)
            assess_quality(img)
            c = tick("quality", c)
            feats = region_features(img, pixel_size_um=None, scale_um=model.scale_um)
            c = tick("features", c)
            p = model.predict_proba(feats.X)
            c = tick("predict", c)
            lab = block_labels(tiles_to_blocks(p, feats.tile_grid), model.threshold)
            classes = tuple(str(k) for k in model.classes_)
            block_bootstrap_fractions(
                memberships_from_labels(lab, len(classes)),
                feats.block_weights(),
                (*classes, "unclassified"),
                n_boot=1000,
                seed=0,
            )
            label_map = paint((lab + 1).astype(np.uint8), feats.block_px, img.shape)
            c = tick("bootstrap+paint", c)

            class _R:  # what striations_from_mode_result reads
                pass

            res = _R()
            res.classes, res.label_map = classes, label_map
            _striation(img, res, None, 0)
            c = tick("striation", c)
            thumbnail_jpeg(img, label_map, classes)
            c = tick("thumbnail", c)
    tot = sum(stages.values()) / len(files)
    print(
        f"CPU per image (score_task, one thread, {len(files)} images): {whole:.2f} s "
        f"-> at most {1 / whole:.2f} images/s per core, {2 / whole:.2f} on 2 cores"
    )
    print("  stages (timed separately; CPU s per image, share of their sum):")
    for k, v in stages.items():
        v /= len(files)
        print(f"    {k:<16} {v:6.3f} s  {v / tot:5.1%}")


def _fmt(values: list[float]) -> str:
    """The median of `values`, two decimals."""
    return f"{float(np.median(values)):.2f}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--base", type=int, default=4, help="base images (4 files each)")
    ap.add_argument("--model", help="model file (default: fracto's default model)")
    ap.add_argument("--keep", help="folder to keep the generated images in (reused)")
    ap.add_argument("--no-dask", action="store_true")
    ap.add_argument("--profile", type=int, default=3, help="images in the CPU profile")
    ap.add_argument("--only-profile", action="store_true")
    ap.add_argument(
        "--repeat", type=int, default=1, help="runs of each configuration, alternated (median)"
    )
    a = ap.parse_args()
    from fracto.modes.model import default_model_path

    model = a.model or str(default_model_path())
    import scipy.fft

    ref = np.random.default_rng(0).random((2048, 2048))
    ts = []
    for _ in range(5):
        t0 = time.perf_counter()
        scipy.fft.irfft2(scipy.fft.rfft2(ref), s=ref.shape)
        ts.append(time.perf_counter() - t0)
    print(
        f"machine reference: 2048^2 rfft2+irfft2 round trip {min(ts):.3f} s in one thread "
        "(compare machines by it; the images/s target assumes a fast core)"
    )
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
    if a.profile > 0:
        profile_stages(files[: a.profile], model)
        print()
    if a.only_profile:
        return
    # runs of one pair alternate (1 worker, 2 workers, 1, 2, ...) so that the drift of a
    # shared machine falls on both alike; each pair's ratio is printed and their median
    runs: dict[str, list[dict]] = {}
    for _ in range(a.repeat):
        runs.setdefault("jobs1", []).append(run("local --jobs 1", folder, model, jobs=1))
        runs.setdefault("jobs2", []).append(run("local --jobs 2", folder, model, jobs=2))
    if not a.no_dask:
        from distributed import Client, LocalCluster

        for _ in range(a.repeat):
            for w in (1, 2):
                with (
                    LocalCluster(
                        n_workers=w, threads_per_worker=1, processes=True, dashboard_address=None
                    ) as cl,
                    Client(cl) as c,
                ):
                    label = f"LocalCluster {w} worker(s)"
                    runs.setdefault(f"dask{w}", []).append(run(label, folder, model, client=c))
    print()
    ips2 = [r["ips"] for r in runs["jobs2"]]
    st2 = [r["steady"] for r in runs["jobs2"]]
    print(
        f"target: >= 2 images/s with --jobs 2: overall {_fmt(ips2)}, steady {_fmt(st2)}"
        + (" (median of the runs)" if a.repeat > 1 else "")
    )
    for a1, a2, name in (("jobs1", "jobs2", "local"), ("dask1", "dask2", "LocalCluster")):
        if a1 in runs and a2 in runs:
            pairs = list(zip(runs[a1], runs[a2], strict=True))
            over = [r2["ips"] / r1["ips"] for r1, r2 in pairs]
            steady = [r2["steady"] / r1["steady"] for r1, r2 in pairs]
            print(
                f"{name}: 2 workers / 1 worker = {_fmt(over)} overall, {_fmt(steady)} steady "
                "(target >= 1.8)"
                + (f"; runs {', '.join(f'{v:.2f}' for v in over)} overall" if a.repeat > 1 else "")
            )
    if tmp is not None:
        tmp.cleanup()


if __name__ == "__main__":
    main()
