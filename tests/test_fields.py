"""Checks of the seeded random-field generators against their analytic definitions."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fracto.errors import FractoInputError
from fracto.synth.fields import gaussian_correlated_field, self_affine_field


def _circular_acf(z: np.ndarray) -> np.ndarray:
    """Normalised circular autocorrelation by the Wiener-Khinchin theorem (numpy.fft).

    The generators make periodic fields, so the circular estimate is the
    natural unbiased one.
    """
    f = np.fft.fft2(z - z.mean())
    acf = np.fft.ifft2(np.abs(f) ** 2).real
    return acf / acf[0, 0]


def test_gaussian_field_acf_is_exp_minus_r2_over_tau2():
    # Analytic: ACF(r) = exp(-(r/tau)^2), so exp(-1/4), exp(-1), exp(-4) at r = tau/2, tau, 2 tau.
    # Sampling error of a sample ACF (leading term of Bartlett's formula, in 2-D; the other
    # terms only lower it): var ≲ (1/N²)·Σ_m ρ(m)² ≈ (π τ²/2)/N² (the sum of exp(-2 r²/τ²)
    # over the lattice), i.e. σ ≲ 0.0098 for N = 1024, τ = 8 px. A 0.04 tolerance is ≳ 4σ.
    tau = 8.0
    z = gaussian_correlated_field((1024, 1024), tau, 1.0, 1.0, rms_um=2.0, seed=3)
    acf = _circular_acf(z)
    for lag, expected in ((4, math.exp(-0.25)), (8, math.exp(-1.0)), (16, math.exp(-4.0))):
        measured = 0.5 * (acf[0, lag] + acf[lag, 0])
        assert measured == pytest.approx(expected, abs=0.04)


def test_gaussian_field_rms_mean_dtype_and_seed():
    # Output contract (docstring): float64, mean 0, sample RMS = rms_um; same seed, same map.
    a = gaussian_correlated_field((64, 96), 4.0, 0.5, 0.5, rms_um=0.7, seed=11)
    b = gaussian_correlated_field((64, 96), 4.0, 0.5, 0.5, rms_um=0.7, seed=11)
    c = gaussian_correlated_field((64, 96), 4.0, 0.5, 0.5, rms_um=0.7, seed=12)
    assert a.dtype == np.float64 and a.shape == (64, 96)
    assert abs(a.mean()) < 1e-12
    assert math.sqrt(np.mean(a * a)) == pytest.approx(0.7, rel=1e-12)
    assert np.array_equal(a, b)
    assert not np.allclose(a, c)


def test_gaussian_field_anisotropic_and_rotated_acf():
    # Analytic: ACF = exp(-(u/τx)² - (v/τy)²); with τx = 6, τy = 12 the ACF is e^-1 at 6 px
    # along x and at 12 px along y; rotated by 90°, the axes swap. Tolerance as above
    # (σ ≲ √(π·τx·τy/2)/N ≈ 0.010 for τx·τy = 72 px², N = 1024; 0.05 ≈ 5σ).
    z = gaussian_correlated_field((1024, 1024), 6.0, 1.0, 1.0, anisotropy=2.0, seed=5)
    acf = _circular_acf(z)
    assert acf[0, 6] == pytest.approx(math.exp(-1), abs=0.05)
    assert acf[12, 0] == pytest.approx(math.exp(-1), abs=0.05)
    assert acf[6, 0] == pytest.approx(math.exp(-0.25), abs=0.05)  # 6 px along y: (6/12)² = 1/4
    zr = gaussian_correlated_field(
        (1024, 1024), 6.0, 1.0, 1.0, anisotropy=2.0, angle_deg=90.0, seed=5
    )
    acfr = _circular_acf(zr)
    assert acfr[6, 0] == pytest.approx(math.exp(-1), abs=0.05)
    assert acfr[0, 12] == pytest.approx(math.exp(-1), abs=0.05)


def test_gaussian_field_physical_units():
    # Correlation length in µm, not pixels: τ = 2 µm at dx = 0.25 µm is 8 px (analytic ACF).
    # σ ≲ √(π·64/2)/512 ≈ 0.020 (as above); 0.06 ≈ 3σ.
    z = gaussian_correlated_field((512, 512), 2.0, 0.25, 0.25, seed=1)
    acf = _circular_acf(z)
    assert 0.5 * (acf[0, 8] + acf[8, 0]) == pytest.approx(math.exp(-1), abs=0.06)


def _psd_and_q(z: np.ndarray, dx: float, dy: float) -> tuple[np.ndarray, np.ndarray]:
    """Periodogram |FFT|² and |q| (rad/µm) on the full numpy FFT grid."""
    p = np.abs(np.fft.fft2(z)) ** 2
    qy = 2 * np.pi * np.fft.fftfreq(z.shape[0], d=dy)
    qx = 2 * np.pi * np.fft.fftfreq(z.shape[1], d=dx)
    return p, np.hypot(qy[:, None], qx[None, :])


@pytest.mark.parametrize("hurst", [0.3, 0.5, 0.8])
def test_self_affine_psd_slope_is_minus_2_1_plus_h(hurst):
    # Voss (1988): areal PSD C(q) ∝ q^(-2(1+H)). The generator sets deterministic amplitudes, so
    # the periodogram (computed independently here with numpy.fft) lies on the power law and the
    # slope is exact up to rounding: tolerance 1e-6.
    z = self_affine_field((128, 192), hurst, 0.5, 0.8, seed=2)
    p, q = _psd_and_q(z, 0.5, 0.8)
    ok = (q > 0) & (p > 1e-30 * p.max())
    slope = np.polyfit(np.log(q[ok]), np.log(p[ok]), 1)[0]
    assert slope == pytest.approx(-2.0 * (1.0 + hurst), abs=1e-6)
    assert z.dtype == np.float64
    assert math.sqrt(np.mean(z * z)) == pytest.approx(1.0, rel=1e-12)


def test_self_affine_roll_off_and_cutoff():
    # Definition (Persson et al. 2005): flat PSD below the roll-off, zero below the cutoff.
    dx = 1.0
    q_r, q_c = 2 * np.pi / 32.0, 2 * np.pi / 100.0
    z = self_affine_field((256, 256), 0.7, dx, dx, seed=4, q_roll_off=q_r, q_low_cutoff=q_c)
    p, q = _psd_and_q(z, dx, dx)
    flat = (q >= q_c) & (q < q_r)
    assert np.ptp(p[flat]) <= 1e-8 * p[flat].max()
    assert np.all(p[(q > 0) & (q < q_c)] <= 1e-20 * p.max())
    above = q >= q_r
    slope = np.polyfit(np.log(q[above]), np.log(p[above]), 1)[0]
    assert slope == pytest.approx(-2 * 1.7, abs=1e-6)


@pytest.mark.parametrize(
    "call",
    [
        lambda: gaussian_correlated_field((1, 10), 1.0, 1.0, 1.0),
        lambda: gaussian_correlated_field((10, 10), -1.0, 1.0, 1.0),
        lambda: gaussian_correlated_field((10, 10), 1.0, 0.0, 1.0),
        lambda: gaussian_correlated_field((10, 10), 1.0, 1.0, 1.0, anisotropy=0.0),
        lambda: self_affine_field((10, 10), 1.5, 1.0, 1.0),
        lambda: self_affine_field((10, 10), 0.5, 1.0, 1.0, q_roll_off=-1.0),
        lambda: self_affine_field((10, 10), 0.5, 1.0, 1.0, q_low_cutoff=1e9),
    ],
)
def test_bad_input_raises_one_sentence(call):
    with pytest.raises(FractoInputError):
        call()
