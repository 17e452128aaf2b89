"""Striation spacing in the batch outputs (images.csv and specimens.csv).

Outside references: the striation fields of tests/modes_textures.texture (mode 4)
are cosines of a known period (0.3 × grain, px) across a known normal angle θ, so
the spacing (period × pixel size) and the crack-growth direction θ are analytic;
the axial mean of angles (mean of exp(2iθ), halved) follows Fisher (1993),
Statistical Analysis of Circular Data, §2.4.
"""

from __future__ import annotations

import csv
import math

import numpy as np
import pytest
from campaign_fixtures import png, write_manifest

from fracto.campaign.summary import axial_mean_deg

PX_UM = 0.1
GRAIN = 40.0
PERIOD_PX = 0.3 * GRAIN  # modes_textures.texture, mode 4


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    from modes_textures import small_model

    from fracto.modes.model import save_model

    p = tmp_path_factory.mktemp("model") / "m.skops"
    save_model(small_model(), p)
    return str(p)


def _read(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _axial_diff(a: float, b: float) -> float:
    d = (a - b) % 180.0
    return min(d, 180.0 - d)


def test_fatigue_fields_give_their_spacing_and_direction(tmp_path, model_file):
    from modes_textures import texture

    from fracto.campaign.batch import run_batch

    rows, theta = [], {}
    for seed in (1, 2):
        img = texture(4, (384, 384), GRAIN, np.random.default_rng(seed))
        # the normal angle is the texture's first draw from its generator
        theta[f"fat{seed}.png"] = math.degrees(np.random.default_rng(seed).uniform(0, np.pi))
        png(tmp_path / f"fat{seed}.png", img)
        rows.append([f"fat{seed}.png", "sem", "F-1", f"{PX_UM}um"])
    img = texture(1, (384, 384), GRAIN, np.random.default_rng(9))  # intergranular facets
    png(tmp_path / "ig.png", img)
    rows.append(["ig.png", "sem", "F-2", f"{PX_UM}um"])
    man = write_manifest(tmp_path / "m.csv", ["path", "kind", "specimen", "pixel_size"], rows)
    s = run_batch(man, tmp_path / "out", model_path=model_file, report=False, n_boot=100)
    assert s.scored == 3
    im = {r["path"]: r for r in _read(tmp_path / "out" / "images.csv")}
    truth_um = PERIOD_PX * PX_UM
    for name in ("fat1.png", "fat2.png"):
        r = im[name]
        sp = float(r["striation_spacing_um"])
        assert abs(sp - truth_um) <= 0.03 * truth_um, (name, sp)
        lo, hi = (
            float(r["striation_spacing_ci95_low_um"]),
            float(r["striation_spacing_ci95_high_um"]),
        )
        assert lo <= sp <= hi and hi - lo < 0.1 * truth_um
        assert _axial_diff(float(r["striation_direction_deg"]), theta[name]) < 3.0
        assert int(float(r["striation_windows"])) >= 4
    # no fatigue regions: no striation values
    assert im["ig.png"]["striation_spacing_um"] == "" and im["ig.png"]["striation_windows"] == ""
    sp = {r["specimen"]: r for r in _read(tmp_path / "out" / "specimens.csv")}
    f1 = sp["F-1"]
    vals = [float(im[n]["striation_spacing_um"]) for n in ("fat1.png", "fat2.png")]
    assert float(f1["striation_spacing_um_mean"]) == pytest.approx(np.mean(vals), rel=1e-12)
    assert f1["striation_spacing_um_n"] == "2"
    assert float(f1["striation_windows_total"]) == sum(
        float(im[n]["striation_windows"]) for n in ("fat1.png", "fat2.png")
    )
    dirs = [float(im[n]["striation_direction_deg"]) for n in ("fat1.png", "fat2.png")]
    assert float(f1["striation_direction_axial_mean_deg"]) == pytest.approx(
        axial_mean_deg(dirs), abs=1e-9
    )
    assert sp["F-2"]["striation_spacing_um_n"] == "0"


def test_axial_mean_wraps_at_180_degrees():
    # 179° and 1° are 2° apart as axes: their mean axis is 0°, not 90° (Fisher 1993)
    assert _axial_diff(axial_mean_deg([179.0, 1.0]), 0.0) < 1e-9
    assert axial_mean_deg([30.0, 40.0]) == pytest.approx(35.0)
    assert axial_mean_deg([0.0, 90.0]) is None  # no preferred axis
    assert axial_mean_deg([]) is None
