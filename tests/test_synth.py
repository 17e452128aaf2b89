"""Tests of the synthetic fracture-surface generator (fracto.synth)."""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import cv2
import numpy as np
import pytest
from scipy import stats

from fracto.classes import CLASSES, MODES
from fracto.errors import FractoInputError
from fracto.synth import (
    GrainSize,
    ModeModel,
    RenderSettings,
    make_campaign,
    make_polycrystal,
    make_surface,
    render_sem,
)
from fracto.synth.polycrystal import (
    MEIJERING_INTERCEPT,
    column_extent,
    mean_lineal_intercept_px,
)


def _hashes(folder: Path) -> dict[str, str]:
    return {
        p.name: hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.iterdir())
        if p.suffix in (".png", ".tif")
    }


# ---------------------------------------------------------------- reproducibility


def test_same_seed_gives_byte_identical_files(tmp_path):
    # Quality bar of the issue: same seed -> byte-identical images (hashes of two runs).
    kw = dict(size=96, seed=11, modes={"intergranular": 0.4, "transgranular": 0.3, "ductile": 0.3})
    make_surface(**kw).write(tmp_path / "a")
    make_surface(**kw).write(tmp_path / "b")
    ha, hb = _hashes(tmp_path / "a"), _hashes(tmp_path / "b")
    assert set(ha) == {"height.tif", "sem.png", "labels.png", "grains.tif"}
    assert ha == hb
    make_surface(**{**kw, "seed": 12}).write(tmp_path / "c")
    assert _hashes(tmp_path / "c")["sem.png"] != ha["sem.png"]


# ---------------------------------------------------------------- fractions


def test_requested_fractions_met_on_1024_and_labels_equal_truth(tmp_path):
    # Quality bar: requested fractions within ±0.05 on 1024² surfaces; labels.png
    # fractions equal truth.json exactly (counted independently with numpy here).
    target = {"intergranular": 0.35, "transgranular": 0.25, "ductile": 0.3, "fatigue": 0.1}
    surf = make_surface(size=1024, modes=target, seed=5, render=RenderSettings.secant_only())
    surf.write(tmp_path / "s")
    truth = json.loads((tmp_path / "s" / "truth.json").read_text())
    lab = cv2.imread(str(tmp_path / "s" / "labels.png"), cv2.IMREAD_UNCHANGED)
    assert lab.dtype == np.uint8 and lab.shape == (1024, 1024)
    assert truth["classes"] == list(CLASSES)
    counts = np.bincount(lab.ravel(), minlength=len(CLASSES))
    assert counts[0] == 0  # index 0 is never a mode
    for i, name in enumerate(CLASSES[1:], start=1):
        assert truth["fractions"][name] == counts[i] / lab.size  # exactly
        assert abs(truth["fractions"][name] - target[name]) <= 0.05


def test_requested_fractions_met_lognormal_1024():
    # Second case of the ±0.05 bar: spread grain sizes (power-weighted cells), two modes.
    target = {"intergranular": 0.7, "transgranular": 0.3}
    surf = make_surface(
        size=1024,
        modes=target,
        grain_size=GrainSize.parse("lognormal:2um,0.3"),
        seed=9,
        render=RenderSettings.secant_only(),
    )
    lab = surf.labels
    for name in MODES:
        frac = float(np.mean(lab == CLASSES.index(name)))
        assert frac == surf.truth["fractions"][name]
        assert abs(frac - target.get(name, 0.0)) <= 0.05


def test_height_tif_carries_pixel_size(tmp_path):
    from fracto.io import read_height_map

    surf = make_surface(size=64, pixel_size_um=0.25, grain_size=GrainSize(mean_um=3.0), seed=2)
    surf.write(tmp_path / "h")
    hm = read_height_map(tmp_path / "h" / "height.tif")
    assert hm.pixel_size.x_um == pytest.approx(0.25)
    np.testing.assert_allclose(hm.z_um, surf.height_um, rtol=0, atol=0)


# ---------------------------------------------------------------- polycrystal


def test_poisson_voronoi_mean_lineal_intercept_meijering():
    # Meijering (1953): for Poisson–Voronoi cells of intensity λ, S_V = 2.9105 λ^(1/3) and
    # the mean lineal intercept is L = 2/S_V = 0.6872 λ^(-1/3). Test lines lying in a plane
    # section of an isotropic structure are isotropic test lines in 3-D, so lines in the
    # plane z = 0 give the same L. Lines are sampled at 1/10 of a unit so that (almost)
    # no crossing is missed; the check is within 3 standard errors of the mean of four
    # independent realisations (plus 1 % for crossings closer than the sampling step).
    ratios = []
    width = 300.0
    for seed in range(4):
        pc = make_polycrystal(
            (width, width), GrainSize(mean_um=30.0), seed=seed, slab_half_um=60, margin_um=45
        )
        lam = len(pc.seeds_um) / ((width + 90) ** 2 * 120)  # realised intensity of the box
        t = np.arange(0.0, width, 0.1)
        pos = np.linspace(5.0, width - 5.0, 60)
        cross, length = 0, 0.0
        for horizontal in (True, False):
            a, b = np.meshgrid(t, pos)
            x, y = (a, b) if horizontal else (b, a)
            o = pc.owner(np.c_[x.ravel(), y.ravel(), np.zeros(x.size)]).reshape(x.shape)
            cross += int(np.count_nonzero(o[:, 1:] != o[:, :-1]))
            length += o.shape[0] * (t[-1] - t[0])
        ratios.append((length / cross) / (MEIJERING_INTERCEPT * lam ** (-1 / 3)))
    mean = float(np.mean(ratios))
    se = float(np.std(ratios, ddof=1) / math.sqrt(len(ratios)))
    assert abs(mean - 1.0) <= 3 * se + 0.01, (ratios, se)


def test_mean_lineal_intercept_px_on_a_known_map():
    # Analytic: vertical stripes 8 px wide on a 64 × 64 map. Rows: 7 crossings over 63 px
    # each; columns: none over 63 px. Intercept = (64·63 + 64·63) / (64·7) = 18.
    g = np.repeat(np.arange(8), 8)[None, :].repeat(64, axis=0)
    assert mean_lineal_intercept_px(g) == pytest.approx(2 * 64 * 63 / (64 * 7))


def test_power_cell_owner_matches_brute_force():
    # Reference: the definition of the power cell, argmin_j |p - s_j|² - w_j, by brute force.
    pc = make_polycrystal((30.0, 30.0), GrainSize("lognormal", 4.0, 0.4), seed=3)
    rng = np.random.default_rng(0)
    p = np.c_[rng.uniform(0, 30, (800, 2)), rng.uniform(-2, 2, 800)]
    d2 = ((p[:, None, :] - pc.seeds_um[None, :, :]) ** 2).sum(-1) - pc.weights_um2[None, :]
    np.testing.assert_array_equal(pc.owner(p), np.argmin(d2, axis=1))


def test_two_level_owner_matches_definition():
    # Reference: the definition of the two-level tessellation, by brute force: the parent
    # is the nearest parent seed; a kept parent cell is one grain, otherwise the grain is
    # the nearest fine seed among those whose own nearest parent is the same.
    pc = make_polycrystal((30.0, 30.0), GrainSize.parse("bimodal:2um,7um,0.4"), seed=5)
    rng = np.random.default_rng(1)
    p = np.c_[rng.uniform(0, 30, (600, 2)), rng.uniform(-3, 3, 600)]
    par = np.argmin(((p[:, None] - pc.parent_seeds_um[None]) ** 2).sum(-1), axis=1)
    seed_par = np.argmin(((pc.seeds_um[:, None] - pc.parent_seeds_um[None]) ** 2).sum(-1), axis=1)
    expect = pc.parent_grain[par].copy()
    for i in np.flatnonzero(expect < 0):
        members = np.flatnonzero(seed_par == par[i])
        d = ((pc.seeds_um[members] - p[i]) ** 2).sum(-1)
        expect[i] = members[np.argmin(d)]
    got = pc.owner(p)
    np.testing.assert_array_equal(got, expect)
    # and each point satisfies every bounding plane of its grain
    for i in range(len(p)):
        A, b, _ = pc.halfspace(got[i])
        assert np.all(A @ p[i] <= b + 1e-9)


def test_column_extent_are_cell_faces():
    # The top and bottom found from the face planes must be where the power-cell owner
    # (brute force) changes along the vertical line: just inside -> same grain, just
    # outside -> another grain (or the slab end).
    pc = make_polycrystal((20.0, 20.0), GrainSize("lognormal", 3.0, 0.3), seed=7)
    rng = np.random.default_rng(1)
    x, y = rng.uniform(2, 18, 300), rng.uniform(2, 18, 300)
    g = pc.owner(np.c_[x, y, np.zeros_like(x)])
    top, bot, ftop, _ = column_extent(pc, g, x, y)
    assert np.all(top > 0) and np.all(bot < 0)
    eps = 1e-6
    inside_t = pc.owner(np.c_[x, y, top - eps])
    outside_t = pc.owner(np.c_[x, y, top + eps])
    inside_b = pc.owner(np.c_[x, y, bot + eps])
    np.testing.assert_array_equal(inside_t, g)
    np.testing.assert_array_equal(inside_b, g)
    interior = top < pc.slab_half_um
    np.testing.assert_array_equal(outside_t[interior], ftop[interior])


def test_intergranular_facets_consistent_with_grain_size():
    # Expected relation: each visible intergranular facet is (a piece of) one face of the
    # Poisson–Voronoi tessellation; Meijering (1953) gives the mean face area as
    # S/F = 5.821 λ^(-2/3) / 15.535 = 0.3747 λ^(-2/3) (S = 2 S_V/λ the mean cell surface,
    # F = 2 + 48π²/35 faces per cell; values from memory). The section truncates facets
    # (smaller) while large faces are seen more often (larger), so the mean 3-D facet area
    # must lie between 0.6 and 1.0 of the mean face area — equivalently the facet
    # equivalent diameter is 0.53–0.69 λ^(-1/3), i.e. 0.43–0.56 of the grain's
    # equivalent-sphere diameter (1.2407 λ^(-1/3)): facets of the order of the grain size
    # (common practice: ASM Handbook Vol. 12, 1987).
    n = 384
    pc = make_polycrystal((n, n), GrainSize(mean_um=30.0), seed=4, slab_half_um=60)
    yy, xx = np.mgrid[0:n, 0:n] + 0.5
    x, y = xx.ravel(), yy.ravel()
    g = pc.owner(np.c_[x, y, np.zeros_like(x)])
    top, _, ftop, _ = column_extent(pc, g, x, y)
    code = g * (len(pc.seeds_um) + 1) + ftop + 1
    _, inv = np.unique(code, return_inverse=True)
    gy, gx = np.gradient(top.reshape(n, n))
    sec = np.sqrt(1 + gx**2 + gy**2).ravel()
    area3d = np.bincount(inv, weights=sec)
    edge = np.zeros((n, n), bool)
    edge[[0, -1], :] = edge[:, [0, -1]] = True
    keep = np.ones(area3d.size, bool)
    keep[np.unique(inv[edge.ravel()])] = False
    lam = len(pc.seeds_um) / ((n + 90) ** 2 * 120)
    ratio = float(np.mean(area3d[keep]) / (0.3747 * lam ** (-2 / 3)))
    assert 0.6 <= ratio <= 1.0, ratio


def test_bimodal_coarse_fraction_and_parse():
    # Delesse (1847): area fraction on a section estimates volume fraction. Coarse seeds
    # are placed by random sequential addition at the requested volume fraction; the
    # coarse cells also take some of the matrix around their spheres, so the section
    # fraction must be at least the target and not far above it.
    gs = GrainSize.parse("bimodal:1um,4um,0.3")
    assert (gs.fine_um, gs.coarse_um, gs.coarse_volume_fraction) == (1.0, 4.0, 0.3)
    surf = make_surface(size=384, pixel_size_um=0.1, grain_size=gs, seed=1)
    frac = surf.truth["grain_statistics"]["coarse_area_fraction"]
    assert 0.25 <= frac <= 0.5, frac


@pytest.mark.parametrize(
    "text", ["", "2", "lognormal:", "bimodal:1um,2um", "bimodal:3um,1um,0.2", "weird:2um"]
)
def test_grain_size_parse_errors(text):
    with pytest.raises(FractoInputError):
        GrainSize.parse(text)


def test_grain_size_parse_forms():
    assert GrainSize.parse("2um") == GrainSize("lognormal", 2.0, 0.0)
    assert GrainSize.parse("lognormal:1500nm,0.3") == GrainSize("lognormal", 1.5, 0.3)


# ---------------------------------------------------------------- renderer


@pytest.mark.parametrize("theta_deg", [0.0, 15.0, 30.0, 45.0, 60.0])
def test_tilted_plane_follows_secant_law(theta_deg):
    # Reimer (1998): SE yield δ(θ) = δ0 sec θ. With every other effect off, a plane
    # tilted by θ renders as δ0 sec θ within 2 % (16-bit quantisation is ~1e-5).
    n, px = 64, 0.1
    x = np.arange(n) * px
    h = np.tile(np.tan(np.radians(theta_deg)) * x, (n, 1))
    s = RenderSettings.secant_only(yield_base=0.3)
    img = render_sem(h, px, s)
    centre = float(np.mean(img[16:48, 16:48]))
    assert centre == pytest.approx(0.3 / math.cos(math.radians(theta_deg)), rel=0.02)


def test_secant_cap_and_effects():
    n, px = 64, 0.1
    h = np.tile(np.tan(np.radians(80.0)) * np.arange(n) * px, (n, 1))
    img = render_sem(h, px, RenderSettings.secant_only(yield_base=0.2, secant_cap=3.0))
    assert float(img[32, 32]) == pytest.approx(0.6, rel=1e-3)  # capped at δ0 · cap
    # a ridge is brighter at its crest than on its flanks once the edge effect is on
    xx = np.abs(np.arange(n) - n / 2) * px
    ridge = np.tile(-0.5 * xx, (n, 1))
    s = RenderSettings(
        dose=None,
        auto_level=False,
        detector_strength=0,
        detector_shadow=0,
        valley_strength=0,
        blur_um=0,
        line_jitter=0,
        bit_depth=16,
    )
    im = render_sem(ridge, px, s)
    assert im[32, 32] > 1.2 * im[32, 10]


def test_scan_noise_rms_and_row_correlation():
    # White noise smoothed by a Gaussian of σ pixels has a Gaussian autocorrelation of
    # σ√2: neighbour correlation exp(-1 / (4 σ²)) along the rows, none across them
    # (analytic); the multiplicative scan noise on a flat plane must show exactly that.
    from dataclasses import replace

    sig = 3.0
    s = replace(RenderSettings.secant_only(yield_base=0.3), scan_noise=0.05, scan_noise_px=sig)
    img = render_sem(np.zeros((256, 1024)), 0.1, s, seed=2).astype(np.float64)
    rel = img / 0.3 - 1.0
    assert float(np.std(rel)) == pytest.approx(0.05, rel=0.05)
    along = float(np.corrcoef(rel[:, 1:].ravel(), rel[:, :-1].ravel())[0, 1])
    across = float(np.corrcoef(rel[1:].ravel(), rel[:-1].ravel())[0, 1])
    assert along == pytest.approx(math.exp(-1.0 / (4 * sig * sig)), abs=0.02)
    assert abs(across) < 0.02
    with pytest.raises(FractoInputError):
        RenderSettings(scan_noise=-0.1)


def test_render_random_settings_and_banner():
    rng = np.random.default_rng(3)
    h = make_surface(size=96, seed=1, render=RenderSettings.secant_only()).height_um
    for _ in range(5):
        s = RenderSettings.random(rng)
        img = render_sem(h, 0.1, s, seed=1)
        assert img.dtype == np.float32 and img.min() >= 0 and img.max() <= 1
        assert img.shape[1] == 96
    s = RenderSettings(banner=True)
    img = render_sem(h, 0.1, s)
    assert img.shape[0] > 96
    with pytest.raises(FractoInputError):
        RenderSettings(bit_depth=12)


# ---------------------------------------------------------------- mode model


def test_mode_model_tanh_midpoint_and_sum():
    # Oldfield (1975) tanh shape: at T = T_t (no size shift) the ductile share is U/2,
    # and U·(1+tanh 1)/2 one width above.
    mm = ModeModel(upper_shelf_ductile=0.9, width_C=20.0)
    p = mm.probabilities(np.array([2.0, 5.0]), 0.0)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    assert p[0, 2] == pytest.approx(0.45)
    p = mm.probabilities(np.array([2.0]), 20.0)
    assert p[0, 2] == pytest.approx(0.9 * (1 + math.tanh(1.0)) / 2)


def test_mode_model_draw_has_exact_marginals():
    # The Gaussian-copula draw keeps the marginal P(mode) = p for any spatial correlation;
    # check observed counts with a two-sided binomial test (scipy.stats).
    mm = ModeModel.steel(spatial_correlation=0.8, fatigue_fraction=0.1)
    n = 20000
    rng = np.random.default_rng(0)
    d = np.full(n, 2.0)
    patch = rng.standard_normal((n, 2))
    modes = mm.draw(d, -10.0, patch, rng)
    p = mm.probabilities(d[:1], -10.0)[0]
    for k in range(len(MODES)):
        res = stats.binomtest(int(np.sum(modes == k)), n, float(p[k]))
        assert res.pvalue > 1e-3, (MODES[k], p[k], np.mean(modes == k))


def test_ceramic_peak_in_coarse_grains():
    mm = ModeModel.ceramic()
    fine, coarse = mm.probabilities(np.array([1.0, 6.0]), 0.0)
    assert coarse[0] > fine[0] + 0.4  # intergranular peak only in coarse grains
    far = mm.probabilities(np.array([6.0]), 100.0)[0]
    assert far[0] < coarse[0] - 0.4


# ---------------------------------------------------------------- surface + files


def test_temperature_moves_fractions():
    kw = dict(size=192, grain_size=GrainSize(mean_um=1.5), transition_C=0.0, seed=3)
    cold = make_surface(temperature_C=-60.0, **kw).truth["fractions"]
    hot = make_surface(temperature_C=60.0, **kw).truth["fractions"]
    assert cold["ductile"] < 0.1 and hot["ductile"] > 0.8


def test_write_refuses_non_empty_folder(tmp_path):
    surf = make_surface(size=48, seed=0)
    (tmp_path / "x.txt").write_text("keep")
    with pytest.raises(FractoInputError):
        surf.write(tmp_path)
    surf.write(tmp_path, force=True)
    assert (tmp_path / "truth.json").exists() and (tmp_path / "x.txt").exists()


@pytest.mark.parametrize(
    "kw",
    [
        {"modes": {"intergranular": 0.5}},
        {"modes": {"brittle": 1.0}},
        {"temperature_C": 20.0},
        {"size": 8},
        {"pixel_size_um": -1.0},
    ],
)
def test_bad_input_is_one_sentence(kw):
    with pytest.raises(FractoInputError) as exc:
        make_surface(**{"size": 64, **kw})
    assert str(exc.value).endswith(".")


def test_fatigue_striation_spacing_in_truth():
    surf = make_surface(size=128, modes={"fatigue": 1.0}, seed=2)
    assert surf.truth["striation_spacing_um"] == pytest.approx(0.4)


# ---------------------------------------------------------------- campaign + CLI


def test_campaign_manifest_and_truth(tmp_path):
    path = make_campaign(
        tmp_path / "c",
        temperatures_C=[-80.0, 0.0, 80.0],
        specimens_per_temperature=2,
        transition_C=0.0,
        size=64,
        grain_size=GrainSize(mean_um=1.0),
        seed=1,
    )
    import csv

    rows = list(csv.DictReader(open(path, encoding="utf-8")))
    assert {
        "path",
        "kind",
        "specimen",
        "temperature_C",
        "pixel_size_um",
        "toughness_MPa_sqrt_m",
    } <= set(rows[0])
    assert {r["kind"] for r in rows} == {"sem", "height", "labels"}
    assert len({r["specimen"] for r in rows}) == 6
    truth = json.loads((tmp_path / "c" / "truth.json").read_text())
    assert truth["transition_temperature_C"] == 0.0
    for r in rows:
        assert (tmp_path / "c" / r["path"]).exists()
        assert r["path"] in truth["files"]
    duc = {
        float(r["temperature_C"]): truth["files"][r["path"]]["fractions"]["ductile"] for r in rows
    }
    assert duc[-80.0] < duc[80.0]


def test_cli_writes_and_refuses_bad_text(tmp_path, capsys):
    from fracto.cli import main

    out = tmp_path / "o"
    rc = main(
        [
            "synth",
            str(out),
            "--size",
            "64",
            "--modes",
            "intergranular=0.5,transgranular=0.5",
            "--grain-size",
            "lognormal:1um,0.2",
        ]
    )
    assert rc == 0
    assert "wrote" in capsys.readouterr().out
    assert (out / "sem.png").exists()
    assert main(["synth", str(out), "--size", "64"]) == 2  # non-empty folder
    assert "not empty" in capsys.readouterr().err
    for bad in (
        ["--modes", "intergranular:0.5"],
        ["--grain-size", "big"],
        ["--pixel-size", "0.1"],
        ["--size", "huge"],
        ["--temperature", "20C"],
    ):
        rc = main(["synth", str(tmp_path / "n"), "--size", "64", *bad])
        assert rc == 2, bad
        err = capsys.readouterr().err
        assert err.startswith("fracto: ") and err.count("\n") == 1


# ---------------------------------------------------------------- demo_images


DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_images"


@pytest.mark.skipif(not (DEMO_DIR / "truth.json").exists(), reason="demo_images not built")
def test_demo_images_consistent():
    import csv

    truth = json.loads((DEMO_DIR / "truth.json").read_text())
    rows = list(csv.DictReader(open(DEMO_DIR / "campaign.csv", encoding="utf-8")))
    temps = {float(r["temperature_C"]) for r in rows}
    assert len(temps) >= 6 and "transition_temperature_C" in truth
    assert min(temps) < truth["transition_temperature_C"] < max(temps)
    for t in temps:  # at least two specimens at every temperature
        assert len({r["specimen"] for r in rows if float(r["temperature_C"]) == t}) >= 2
    assert {"sem", "height"} <= {r["kind"] for r in rows}
    total = sum(p.stat().st_size for p in DEMO_DIR.rglob("*") if p.is_file())
    assert total < 30e6
    # the label images hold exactly the fractions given in truth.json
    for r in rows:
        if r["kind"] == "labels":
            lab = cv2.imread(str(DEMO_DIR / r["path"]), cv2.IMREAD_UNCHANGED)
            counts = np.bincount(lab.ravel(), minlength=len(CLASSES))
            for i, name in enumerate(CLASSES[1:], start=1):
                assert truth["files"][r["path"]]["fractions"][name] == counts[i] / lab.size


@pytest.mark.skipif(not (DEMO_DIR / "truth.json").exists(), reason="demo_images not built")
def test_demo_regenerates_byte_identical(tmp_path):
    # The README's regeneration claim: the first temperature of the demo, made again
    # with the demo settings, gives byte-identical files (seeds are spawned per specimen).
    from fracto.synth.campaign import demo_settings

    kw = demo_settings()
    kw["temperatures_C"] = kw["temperatures_C"][:1]
    make_campaign(tmp_path / "d", progress=False, **kw)
    for p in sorted((tmp_path / "d").rglob("*_*.*")):
        if p.suffix in (".png", ".tif"):
            rel = p.relative_to(tmp_path / "d")
            assert p.read_bytes() == (DEMO_DIR / rel).read_bytes(), rel


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_fragment_flake_area_is_superellipse_area(seed):
    # Analytic: the superellipse |a/r|^p + |b/(r/e)|^p <= 1 has area
    # 4 r (r/e) Γ(1 + 1/p)² / Γ(1 + 2/p) (p = 2: the ellipse π r²/e). An untilted
    # flake on a flat map raises exactly the pixels inside it (to 2 % at r = 40 px).
    from fracto.synth.fragments import place_fragments

    r = 40.0
    flat = np.zeros((128, 128))
    out = place_fragments(
        flat,
        0.1,
        np.array([[64.0, 64.0]]),
        np.array([r]),
        np.random.default_rng(seed),
        max_tilt_deg=0.0,
    )
    rng = np.random.default_rng(seed)  # the same draws: orientation, exponent, aspect ratio
    rng.uniform(0, math.pi, 1)
    p = float(rng.uniform(1.0, 3.0, 1)[0])
    e = float(rng.uniform(1.0, 2.0, 1)[0])
    area = 4 * r * (r / e) * math.gamma(1 + 1 / p) ** 2 / math.gamma(1 + 2 / p)
    raised = np.count_nonzero(out > 0)
    assert raised == pytest.approx(area, rel=0.02)
    assert np.allclose(out[out > 0], 0.5 * r * 0.1)  # thickness 0.5 r, flat on a flat base
    np.testing.assert_array_equal(flat, 0.0)  # input unchanged
