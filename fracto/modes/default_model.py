"""Build fracto's default mode model from synthetic surfaces only.

One documented command reproduces the files in ``models/``::

    python -m fracto.modes.default_model --out models/

It makes ``--fields`` synthetic fractographs with :func:`fracto.synth.make_surface`
under strong domain randomisation — renderer settings from
:meth:`fracto.synth.RenderSettings.random` (detector geometry, edge and
shadow contrast, dose noise, brightness, contrast, gamma, bit depth, JPEG
compression), grain sizes from about 5 to 150 pixels (log-uniform), random
mixtures of one to four modes, pixel sizes from 0.07 to 0.14 µm (log-uniform,
so the generator's physical lengths such as river-line and striation spacings
vary against the grain size) — extracts region features, scores the model by
grouped cross-validation (by field), fits it on every field, and writes
``fracto-default.skops`` with ``fracto-default.card.json`` beside it, and
``fracto-default.regions.npz``: a seeded random subset (at most
:data:`fracto.modes.training.MAX_SAVED_REGIONS`) of the training regions (keys ``X``, ``y``,
``groups``, ``feature_names``, ``classes``, ``feature_set_version``) from which
the model can later be adapted without regenerating the synthetic fields.

The default model is scale-free (``scale_um=None``): its filter scales follow
each image's own texture scale, because a physical scale says nothing about
the grain size of an unknown material.

The height model, for height maps without an SEM image, is built with::

    python -m fracto.modes.default_model --height --out models/

from the generator's height maps of ``--fields`` fields (seeds from
:data:`HEIGHT_SEED_BASE`, the same grain-size, pixel-size and mode-mixture
draws as the image model) with height-measurement nuisances (a random tilt,
white height noise on about half of the maps, dropped-out points on about a
third): each map goes through
:func:`fracto.modes.heightview.height_region_features` — the rendered view
with fixed settings plus the height features — the very function
:func:`fracto.modes.pipeline.classify_height_map` predicts with. It writes
``fracto-height.skops``, ``fracto-height.card.json`` and
``fracto-height.regions.npz``. The height model is scale-free too although
a height map always carries its pixel size: the pixel size says how large a
pixel is, not how large the grains are, so a physical texture scale would
fix the filter scales to one material's grain size; the view is rendered
after an isotropic rescaling to a reference pixel, and the height features
are slopes, curvatures and heights relative to the texture scale, so the
whole input is free of the magnification. The pixel size is still needed:
for the slopes of the height features and the rendering.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from collections.abc import Iterator
from dataclasses import replace
from pathlib import Path

import numpy as np

from fracto.classes import MODES
from fracto.modes.training import save_training_regions

#: Training-field seeds start here; bench/bench_classify.py uses seeds from 900000.
TRAIN_SEED_BASE = 10_000
#: Range of mean grain sizes in pixels for training fields.
GRAIN_PX_RANGE = (5.0, 150.0)
#: Range of pixel sizes in µm for training fields (drawn log-uniform).
PIXEL_UM_RANGE = (0.07, 0.14)
#: Training-field seeds of the height model start here (bench seeds start at 900000).
HEIGHT_SEED_BASE = 20_000


def random_modes(rng: np.random.Generator) -> dict[str, float]:
    """A random mixture of one to four modes (Dirichlet over a random subset)."""
    k = int(rng.choice([1, 2, 2, 3, 3, 4]))
    chosen = rng.choice(len(MODES), size=k, replace=False)
    w = rng.dirichlet(np.ones(k))
    w = np.round(w, 3)
    w[-1] = round(1.0 - w[:-1].sum(), 3)
    if (w < 0).any():
        w = np.full(k, 1.0 / k)
        w[-1] = 1.0 - w[:-1].sum()
    out = {m: 0.0 for m in MODES}
    for i, v in zip(chosen, w, strict=True):
        out[MODES[i]] = float(v)
    # make the sum exactly 1 for the generator's check
    s = sum(out.values())
    out[MODES[chosen[-1]]] += 1.0 - s
    return out


def synthetic_field(
    seed: int,
    *,
    size: int = 512,
    grain_px: float | None = None,
    modes: dict[str, float] | None = None,
    randomise_render: bool = True,
    pixel_size_um: float = 0.1,
):
    """One synthetic fractograph and its true label image.

    Returns
    -------
    (sem image float32, labels uint8 (CLASSES indices), meta dict)
    """
    from fracto.synth import GrainSize, RenderSettings, make_surface

    rng = np.random.default_rng(seed)
    if grain_px is None:
        grain_px = float(np.exp(rng.uniform(*np.log(GRAIN_PX_RANGE))))
    if modes is None:
        modes = random_modes(rng)
    rs = RenderSettings.random(rng) if randomise_render else RenderSettings()
    rs = replace(rs, banner=False)
    surf = make_surface(
        size=size,
        pixel_size_um=pixel_size_um,
        modes=modes,
        grain_size=GrainSize(mean_um=grain_px * pixel_size_um),
        render=rs,
        seed=seed,
    )
    sem = np.asarray(surf.sem, dtype=np.float32)[: surf.labels.shape[0]]
    meta = {
        "seed": seed,
        "grain_px": grain_px,
        "modes": modes,
        "truth_fractions": surf.truth.get("fractions"),
        "jpeg_quality": rs.jpeg_quality,
        "dose": rs.dose,
        "pixel_size_um": pixel_size_um,
    }
    return sem, np.asarray(surf.labels, dtype=np.uint8), meta


def training_fields(
    n_fields: int, *, seed: int = 0, size: int = 512
) -> Iterator[tuple[np.ndarray, np.ndarray, str]]:
    """Yield (image, labels, name) for the default model's training fields.

    Field ``i`` has seed ``TRAIN_SEED_BASE + 1000 seed + i``; its pixel size is
    drawn log-uniform from :data:`PIXEL_UM_RANGE` by a generator seeded with
    ``(field seed, 1)``, apart from the draws inside :func:`synthetic_field`.
    """
    for i in range(n_fields):
        s, px = field_seed_and_pixel(TRAIN_SEED_BASE, seed, i)
        img, lab, meta = synthetic_field(s, size=size, pixel_size_um=px)
        yield img, lab, f"synth-seed{s}-grain{meta['grain_px']:.1f}px-px{px:.3f}um"


def field_seed_and_pixel(base: int, seed: int, i: int) -> tuple[int, float]:
    """Seed ``base + 1000 seed + i`` of field `i` and its log-uniform pixel size (µm)."""
    s = base + 1000 * seed + i
    return s, float(np.exp(np.random.default_rng([s, 1]).uniform(*np.log(PIXEL_UM_RANGE))))


def _field_rng(seed: int, i: int) -> np.random.Generator:
    """Generator of field `i`'s region subset (the same whatever the number of jobs)."""
    return np.random.default_rng([seed, i, 3])


def _keep_regions(lab: np.ndarray, rng: np.random.Generator, max_regions: int | None):
    keep = np.nonzero(lab > 0)[0]
    if max_regions is not None and keep.size > max_regions:
        keep = np.sort(rng.choice(keep, size=max_regions, replace=False))
    return keep


def image_field_part(i: int, seed: int, size: int, max_regions: int | None):
    """(features, labels, name) of the labelled regions kept from image training field `i`."""
    from fracto.errors import FractoInputError
    from fracto.modes.features import region_features
    from fracto.modes.regions import tile_labels_from_mask

    s, px = field_seed_and_pixel(TRAIN_SEED_BASE, seed, i)
    img, lab_img, meta = synthetic_field(s, size=size, pixel_size_um=px)
    name = f"synth-seed{s}-grain{meta['grain_px']:.1f}px-px{px:.3f}um"
    try:
        f = region_features(img, pixel_size_um=None, scale_um=None)
    except FractoInputError:
        # texture scale too coarse for the field to hold 3 x 3 regions: a user would
        # be refused the same image, so the model does not learn from it either
        return None, np.empty(0, dtype=object), name, None
    lab = tile_labels_from_mask(lab_img, f.tile_grid, f.block_px, len(MODES) + 1)
    keep = _keep_regions(lab, _field_rng(seed, i), max_regions)
    return f.X[keep], np.asarray(MODES)[lab[keep] - 1], name, f.names


def _part_worker(args):
    from fracto.campaign.runner import single_thread_worker

    single_thread_worker()
    fn, i, seed, size, max_regions = args
    return fn(i, seed, size, max_regions)


def field_parts(
    fn, n_fields: int, *, seed: int, size: int, max_regions: int | None, jobs: int, progress: bool
):
    """Training set of every field's part from `fn`, in field order, on `jobs` processes."""
    from fracto.modes.training import TrainingSet

    t0 = time.perf_counter()
    args = [(fn, i, seed, size, max_regions) for i in range(n_fields)]
    if jobs > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        ex = ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("spawn"))
        results = ex.map(_part_worker, args)
    else:
        ex = None
        results = (fn(*a[1:]) for a in args)
    parts, names, skipped = [], [], []
    try:
        for i, (X, y, name, f_names) in enumerate(results):
            if f_names is not None:
                names = list(f_names)
            if len(y):
                parts.append((X, y, name))
            else:
                skipped.append(name)
            if progress and (i + 1) % 8 == 0:
                print(
                    f"  {i + 1}/{n_fields} fields ({time.perf_counter() - t0:.0f} s)", flush=True
                )
    finally:
        if ex is not None:
            ex.shutdown(cancel_futures=True)
    ts = TrainingSet.concatenate(parts, names)
    ts.summary["classes"] = list(MODES)
    ts.summary["fields_without_regions"] = skipped
    return ts


def build_command(
    n_fields: int, size: int, seed: int, cv_folds: int, max_regions: int | None, *, height: bool
) -> str:
    """The command line that rebuilds a model with these settings (for its card)."""
    words = ["OMP_NUM_THREADS=1 python -m fracto.modes.default_model"]
    words += ["--height"] if height else []
    words += ["--out models/", f"--fields {n_fields}", f"--size {size}", f"--seed {seed}"]
    words += [f"--cv {cv_folds}"]
    words += [f"--regions-per-field {max_regions}"] if max_regions is not None else []
    return " ".join(words)


def build_default_model(
    out_dir: str | Path,
    *,
    n_fields: int = 288,
    size: int = 512,
    seed: int = 0,
    cv_folds: int = 4,
    n_threads: int | None = 1,
    max_regions: int | None = 500,
    progress: bool = True,
    jobs: int = 1,
) -> dict:
    """Generate the synthetic training set, train, score, and write model + card.

    `jobs` processes make the fields and their features, and `jobs` OpenMP
    threads fit the boosting (the thread count does not change the fitted
    trees); the saved model predicts on `n_threads`. Each
    field's region subset has its own seeded generator, so `jobs` changes which
    process computes a field, not which regions are kept; the features may then
    differ in the last float32 bit (summation order depends on memory
    alignment), which can move a rare region across a histogram-bin edge.

    Returns
    -------
    dict
        The model card.
    """
    from fracto.modes.training import format_scores, train_and_save

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    ts = field_parts(
        image_field_part,
        n_fields,
        seed=seed,
        size=size,
        max_regions=max_regions,
        jobs=jobs,
        progress=progress,
    )
    ts.summary.update(
        {
            "source": "fracto.synth only (no real images)",
            "n_fields": n_fields,
            "max_regions_per_field": max_regions,
            "field_size_px": size,
            "grain_px_range": list(GRAIN_PX_RANGE),
            "pixel_size_um_range": list(PIXEL_UM_RANGE),
            "pixel_size_draw": "log-uniform, generator seeded with (field seed, 1)",
            "field_seeds": [
                TRAIN_SEED_BASE + 1000 * seed,
                TRAIN_SEED_BASE + 1000 * seed + n_fields - 1,
            ],
            "render": "RenderSettings.random (domain randomisation, JPEG on about half)",
            "modes": "random mixtures of 1-4 modes per field",
        }
    )
    if progress:
        print(f"features of {ts.summary['n_regions']} regions ({time.perf_counter() - t0:.0f} s)")
    path = out / "fracto-default.skops"
    card, scores = train_and_save(
        ts,
        path,
        classes=MODES,
        model_params={"n_threads": n_threads},
        fit_threads=jobs,
        n_splits=cv_folds,
        seed=seed,
        extra_card={
            "command": build_command(n_fields, size, seed, cv_folds, max_regions, height=False),
            "build_seconds": None,
            "build_jobs": jobs,
        },
    )
    regions_path = out / "fracto-default.regions.npz"
    n_saved = save_training_regions(regions_path, ts, MODES, seed=seed)
    card["saved_regions"] = {
        "file": regions_path.name,
        "n_regions": n_saved,
        "selection": f"seeded random subset (seed {seed}) of the training regions",
        "keys": ["X", "y", "groups", "feature_names", "classes", "feature_set_version"],
    }
    card["build_seconds"] = round(time.perf_counter() - t0, 1)
    from fracto.io.safe import write_json_atomic

    card_path = Path(card.pop("card_path"))
    write_json_atomic(card_path, card)
    if progress:
        print(format_scores(scores))
        size_mb = path.stat().st_size / 1e6
        print(f"wrote {path} ({size_mb:.1f} MB) and {card_path} in {card['build_seconds']} s")
    return card


def height_nuisance(z: np.ndarray, px: float, rng: np.random.Generator) -> np.ndarray:
    """Measurement nuisances of a height map: tilt, white noise, dropped-out points.

    A random plane of slope up to tan 5° in a random direction (always); white
    Gaussian height noise of standard deviation ``px · U(0, 0.05)`` (a slope
    noise up to about 0.07) on half of the maps; on a third of the maps a
    share ``U(0, 0.03)`` of the points set to NaN (not measured). Common
    practice for profilometer data, no source.
    """
    ny, nx = z.shape
    yy, xx = np.mgrid[0:ny, 0:nx] * px
    az = rng.uniform(0.0, 2 * np.pi)
    slope = np.tan(np.radians(rng.uniform(0.0, 5.0)))
    out = z + slope * (np.cos(az) * xx + np.sin(az) * yy)
    if rng.uniform() < 0.5:
        out = out + px * rng.uniform(0.0, 0.05) * rng.standard_normal(z.shape)
    if rng.uniform() < 1.0 / 3.0:
        out = np.where(rng.uniform(size=z.shape) < rng.uniform(0.0, 0.03), np.nan, out)
    return out


def synthetic_height_field(
    seed: int,
    *,
    size: int = 512,
    grain_px: float | None = None,
    modes: dict[str, float] | None = None,
    pixel_size_um: float = 0.1,
    nuisance: bool = True,
):
    """One synthetic height map and its true label image.

    The grain size and mode mixture are drawn as in :func:`synthetic_field`;
    the generator's SEM rendering is not used (the cheap secant-only render).

    Returns
    -------
    (height float64 µm, labels uint8 (CLASSES indices), meta dict)
    """
    from fracto.synth import GrainSize, RenderSettings, make_surface

    rng = np.random.default_rng(seed)
    if grain_px is None:
        grain_px = float(np.exp(rng.uniform(*np.log(GRAIN_PX_RANGE))))
    if modes is None:
        modes = random_modes(rng)
    surf = make_surface(
        size=size,
        pixel_size_um=pixel_size_um,
        modes=modes,
        grain_size=GrainSize(mean_um=grain_px * pixel_size_um),
        render=RenderSettings.secant_only(),
        seed=seed,
    )
    lab = np.asarray(surf.labels, dtype=np.uint8)
    z = np.asarray(surf.height_um, dtype=np.float64)[: lab.shape[0], : lab.shape[1]]
    if nuisance:
        z = height_nuisance(z, pixel_size_um, np.random.default_rng([seed, 2]))
    meta = {
        "seed": seed,
        "grain_px": grain_px,
        "modes": modes,
        "pixel_size_um": pixel_size_um,
        "nuisance": nuisance,
    }
    return z, lab, meta


def height_field_part(i: int, seed: int, size: int, max_regions: int | None):
    """(features, labels, name, feature names) of height training map `i`'s kept regions."""
    from fracto.modes.heightview import height_region_features
    from fracto.modes.regions import tile_labels_from_mask

    s, px = field_seed_and_pixel(HEIGHT_SEED_BASE, seed, i)
    z, lab_img, meta = synthetic_height_field(s, size=size, pixel_size_um=px)
    _, f = height_region_features(z, px)
    lab = tile_labels_from_mask(lab_img, f.tile_grid, f.block_px, len(MODES) + 1)
    keep = _keep_regions(lab, _field_rng(seed, i), max_regions)
    name = f"synth-height-seed{s}-grain{meta['grain_px']:.1f}px-px{px:.3f}um"
    return f.X[keep], np.asarray(MODES)[lab[keep] - 1], name, f.names


def height_training_set(
    n_fields: int,
    *,
    seed: int = 0,
    size: int = 512,
    max_regions: int | None = 500,
    progress: bool = False,
    jobs: int = 1,
):
    """Region features (view + height) and labels of the height model's training maps.

    Field ``i`` has seed ``HEIGHT_SEED_BASE + 1000 seed + i``; its pixel size is
    drawn log-uniform from :data:`PIXEL_UM_RANGE` by a generator seeded with
    ``(field seed, 1)``. `jobs` processes share the maps.
    """
    ts = field_parts(
        height_field_part,
        n_fields,
        seed=seed,
        size=size,
        max_regions=max_regions,
        jobs=jobs,
        progress=progress,
    )
    return ts


def mark_height_model(model) -> None:
    """Record on a fitted model that it takes height maps alone, and the view it learned."""
    from fracto.modes.heightview import HEIGHT_VIEW_VERSION, view_fingerprint

    model.height_only_ = True
    model.height_view_version_ = HEIGHT_VIEW_VERSION
    model.height_view_fingerprint_ = view_fingerprint()


def build_height_model(
    out_dir: str | Path,
    *,
    n_fields: int = 96,
    size: int = 512,
    seed: int = 0,
    cv_folds: int = 4,
    n_threads: int | None = 1,
    max_regions: int | None = 500,
    progress: bool = True,
    jobs: int = 1,
) -> dict:
    """Train the height-input model on synthetic height maps and write model, card, regions.

    `jobs` as in :func:`build_default_model`.

    Returns
    -------
    dict
        The model card.
    """
    from fracto.io.safe import write_json_atomic
    from fracto.modes.heightview import HEIGHT_MODEL_NAME, view_settings
    from fracto.modes.model import load_model, save_model
    from fracto.modes.training import format_scores, train_and_save

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    ts = height_training_set(
        n_fields, seed=seed, size=size, max_regions=max_regions, progress=progress, jobs=jobs
    )
    ts.summary.update(
        {
            "source": "fracto.synth height maps only (no real data)",
            "input": "height map alone: rendered view (fracto.modes.heightview) + height features",
            "n_fields": n_fields,
            "max_regions_per_field": max_regions,
            "field_size_px": size,
            "grain_px_range": list(GRAIN_PX_RANGE),
            "pixel_size_um_range": list(PIXEL_UM_RANGE),
            "pixel_size_draw": "log-uniform, generator seeded with (field seed, 1)",
            "field_seeds": [
                HEIGHT_SEED_BASE + 1000 * seed,
                HEIGHT_SEED_BASE + 1000 * seed + n_fields - 1,
            ],
            "nuisance": "fracto.modes.default_model.height_nuisance, seeded with (field seed, 2)",
            "modes": "random mixtures of 1-4 modes per field",
        }
    )
    if progress:
        print(f"features of {ts.summary['n_regions']} regions ({time.perf_counter() - t0:.0f} s)")
    path = out / HEIGHT_MODEL_NAME
    card, scores = train_and_save(
        ts,
        path,
        classes=MODES,
        model_params={"n_threads": n_threads, "uses_height": True},
        fit_threads=jobs,
        n_splits=cv_folds,
        seed=seed,
        extra_card={
            "command": build_command(n_fields, size, seed, cv_folds, max_regions, height=True),
            "build_seconds": None,
            "build_jobs": jobs,
        },
    )
    # the fitted model learns that it takes height maps alone, and which view it saw
    model = load_model(path)
    mark_height_model(model)
    card["sha256"] = save_model(model, path)
    card["input"] = "height map alone"
    card["height_view"] = {
        **view_settings(),
        "fingerprint": model.height_view_fingerprint_,
    }
    regions_path = out / HEIGHT_MODEL_NAME.replace(".skops", ".regions.npz")
    n_saved = save_training_regions(regions_path, ts, MODES, seed=seed)
    card["saved_regions"] = {
        "file": regions_path.name,
        "n_regions": n_saved,
        "selection": f"seeded random subset (seed {seed}) of the training regions",
        "keys": ["X", "y", "groups", "feature_names", "classes", "feature_set_version"],
    }
    card["build_seconds"] = round(time.perf_counter() - t0, 1)
    card_path = Path(card.pop("card_path"))
    write_json_atomic(card_path, card)
    if progress:
        print(format_scores(scores))
        size_mb = path.stat().st_size / 1e6
        print(f"wrote {path} ({size_mb:.1f} MB) and {card_path} in {card['build_seconds']} s")
    return card


def _main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--out", default="models/", help="output folder (default models/)")
    p.add_argument(
        "--fields",
        type=int,
        default=None,
        help="synthetic training fields (default 288 for the image model, 96 for --height)",
    )
    p.add_argument("--size", type=int, default=512, help="field side in pixels")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--cv", type=int, default=4, help="grouped cross-validation folds")
    p.add_argument(
        "--height",
        action="store_true",
        help="build the height-map model (fracto-height.skops) instead of the image model",
    )
    p.add_argument(
        "--jobs",
        type=int,
        default=2,
        help="processes making the synthetic fields and their features (default 2)",
    )
    p.add_argument(
        "--regions-per-field",
        type=int,
        default=500,
        help="most training regions kept per field (seeded subset; default 500)",
    )
    a = p.parse_args(argv)
    if a.jobs < 1 or a.regions_per_field < 1:
        print("fracto: --jobs and --regions-per-field must be at least 1.", file=sys.stderr)
        return 2
    if a.fields is None:
        a.fields = 96 if a.height else 288
    if not (a.fields >= 4 and a.size >= 128 and math.isfinite(a.size)):
        print("fracto: need at least 4 fields of at least 128 px.", file=sys.stderr)
        return 2
    build = build_height_model if a.height else build_default_model
    build(
        a.out,
        n_fields=a.fields,
        size=a.size,
        seed=a.seed,
        cv_folds=a.cv,
        jobs=a.jobs,
        max_regions=a.regions_per_field,
    )
    return 0


if __name__ == "__main__":
    sys.exit(_main())
