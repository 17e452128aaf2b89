"""How real is the generator: a discriminator between synthetic and real SEM tiles.

A logistic regression (scikit-learn ``Pipeline(StandardScaler, LogisticRegression)``)
learns to tell tiles of synthetic fractographs from tiles of the real ones in
``--real-dir`` (default ``../shared/real-sem`` beside the repository; read at run
time, never copied), on the classifier's own region features
(:func:`fracto.modes.features.region_features`). Cross-validation is grouped by
image: every real and every synthetic image is its own group, and
``StratifiedGroupKFold`` keeps both kinds in each fold. The ROC AUC of the
held-out tiles is printed as mean ± sd over the folds: 0.5 means the features
cannot tell the two apart; the target is ≤ 0.70.

Like with like: the real images are a mixed intergranular / transgranular
ceramic, so the synthetic surfaces have only those two modes (intergranular
share uniform in 0.2..0.8), ceramic-like lognormal grains (mean 4-12 µm,
σ of ln d 0.3), renderer settings from ``RenderSettings.random`` (no banner),
at the real images' approximate pixel size (0.08 µm/px per the real-sem
README; a guess, not a calibration). Features are computed on the
**uncalibrated (scale-free) path for both**, the path of the default model
(texture scale from each image's own autocorrelation), so a wrong guess of the
real pixel size cannot bias the comparison.

Also printed: the ten features with the largest standardised coefficients of
a model fitted on all tiles (positive = "looks synthetic"), which tell the
generator what to improve, and the mean P(synthetic) of each real image's
tiles under cross-validation.

    /root/venv/bin/python bench/bench_realism.py [--real-dir DIR] [--n-synth 24] [--size 768]

References
----------
.. [1] T. Fawcett, "An introduction to ROC analysis", Pattern Recognition
   Letters 27 (2006) 861-874 (ROC AUC).
.. [2] A classifier two-sample test: D. Lopez-Paz & M. Oquab, "Revisiting
   classifier two-sample tests", ICLR 2017 (a discriminator's held-out AUC as
   the measure of how far two samples differ).
"""

from __future__ import annotations

import argparse
import glob
import os
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

REAL_PIXEL_UM = 0.08


def real_tiles(real_dir: str, max_tiles: int, rng: np.random.Generator):
    from fracto.io.sem import read_sem_image
    from fracto.modes.features import region_features

    files = sorted(glob.glob(os.path.join(real_dir, "*.jpg")))
    out = []
    for f in files:
        sem = read_sem_image(f)
        rf = region_features(sem.image, pixel_size_um=None, scale_um=None)
        X = rf.X
        if len(X) > max_tiles:
            X = X[rng.choice(len(X), max_tiles, replace=False)]
        out.append((Path(f).name, X, rf.names))
    return out


def grain_size(kind: str, rng: np.random.Generator):
    """Grain sizes of one synthetic field: ``lognormal`` (one population, σ of ln d
    0.3), ``bimodal`` (fine and coarse grains mixed in the field) or ``mixed``
    (either, with equal odds)."""
    from fracto.synth import GrainSize

    if kind == "mixed":
        kind = "bimodal" if rng.uniform() < 0.5 else "lognormal"
    if kind == "bimodal":
        fine = float(rng.uniform(1.5, 3.5))
        return GrainSize(
            "bimodal",
            fine_um=fine,
            coarse_um=fine * float(rng.uniform(3.0, 6.0)),
            coarse_volume_fraction=float(rng.uniform(0.3, 0.6)),
        )
    return GrainSize(mean_um=float(rng.uniform(4.0, 12.0)), spread=0.3)


def synth_tiles(n: int, size: int, max_tiles: int, seed: int, grains: str = "lognormal"):
    from fracto.modes.features import region_features
    from fracto.synth import RenderSettings, make_surface

    rng = np.random.default_rng(seed)
    out = []
    for i in range(n):
        f_ig = float(rng.uniform(0.2, 0.8))
        gs = grain_size(grains, rng)
        rs = replace(RenderSettings.random(rng), banner=False)
        s = make_surface(
            size=size,
            pixel_size_um=REAL_PIXEL_UM,
            modes={"intergranular": f_ig, "transgranular": 1.0 - f_ig},
            grain_size=gs,
            render=rs,
            seed=int(rng.integers(2**31)),
        )
        rf = region_features(s.sem, pixel_size_um=None, scale_um=None)
        X = rf.X
        if len(X) > max_tiles:
            X = X[rng.choice(len(X), max_tiles, replace=False)]
        out.append((f"synth_{i:02d}", X, rf.names))
    return out


def main() -> None:
    here = Path(__file__).resolve().parents[1]
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--real-dir", default=str(here.parent / "shared" / "real-sem"))
    ap.add_argument("--n-synth", type=int, default=24, help="synthetic images")
    ap.add_argument("--size", type=int, default=768, help="synthetic image side (px)")
    ap.add_argument("--max-tiles", type=int, default=150, help="tiles kept per image")
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument(
        "--grains",
        choices=("lognormal", "bimodal", "mixed"),
        default="lognormal",
        help="grain sizes of the synthetic fields",
    )
    args = ap.parse_args()

    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import roc_auc_score
    from sklearn.model_selection import StratifiedGroupKFold
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import StandardScaler

    rng = np.random.default_rng(args.seed)
    t0 = time.perf_counter()
    real = real_tiles(args.real_dir, args.max_tiles, rng)
    if not real:
        raise SystemExit(f"no *.jpg images in {args.real_dir}")
    t1 = time.perf_counter()
    synth = synth_tiles(args.n_synth, args.size, args.max_tiles, args.seed + 1, args.grains)
    t2 = time.perf_counter()
    names = real[0][2]
    X = np.vstack([x for _, x, _ in real + synth]).astype(np.float64)
    y = np.concatenate(
        [np.zeros(len(x)) for _, x, _ in real] + [np.ones(len(x)) for _, x, _ in synth]
    )
    groups = np.concatenate([np.full(len(x), i) for i, (_, x, _) in enumerate(real + synth)])
    print(
        f"{len(real)} real images ({int((y == 0).sum())} tiles) from {args.real_dir}; "
        f"{len(synth)} synthetic images {args.size}² at {REAL_PIXEL_UM} µm/px "
        f"({int((y == 1).sum())} tiles); {X.shape[1]} features, scale-free path"
    )
    print(f"features: real {t1 - t0:.1f} s, synthetic (generation + features) {t2 - t1:.1f} s")

    def model():
        return Pipeline(
            [("scale", StandardScaler()), ("lr", LogisticRegression(C=1.0, max_iter=5000))]
        )

    cv = StratifiedGroupKFold(n_splits=args.folds, shuffle=True, random_state=args.seed)
    aucs = []
    p_oof = np.full(len(y), np.nan)
    for tr, te in cv.split(X, y, groups):
        m = model().fit(X[tr], y[tr])
        p = m.predict_proba(X[te])[:, 1]
        p_oof[te] = p
        aucs.append(roc_auc_score(y[te], p))
    aucs = np.array(aucs)
    print(
        f"REALISM ROC AUC (grouped by image, {args.folds} folds): "
        f"{aucs.mean():.3f} ± {aucs.std(ddof=1):.3f}  (folds: "
        + ", ".join(f"{a:.3f}" for a in aucs)
        + f"); target ≤ 0.70 -> {'met' if aucs.mean() <= 0.70 else 'NOT met'}"
    )
    # image level: mean P(synthetic) of each image's held-out tiles
    img_p = np.array([p_oof[groups == g].mean() for g in range(len(real) + len(synth))])
    img_y = np.array([0] * len(real) + [1] * len(synth))
    print(f"image-level AUC of the mean tile probability: {roc_auc_score(img_y, img_p):.3f}")
    print("real images, mean held-out P(synthetic):")
    for (name, _, _), p in zip(real, img_p[: len(real)], strict=True):
        print(f"    {name:12s} {p:.3f}")

    full = model().fit(X, y)
    coef = full.named_steps["lr"].coef_[0]
    order = np.argsort(-np.abs(coef))[:10]
    print("ten largest standardised coefficients (+ = looks synthetic):")
    mu_r, mu_s = X[y == 0].mean(axis=0), X[y == 1].mean(axis=0)
    for j in order:
        print(
            f"    {names[j]:24s} {coef[j]:+8.3f}   mean real {mu_r[j]:9.4f}"
            f"  synthetic {mu_s[j]:9.4f}"
        )
    print(f"total {time.perf_counter() - t0:.1f} s")


if __name__ == "__main__":
    main()
