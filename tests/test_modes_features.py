"""Region features: scale estimate, invariances, orientation and periodicity."""

import numpy as np
import pytest
from scipy import ndimage

from fracto.errors import FractoInputError
from fracto.modes.features import (
    FEATURE_DESCRIPTIONS,
    HEIGHT_FEATURE_DESCRIPTIONS,
    estimate_texture_scale_px,
    feature_names,
    normalise_intensity,
    region_features,
)


def _smooth_noise(n, sigma, seed=0):
    rng = np.random.default_rng(seed)
    return ndimage.gaussian_filter(rng.normal(size=(n, n)), sigma, mode="wrap")


def test_texture_scale_of_gaussian_filtered_noise():
    # Analytic: white noise filtered by a Gaussian of sigma s has the autocorrelation
    # exp(-r^2 / (4 s^2)); the estimator smooths again with sigma 1 px, so
    # s_eff^2 = s^2 + 1 and the half-correlation radius is 2 s_eff sqrt(ln 2).
    s = 6.0
    expected = 2.0 * np.sqrt(s**2 + 1.0) * np.sqrt(np.log(2.0))
    got = estimate_texture_scale_px(_smooth_noise(512, s).astype(np.float32))
    # the Hann window and a finite sample bias it a little (tolerance chosen, 15 %)
    assert got == pytest.approx(expected, rel=0.15)


def test_texture_scale_follows_magnification():
    # Analytic: block-averaging an image by 2 halves every length in pixels.
    img = _smooth_noise(1024, 8.0, seed=1).astype(np.float32)
    half = img.reshape(512, 2, 512, 2).mean(axis=(1, 3))
    r = estimate_texture_scale_px(img) / estimate_texture_scale_px(half)
    assert r == pytest.approx(2.0, rel=0.12)


def test_features_ignore_brightness_and_contrast():
    # Analytic: robust percentile normalisation maps a*I + b (a > 0) to the same image.
    img = _smooth_noise(256, 3.0, seed=2).astype(np.float32)
    f1 = region_features(img)
    f2 = region_features(0.3 * img + 5.0)
    # float32 rounding of 0.3 I + 5 (about 3e-5 of the signal) can flip single pixels
    # across a line threshold; the distance to the nearest line then jumps locally, so the
    # facet features (distances, interiors) are compared on average, everything else tight.
    facet = np.array(["facet_" in n for n in f1.names])
    np.testing.assert_allclose(f1.X[:, ~facet], f2.X[:, ~facet], rtol=1e-3, atol=1e-3)
    assert np.abs(f1.X[:, facet] - f2.X[:, facet]).mean() < 0.01


def test_every_feature_is_described():
    f = region_features(_smooth_noise(256, 3.0).astype(np.float32))
    assert f.names == feature_names() == list(FEATURE_DESCRIPTIONS)
    assert f.X.shape == (f.tile_grid[0] * f.tile_grid[1], len(FEATURE_DESCRIPTIONS))
    assert feature_names(with_height=True)[-1] in HEIGHT_FEATURE_DESCRIPTIONS
    assert all(len(d) > 10 for d in FEATURE_DESCRIPTIONS.values())
    assert all(len(d) > 10 for d in HEIGHT_FEATURE_DESCRIPTIONS.values())
    assert np.isfinite(f.X).all()


def test_striations_are_coherent_and_periodic():
    # Analytic: a pure sinusoid has all gradients parallel (structure-tensor coherence 1)
    # and all its power at one wavelength; isotropic noise has neither.
    n, period = 384, 12.0
    yy, xx = np.mgrid[0:n, 0:n]
    th = np.deg2rad(30)
    stripes = np.cos(2 * np.pi * (xx * np.cos(th) + yy * np.sin(th)) / period)
    fs = region_features(stripes.astype(np.float32))
    fn = region_features(_smooth_noise(n, 2.0).astype(np.float32))
    col = {k: i for i, k in enumerate(fs.names)}
    assert np.median(fs.X[:, col["coh_tile_s2"]]) > 0.9
    assert np.median(fn.X[:, col["coh_tile_s2"]]) < 0.5
    # Analytic: under a Hann window a tone centred on a frequency bin leaves power
    # 1 : 1/4 : 1/4 in its bin and the two neighbours along each axis, so the peak bin
    # holds (1 / 1.5)^2 = 0.444 of the power in 2-D (less for a tone between bins).
    peak_s = np.median(fs.X[:, col["spec_peak_frac"]])
    assert 0.3 < peak_s <= 0.45
    assert peak_s > 1.8 * np.median(fn.X[:, col["spec_peak_frac"]])
    # wavelength back in image pixels: (texture scales) * texture scale on the working grid / zoom
    s_work = fs.scale.texture_scale_px * fs.scale.zoom
    lam = np.median(fs.X[:, col["spec_peak_wavelength"]]) * s_work / fs.scale.zoom
    tile_px = 2 * fs.block_px
    # one frequency bin of the tile spectrum is the resolution: |dλ| ≈ λ^2 / tile
    assert abs(lam - period) <= period**2 / tile_px + 0.5


def test_context_columns_average_the_neighbouring_tiles():
    # Analytic: the 3 x 3 mean of a feature that is 1 on one tile and 0 elsewhere is
    # 1/9 on its eight inner neighbours and 1/4 on the corner tile's neighbours.
    from fracto.modes.features import context_mean

    X = np.zeros((25, 1))
    X[12] = 1.0  # centre of a 5 x 5 tile grid
    c = context_mean(X, (5, 5)).reshape(5, 5)
    assert c[1, 1] == pytest.approx(1 / 9) and c[0, 0] == 0.0
    X = np.zeros((25, 1))
    X[0] = 1.0
    assert context_mean(X, (5, 5)).reshape(5, 5)[0, 0] == pytest.approx(1 / 4)


def test_height_features_of_a_tilted_plane():
    # Analytic: a plane z = a x has slope a everywhere, Sdr = sqrt(1 + a^2) - 1,
    # planarity 1 and no residual Sq.
    n, a, px = 256, 0.5, 0.1
    img = _smooth_noise(n, 3.0).astype(np.float32)
    xx = np.arange(n)[None, :] * px * np.ones((n, 1))
    f = region_features(img, pixel_size_um=px, height_um=a * xx)
    col = {k: i for i, k in enumerate(f.names)}
    X = f.X
    inner = X[:, col["h_slope_mean"]]
    assert np.median(inner) == pytest.approx(a, rel=0.02)
    assert np.median(X[:, col["h_sdr"]]) == pytest.approx(np.sqrt(1 + a * a) - 1, rel=0.03)
    assert np.median(X[:, col["h_planarity"]]) > 0.999
    assert np.median(X[:, col["h_plane_tilt"]]) == pytest.approx(a, rel=0.02)


def test_bad_images_are_refused():
    with pytest.raises(FractoInputError, match="blank or saturated"):
        normalise_intensity(np.full((128, 128), 0.5))
    with pytest.raises(FractoInputError, match="too small"):
        region_features(_smooth_noise(20, 1.0))
    with pytest.raises(FractoInputError, match="too small"):
        # a coarse texture in a small frame leaves fewer than three regions a side
        region_features(_smooth_noise(64, 12.0))
    with pytest.raises(FractoInputError, match="pixel size"):
        region_features(_smooth_noise(128, 2.0), height_um=np.zeros((128, 128)))


def test_vectorised_lbp_matches_scikit_image():
    # Reference library: skimage.feature.local_binary_pattern(P=8, R, "uniform"), whose
    # definition (Ojala et al. 2002) the vectorised codes follow; borders differ (skimage
    # treats outside neighbours as 0), so only the interior is compared.
    from skimage.feature import local_binary_pattern

    from fracto.modes.features import _lbp_uniform

    g8 = np.rint(255 * np.clip(_smooth_noise(96, 1.5, seed=3) * 4 + 0.5, 0, 1))
    g8 = g8.astype(np.uint8)
    for radius in (1.0, 2.5):
        ref = local_binary_pattern(g8, 8, radius, method="uniform")
        got = _lbp_uniform(g8.astype(np.float32), radius)
        m = int(np.ceil(radius)) + 1
        inner = (slice(m, -m), slice(m, -m))
        agree = (ref[inner] == got[inner]).mean()
        # bilinear weights are computed in float32 here and float64 there: ties may flip
        assert agree > 0.97, (radius, agree)


def test_histogram_tile_quantiles_match_numpy_percentiles():
    # Reference: numpy.percentile on the pixels of each tile; the histogram quantile is
    # exact up to one bin (1 / QUANTILE_BINS) of the [0, 1] range.
    from numpy.lib.stride_tricks import sliding_window_view

    from fracto.modes.features import QUANTILE_BINS, _tile_quantiles

    rng = np.random.default_rng(4)
    b = 8
    g = rng.beta(2, 5, size=(6 * b, 5 * b)).astype(np.float32)
    got = _tile_quantiles(g, b, (0.1, 0.5, 0.9))
    tiles = sliding_window_view(g, (2 * b, 2 * b))[::b, ::b].reshape(-1, 4 * b * b)
    ref = np.percentile(tiles, [10, 50, 90], axis=1)
    for q_got, q_ref in zip(got, ref, strict=True):
        assert np.abs(q_got - q_ref).max() <= 1.0 / QUANTILE_BINS + 1e-6


def test_facet_distance_of_a_single_line():
    # Analytic: the Euclidean distance to a straight line x = x0 is |x - x0|.
    from fracto.modes.features import _facet_distance

    mask = np.zeros((40, 60), bool)
    mask[:, 20] = True
    d = _facet_distance(mask, 1, 1.0)
    expect = np.abs(np.arange(60) - 20.0)[None, :] * np.ones((40, 1))
    np.testing.assert_allclose(d, np.minimum(expect, 16.0), atol=1e-3)
    # distances are in texture scales: reduction f and texture scale s rescale them
    np.testing.assert_allclose(
        _facet_distance(mask, 2, 4.0), np.minimum(expect / 2, 16.0), atol=1e-3
    )


def test_parallel_lines_are_coherent_and_fanned_lines_are_not():
    # Analytic: the lines of a sinusoid all share one direction (line coherence 1); the
    # level lines of a radial pattern cos(k r) around a tile centre turn through all angles.
    n, period = 384, 8.0
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float32)
    stripes = np.cos(2 * np.pi * (xx * 0.8 + yy * 0.6) / period)
    fs = region_features(stripes.astype(np.float32))
    col = {k: i for i, k in enumerate(fs.names)}
    assert np.median(fs.X[:, col["line_coh_s1"]]) > 0.9
    fn = region_features(_smooth_noise(n, 2.0).astype(np.float32))
    assert np.median(fn.X[:, col["line_coh_s1"]]) < 0.5
    assert np.median(fs.X[:, col["line_coh_s1"]]) > 2 * np.median(fn.X[:, col["line_coh_s1"]])


def test_reduced_coarse_scales_agree_with_full_resolution():
    # Consistency with the unreduced computation: a Gaussian of σ on the grid reduced by f
    # after f x f block averaging approximates a Gaussian of σ f on the full grid
    # (box variance (f^2 - 1) / 12 accounted for), so coarse-scale tile means barely move.
    import fracto.modes.features as F

    img = _smooth_noise(512, 6.0, seed=5).astype(np.float32)
    reduced = F.region_features(img)
    saved = F.MAX_REDUCTION
    try:
        F.MAX_REDUCTION = 1
        full = F.region_features(img)
    finally:
        F.MAX_REDUCTION = saved
    col = {k: i for i, k in enumerate(full.names)}
    for name in ("grad_mean_s3", "log_absmean_s3", "grad_mean_s4"):
        a, b = reduced.X[:, col[name]], full.X[:, col[name]]
        assert np.corrcoef(a, b)[0, 1] > 0.95, name
        assert np.median(a) == pytest.approx(np.median(b), rel=0.1), name


def test_saved_training_regions_load_without_pickle(tmp_path):
    # Contract of fracto-default.regions.npz: plain arrays (numpy.load with
    # allow_pickle=False), at most max_regions rows, the stated keys and feature version.
    from fracto.classes import MODES
    from fracto.modes.features import FEATURE_SET_VERSION
    from fracto.modes.training import TrainingSet, save_training_regions

    rng = np.random.default_rng(6)
    names = feature_names()
    X = rng.normal(size=(50, len(names))).astype(np.float32)
    y = np.array(MODES)[rng.integers(0, 4, 50)]
    ts = TrainingSet(X, y, np.repeat(np.arange(5), 10), names)
    n = save_training_regions(tmp_path / "r.npz", ts, MODES, max_regions=20, seed=1)
    with np.load(tmp_path / "r.npz", allow_pickle=False) as z:
        assert set(z.files) == {
            "X",
            "y",
            "groups",
            "feature_names",
            "classes",
            "feature_set_version",
        }
        assert n == 20 and z["X"].shape == (20, len(names))
        assert str(z["feature_set_version"]) == FEATURE_SET_VERSION
        assert list(z["classes"]) == list(MODES) and list(z["feature_names"]) == names
        # the rows kept are rows of the input, with their labels
        rows = {tuple(r) for r in X}
        assert all(tuple(r) in rows for r in z["X"])
        i = [int(np.nonzero((X == r).all(axis=1))[0][0]) for r in z["X"]]
        assert (z["y"] == y[i]).all() and (z["groups"] == ts.groups[i]).all()
