"""Coverage, width and bias of the corrected mode fractions on unseen synthetic fields.

    python bench/bench_coverage.py [--model PATH | --train-fields N] [--fields 200]
                                   [--n-boot 500] [--json OUT]

Fields come from fracto.synth with seeds from 700000 (the default model trains
on seeds 10000 + 1000·seed + i, bench_classify.py uses 900000+), field sides of
256, 384 and 512 px, pixel sizes from 0.02 to 0.5 µm (log-uniform), mean grain
sizes from 5 to 150 px (log-uniform) and random mixtures of one to four modes,
with randomised rendering. The truth is each field's pixel fraction of each
mode (its label image).

For every interval construction it prints, per mode:

- coverage: share of fields whose 95 % interval holds the true fraction
  (target 0.90 to 0.98);
- mean width of the interval;
- bias: mean of (estimate - truth), and the RMSE.

Constructions: ``counted`` (no correction, block bootstrap only),
``pooled`` (correction, Dirichlet on the pooled confusion rows),
``image`` (correction, each row drawn from one held-out training image) and
``image+confidence`` (the same from the training images of nearest mean
confidence). Then the coverage of ``image`` for the fields finer than, inside
and coarser than the default model's training pixel sizes.

With ``--train-fields N`` a model is trained in the bench on N fields of the
default model's training seeds (quicker than the default build; saved with
``--save-model``).
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np

from fracto.classes import MODES, UNCLASSIFIED
from fracto.modes.correction import ErrorRates, corrected_fractions
from fracto.modes.default_model import random_modes, synthetic_field, training_fields
from fracto.modes.features import region_features
from fracto.modes.fractions import block_bootstrap_fractions, memberships_from_labels
from fracto.modes.regions import block_labels, tiles_to_blocks

SEED_BASE = 700_000
SIZES = (256, 384, 512)
PIXEL_UM = (0.02, 0.5)
GRAIN_PX = (5.0, 150.0)
SCHEMES = {
    "pooled": {"scheme": "pooled", "conditioning": None},
    "image": {"scheme": "image", "conditioning": None},
    "image+confidence": {"scheme": "image", "conditioning": "confidence"},
}


def bench_field(i: int, pixel_um: tuple[float, float] = PIXEL_UM):
    """Image, label image and settings of bench field `i` (seed SEED_BASE + i)."""
    seed = SEED_BASE + i
    rng = np.random.default_rng([seed, 1])
    size = int(SIZES[i % len(SIZES)])
    px = float(np.exp(rng.uniform(*np.log(pixel_um))))
    grain = float(np.exp(rng.uniform(*np.log(GRAIN_PX))))
    modes = random_modes(rng)
    img, lab, _ = synthetic_field(seed, size=size, grain_px=grain, modes=modes, pixel_size_um=px)
    return img, lab, {"seed": seed, "size": size, "pixel_um": px, "grain_px": grain}


def train_in_bench(n_fields: int, seed: int = 0):
    from fracto.modes.model import ModeClassifier
    from fracto.modes.scoring import training_data_from_arrays

    ts, images = training_data_from_arrays(
        training_fields(n_fields, seed=seed), MODES, max_regions_per_image=500, seed=seed
    )
    return ModeClassifier(MODES, random_state=seed).fit(
        ts.X, ts.y, ts.groups, feature_names=ts.names, score_images=images
    )


def evaluate(
    model,
    n_fields: int,
    n_boot: int,
    progress: bool = True,
    pixel_um: tuple[float, float] = PIXEL_UM,
) -> dict:
    rates = ErrorRates.from_model(model)
    if rates is None:
        raise SystemExit("The model holds no held-out confusion; retrain it.")
    classes = tuple(str(c) for c in model.classes_)
    names = (*classes, UNCLASSIFIED)
    k = len(classes)
    kinds = ["counted", *SCHEMES]
    est = {c: np.zeros((n_fields, k)) for c in kinds}
    lo = {c: np.zeros((n_fields, k)) for c in kinds}
    hi = {c: np.zeros((n_fields, k)) for c in kinds}
    truth = np.zeros((n_fields, k))
    fields = []
    t0 = time.perf_counter()
    from fracto.errors import FractoInputError

    skipped = []
    j = -1
    for i in range(n_fields):
        while True:  # fields too coarse to classify (too few regions) are skipped
            j += 1
            img, lab, meta = bench_field(j, pixel_um)
            try:
                f = region_features(img, scale_um=model.scale_um)
                break
            except FractoInputError:
                skipped.append(SEED_BASE + j)
        truth[i] = [(lab == MODES.index(c) + 1).mean() for c in classes]
        fields.append(meta)
        pb = tiles_to_blocks(model.predict_proba(f.X), f.tile_grid)
        w = f.block_weights()
        counted = block_bootstrap_fractions(
            memberships_from_labels(block_labels(pb, model.threshold), k),
            w,
            names,
            n_boot=n_boot,
            seed=i,
        )
        est["counted"][i] = counted.value[:k]
        lo["counted"][i], hi["counted"][i] = counted.ci_low[:k], counted.ci_high[:k]
        conf = float((pb.max(axis=2) * w).sum() / w.sum())
        for name, kw in SCHEMES.items():
            e, _ = corrected_fractions(
                pb.argmax(axis=2),
                w,
                names,
                rates,
                image_confidence=conf,
                block_regions=counted.block_regions,
                n_boot=n_boot,
                seed=i,
                **kw,
            )
            est[name][i], lo[name][i], hi[name][i] = e.value[:k], e.ci_low[:k], e.ci_high[:k]
        if progress and (i + 1) % 20 == 0:
            print(f"  {i + 1}/{n_fields} fields ({time.perf_counter() - t0:.0f} s)", flush=True)
    out = {}
    for c in kinds:
        cover = ((lo[c] <= truth + 1e-9) & (truth <= hi[c] + 1e-9)).mean(axis=0)
        err = est[c] - truth
        out[c] = {
            m: {
                "coverage": float(cover[j]),
                "mean_width": float((hi[c][:, j] - lo[c][:, j]).mean()),
                "bias": float(err[:, j].mean()),
                "rmse": float(np.sqrt((err[:, j] ** 2).mean())),
            }
            for j, m in enumerate(classes)
        }
    return {
        "n_fields": n_fields,
        "n_boot": n_boot,
        "skipped_seeds": skipped,
        "pixel_um_range": list(pixel_um),
        "results": out,
        "fields": [
            {
                **f,
                "truth": truth[i].tolist(),
                **{c: est[c][i].tolist() for c in kinds},
                "ci95": {c: [lo[c][i].tolist(), hi[c][i].tolist()] for c in kinds},
            }
            for i, f in enumerate(fields)
        ],
        "seconds": None,
    }


def format_results(d: dict) -> str:
    lines = [
        f"{d['n_fields']} unseen fields ({len(d['skipped_seeds'])} too coarse to classify "
        f"skipped), pixel sizes {d['pixel_um_range'][0]}-{d['pixel_um_range'][1]} µm, "
        f"{d['n_boot']} replicates, target coverage 0.90-0.98"
    ]
    lines.append(f"{'interval':<18}{'mode':<15}{'coverage':>9}{'width':>8}{'bias':>8}{'rmse':>7}")
    for kind, per in d["results"].items():
        for m, v in per.items():
            ok = (
                ""
                if kind == "counted"
                else ("  ok" if 0.90 <= v["coverage"] <= 0.98 else "  MISS")
            )
            lines.append(
                f"{kind:<18}{m:<15}{v['coverage']:>9.3f}{v['mean_width']:>8.3f}"
                f"{v['bias']:>+8.3f}{v['rmse']:>7.3f}{ok}"
            )
    return "\n".join(lines)


def format_by_pixel(d: dict, kind: str = "image") -> str:
    """Coverage of one construction for fields finer than, inside and coarser than the
    default model's training pixel sizes (:data:`fracto.modes.default_model.PIXEL_UM_RANGE`)."""
    from fracto.modes.default_model import PIXEL_UM_RANGE

    lo_px, hi_px = PIXEL_UM_RANGE
    fields = d["fields"]
    px = np.array([f["pixel_um"] for f in fields])
    truth = np.array([f["truth"] for f in fields])
    lo = np.array([f["ci95"][kind][0] for f in fields])
    hi = np.array([f["ci95"][kind][1] for f in fields])
    inside = (lo <= truth + 1e-9) & (truth <= hi + 1e-9)
    modes = list(d["results"][kind])
    lines = [f"coverage of '{kind}' by pixel size (training pixel sizes {lo_px}-{hi_px} µm)"]
    lines.append(f"{'pixel size':<22}{'fields':>7}" + "".join(f"{m:>15}" for m in modes))
    bands = [
        (f"finer than {lo_px} µm", px < lo_px),
        (f"{lo_px}-{hi_px} µm", (px >= lo_px) & (px <= hi_px)),
        (f"coarser than {hi_px} µm", px > hi_px),
    ]
    for name, m in bands:
        if m.any():
            cov = inside[m].mean(axis=0)
            lines.append(f"{name:<22}{int(m.sum()):>7}" + "".join(f"{c:>15.3f}" for c in cov))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--model", help="model file (default: fracto's default model)")
    p.add_argument("--train-fields", type=int, help="train a model in the bench on N fields")
    p.add_argument("--save-model", help="save the in-bench model here")
    p.add_argument("--fields", type=int, default=200)
    p.add_argument("--n-boot", type=int, default=500)
    p.add_argument("--json", help="write the figures (and every field's) here as JSON")
    p.add_argument(
        "--pixel-um",
        type=float,
        nargs=2,
        default=PIXEL_UM,
        metavar=("LO", "HI"),
        help=f"pixel-size range in µm, drawn log-uniform (default {PIXEL_UM[0]} {PIXEL_UM[1]})",
    )
    a = p.parse_args(argv)
    from fracto.modes.model import default_model_path, load_model, save_model, sha256_of

    t0 = time.perf_counter()
    if a.train_fields:
        model = train_in_bench(a.train_fields)
        label = f"in-bench model on {a.train_fields} training fields"
        if a.save_model:
            save_model(model, a.save_model)
        print(f"trained ({time.perf_counter() - t0:.0f} s)", flush=True)
    else:
        path = a.model or default_model_path()
        model = load_model(path)
        label = f"{path} (sha256 {sha256_of(path)[:12]})"
    d = evaluate(model, a.fields, a.n_boot, pixel_um=tuple(a.pixel_um))
    d["seconds"] = round(time.perf_counter() - t0, 1)
    d["model"] = label
    print(f"model: {label}")
    print(format_results(d))
    print(format_by_pixel(d))
    print(f"{d['seconds']} s in all")
    if a.json:
        from fracto.io.safe import write_json_atomic

        write_json_atomic(a.json, d)
    return 0


if __name__ == "__main__":
    sys.exit(main())
