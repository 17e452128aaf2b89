"""ISO 21920-2 profile parameters."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from fracto.errors import FractoInputError
from fracto.surface.filters import GAUSSIAN_ALPHA
from fracto.surface.profile import (
    PROFILE_PARAMETERS,
    areal_profile_parameters,
    profile_parameters,
)


def _centred_x(n_periods: int, lam: float, dx: float) -> np.ndarray:
    """Sample positions over whole periods, symmetric about the profile centre.

    A profile even about its centre has zero correlation with the centred x, so the
    least-squares reference line of a cosine sampled this way is exactly zero.
    """
    n = round(n_periods * lam / dx)
    return (np.arange(n) - (n - 1) / 2.0) * dx


def test_sinusoid_analytic_values() -> None:
    # Analytic, z = A cos(2πx/λ) over whole periods (z uniform in phase):
    # Ra = 2A/π, Rq = A/√2, Rsk = 0, Rku = 3/2, RSm = λ, Rz = 2A,
    # Rdq = RMS of −(2πA/λ) sin(·) = (2πA/λ)/√2.
    amp, lam, dx = 1.7, 40.0, 0.2
    x = _centred_x(20, lam, dx)
    p = amp * np.cos(2 * math.pi * x / lam)
    r = profile_parameters(p, dx)
    assert set(r) == set(PROFILE_PARAMETERS)
    assert r["Ra"] == pytest.approx(2 * amp / math.pi, rel=1e-4)
    assert r["Rq"] == pytest.approx(amp / math.sqrt(2), rel=1e-4)
    assert r["Rsk"] == pytest.approx(0.0, abs=1e-6)
    assert r["Rku"] == pytest.approx(1.5, rel=1e-4)
    assert r["RSm"] == pytest.approx(lam, rel=1e-6)
    # The samples miss each crest by at most half a step: 1 − cos(πdx/λ) ≈ (πdx/λ)²/2.
    assert r["Rz"] == pytest.approx(2 * amp, rel=(math.pi * dx / lam) ** 2 / 2)
    # The seven-point stencil needs 3 neighbours each side, so the 3 end samples
    # (slope 0 at the crests there) drop out: RMS slope larger by about 6/(2n).
    assert r["Rdq"] == pytest.approx(2 * math.pi * amp / lam / math.sqrt(2), rel=1e-3)
    # On the evaluated samples themselves the stencil is sixth-order accurate
    # (error ∝ (2πdx/λ)⁶/140): compare with the analytic slope at those samples.
    slope = -2 * math.pi * amp / lam * np.sin(2 * math.pi * x[3:-3] / lam)
    assert r["Rdq"] == pytest.approx(math.sqrt(np.mean(slope**2)), rel=1e-8)


def test_triangular_and_sawtooth_waves() -> None:
    # Analytic: a triangular or sawtooth wave of amplitude A has heights uniform on
    # [−A, A]: Ra = A/2, Rq = A/√3, Rsk = 0, Rku = 9/5; RSm = λ; the triangular
    # wave's slope magnitude is 4A/λ everywhere (Rdq = 4A/λ away from the kinks).
    amp, lam, dx = 2.0, 50.0, 0.1
    x = _centred_x(10, lam, dx)
    tri = amp * (2 / math.pi) * np.arcsin(np.cos(2 * math.pi * x / lam))
    r = profile_parameters(tri, dx)
    assert r["Ra"] == pytest.approx(amp / 2, rel=1e-4)
    assert r["Rq"] == pytest.approx(amp / math.sqrt(3), rel=1e-4)
    assert r["Rsk"] == pytest.approx(0.0, abs=1e-6)
    assert r["Rku"] == pytest.approx(1.8, rel=1e-3)
    assert r["RSm"] == pytest.approx(lam, rel=1e-6)
    assert r["Rdq"] == pytest.approx(4 * amp / lam, rel=0.01)  # 7-point stencil blurs kinks
    # Sawtooth: rises linearly over a period then drops; its least-squares line is
    # not zero, so check exactly against heights detrended by numpy.polyfit.
    n = 20000  # 40 periods: the tilt of the least-squares line falls as 1/periods
    xs = np.arange(n) * dx
    saw = amp * (2 * ((xs / lam) % 1.0) - 1.0)
    rs = profile_parameters(saw, dx)
    detr = saw - np.polyval(np.polyfit(xs, saw, 1), xs)
    assert rs["Ra"] == pytest.approx(np.mean(np.abs(detr)), rel=1e-10)
    assert rs["Ra"] == pytest.approx(amp / 2, rel=0.01)
    assert rs["Rq"] == pytest.approx(amp / math.sqrt(3), rel=0.01)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_moments_match_scipy_stats(seed: int) -> None:
    # Reference library: after removing the least-squares line (numpy.polyfit),
    # Ra = mean|z|, Rq = population std, Rsk = scipy.stats.skew, Rku =
    # scipy.stats.kurtosis(fisher=False) — on the valid points only.
    rng = np.random.default_rng(seed)
    n = 3000
    x = np.arange(n) * 0.5
    p = 0.01 * x + rng.gamma(2.0, 1.0, n) + np.sin(x / 7.0)
    p[rng.random(n) < 0.05] = np.nan
    valid = np.isfinite(p)
    fit = np.polyfit(x[valid], p[valid], 1)
    d = p[valid] - np.polyval(fit, x[valid])
    r = profile_parameters(p, 0.5)
    assert r["Ra"] == pytest.approx(np.mean(np.abs(d)), rel=1e-10)
    assert r["Rq"] == pytest.approx(np.std(d), rel=1e-10)
    assert r["Rsk"] == pytest.approx(stats.skew(d), rel=1e-8)
    assert r["Rku"] == pytest.approx(stats.kurtosis(d, fisher=False), rel=1e-8)


def test_rz_is_mean_of_section_heights() -> None:
    # ISO 21920-2 definition: Rz = mean over the sections of (highest peak − lowest
    # valley); build a profile with a known spike per section, zero elsewhere.
    n, dx = 1000, 1.0
    p = np.zeros(n)
    heights = [1.0, 2.0, 3.0, 4.0, 5.0]
    for k, h in enumerate(heights):
        p[k * 200 + 100] = h
        p[k * 200 + 50] = -h / 2
    # keep the least-squares line at zero: mirror the profile (even about the centre)
    p = 0.5 * (p + p[::-1])
    r = profile_parameters(p, dx)
    sections = [p[k * 200 : (k + 1) * 200] for k in range(5)]
    expected = np.mean([s.max() - s.min() for s in sections])
    assert r["Rz"] == pytest.approx(expected, rel=1e-6)


def test_rsm_height_and_width_discrimination() -> None:
    # ISO 4287 discrimination (from memory): parts below 10 % of Rz in height or 1 %
    # of the section length in width are not profile elements. A ripple of 2 % of
    # Rz crossing the mean line adds many small crossings; RSm must stay λ (analytic).
    amp, lam, dx = 1.0, 40.0, 0.05
    x = _centred_x(20, lam, dx)
    base = amp * np.cos(2 * math.pi * x / lam)
    ripple = 0.04 * amp * np.cos(2 * math.pi * x / 0.9)
    with_ripple = profile_parameters(base + ripple, dx)
    assert with_ripple["RSm"] == pytest.approx(lam, rel=0.01)
    # On this 800 µm profile the ripple's half-waves (0.45 µm) are narrower than 1 %
    # of the 160 µm section, so alone it has no profile elements at all ...
    assert math.isnan(profile_parameters(ripple, dx)["RSm"])
    # ... while on a 90 µm profile (section 18 µm, limit 0.18 µm) it is a genuine
    # profile and RSm equals its wavelength.
    short = ripple[np.abs(x) < 45.0]
    assert profile_parameters(short, dx)["RSm"] == pytest.approx(0.9, rel=0.01)


def test_cutoff_roughness_profile_analytic() -> None:
    # ISO 16610-21 mean line with cutoff λc: the roughness profile keeps a sinusoid of
    # wavelength λ with gain 1 − exp(−π(αλc/λ)²) (analytic transmission). A long wave
    # (10 λc) and a short wave (λc/8) of the same amplitude:
    # Rq = √(Σ (A_i (1 − T_i))² / 2).
    cutoff, dx, amp = 80.0, 0.5, 1.0
    x = np.arange(0, 40 * cutoff, dx)
    lam_long, lam_short = 10 * cutoff, cutoff / 8
    p = amp * np.sin(2 * math.pi * x / lam_long) + amp * np.sin(2 * math.pi * x / lam_short)
    r = profile_parameters(p, dx, cutoff_um=cutoff)

    def gain(lam: float) -> float:
        return 1.0 - math.exp(-math.pi * (GAUSSIAN_ALPHA * cutoff / lam) ** 2)

    expected = math.sqrt(((amp * gain(lam_long)) ** 2 + (amp * gain(lam_short)) ** 2) / 2)
    assert r["Rq"] == pytest.approx(expected, rel=0.01)
    assert r["RSm"] == pytest.approx(lam_short, rel=0.01)
    no_filter = profile_parameters(p, dx)
    # Without the filter the long wave adds its A/√2 in quadrature: Rq ≈ 1, not 0.71.
    assert no_filter["Rq"] == pytest.approx(1.0, rel=0.02)


def test_nan_gap_and_too_few_points() -> None:
    # Analytic sinusoid values survive a gap of non-measured points (a whole number of
    # periods removed keeps the height distribution uniform in phase).
    amp, lam, dx = 1.0, 20.0, 0.1
    x = _centred_x(30, lam, dx)
    p = amp * np.cos(2 * math.pi * x / lam)
    gap = (x > -2 * lam) & (x <= 2 * lam)
    p[gap] = np.nan
    r = profile_parameters(p, dx)
    assert r["Rq"] == pytest.approx(amp / math.sqrt(2), rel=1e-3)
    assert r["RSm"] == pytest.approx(lam, rel=1e-4)
    # 12 zero-slope samples at the gap and profile ends leave the stencil (see above).
    assert r["Rdq"] == pytest.approx(2 * math.pi * amp / lam / math.sqrt(2), rel=3e-3)
    few = np.full(100, np.nan)
    few[:5] = 1.0
    assert all(math.isnan(v) for v in profile_parameters(few, 1.0).values())


def test_areal_directions() -> None:
    # Analytic: z = A cos(2πx/λ), constant along y. Rows ("x") give the sinusoid
    # values; columns ("y") are flat (Rq = 0); angle 0 reproduces "x" exactly
    # (samples fall on the grid) and angle 90 reproduces "y".
    amp, lam, dx, dy = 0.8, 16.0, 0.25, 0.4
    x = _centred_x(8, lam, dx)
    z = np.tile(amp * np.cos(2 * math.pi * x / lam), (50, 1))
    rx = areal_profile_parameters(z, dx, dy, direction="x")
    # 64 samples per period: the mean of |cos| over samples is within ~1e-3 of 2/π.
    assert rx["Ra"] == pytest.approx(2 * amp / math.pi, rel=1e-3)
    assert rx["RSm"] == pytest.approx(lam, rel=1e-6)
    ry = areal_profile_parameters(z, dx, dy, direction="y")
    assert ry["Rq"] == pytest.approx(0.0, abs=1e-12)
    r0 = areal_profile_parameters(z, dx, dy, direction=0.0)
    for k in ("Ra", "Rq", "Rz", "Rku", "RSm", "Rdq"):
        assert r0[k] == pytest.approx(rx[k], rel=1e-9)


def test_areal_along_an_angle() -> None:
    # Analytic: a plane wave of wavelength λ travelling at 30° from x. Profiles along
    # 30° see the full sinusoid (RSm = λ, Rq → A/√2); profiles along 120° are flat.
    amp, lam, h = 1.0, 12.0, 0.25
    ny, nx = 240, 240
    yy, xx = np.mgrid[0:ny, 0:nx] * h
    th = math.radians(30.0)
    z = amp * np.sin(2 * math.pi * (xx * math.cos(th) + yy * math.sin(th)) / lam)
    along = areal_profile_parameters(z, h, h, direction=30.0)
    assert along["RSm"] == pytest.approx(lam, rel=0.01)
    assert along["Rq"] == pytest.approx(amp / math.sqrt(2), rel=0.03)
    across = areal_profile_parameters(z, h, h, direction="120")
    assert across["Rq"] < 0.01 * amp


def test_areal_matches_rows_with_nan() -> None:
    # The vectorised row path agrees with profile_parameters row by row (weights are
    # the evaluated lengths, here equal where a row is complete).
    rng = np.random.default_rng(4)
    z = rng.normal(size=(12, 400)).cumsum(axis=1)
    rows = [profile_parameters(row, 0.5) for row in z]
    mean = {k: np.mean([r[k] for r in rows]) for k in PROFILE_PARAMETERS}
    got = areal_profile_parameters(z, 0.5, 0.5, direction="x")
    for k in PROFILE_PARAMETERS:
        assert got[k] == pytest.approx(mean[k], rel=1e-10)


@pytest.mark.parametrize(
    "call",
    [
        lambda: profile_parameters(np.zeros((3, 3)), 1.0),
        lambda: profile_parameters(np.zeros(100), -1.0),
        lambda: profile_parameters(np.zeros(100), 1.0, n_sampling=0),
        lambda: profile_parameters(np.zeros(100), 1.0, cutoff_um=1.0),  # < 2 samples
        lambda: areal_profile_parameters(np.zeros((10, 10)), 1.0, 1.0, direction="z"),
        lambda: areal_profile_parameters(np.zeros(10), 1.0, 1.0),
    ],
)
def test_bad_inputs(call) -> None:
    with pytest.raises(FractoInputError):
        call()
