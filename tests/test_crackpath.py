"""Crack-path and grain-size tests against outside references (named beside each check)."""

from __future__ import annotations

import json
import math

import cv2
import numpy as np
import pytest
from click.testing import CliRunner
from scipy.spatial import cKDTree
from skimage.segmentation import find_boundaries

from fracto.crackpath import (
    astm_e112_grain_size_number,
    crack_path,
    e112_from_grains_per_mm2,
    mean_lineal_intercept,
    path_length_px,
    segment_crack,
)
from fracto.errors import FractoInputError


def zigzag_image(theta_deg: float, n: int = 600, period: int = 200, thick: int = 4, seed=0):
    """A dark zigzag crack whose straight segments make +-theta with the mean path,
    on a bright noisy section."""
    img = np.full((n, n), 200.0)
    half = period / 2
    xs = np.arange(0, n + period, half)
    rise = half * math.tan(math.radians(theta_deg))
    ys = n / 2 + rise / 2 * np.where(np.arange(len(xs)) % 2 == 0, -1, 1)
    pts = np.round(np.stack([xs, ys], 1) * 16).astype(np.int32)
    img = img.astype(np.uint8)
    cv2.polylines(img, [pts], False, 40, thickness=thick, lineType=cv2.LINE_AA, shift=4)
    rng = np.random.default_rng(seed)
    return (img + rng.normal(0, 8, img.shape)).clip(0, 255).astype(np.uint8)


@pytest.mark.parametrize("theta", [10.0, 20.0, 30.0, 45.0, 60.0])
def test_zigzag_tortuosity_is_sec_theta(theta):
    # analytic: a straight zigzag at +-theta to its mean path has path/chord = 1/cos(theta)
    r = crack_path(zigzag_image(theta), pixel_size_um=0.5)
    assert r.tortuosity == pytest.approx(1 / math.cos(math.radians(theta)), rel=0.02)
    # every segment deviates by theta from the chord (analytic)
    assert r.mean_abs_deviation_angle_deg == pytest.approx(theta, abs=2.0)
    assert r.path_length_um == pytest.approx(r.tortuosity * r.chord_length_um)
    # single-valued path: Underwood's R_L equals the tortuosity here
    assert r.lineal_roughness == pytest.approx(r.tortuosity, rel=0.01)


def test_staircase_length_corrected():
    # analytic: an 8-connected pixel chain along a line at 22.5 deg is
    # (|dx| - |dy| + sqrt(2)|dy|) / sqrt(dx^2 + dy^2) = 1.0824 times too long;
    # after the simplification the length is the Euclidean one within 1 %.
    dx = 400
    dy = round(dx * math.tan(math.radians(22.5)))
    from skimage.draw import line

    rr, cc = line(0, 0, dy, dx)
    path = np.stack([rr, cc], 1)
    raw, _ = path_length_px(path, tolerance_px=0)
    fixed, _ = path_length_px(path, tolerance_px=1.0)
    true = math.hypot(dx, dy)
    assert raw / true == pytest.approx((dx - dy + math.sqrt(2) * dy) / true, rel=1e-9)
    assert raw / true > 1.07
    assert fixed == pytest.approx(true, rel=0.01)


def test_astm_e112_table_values():
    # ASTM E112-13 table: G 5 <-> mean intercept 0.0566 mm, G 7 <-> 0.0283 mm
    assert astm_e112_grain_size_number(0.0566) == pytest.approx(5.0, abs=0.01)
    assert astm_e112_grain_size_number(0.0283) == pytest.approx(7.0, abs=0.01)
    # ASTM E112 definition: n = 2^(G-1) grains per square inch at 100x, i.e.
    # N_A = 2^(G-1) / (0.254 mm)^2 per mm^2 at 1x; G = 3.321928 log10(N_A) - 2.954
    for g in (1.0, 5.0, 8.0):
        n_a = 2 ** (g - 1) / 0.254**2
        assert e112_from_grains_per_mm2(n_a) == pytest.approx(g, abs=0.01)
    with pytest.raises(FractoInputError):
        astm_e112_grain_size_number(-1.0)


def poisson_voronoi_section(seed: int, lam: float, n: int = 1200, cells_across: float = 24.0):
    """Planar section z = 0 of a 3-D Poisson–Voronoi structure of intensity lam, by
    nearest-seed labelling (scipy cKDTree); seeds fill a box with a margin of 3 cell
    sizes around the window so that every pixel's nearest seed is present."""
    rng = np.random.default_rng(seed)
    a = lam ** (-1 / 3)  # cell size
    side, margin = cells_across * a, 3.0 * a
    box = np.array([side + 2 * margin, side + 2 * margin, 2 * margin])
    pts = rng.uniform(0, 1, (rng.poisson(lam * box.prod()), 3)) * box - margin
    ps = side / n
    yy, xx = (np.mgrid[0:n, 0:n] + 0.5) * ps
    q = np.stack([xx.ravel(), yy.ravel(), np.zeros(n * n)], 1)
    _, lab = cKDTree(pts).query(q)
    return lab.reshape(n, n).astype(np.int32), ps


@pytest.mark.parametrize(("seed", "lam"), [(0, 1.0), (1, 8.0)])
def test_poisson_voronoi_mean_intercept(seed, lam):
    # Meijering (1953): S_V = 2.9105 lam^(1/3), mean intercept L = 2/S_V = 0.6872 lam^(-1/3).
    # One section of ~24 x 24 cells gives ~6500 intersections; the spread between sections
    # is about 2 %, so 4 % is the sampling tolerance.
    lab, ps = poisson_voronoi_section(seed, lam)
    r = mean_lineal_intercept(find_boundaries(lab, mode="inner"), ps, n_lines=200)
    assert r["mean_lineal_intercept_um"] == pytest.approx(0.6872 * lam ** (-1 / 3), rel=0.04)
    assert r["lateral_unit"] == "um"
    assert r["astm_e112_G"] == pytest.approx(
        -6.643856 * math.log10(r["mean_lineal_intercept_um"] / 1000) - 3.288
    )


def test_intergranular_fraction_of_constructed_path():
    # construction: the crack follows a horizontal boundary for 300 px, then leaves it at
    # 45 deg for 200*sqrt(2) px through boundary-free material; the fraction of the path
    # within 2 px of a boundary is 300 / (300 + 282.8) plus the ~2.8 px where the
    # diagonal is still within 2 px of the line (analytic).
    n = 600
    img = np.full((n, n), 210, np.uint8)
    cv2.polylines(img, [np.array([[0, 150], [300, 150], [500, 350]], np.int32)], False, 30, 3)
    bnd = np.zeros((n, n), bool)
    bnd[150, :300] = True
    bnd[:20, :] = True  # a boundary far from the crack
    bnd[:, 590] = True
    r = crack_path(img, pixel_size_um=1.0, boundaries=bnd, tolerance_px=2.0)
    expected = (300 + 2 * math.sqrt(2)) / (300 + 200 * math.sqrt(2))
    assert r.intergranular_path_fraction == pytest.approx(expected, abs=0.02)
    assert r.intercept is not None and r.to_dict()["astm_e112_G"] is not None


def test_mask_input_and_uncalibrated():
    mask = np.zeros((200, 300), bool)
    mask[98:103, 5:295] = True
    r = crack_path(mask)
    assert r.lateral_unit == "px"
    assert r.tortuosity == pytest.approx(1.0, abs=0.005)
    assert r.path_length_um == pytest.approx(r.chord_length_um)


def test_bad_input():
    with pytest.raises(FractoInputError, match="blank"):
        segment_crack(np.full((50, 50), 0.4))
    dots = np.full((200, 200), 200.0)
    dots[50:53, 50:53] = 10
    dots[120:123, 20:23] = 10
    with pytest.raises(FractoInputError, match="No crack"):
        crack_path(dots)
    with pytest.raises(FractoInputError):
        crack_path(np.zeros(10))
    with pytest.raises(FractoInputError):
        mean_lineal_intercept(np.zeros((20, 20), bool), 1.0)


def test_cli_json_and_exit_codes(tmp_path):
    from fracto.cli import cli

    p = tmp_path / "crack.png"
    cv2.imwrite(str(p), zigzag_image(30))
    lab, _ = poisson_voronoi_section(2, 1.0, n=600)
    b = tmp_path / "gb.png"
    cv2.imwrite(str(b), np.where(find_boundaries(lab, mode="inner"), 0, 255).astype(np.uint8))
    res = CliRunner().invoke(
        cli,
        [
            "crackpath",
            str(p),
            "--boundaries",
            str(b),
            "--pixel-size",
            "0.5um",
            "--banner",
            "none",
            "--json",
        ],
    )
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    for key in (
        "tortuosity",
        "path_length_um",
        "chord_length_um",
        "intergranular_path_fraction",
        "mean_lineal_intercept_um",
        "astm_e112_G",
        "pixel_size",
        "version",
    ):
        assert key in doc
    assert doc["tortuosity"] == pytest.approx(1 / math.cos(math.radians(30)), rel=0.02)
    assert 0.0 <= doc["intergranular_path_fraction"] <= 1.0
    res = CliRunner().invoke(cli, ["crackpath", str(p), "--banner", "none"])
    assert res.exit_code == 0 and "tortuosity" in res.output and "pixels" in res.output

    import subprocess
    import sys

    blank = tmp_path / "blank.png"
    cv2.imwrite(str(blank), np.full((64, 64), 128, np.uint8))
    dots = np.full((200, 200), 200, np.uint8)
    dots[50:53, 50:53] = 10
    nocrack = tmp_path / "dots.png"
    cv2.imwrite(str(nocrack), dots)
    for f in (blank, nocrack, tmp_path / "missing.png"):
        proc = subprocess.run(
            [sys.executable, "-m", "fracto", "crackpath", str(f), "--banner", "none"],
            capture_output=True,
            text=True,
        )
        assert proc.returncode == 2, proc.stderr
        assert proc.stderr.startswith("fracto: ") and proc.stderr.count("\n") == 1
