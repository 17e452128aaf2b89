"""The height-only path: the fixed SEM view of a height map and the height model."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fracto.cli import main
from fracto.errors import FractoInputError
from fracto.modes import heightview
from fracto.synth.render import RenderSettings


def _roof(theta_deg: float, n: int = 64, px: float = 0.1) -> np.ndarray:
    # a symmetric roof: two planes of slope tan θ, so the least-squares plane is flat
    x = np.arange(n) * px
    return np.tile(np.tan(np.radians(theta_deg)) * np.abs(x - x.mean()), (n, 1))


@pytest.mark.parametrize("theta_deg", [20.0, 45.0])
def test_view_of_a_roof_follows_the_secant_law(monkeypatch, theta_deg):
    # Reimer (1998): SE yield δ(θ) = δ0 sec θ. With the view's renderer reduced to the
    # secant law, each face of the roof renders as δ0 sec θ, at any pixel size (the
    # view rescales x, y and z evenly, which keeps slopes).
    monkeypatch.setattr(heightview, "VIEW_SETTINGS", RenderSettings.secant_only(yield_base=0.3))
    for px in (0.1, 0.5):
        v = heightview.render_view(_roof(theta_deg, px=px), px)
        face = float(np.mean(v[16:48, 4:24]))
        assert face == pytest.approx(0.3 / math.cos(math.radians(theta_deg)), rel=0.02)


def test_a_tilted_plane_renders_flat_once_levelled(monkeypatch):
    # ISO 25178-2 F-operation: the least-squares plane is removed first, so a pure tilt
    # leaves a flat surface, which the secant law renders as δ0 everywhere.
    monkeypatch.setattr(heightview, "VIEW_SETTINGS", RenderSettings.secant_only(yield_base=0.3))
    yy, xx = np.mgrid[0:64, 0:64] * 0.2
    v = heightview.render_view(0.4 * xx - 0.3 * yy + 2.0, 0.2)
    assert float(np.max(np.abs(v - 0.3))) < 1e-3


def test_view_is_deterministic_and_unchanged_by_even_rescaling():
    rng = np.random.default_rng(3)
    from scipy.ndimage import gaussian_filter

    h = gaussian_filter(rng.normal(size=(96, 96)), 3) * 2.0
    a = heightview.render_view(h, 0.1)
    b = heightview.render_view(h, 0.1)
    c = heightview.render_view(3.0 * h, 0.3)  # same shape, three times larger
    assert a.dtype == np.float32 and a.shape == h.shape
    np.testing.assert_array_equal(a, b)
    np.testing.assert_allclose(a, c, atol=2e-5)  # 16-bit quantisation


@pytest.mark.parametrize(
    "h, px",
    [
        (np.zeros(5), 0.1),
        (np.ones((2, 2)), 0.1),
        (np.ones((8, 8)), 0.0),
        (np.full((8, 8), np.nan), 0.1),
    ],
)
def test_bad_height_maps_are_one_sentence(h, px):
    with pytest.raises(FractoInputError):
        heightview.render_view(h, px)


def test_shipped_height_model_matches_this_renderer_and_size():
    from fracto.modes.model import load_model

    p = heightview.default_height_model_path()
    assert p.stat().st_size <= 25 * 2**20  # issue 4 §5: at most 25 MB
    m = load_model(p)
    assert m.uses_height
    assert list(m.height_view_fingerprint_) == heightview.view_fingerprint()
    assert m.height_view_version_ == heightview.HEIGHT_VIEW_VERSION


def test_cli_refuses_mismatched_inputs(tmp_path, capsys):
    from PIL import Image

    img = (np.random.default_rng(0).random((256, 256)) * 255).astype(np.uint8)
    Image.fromarray(img).save(tmp_path / "field.png")
    assert main(["classify", str(tmp_path / "field.png"), "--height-only"]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
