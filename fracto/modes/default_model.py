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
:data:`MAX_SAVED_REGIONS`) of the training regions (keys ``X``, ``y``,
``groups``, ``feature_names``, ``classes``, ``feature_set_version``) from which
the model can later be adapted without regenerating the synthetic fields.

The default model is scale-free (``scale_um=None``): its filter scales follow
each image's own texture scale, because a physical scale says nothing about
the grain size of an unknown material.
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

#: Training-field seeds start here; bench/bench_classify.py uses seeds from 900000.
TRAIN_SEED_BASE = 10_000
#: Range of mean grain sizes in pixels for training fields.
GRAIN_PX_RANGE = (5.0, 150.0)
#: Range of pixel sizes in µm for training fields (drawn log-uniform).
PIXEL_UM_RANGE = (0.07, 0.14)
#: Most training regions kept in fracto-default.regions.npz.
MAX_SAVED_REGIONS = 10_000


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
        s = TRAIN_SEED_BASE + 1000 * seed + i
        px = float(np.exp(np.random.default_rng([s, 1]).uniform(*np.log(PIXEL_UM_RANGE))))
        img, lab, meta = synthetic_field(s, size=size, pixel_size_um=px)
        yield img, lab, f"synth-seed{s}-grain{meta['grain_px']:.1f}px-px{px:.3f}um"


def save_regions(
    path: str | Path, ts, classes, *, max_regions: int = MAX_SAVED_REGIONS, seed: int = 0
) -> int:
    """Write a seeded random subset of the training regions as a compressed ``.npz``.

    Keys: ``X`` (float32), ``y`` (class names), ``groups`` (field index),
    ``feature_names``, ``classes``, ``feature_set_version``; all plain arrays
    (loadable with ``numpy.load(path)``, no pickle). Written to a temporary name
    and renamed.

    Returns
    -------
    int
        Number of regions written.
    """
    from fracto.io.safe import atomic_write
    from fracto.modes.features import FEATURE_SET_VERSION

    n = len(ts.y)
    rng = np.random.default_rng(seed)
    keep = np.sort(rng.choice(n, size=min(n, max_regions), replace=False))
    with atomic_write(path, "wb") as fh:
        np.savez_compressed(
            fh,
            X=np.asarray(ts.X[keep], np.float32),
            y=np.asarray(ts.y[keep]).astype(str),
            groups=np.asarray(ts.groups[keep], np.int64),
            feature_names=np.asarray(ts.names, dtype=str),
            classes=np.asarray(list(classes), dtype=str),
            feature_set_version=np.asarray(FEATURE_SET_VERSION),
        )
    return int(keep.size)


def build_default_model(
    out_dir: str | Path,
    *,
    n_fields: int = 96,
    size: int = 512,
    seed: int = 0,
    cv_folds: int = 4,
    n_threads: int | None = 1,
    max_regions: int | None = 500,
    progress: bool = True,
) -> dict:
    """Generate the synthetic training set, train, score, and write model + card.

    Returns
    -------
    dict
        The model card.
    """
    from fracto.modes.training import format_scores, set_from_arrays, train_and_save

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    items = []
    metas = []
    for i, (img, lab, name) in enumerate(training_fields(n_fields, seed=seed, size=size)):
        items.append((img, lab, name))
        metas.append(name)
        if progress and (i + 1) % 8 == 0:
            print(f"  {i + 1}/{n_fields} fields ({time.perf_counter() - t0:.0f} s)", flush=True)
    ts = set_from_arrays(items, MODES, max_regions_per_image=max_regions, seed=seed)
    del items
    ts.summary.update(
        {
            "source": "fracto.synth only (no real images)",
            "n_fields": n_fields,
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
        n_splits=cv_folds,
        seed=seed,
        extra_card={
            "command": "python -m fracto.modes.default_model --out models/",
            "build_seconds": None,
        },
    )
    regions_path = out / "fracto-default.regions.npz"
    n_saved = save_regions(regions_path, ts, MODES, seed=seed)
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


def _main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--out", default="models/", help="output folder (default models/)")
    p.add_argument("--fields", type=int, default=96, help="synthetic training fields")
    p.add_argument("--size", type=int, default=512, help="field side in pixels")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--cv", type=int, default=4, help="grouped cross-validation folds")
    a = p.parse_args(argv)
    if not (a.fields >= 4 and a.size >= 128 and math.isfinite(a.size)):
        print("fracto: need at least 4 fields of at least 128 px.", file=sys.stderr)
        return 2
    build_default_model(a.out, n_fields=a.fields, size=a.size, seed=a.seed, cv_folds=a.cv)
    return 0


if __name__ == "__main__":
    sys.exit(_main())
