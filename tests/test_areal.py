"""Tests of fracto.surface.areal against analytic results, standards and scipy/numpy."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.fft as sfft
from scipy import integrate, special, stats

from fracto.errors import FractoInputError
from fracto.surface.areal import (
    MaterialRatioCurve,
    gradient_parameters,
    height_parameters,
    material_ratio_curve,
    material_ratio_parameters,
    sk_parameters,
    spatial_parameters,
)


def sinusoid(amplitude: float, wavelength: float, dx: float, periods: int, ny: int = 8):
    x = np.arange(round(periods * wavelength / dx)) * dx
    row = amplitude * np.sin(2 * np.pi * x / wavelength)
    return np.tile(row, (ny, 1))


def gaussian_field(shape, tau_y, tau_x, seed, angle_deg=0.0):
    """Gaussian random field with ACF exp(-(u/tau_x)^2 - (v/tau_y)^2), (u, v) the axes
    turned by `angle_deg` from x towards +y.

    Derivation: white noise filtered by the kernel exp(-u²/(2σu²) - v²/(2σv²)) has the
    ACF of the kernel with itself, exp(-u²/(4σu²) - v²/(4σv²)); σ = τ/2 gives exp(-(u/τ)²).
    The kernel is applied as a circular convolution (FFT), so the field is periodic and
    stationary.
    """
    rng = np.random.default_rng(seed)
    ny, nx = shape
    noise = rng.standard_normal(shape)
    yy = np.fft.fftfreq(ny) * ny
    xx = np.fft.fftfreq(nx) * nx
    y, x = np.meshgrid(yy, xx, indexing="ij")
    a = math.radians(angle_deg)
    u = x * math.cos(a) + y * math.sin(a)
    v = -x * math.sin(a) + y * math.cos(a)
    su, sv = tau_x / 2.0, tau_y / 2.0
    kernel = np.exp(-(u**2) / (2 * su**2) - v**2 / (2 * sv**2))
    z = sfft.irfft2(sfft.rfft2(noise) * sfft.rfft2(kernel), s=shape)
    return z / z.std()


# --------------------------------------------------------------------------- height
def test_height_parameters_sinusoid_analytic():
    # Analytic, z = A sin(2πx/λ) over whole periods (REFERENCES.md):
    # Sa = 2A/π, Sq = A/√2, Ssk = 0, Sku = 3/2 (E sin⁴ / (E sin²)² = (3/8)/(1/4)), Sp = Sv = A.
    a = 1.7
    z = sinusoid(a, wavelength=64.0, dx=1.0, periods=5)
    p = height_parameters(z)
    # sampled mean of |sin| differs from 2/π by O((π/N)²) (N = 64 samples per period);
    # the moments of sin² and sin⁴ are exact on whole sampled periods.
    assert p["Sa"] == pytest.approx(2 * a / np.pi, rel=2e-3)
    assert p["Sq"] == pytest.approx(a / np.sqrt(2), rel=1e-9)
    assert p["Ssk"] == pytest.approx(0.0, abs=1e-9)
    assert p["Sku"] == pytest.approx(1.5, rel=1e-9)
    assert p["Sp"] == pytest.approx(a, rel=1e-12)
    assert p["Sv"] == pytest.approx(a, rel=1e-12)
    assert p["Sv"] > 0  # ISO 25178-2: Sv is the absolute value of the lowest height
    assert p["Sz"] == pytest.approx(2 * a, rel=1e-12)


def test_height_parameters_egg_box_analytic():
    # Analytic, z = A sin(kx) sin(ky) over whole periods: the factors are independent,
    # so E|z| = A (2/π)², E z² = A²/4, E z⁴ = A⁴ (3/8)² → Sa = 4A/π², Sq = A/2,
    # Sku = (9/64)/(1/16) = 9/4, Ssk = 0.
    a, lam = 0.8, 64
    t = np.arange(3 * lam) * 2 * np.pi / lam
    z = a * np.outer(np.sin(t), np.sin(t))
    p = height_parameters(z)
    assert p["Sa"] == pytest.approx(4 * a / np.pi**2, rel=3e-3)  # O((π/N)²) sampling
    assert p["Sq"] == pytest.approx(a / 2, rel=1e-9)
    assert p["Ssk"] == pytest.approx(0.0, abs=1e-9)
    assert p["Sku"] == pytest.approx(9 / 4, rel=1e-9)


def test_height_moments_match_scipy_with_nans():
    # Reference library: scipy.stats.skew / kurtosis(fisher=False) (population moments,
    # as ISO 25178-2 defines Ssk and Sku) and numpy on the valid points.
    rng = np.random.default_rng(7)
    z = rng.gamma(2.0, 1.5, size=(120, 90)) + 40.0
    z[rng.random(z.shape) < 0.1] = np.nan
    z[10:30, 20:50] = np.nan
    v = z[~np.isnan(z)]
    d = v - v.mean()
    p = height_parameters(z)
    assert p["Sa"] == pytest.approx(np.mean(np.abs(d)), rel=1e-12)
    assert p["Sq"] == pytest.approx(np.std(v), rel=1e-12)
    assert p["Ssk"] == pytest.approx(stats.skew(v), rel=1e-10)
    assert p["Sku"] == pytest.approx(stats.kurtosis(v, fisher=False), rel=1e-10)
    assert p["Sp"] == pytest.approx(d.max(), rel=1e-12)
    assert p["Sv"] == pytest.approx(-d.min(), rel=1e-12)


def test_tilted_plane_after_plane_removal_is_flat():
    # Analytic (REFERENCES.md): a tilted plane has all height parameters 0 after
    # least-squares plane removal (done here with numpy.linalg.lstsq).
    y, x = np.mgrid[0:50, 0:70].astype(float)
    z = 0.3 * x - 0.7 * y + 4.0
    a = np.c_[x.ravel(), y.ravel(), np.ones(x.size)]
    coef, *_ = np.linalg.lstsq(a, z.ravel(), rcond=None)
    res = z - (a @ coef).reshape(z.shape)
    p = height_parameters(res)
    for k in ("Sa", "Sq", "Sp", "Sv", "Sz"):
        assert abs(p[k]) < 1e-9


def test_bad_input_raises_one_sentence_errors():
    with pytest.raises(FractoInputError):
        height_parameters(np.zeros(10))
    with pytest.raises(FractoInputError):
        height_parameters(np.full((4, 4), np.nan))
    with pytest.raises(FractoInputError):
        height_parameters(np.array([[0.0, np.inf], [1.0, 2.0]]))
    with pytest.raises(FractoInputError):
        gradient_parameters(np.zeros((4, 4)), 0.0, 1.0)
    with pytest.raises(FractoInputError):
        spatial_parameters(np.zeros((8, 8)), 1.0, 1.0, s=1.5)
    with pytest.raises(FractoInputError):
        material_ratio_parameters(np.zeros((4, 4)), p=10.0)  # percent instead of fraction


# --------------------------------------------------------------------------- gradient
@pytest.mark.parametrize("samples_per_wavelength", [32, 64])
def test_gradient_parameters_sinusoid_analytic(samples_per_wavelength):
    # Analytic (REFERENCES.md): Sdq = (2πA/λ)/√2 and
    # Sdr = (2/π)·√(1+k²)·E(k²/(1+k²)) − 1, k = 2πA/λ, E = scipy.special.ellipe(m).
    a, lam = 2.0, 16.0
    dx = lam / samples_per_wavelength
    z = sinusoid(a, lam, dx, periods=6)
    k = 2 * np.pi * a / lam
    sdr = 100 * ((2 / np.pi) * np.sqrt(1 + k**2) * special.ellipe(k**2 / (1 + k**2)) - 1)
    p = gradient_parameters(z, dx, dx)
    assert p["Sdq"] == pytest.approx(k / np.sqrt(2), rel=0.01)
    assert p["Sdr"] == pytest.approx(sdr, rel=0.01)


def test_gradient_parameters_egg_box_vs_numerical_integral():
    # Reference: ISO 25178-2 definition Sdr = (1/A)∫∫(√(1+zx²+zy²) − 1) dA evaluated for
    # the continuous surface with scipy.integrate.dblquad; Sdq analytic = A k/√2
    # (E zx² = A²k²/4, same for zy).
    a, lam = 1.0, 12.0
    n = 64  # samples per wavelength
    k = 2 * np.pi / lam
    t = np.arange(2 * n) * lam / n
    z = a * np.outer(np.sin(k * t), np.sin(k * t))

    def integrand(y, x):
        zx = a * k * np.cos(k * x) * np.sin(k * y)
        zy = a * k * np.sin(k * x) * np.cos(k * y)
        return np.sqrt(1 + zx**2 + zy**2)

    val, _ = integrate.dblquad(integrand, 0, lam, 0, lam, epsabs=1e-10)
    sdr = 100 * (val / lam**2 - 1)
    p = gradient_parameters(z, lam / n, lam / n)
    assert p["Sdq"] == pytest.approx(a * k / np.sqrt(2), rel=0.01)
    assert p["Sdr"] == pytest.approx(sdr, rel=0.01)


def test_gradient_parameters_plane_exact_with_nan_hole():
    # Analytic: a plane z = a x + b y has area ratio √(1+a²+b²) everywhere and RMS
    # gradient √(a²+b²); cells touching a NaN are left out.
    y, x = np.mgrid[0:40, 0:60].astype(float)
    dx, dy = 0.5, 0.25
    ga, gb = 0.4, -1.3
    z = ga * x * dx + gb * y * dy
    z[5:12, 30:41] = np.nan
    p = gradient_parameters(z, dx, dy)
    assert p["Sdq"] == pytest.approx(np.hypot(ga, gb), rel=1e-12)
    assert p["Sdr"] == pytest.approx(100 * (np.sqrt(1 + ga**2 + gb**2) - 1), rel=1e-12)


# --------------------------------------------------------------------------- spatial
def test_spatial_parameters_isotropic_gaussian_field():
    # Analytic (REFERENCES.md): ACF exp(-(r/τ)²) falls to s = 0.2 at r = τ√(ln 5);
    # isotropic → Str → 1; Gaussian heights → Ssk → 0, Sku → 3.
    # Sampling error: about N²/(πτ²/2) ≈ 10⁴ independent values for 1024², τ = 8, so the
    # standard errors are ≈ √(6/10⁴) = 0.025 (Ssk) and √(24/10⁴) = 0.05 (Sku); the
    # tolerances are four of those. The ACF error at r ≈ 10 px is a few per cent of s,
    # the minimum over directions biases Sal low by ~1–2 %: 5 % allowed.
    tau = 8.0
    z = gaussian_field((1024, 1024), tau, tau, seed=11)
    sp = spatial_parameters(z, 1.0, 1.0)
    assert sp["Sal"] == pytest.approx(tau * np.sqrt(np.log(5)), rel=0.05)
    assert sp["Str"] > 0.85
    hp = height_parameters(z)
    assert abs(hp["Ssk"]) < 0.1
    assert hp["Sku"] == pytest.approx(3.0, abs=0.2)


def test_spatial_parameters_calibrated_and_rectangular_pixels():
    # Analytic as above, in µm with dx ≠ dy: the same field sampled at (0.5, 0.25) µm with
    # correlation lengths 4 µm in both directions (16 px along y, 8 px along x).
    z = gaussian_field((768, 512), tau_y=16.0, tau_x=8.0, seed=5)
    sp = spatial_parameters(z, 0.5, 0.25)
    assert sp["Sal"] == pytest.approx(4.0 * np.sqrt(np.log(5)), rel=0.05)
    assert sp["Str"] > 0.85


@pytest.mark.parametrize("angle", [0.0, 30.0, 90.0, 135.0])
def test_spatial_parameters_anisotropic_field(angle):
    # Analytic: ACF exp(-(u/τl)² - (v/τs)²) with the long axis u at `angle`: decay distances
    # τs√ln5 (across) and τl√ln5 (along), so Str = τs/τl; the lay runs along u, so
    # Std = angle (our convention: from +x towards +y, lay direction). The periodogram of
    # one map scatters the angular spectrum's maximum by ~1–2° here (seen over seeds).
    tau_s, tau_l = 5.0, 15.0
    z = gaussian_field((1024, 1024), tau_s, tau_l, seed=3, angle_deg=angle)
    sp = spatial_parameters(z, 1.0, 1.0)
    assert sp["Sal"] == pytest.approx(tau_s * np.sqrt(np.log(5)), rel=0.06)
    assert sp["Str"] == pytest.approx(tau_s / tau_l, rel=0.12)
    diff = (sp["Std"] - angle + 90.0) % 180.0 - 90.0
    assert abs(diff) < 4.0


def test_spatial_parameters_grooves_never_decay_along_lay():
    # Analytic: z = sin(2πy/λ) (grooves along x) has ACF cos(2π t_y/λ), constant along x:
    # it never decays along x (capped at the ray end, Str small), falls to 0.2 across
    # the grooves at t_y = λ·arccos(0.2)/(2π); the lay is along x, Std = 0°.
    lam = 40.0
    y = np.arange(400)
    z = np.tile(np.sin(2 * np.pi * y / lam)[:, None], (1, 300))
    sp = spatial_parameters(z, 1.0, 1.0)
    assert sp["Sal"] == pytest.approx(lam * np.arccos(0.2) / (2 * np.pi), rel=0.02)
    assert sp["Str"] < 0.2
    diff = (sp["Std"] + 90.0) % 180.0 - 90.0
    assert abs(diff) < 1.0


def test_spatial_parameters_nan_hole_keeps_sal():
    # Definition (overlap-normalised ACF, ISO 25178-2 §4.2 with missing points excluded):
    # a map whose right part is missing gives the same ACF near the origin as the
    # valid part alone, hence the same Sal.
    z = gaussian_field((512, 512), 6.0, 6.0, seed=9)
    left = z[:, :300].copy()
    holed = z.copy()
    holed[:, 300:] = np.nan
    a = spatial_parameters(left, 1.0, 1.0)
    b = spatial_parameters(holed, 1.0, 1.0)
    assert b["Sal"] == pytest.approx(a["Sal"], rel=1e-3)


# --------------------------------------------------------------------------- material ratio
def uniform_map(a: float, shape=(512, 512), seed=0):
    """Heights exactly uniformly spread over [-a, a] (z_i = a(1 - 2u_i), u_i = (i-½)/n),
    shuffled into a map."""
    n = shape[0] * shape[1]
    u = (np.arange(1, n + 1) - 0.5) / n
    z = a * (1 - 2 * u)
    np.random.default_rng(seed).shuffle(z)
    return z.reshape(shape)


def test_material_ratio_uniform_distribution_closed_forms():
    # Analytic, heights uniform on [-A, A] (mean 0): Smc(q) = A(1 − 2q), Smr(c) = (A − c)/2A.
    # Vm(p) = ∫₀^p (Smc(q) − Smc(p)) dq = ∫₀^p 2A(p − q) dq = A p²;
    # Vv(p) = ∫_p^1 (Smc(p) − Smc(q)) dq = A (1 − p)².
    # Defaults p = 10 %, q = 80 % (ISO 25178-3, from memory): Vmp = 0.01A, Vmc = 0.63A,
    # Vvc = 0.77A, Vvv = 0.04A; Sxp = Smc(2.5 %) − Smc(50 %) = 0.95A.
    a = 3.0
    z = uniform_map(a)
    curve = material_ratio_curve(z)
    assert curve.smr(1.2) == pytest.approx(100 * (a - 1.2) / (2 * a), abs=1e-3)
    assert curve.smc(0.3) == pytest.approx(a * (1 - 0.6), abs=1e-4)
    for p in (0.05, 0.1, 0.37, 0.8):
        assert curve.vm(p) == pytest.approx(a * p**2, rel=1e-4)
        assert curve.vv(p) == pytest.approx(a * (1 - p) ** 2, rel=1e-4)
    mp = material_ratio_parameters(curve, c=1.2, mr=0.3)
    assert mp["Smr"] == pytest.approx(100 * (a - 1.2) / (2 * a), abs=1e-3)
    assert mp["Smc"] == pytest.approx(0.4 * a, abs=1e-4)
    assert mp["Sxp"] == pytest.approx(0.95 * a, rel=1e-4)
    assert mp["Vmp"] == pytest.approx(0.01 * a, rel=1e-3)
    assert mp["Vmc"] == pytest.approx(0.63 * a, rel=1e-4)
    assert mp["Vvc"] == pytest.approx(0.77 * a, rel=1e-4)
    assert mp["Vvv"] == pytest.approx(0.04 * a, rel=1e-4)
    # ISO 13565-2 on a linear curve: the secant is the curve itself, the core spans
    # everything: Sk = 2A, Spk = Svk = 0, Smr1 = 0 %, Smr2 = 100 %.
    sk = sk_parameters(curve)
    assert sk["Sk"] == pytest.approx(2 * a, rel=1e-3)
    assert sk["Spk"] == pytest.approx(0.0, abs=1e-3)
    assert sk["Svk"] == pytest.approx(0.0, abs=1e-3)
    assert sk["Smr1"] == pytest.approx(0.0, abs=0.05)
    assert sk["Smr2"] == pytest.approx(100.0, abs=0.05)


def test_material_ratio_sinusoid_arccos():
    # Analytic: for z = A sin(2πx/λ) over whole periods the share of the length at or above
    # c is arccos(c/A)/π (REFERENCES.md family of sinusoid checks).
    a = 1.0
    z = sinusoid(a, wavelength=1000.0, dx=1.0, periods=4, ny=2)
    curve = material_ratio_curve(z)
    for c in (-0.9, -0.3, 0.0, 0.5, 0.8):
        assert curve.smr(c) == pytest.approx(100 * np.arccos(c / a) / np.pi, abs=0.15)


def test_volume_parameters_vs_numeric_integral_and_identity():
    # Reference library: Vm(p) = ∫₀^p (Smc(q) − Smc(p)) dq with Smc from numpy.quantile on a
    # fine grid and scipy.integrate.trapezoid. Identity (not built in: Vm and Vv come from
    # separate sums): Vv(p) − Vm(p) = ∫₀¹(Smc(p) − Smc(q)) dq = Smc(p) − mean = Smc(p).
    rng = np.random.default_rng(4)
    z = rng.gamma(1.5, 1.0, size=(300, 200))
    z[rng.random(z.shape) < 0.05] = np.nan
    v = z[~np.isnan(z)]
    v = v - v.mean()
    curve = material_ratio_curve(z)
    for p in (0.1, 0.5, 0.8):
        q = np.linspace(0, p, 20001)
        smc_q = np.quantile(v, 1 - q)
        smc_p = np.quantile(v, 1 - p)
        vm_ref = integrate.trapezoid(smc_q - smc_p, q)
        assert curve.vm(p) == pytest.approx(vm_ref, rel=2e-3)
        assert curve.vv(p) - curve.vm(p) == pytest.approx(curve.smc(p), abs=1e-5)


def trapezoid_curve_map(n_side=512, a=0.1, b=0.85, h1=5.0, c1=1.0, c2=-1.0, h2=-6.0, seed=1):
    """Heights whose material ratio curve Smc(q) is piecewise linear:
    h1 → c1 on [0, a], c1 → c2 on [a, b], c2 → h2 on [b, 1]."""
    n = n_side * n_side
    u = (np.arange(1, n + 1) - 0.5) / n
    z = np.interp(u, [0, a, b, 1], [h1, c1, c2, h2])
    np.random.default_rng(seed).shuffle(z)
    return z.reshape(n_side, n_side)


def test_sk_parameters_trapezoidal_curve_by_hand():
    # ISO 13565-2 construction done by hand on a piecewise-linear curve (derivation):
    # core slope s = (c1 − c2)/(b − a) = 2/0.75; every 40 % window inside the core has
    # this least gradient (the outer segments are 15× steeper), so the equivalent line is
    # L(q) = c1 − s(q − a): L(0) = c1 + s·a = 1.26667, L(1) = c2 − s(1 − b) = −1.4,
    # Sk = L(0) − L(1) = s = 2.66667.
    # Smr1: h1 − (h1 − c1) q/a = L(0) → q = a(h1 − L(0))/(h1 − c1) = 0.093333.
    # Smr2: c2 − (c2 − h2)(q − b)/(1 − b) = L(1) → q = b + (1 − b)(c2 − L(1))/(c2 − h2) = 0.862.
    # Peak area above L(0) is the triangle ½·Smr1·(h1 − L(0)), so Spk = 2A1/Smr1 =
    # h1 − L(0) = 3.73333; likewise Svk = L(1) − h2 = 4.6. (Differences: mean-independent.)
    z = trapezoid_curve_map()
    sk = sk_parameters(z)
    s = 2 / 0.75
    assert sk["Sk"] == pytest.approx(s, rel=1e-3)
    assert sk["Spk"] == pytest.approx(5.0 - (1 + 0.1 * s), rel=1e-3)
    assert sk["Svk"] == pytest.approx((-1 - 0.15 * s) + 6.0, rel=1e-3)
    assert sk["Smr1"] == pytest.approx(100 * 0.1 * (5 - (1 + 0.1 * s)) / 4, abs=0.02)
    assert sk["Smr2"] == pytest.approx(100 * (0.85 + 0.15 * 0.4 / 5), abs=0.02)


def test_material_ratio_curve_reused_and_nan_hole_equal_to_valid_part():
    # Definition: the material ratio family depends only on the multiset of valid heights,
    # so a map with a NaN hole equals its valid values in any arrangement.
    rng = np.random.default_rng(2)
    z = rng.normal(size=(200, 150)) ** 3
    z[50:120, 40:90] = np.nan
    valid = z[~np.isnan(z)]
    k = valid.size
    # the valid part alone, as a 1 × k map padded to 2 rows by repeating it
    alone = np.vstack([valid, valid])
    a = material_ratio_parameters(z, c=0.3)
    b = material_ratio_parameters(alone, c=0.3)
    for key in a:
        assert a[key] == pytest.approx(b[key], rel=1e-6, abs=1e-9), key
    assert sk_parameters(z) == pytest.approx(sk_parameters(alone), rel=1e-6)
    ha = height_parameters(z)
    hb = height_parameters(alone)
    for key in ha:
        assert ha[key] == pytest.approx(hb[key], rel=1e-9), key
    curve = material_ratio_curve(z)
    assert isinstance(curve, MaterialRatioCurve)
    assert curve.n == k
    assert material_ratio_parameters(curve, c=0.3) == a


def test_nan_right_half_equals_left_part_for_gradients():
    # Definition: cells with a missing corner are excluded, so a map whose right part is
    # NaN gives the gradients of its left part alone.
    z = gaussian_field((128, 128), 5.0, 5.0, seed=1)
    holed = z.copy()
    holed[:, 70:] = np.nan
    assert gradient_parameters(holed, 0.5, 0.5) == pytest.approx(
        gradient_parameters(z[:, :70], 0.5, 0.5), rel=1e-12
    )


def test_degenerate_maps_give_nan_not_warnings():
    # Definitions: a flat map has Sq = 0, so Ssk, Sku (divided by Sq³, Sq⁴) and the
    # normalised ACF (divided by its value at lag 0) are undefined → NaN, with no warning.
    import warnings

    from fracto.surface.areal import areal_parameters

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        flat = areal_parameters(np.full((6, 7), 2.5), 1.0, 1.0, features=False)
        tiny = areal_parameters(np.arange(6.0).reshape(2, 3), 1.0, 1.0, features=False)
    assert flat["Sq"] == 0.0 and flat["Sv"] == 0.0
    assert np.isnan(flat["Ssk"]) and np.isnan(flat["Sku"]) and np.isnan(flat["Sal"])
    assert np.isnan(tiny["Sal"]) and np.isnan(tiny["Str"])
