"""Fractography ratios RL and RS against analytic values and published ratios."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import ellipe

from fracto.errors import FractoInputError
from fracto.surface.ratios import (
    fractography_ratios,
    pickens_gurland_rs,
    profile_length_ratio,
    profile_length_ratio_mean,
    surface_area_ratio,
    triangulated_area,
)
from fracto.synth.fields import gaussian_correlated_field


def _plane(shape, dx, dy, tilt_deg, azimuth_deg):
    """Plane of tilt θ whose dip (steepest descent direction) lies at the given azimuth."""
    ny, nx = shape
    y = np.arange(ny)[:, None] * dy
    x = np.arange(nx)[None, :] * dx
    a = math.radians(azimuth_deg)
    return math.tan(math.radians(tilt_deg)) * (x * math.cos(a) + y * math.sin(a))


@pytest.mark.parametrize("tilt", [10.0, 35.0, 60.0])
@pytest.mark.parametrize("azimuth", [0.0, 30.0, 90.0, 135.0])
def test_plane_rs_sec_theta_rl_dip_sec_theta_strike_one(tilt, azimuth):
    # Analytic (Underwood & Banerji 1987; REFERENCES.md): any single plane of tilt θ has
    # RS = sec θ; a profile along its dip has RL = sec θ, along its strike RL = 1. Planes are
    # exact under triangulation and bilinear interpolation, so only rounding remains (1e-9).
    dx, dy = 0.5, 0.7  # non-square pixels on purpose
    z = _plane((60, 80), dx, dy, tilt, azimuth)
    sec = 1.0 / math.cos(math.radians(tilt))
    assert surface_area_ratio(z, dx, dy) == pytest.approx(sec, abs=1e-9)
    assert profile_length_ratio(z, dx, dy, direction=azimuth) == pytest.approx(sec, abs=1e-9)
    assert profile_length_ratio(z, dx, dy, direction=azimuth + 90.0) == pytest.approx(
        1.0, abs=1e-9
    )


def test_plane_rl_x_y_strings_match_angles():
    # Along x the plane z = x tan θ has RL = sec θ, along y RL = 1 (analytic).
    z = _plane((40, 50), 1.0, 1.0, 40.0, 0.0)
    sec = 1.0 / math.cos(math.radians(40.0))
    assert profile_length_ratio(z, 1.0, 1.0, direction="x") == pytest.approx(sec, abs=1e-12)
    assert profile_length_ratio(z, 1.0, 1.0, direction="y") == pytest.approx(1.0, abs=1e-12)
    # Angles as text (for the command line) mean the same as numbers.
    assert profile_length_ratio(z, 1.0, 1.0, direction="30deg") == profile_length_ratio(
        z, 1.0, 1.0, direction=30.0
    )


@pytest.mark.parametrize("tilt", [20.0, 45.0])
def test_cone_rs_and_direction_mean_rl(tilt):
    # A cone z = r tan θ is a surface of planar facets of tilt θ facing every azimuth equally.
    # Analytic (Underwood & Banerji 1987; REFERENCES.md): RS = sec θ and the direction-mean
    # RL = (2/π)·sec θ·E(sin²θ), E the complete elliptic integral of the second kind
    # (scipy.special.ellipe, parameter m = sin²θ). Derivation of RL: a profile meeting the dip
    # at angle ψ has slope tanθ·cosψ, so RL = mean over ψ of √(1 + tan²θ cos²ψ)
    # = (2/π)√(1+tan²θ)·E(tan²θ/(1+tan²θ)) = (2/π) sec θ E(sin²θ).
    # The map is an annulus (NaN elsewhere), so also every single direction sees all azimuths
    # equally and carries the same RL. The triangulation and bilinear interpolation of the
    # curved cone err by O((Δ/r)²) (Δ the spacing): tolerance 2e-4 with r ≥ 20 px.
    n = 601
    c = (n - 1) / 2
    y, x = np.mgrid[0:n, 0:n] - c
    r = np.hypot(x, y)
    t = math.tan(math.radians(tilt))
    z = r * t
    z[(r > 290) | (r < 20)] = np.nan
    sec = 1.0 / math.cos(math.radians(tilt))
    rl_expected = 2.0 / math.pi * sec * ellipe(math.sin(math.radians(tilt)) ** 2)
    assert surface_area_ratio(z, 1.0, 1.0) == pytest.approx(sec, abs=2e-4)
    assert profile_length_ratio_mean(z, 1.0, 1.0) == pytest.approx(rl_expected, abs=2e-4)
    assert profile_length_ratio(z, 1.0, 1.0, direction="x") == pytest.approx(rl_expected, abs=5e-4)
    assert profile_length_ratio(z, 1.0, 1.0, direction=33.0) == pytest.approx(
        rl_expected, abs=5e-4
    )


def test_sinusoid_rl_one_period_is_one_plus_sdr():
    # Analytic (REFERENCES.md): z = A sin(2πx/λ) has, over whole periods, RL = 1 + Sdr with
    # Sdr = (2/π)·√(1+k²)·E(k²/(1+k²)) − 1, k = 2πA/λ (arc length of a sine). The surface is a
    # cylinder, so RS = RL along x, and RL along y = 1. Chords at λ/512 underestimate the
    # arc by O((kΔ)²·(Δ/λ)²) ≈ 1e-5: tolerance 1e-4.
    lam, amp = 512.0, 60.0
    x = np.arange(2 * int(lam) + 1) * 1.0
    z = np.tile(amp * np.sin(2 * np.pi * x / lam), (20, 1))
    k = 2 * math.pi * amp / lam
    sdr = 2 / math.pi * math.sqrt(1 + k * k) * ellipe(k * k / (1 + k * k)) - 1
    assert profile_length_ratio(z, 1.0, 1.0, direction="x") == pytest.approx(1 + sdr, abs=1e-4)
    assert surface_area_ratio(z, 1.0, 1.0) == pytest.approx(1 + sdr, abs=1e-4)
    assert profile_length_ratio(z, 1.0, 1.0, direction="y") == pytest.approx(1.0, abs=1e-12)


def test_triangulated_area_of_one_cell_by_hand():
    # Hand calculation (cross products): cell corners z00=0, z10=1, z01=0, z11=1 with dx=dy=1 is
    # the plane z = x: both triangles have area √2/2, total √2.
    z = np.array([[0.0, 1.0], [0.0, 1.0]])
    true_a, proj_a = triangulated_area(z, 1.0, 1.0)
    assert true_a == pytest.approx(math.sqrt(2), abs=1e-15)
    assert proj_a == 1.0
    # A saddle-like non-planar cell: z00=0, z10=0, z01=0, z11=1: T1 is flat (1/2), T2 has
    # edge vectors (-1, 0, -1) and (0, -1, -1): |(1, 1, 1)|/2 = √3/2.
    z = np.array([[0.0, 0.0], [0.0, 1.0]])
    assert triangulated_area(z, 1.0, 1.0)[0] == pytest.approx(0.5 + math.sqrt(3) / 2, abs=1e-15)


def test_nan_cells_and_segments_are_left_out():
    # A plane with holes keeps RS = sec θ and RL = sec θ (analytic): only valid cells and
    # segments count, so the holes cannot change the ratio of a plane.
    z = _plane((50, 50), 1.0, 1.0, 30.0, 0.0)
    rng = np.random.default_rng(0)
    z[rng.random(z.shape) < 0.1] = np.nan
    sec = 1.0 / math.cos(math.radians(30.0))
    assert surface_area_ratio(z, 1.0, 1.0) == pytest.approx(sec, abs=1e-12)
    assert profile_length_ratio(z, 1.0, 1.0) == pytest.approx(sec, abs=1e-12)
    # At 20° from the dip the profile slope is tan θ·cos 20°, so RL = √(1 + tan²θ cos²20°).
    slope = math.tan(math.radians(30.0)) * math.cos(math.radians(20.0))
    assert profile_length_ratio(z, 1.0, 1.0, direction=20.0) == pytest.approx(
        math.sqrt(1 + slope * slope), abs=1e-9
    )


def test_pickens_gurland_formula():
    # Pickens & Gurland (1976): RS ≈ (4/π)(RL − 1) + 1, here evaluated by hand.
    assert pickens_gurland_rs(1.0) == 1.0
    assert pickens_gurland_rs(1.25) == pytest.approx(1.0 + 4.0 / math.pi * 0.25, abs=1e-15)
    assert pickens_gurland_rs(2.0) == pytest.approx(2.2732395447351628, abs=1e-12)  # 1 + 4/π
    with pytest.raises(FractoInputError):
        pickens_gurland_rs(0.9)
    with pytest.raises(FractoInputError):
        pickens_gurland_rs(float("nan"))


@pytest.mark.parametrize(("rms_slope", "expected"), [(0.3, 1.96), (1.0, 1.85), (3.0, 1.72)])
def test_rs_over_rl_ratio_on_gaussian_fields(rms_slope, expected):
    # REFERENCES.md: isotropic Gaussian fields with RMS slope 0.3, 1 and 3 give
    # (RS − 1)/(RL − 1) ≈ 1.96, 1.85, 1.72 (never 4/π, so Pickens–Gurland is only an estimate).
    # "RMS slope" is per direction, √<(∂z/∂x)²> = √2·σ/τ for the ACF exp(-(r/τ)²)
    # (−R''(0) = 2σ²/τ²); the continuum values are 1.965, 1.849, 1.717 (Gaussian gradient,
    # independent numerical integration). Tolerance 0.02: reference rounding (0.005), the
    # discretisation bias O((Δ/τ)²) of the triangles and the interpolated oblique profiles
    # (measured ≈ +0.08 at τ = 5 px, +0.02 at 10 px, so ≈ +0.008 at 16 px) and the realisation
    # scatter (≈ 0.001 between seeds at 1024²).
    tau = 16.0
    z = gaussian_correlated_field((1024, 1024), tau, 1.0, 1.0, rms_um=rms_slope * tau / 2**0.5)
    r = fractography_ratios(z, 1.0, 1.0)
    ratio = (r["RS"] - 1) / (r["RL"] - 1)
    assert ratio == pytest.approx(expected, abs=0.02)
    # Pickens–Gurland falls short on such maps: measured/predicted > 1 (REFERENCES.md).
    assert r["RS_pickens_gurland"] == pytest.approx(pickens_gurland_rs(r["RL"]), abs=1e-15)
    assert r["RS_measured_to_predicted"] == pytest.approx(r["RS"] / r["RS_pickens_gurland"])
    assert r["RS_measured_to_predicted"] > 1.0


def test_fractography_ratios_keys_and_consistency():
    # Self-consistency of the summary with the single functions (same definitions).
    z = gaussian_correlated_field((96, 128), 5.0, 0.5, 0.5, rms_um=0.8, seed=7)
    r = fractography_ratios(z, 0.5, 0.5)
    assert set(r) == {"RL_x", "RL_y", "RL", "RS", "RS_pickens_gurland", "RS_measured_to_predicted"}
    assert r["RL_x"] == profile_length_ratio(z, 0.5, 0.5, direction="x")
    assert r["RL_y"] == profile_length_ratio(z, 0.5, 0.5, direction="y")
    assert r["RS"] == surface_area_ratio(z, 0.5, 0.5)
    assert r["RL"] == pytest.approx(profile_length_ratio_mean(z, 0.5, 0.5), abs=1e-15)
    assert all(isinstance(v, float) and math.isfinite(v) for v in r.values())


def test_line_thinning_keeps_ratio():
    # Thinning the oblique lines only reduces the number of profiles averaged: on a plane the
    # RL at any angle stays exact (analytic, as above).
    z = _plane((300, 300), 1.0, 1.0, 50.0, 45.0)
    sec = 1.0 / math.cos(math.radians(50.0))
    assert profile_length_ratio(z, 1.0, 1.0, direction=45.0, max_samples=5000) == pytest.approx(
        sec, abs=1e-9
    )


@pytest.mark.parametrize(
    "call",
    [
        lambda: surface_area_ratio(np.zeros(5), 1.0, 1.0),
        lambda: surface_area_ratio(np.full((4, 4), np.nan), 1.0, 1.0),
        lambda: profile_length_ratio(np.zeros((4, 4)), 0.0, 1.0),
        lambda: profile_length_ratio(np.zeros((4, 4)), 1.0, 1.0, direction="z"),
        lambda: profile_length_ratio_mean(np.zeros((4, 4)), 1.0, 1.0, n_directions=0),
    ],
)
def test_bad_input_raises(call):
    with pytest.raises(FractoInputError):
        call()
