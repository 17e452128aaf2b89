"""Fatigue striation spacing: analytic ridge fields and the generator's fatigue surfaces."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from fracto.errors import FractoInputError
from fracto.modes.striation import (
    StriationResult,
    striation_spacing,
    striations_from_mode_result,
)


def ridge_field(shape, spacing_px, phi_deg, noise, seed=0):
    """z = sin(2π (x cos φ + y sin φ) / s) + Gaussian noise.

    Analytic: its wave vector is (cos φ, sin φ) / s, so the spacing is s and the
    striation normal points at φ (x right, y = row index downwards).
    """
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(np.float64)
    p = math.radians(phi_deg)
    z = np.sin(2 * math.pi * (x * math.cos(p) + y * math.sin(p)) / spacing_px)
    return z + noise * rng.standard_normal(shape)


def axial_diff_deg(a, b):
    """Smallest difference of two axial directions (mod 180°)."""
    d = (a - b) % 180.0
    return min(d, 180.0 - d)


@pytest.mark.parametrize("spacing_px", [5.0, 9.7, 16.0, 30.0])
@pytest.mark.parametrize("phi_deg", [0.0, 30.0, 77.0, 135.0, 168.0])
def test_sinusoidal_ridges(spacing_px, phi_deg):
    # analytic reference: spacing s and normal φ (see ridge_field); tolerances 2 % and 2°
    z = ridge_field((384, 384), spacing_px, phi_deg, noise=0.7, seed=int(spacing_px * 10))
    r = striation_spacing(z, pixel_size_um=None)
    assert r.unit == "px" and r.n_windows == 9
    assert abs(r.spacing / spacing_px - 1) <= 0.02
    assert axial_diff_deg(r.direction_deg, phi_deg) <= 2.0
    assert r.ci95[0] <= r.spacing <= r.ci95[1]
    assert 0.0 <= r.direction_deg < 180.0 + 1e-9


def test_units_mask_and_no_striations():
    px = 0.05
    z = ridge_field((256, 512), 8.0, 40.0, noise=0.5)
    # right half: noise only; the mask keeps the left half
    rng = np.random.default_rng(1)
    z[:, 256:] = rng.standard_normal((256, 256))
    mask = np.zeros(z.shape, bool)
    mask[:, :256] = True
    r = striation_spacing(z, pixel_size_um=px, mask=mask, window_px=64)
    assert r.unit == "um" and r.n_windows == 16
    assert r.spacing == pytest.approx(8.0 * px, rel=0.02)  # s px times the pixel size
    d = r.to_dict()
    assert "spacing_um" in d and "direction_convention" in d
    # white noise has no directional peak: few windows pass the ring-ratio test by
    # chance (0-2 of 16 measured over four seeds), and none without any texture
    r0 = striation_spacing(rng.standard_normal((256, 256)), pixel_size_um=px, window_px=64)
    assert r0.n_windows <= 3
    flat = striation_spacing(np.ones((256, 256)), pixel_size_um=px, window_px=64)
    assert flat.n_windows == 0 and math.isnan(flat.spacing)
    with pytest.raises(FractoInputError):
        striation_spacing(z, pixel_size_um=px, mask=mask[:10])
    with pytest.raises(FractoInputError):
        striation_spacing(z, pixel_size_um=px, window_px=8)


def test_from_mode_result():
    z = ridge_field((256, 512), 10.0, 120.0, noise=0.5)
    z[:, 256:] = np.random.default_rng(2).standard_normal((256, 256))
    classes = ("intergranular", "transgranular", "ductile", "fatigue")
    lab = np.full(z.shape, 1, np.uint8)
    lab[:, :256] = 4  # label i + 1 = classes[i]: 4 = fatigue
    res = striations_from_mode_result(z, SimpleNamespace(classes=classes, label_map=lab), 0.1)
    assert isinstance(res, StriationResult)
    assert res.spacing == pytest.approx(1.0, rel=0.02)  # 10 px x 0.1 µm
    assert axial_diff_deg(res.direction_deg, 120.0) <= 2.0
    none = SimpleNamespace(classes=classes, label_map=np.ones(z.shape, np.uint8))
    assert striations_from_mode_result(z, none, 0.1) is None
    no_class = SimpleNamespace(classes=classes[:2], label_map=lab)
    assert striations_from_mode_result(z, no_class, 0.1) is None


GENERATOR_CASES = [
    (0.4, 0.05, 30.0, 1),
    (0.8, 0.1, 100.0, 2),
    (0.5, 0.05, 60.0, 4),
    (0.6, 0.06, 10.0, 5),
]


def _generator_estimate(spacing_um, px_um, direction_deg, seed):
    from fracto.synth import FractureSettings, make_surface

    s = make_surface(
        size=512,
        pixel_size_um=px_um,
        modes={"fatigue": 1.0},
        fracture=FractureSettings(
            striation_spacing_um=spacing_um, crack_direction_deg=direction_deg
        ),
        seed=seed,
    )
    truth = s.truth["striation_spacing_um"]
    assert truth == spacing_um
    return striation_spacing(s.sem, pixel_size_um=px_um, window_px=64), truth


@pytest.mark.parametrize(("spacing_um", "px_um", "direction_deg", "seed"), GENERATOR_CASES)
def test_generator_fatigue(spacing_um, px_um, direction_deg, seed):
    """Spacing on the generator's SEM images within 5 % of its nominal spacing (truth).

    The generator (version 2) draws striations as arcs about a distant crack
    origin, so the spacing along the local growth direction is the nominal one,
    with a weak phase wobble (0.1 spacing) and plateaus tilted by at most 1°.
    Measured 2026-12-02 with 64 px windows: +0.4, -1.1, +1.8, -0.2 %; on exact
    ridge fields the method is within 0.1 % (tests above). The direction is
    checked to 5°: the arcs turn the local normal by at most about 3° from the
    mean travel direction.
    """
    r, truth = _generator_estimate(spacing_um, px_um, direction_deg, seed)
    assert r.n_windows >= 32
    assert abs(r.spacing / truth - 1) <= 0.05, (r.spacing, truth)
    assert axial_diff_deg(r.direction_deg, direction_deg) <= 5.0
