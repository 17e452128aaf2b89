"""ISO 16610-21/-61 Gaussian filters, spike removal and the conditioning chain."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import ndimage

from fracto.errors import FractoInputError
from fracto.surface import filters
from fracto.surface.filters import (
    GAUSSIAN_ALPHA,
    condition_surface,
    gaussian_mean_surface,
    gaussian_profile_filter,
    l_filter,
    remove_spikes,
    s_filter,
)
from fracto.surface.form import remove_form


def _analytic_transmission(cutoff: float, wavelength: float) -> float:
    # Fourier transform of s(x) = 1/(αλc)·exp(−π(x/(αλc))²): with ∫exp(−πx²)e^{−2πifx}dx
    # = exp(−πf²) and the scaling x → x/(αλc), S(f) = exp(−π(αλc f)²), f = 1/λ.
    return math.exp(-math.pi * (GAUSSIAN_ALPHA * cutoff / wavelength) ** 2)


def _gain(out: np.ndarray, inp: np.ndarray) -> float:
    """Least-squares gain of a linear filter on one sinusoid (out = T·in)."""
    return float(np.sum(out * inp) / np.sum(inp * inp))


@pytest.fixture(params=["direct", "fft"])
def path(request, monkeypatch):
    """Run a test through the direct kernel and through the FFT path."""
    monkeypatch.setattr(filters, "_DIRECT_MAX_TAPS", 10**9 if request.param == "direct" else 0)
    return request.param


def test_alpha_value() -> None:
    # ISO 16610-21 (2011): α = √(ln 2/π) ≈ 0.4697.
    assert GAUSSIAN_ALPHA == pytest.approx(0.4697, abs=1e-4)
    assert GAUSSIAN_ALPHA == pytest.approx(math.sqrt(math.log(2) / math.pi), rel=1e-15)


def test_profile_transmission_50_percent_at_cutoff(path: str) -> None:
    # ISO 16610-21: 50 % amplitude transmission of the mean line at λc.
    cutoff, dx = 80.0, 0.5
    x = np.arange(0, 12 * cutoff, dx)
    p = np.sin(2 * math.pi * x / cutoff + 0.3)
    mean = gaussian_profile_filter(p, cutoff, dx)
    inner = slice(int(cutoff / dx), -int(cutoff / dx))
    assert _gain(mean[inner], p[inner]) == pytest.approx(0.5, abs=0.005)


@pytest.mark.parametrize("ratio", [0.3, 0.5, 0.8, 1.5, 2.5, 5.0])
def test_profile_transmission_matches_analytic(path: str, ratio: float) -> None:
    # Analytic transmission exp(−π(αλc/λ)²) (Fourier transform of the ISO weighting).
    cutoff, dx = 80.0, 0.5
    lam = ratio * cutoff
    x = np.arange(0, 12 * cutoff, dx)
    p = np.cos(2 * math.pi * x / lam)
    mean = gaussian_profile_filter(p, cutoff, dx)
    inner = slice(int(cutoff / dx), -int(cutoff / dx))
    assert _gain(mean[inner], p[inner]) == pytest.approx(
        _analytic_transmission(cutoff, lam), abs=2e-3
    )


@pytest.mark.parametrize("direction", ["x", "y", "diagonal"])
@pytest.mark.parametrize("ratio", [1.0, 0.6, 2.0])
def test_areal_transmission_isotropic(path: str, direction: str, ratio: float) -> None:
    # ISO 16610-61: the areal Gaussian is the product of two ISO 16610-21 Gaussians,
    # exp(−π(αλc)²(fx² + fy²)), so a sinusoid of wavelength λ in any direction passes
    # with exp(−π(αλc/λ)²) (analytic).
    cutoff, dx, dy = 40.0, 0.8, 0.5
    lam = ratio * cutoff
    ny, nx = 260, 170
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    x, y = x * dx, y * dy
    theta = {"x": 0.0, "y": math.pi / 2, "diagonal": math.pi / 4}[direction]
    z = np.sin(2 * math.pi * (x * math.cos(theta) + y * math.sin(theta)) / lam + 0.4)
    mean = gaussian_mean_surface(z, cutoff, dx, dy)
    bx, by = math.ceil(cutoff / dx), math.ceil(cutoff / dy)
    inner = (slice(by, -by), slice(bx, -bx))
    assert _gain(mean[inner], z[inner]) == pytest.approx(
        _analytic_transmission(cutoff, lam), abs=3e-3
    )


def _holes(shape: tuple[int, int], seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    mask = rng.random(shape) < 0.1
    mask[30:45, 50:80] = True
    mask[0:6, :12] = True  # a hole on the border
    return mask


@pytest.mark.parametrize("cutoff", [6.0, 60.0])
def test_constant_preserved_everywhere_with_holes(path: str, cutoff: float) -> None:
    # Normalised convolution (Knutsson & Westin 1993): the filtered constant is
    # (c·Σw g)/(Σw g) = c exactly, at the borders and beside holes too.
    z = np.full((90, 120), 3.75)
    z[_holes(z.shape, 1)] = np.nan
    mean = gaussian_mean_surface(z, cutoff, 1.0, 1.0)
    assert np.nanmax(np.abs(mean - 3.75)) < 1e-9
    assert np.isfinite(mean[np.isfinite(z)]).all()
    lf = l_filter(z, cutoff, 1.0, 1.0)
    assert np.nanmax(np.abs(lf)) < 1e-9
    assert np.array_equal(np.isfinite(lf), np.isfinite(z))
    sf = s_filter(z, cutoff, 1.0, 1.0)
    assert np.array_equal(np.isfinite(sf), np.isfinite(z))


def test_plane_preserved_where_kernel_is_complete_and_border_bias_analytic(path: str) -> None:
    # Analytic: with a full symmetric kernel the weighted mean of a plane is the plane
    # (first moment of a symmetric kernel is zero). At a straight border only the inner
    # half of the kernel remains, whose centroid lies σ·√(2/π) inside (mean of a
    # half-normal distribution), so the zero-order normalised convolution shifts a
    # plane of slope s by s·σ·√(2/π) there.
    cutoff, dx, dy = 30.0, 0.5, 0.5
    ny, nx = 200, 220
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    slope = 0.2
    z = 1.0 + slope * x * dx - 0.1 * y * dy
    holes = np.zeros(z.shape, dtype=bool)
    holes[140:150, 150:160] = True
    zh = z.copy()
    zh[holes] = np.nan
    mean = gaussian_mean_surface(zh, cutoff, dx, dy)
    r = math.ceil(cutoff / dx)
    near = ndimage.maximum_filter(holes, size=2 * r + 3)  # square kernel support
    far = ~near
    far[:r, :] = far[-r:, :] = False
    far[:, :r] = far[:, -r:] = False
    assert np.max(np.abs(mean[far] - z[far])) < 1e-9
    sigma = GAUSSIAN_ALPHA * cutoff / math.sqrt(2 * math.pi)
    bias = mean[100, 0] - z[100, 0]
    assert bias == pytest.approx(slope * sigma * math.sqrt(2 / math.pi), rel=0.05)


def test_first_order_edges_keep_a_plane_everywhere(path: str) -> None:
    # Analytic: a Gaussian-weighted local plane fit (first-order normalised
    # convolution, Knutsson & Westin 1993) reproduces any plane exactly, at the
    # borders and beside holes; where the kernel is complete its first moments
    # vanish by symmetry and it equals the zero-order filter.
    cutoff, dx, dy = 30.0, 0.5, 0.4
    ny, nx = 180, 150
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    z = -2.0 + 0.3 * x * dx + 0.15 * y * dy
    zh = z.copy()
    zh[_holes(z.shape, 8)] = np.nan
    mean = gaussian_mean_surface(zh, cutoff, dx, dy, edge_order=1)
    assert np.isfinite(mean).all()
    assert np.max(np.abs(mean - z)) < 1e-9
    assert np.nanmax(np.abs(l_filter(zh, cutoff, dx, dy, edge_order=1))) < 1e-9
    rng = np.random.default_rng(1)
    noise = rng.normal(size=z.shape)
    m0 = gaussian_mean_surface(noise, cutoff, dx, dy)
    m1 = gaussian_mean_surface(noise, cutoff, dx, dy, edge_order=1)
    bx, by = round(cutoff / dx), round(cutoff / dy)
    inner = (slice(by, -by), slice(bx, -bx))
    np.testing.assert_allclose(m1[inner], m0[inner], atol=1e-12)
    assert np.max(np.abs(m1 - m0)) > 1e-3  # they do differ at the borders


def test_fft_path_matches_scipy_gaussian_filter1d() -> None:
    # Reference library: scipy.ndimage.gaussian_filter1d with mode="constant" and the
    # same radius is the direct convolution; the FFT path must reproduce it.
    rng = np.random.default_rng(5)
    a = rng.normal(size=(70, 300))
    sigma, radius = 17.3, 92
    for axis in (0, 1):
        ref = ndimage.gaussian_filter1d(
            a, sigma, axis=axis, mode="constant", cval=0.0, radius=radius
        )
        old = filters._DIRECT_MAX_TAPS
        try:
            filters._DIRECT_MAX_TAPS = 0
            got = filters._filter_axis(a, sigma, radius, axis)
        finally:
            filters._DIRECT_MAX_TAPS = old
        np.testing.assert_allclose(got, ref, atol=1e-12)


def test_interior_matches_scipy_gaussian_filter() -> None:
    # Reference library: away from borders (full kernel, no NaN) the mean surface is
    # scipy.ndimage.gaussian_filter with σ = αλc/√(2π) per axis in pixels.
    rng = np.random.default_rng(9)
    z = rng.normal(size=(120, 140))
    cutoff, dx, dy = 12.0, 0.5, 0.4
    sigma = GAUSSIAN_ALPHA * cutoff / math.sqrt(2 * math.pi)
    rx, ry = round(cutoff / dx), round(cutoff / dy)
    ref = ndimage.gaussian_filter(z, (sigma / dy, sigma / dx), mode="reflect", radius=(ry, rx))
    got = gaussian_mean_surface(z, cutoff, dx, dy)
    inner = (slice(ry, -ry), slice(rx, -rx))
    np.testing.assert_allclose(got[inner], ref[inner], atol=1e-12)


def test_profile_filter_handles_nan_and_stacks() -> None:
    # Normalised convolution: a constant profile with gaps keeps its value (analytic),
    # and each row of a stack is filtered on its own.
    p = np.full(400, -2.5)
    p[100:130] = np.nan
    m = gaussian_profile_filter(p, 50.0, 1.0)
    assert np.nanmax(np.abs(m + 2.5)) < 1e-12
    stack = np.vstack([p, 2 * p])
    ms = gaussian_profile_filter(stack, 50.0, 1.0)
    assert np.nanmax(np.abs(ms[1] + 5.0)) < 1e-12


def test_remove_spikes_finds_planted_spikes() -> None:
    # Planted truth: 25 single-pixel spikes of ±(20–40) σ on a smooth tilted surface
    # with σ = 0.02 µm noise and holes; the local-median/MAD test (common practice)
    # must flag all of them. The local-median residual of Gaussian noise is
    # leptokurtic, so at 5 robust σ a few noise points (measured: ~5e-5 of pure
    # noise, more beside holes) are flagged too; allow 0.1 % of the points.
    rng = np.random.default_rng(3)
    ny, nx = 150, 160
    _y, x = np.mgrid[0:ny, 0:nx].astype(float)
    z = 0.02 * x + 0.5 * np.sin(x / 15.0) + rng.normal(0, 0.02, (ny, nx))
    z[_holes((ny, nx), 4)] = np.nan
    _clean, n_clean = remove_spikes(z)
    assert n_clean <= 1e-3 * z.size
    cand = np.flatnonzero(np.isfinite(z.ravel()))
    idx = rng.choice(cand, 25, replace=False)
    spikes = np.unravel_index(idx, z.shape)
    z[spikes] += rng.choice([-1, 1], 25) * rng.uniform(0.4, 0.8, 25)
    out, n = remove_spikes(z)
    assert np.isnan(out[spikes]).all()
    assert 25 <= n <= 25 + 1e-3 * z.size
    assert np.isnan(out).sum() == np.isnan(z).sum() + n
    # Without holes a pure-noise map loses almost nothing (false-positive rate).
    noise = rng.normal(0, 1.0, (200, 200))
    assert remove_spikes(noise)[1] <= 1e-3 * noise.size


def test_median_network_matches_scipy() -> None:
    # Reference library: scipy.ndimage.median_filter(size=3, mode="nearest"), also
    # with ±inf entries (how remove_spikes marks missing neighbours).
    rng = np.random.default_rng(12)
    a = rng.normal(size=(300, 77))
    a[rng.random(a.shape) < 0.1] = np.inf
    a[rng.random(a.shape) < 0.1] = -np.inf
    ref = ndimage.median_filter(a, size=3, mode="nearest")
    np.testing.assert_array_equal(filters._median_filter(a, 3), ref)
    np.testing.assert_array_equal(
        filters._median_filter(a[:1], 3), ndimage.median_filter(a[:1], size=3, mode="nearest")
    )


def test_condition_surface_order_and_record() -> None:
    # The chain is form removal then L-filter; compare with the two steps applied by hand.
    rng = np.random.default_rng(2)
    y, x = np.mgrid[0:100, 0:120].astype(float)
    z = 5 + 0.1 * x - 0.2 * y + np.sin(x / 4.0) + 0.1 * rng.normal(size=x.shape)
    z[_holes(z.shape, 6)] = np.nan
    res = condition_surface(z, 0.5, 0.5, form="plane", s_filter_um=1.5, l_filter_um=20.0)
    by_hand = l_filter(s_filter(remove_form(z, "plane").residual, 1.5, 0.5, 0.5), 20.0, 0.5, 0.5)
    np.testing.assert_allclose(res.z, by_hand, atol=1e-12, equal_nan=True)
    proc = res.processing
    assert proc["steps"] == ["form", "s_filter", "l_filter"]
    assert proc["l_filter"]["nesting_index_um"] == 20.0
    assert proc["despike"] == {"applied": False}
    json.dumps(res.to_dict())
    res2 = condition_surface(z, 0.5, 0.5, form="poly:3", despike=True)
    assert res2.processing["steps"] == ["despike", "form"]
    assert res2.processing["form"]["order"] == 3
    assert res2.processing["s_filter"] == {"applied": False}
    res3 = condition_surface(z, 0.5, 0.5, l_filter_um=20.0, edge_order=1)
    assert "local plane fit" in res3.processing["l_filter"]["edge_handling"]


@pytest.mark.parametrize(
    "kwargs",
    [
        {"form": "wobbly"},
        {"s_filter_um": 20.0, "l_filter_um": 20.0},  # S must be below L
        {"s_filter_um": 30.0, "l_filter_um": 20.0},
        {"l_filter_um": 0.8},  # shorter than 2 pixels of 0.5
        {"s_filter_um": 1e6},  # longer than the map
        {"l_filter_um": -3.0},
        {"l_filter_um": float("nan")},
        {"l_filter_um": 10.0, "edge_order": 2},
    ],
)
def test_condition_surface_rejects_bad_settings(kwargs: dict) -> None:
    z = np.zeros((40, 50))
    with pytest.raises(FractoInputError):
        condition_surface(z, 0.5, 0.5, **kwargs)


def test_filters_reject_bad_input() -> None:
    with pytest.raises(FractoInputError):
        gaussian_profile_filter(np.zeros(100), 1.0, 1.0)  # < 2 samples
    with pytest.raises(FractoInputError):
        gaussian_mean_surface(np.zeros(10), 5.0, 1.0, 1.0)  # not 2-D
    with pytest.raises(FractoInputError):
        remove_spikes(np.zeros((10, 10)), size=4)
