"""Stereo heights against a known surface rendered by parallel projection.

Reference: SEM stereophotogrammetry, Piazzesi (1973), J. Phys. E 6: for a symmetric
eucentric tilt difference dtheta, h = p / (2 sin(dtheta/2)); the one-view-at-0 case is
derived in fracto.stereo's module notes. The pair is rendered here independently of
fracto: a view at stage tilt theta sees the object point (x, z) at x' = x cos(theta) +
z sin(theta) (parallel projection, axis through the image centre), and each image samples
a fixed random albedo of the surface at the projected positions.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import ndimage

from fracto.errors import FractoInputError
from fracto.stereo import stereo_height

PS = 0.1  # µm


def render(z_um: np.ndarray, albedo: np.ndarray, ps: float, theta_deg: float) -> np.ndarray:
    """Parallel projection at stage tilt theta: column u shows the point whose
    x cos(theta) + z sin(theta) equals (u - c) ps (no occlusion: slopes stay gentle)."""
    ny, nx = z_um.shape
    c = (nx - 1) / 2
    t = math.radians(theta_deg)
    x = (np.arange(nx) - c) * ps
    target = (np.arange(nx) - c) * ps
    img = np.empty_like(albedo)
    for r in range(ny):
        xp = x * math.cos(t) + z_um[r] * math.sin(t)
        assert np.all(np.diff(xp) > 0)  # single-valued projection
        img[r] = np.interp(target, xp, albedo[r])
    return img


def known_surface(n: int = 256, seed: int = 1, sq_um: float = 1.0):
    rng = np.random.default_rng(seed)
    z = ndimage.gaussian_filter(rng.standard_normal((n, n)), 20, mode="wrap")
    z *= sq_um / z.std()
    tex = ndimage.gaussian_filter(rng.standard_normal((n, n)), 1.2)
    tex = (tex - tex.min()) / (tex.max() - tex.min())
    return z, tex


def rms_error_over_sq(h: np.ndarray, z: np.ndarray, border: int = 10) -> float:
    ok = np.isfinite(h)
    ok[:, :border] = ok[:, -border:] = False
    ok[:border] = ok[-border:] = False
    d = h[ok] - z[ok]
    d -= d.mean()  # heights from a pair are relative
    return float(np.sqrt(np.mean(d**2)) / z.std())


@pytest.fixture(scope="module")
def surf():
    return known_surface()


def test_symmetric_pair_within_5_percent_of_sq(surf):
    z, tex = surf
    left, right = render(z, tex, PS, -4.0), render(z, tex, PS, 4.0)
    res = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS)
    assert res.valid_fraction > 0.9
    # Piazzesi (1973): h = p / (2 sin(dtheta/2)); RMS error <= 5 % of Sq
    assert rms_error_over_sq(res.height_um, z) <= 0.05
    d = res.to_dict()
    assert d["pixel_size"]["x"] == PS and d["settings"]["mode"] == "symmetric"
    assert np.all((res.confidence >= 0) & (res.confidence <= 1))


def test_object_grid_not_left_grid(surf):
    # the LEFT view is foreshortened by cos(dtheta/2); a large tilt difference makes the
    # shift at the edges several pixels. Heights on the object grid must match z there.
    z, tex = surf
    left, right = render(z, tex, PS, -10.0), render(z, tex, PS, 10.0)
    res = stereo_height(left, right, tilt_difference_deg=20.0, pixel_size_um=PS)
    assert rms_error_over_sq(res.height_um, z) <= 0.05
    # reading the same heights as if on the LEFT grid (no resampling) is measurably worse:
    # the left view places object x at x cos(10 deg) - z sin(10 deg)
    zl = render(z, z, PS, -10.0)  # height seen at each LEFT pixel
    assert rms_error_over_sq(res.height_um, zl) > 1.5 * rms_error_over_sq(res.height_um, z)


def test_one_at_zero_mode(surf):
    z, tex = surf
    left, right = render(z, tex, PS, 0.0), render(z, tex, PS, 8.0)
    res = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS, mode="one-at-zero")
    # derived: z = (p + x (1 - cos dtheta)) / sin dtheta
    assert rms_error_over_sq(res.height_um, z) <= 0.05
    # the symmetric formula on this pair would leave the foreshortening as a false tilt
    wrong = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS)
    assert rms_error_over_sq(wrong.height_um, z) > 0.05


def test_flat_specimen_one_at_zero_stays_flat():
    # analytic: a flat specimen (z = 0) at 0 and 8 deg has parallax x (cos 8 - 1), which
    # the one-at-zero relation must map back to z = 0 (no tilt).
    _, tex = known_surface(seed=4)
    z0 = np.zeros_like(tex)
    left, right = render(z0, tex, PS, 0.0), render(z0, tex, PS, 8.0)
    res = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS, mode="one-at-zero")
    h = res.height_um[10:-10, 10:-10]
    yy, xx = np.mgrid[0 : h.shape[0], 0 : h.shape[1]] * PS
    ok = np.isfinite(h)
    a = np.linalg.lstsq(np.c_[xx[ok], yy[ok], np.ones(ok.sum())], h[ok], rcond=None)[0]
    assert abs(a[0]) < 0.002  # slope of 0.07 = tan(4 deg) without the correction


def test_flip_parallax_sign(surf):
    z, tex = surf
    # opposite geometry: the stage tilts the other way, higher points move to -x
    left, right = render(z, tex, PS, 4.0), render(z, tex, PS, -4.0)
    res = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS, flip_parallax=True)
    assert rms_error_over_sq(res.height_um, z) <= 0.05
    unflipped = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS)
    ok = np.isfinite(unflipped.height_um)
    assert np.corrcoef(unflipped.height_um[ok], z[ok])[0, 1] < -0.9


def test_horizontal_axis(surf):
    z, tex = surf
    left, right = render(z, tex, PS, -4.0), render(z, tex, PS, 4.0)
    res = stereo_height(
        left.T, right.T, tilt_difference_deg=8.0, pixel_size_um=PS, tilt_axis="horizontal"
    )
    assert rms_error_over_sq(res.height_um.T, z) <= 0.05


def test_bad_input():
    rng = np.random.default_rng(0)
    a = rng.random((64, 64))
    with pytest.raises(FractoInputError, match="differ in size"):
        stereo_height(a, a[:50], tilt_difference_deg=8, pixel_size_um=0.1)
    with pytest.raises(FractoInputError, match="blank"):
        stereo_height(a, np.full_like(a, 0.3), tilt_difference_deg=8, pixel_size_um=0.1)
    with pytest.raises(FractoInputError):
        stereo_height(a, a, tilt_difference_deg=0, pixel_size_um=0.1)
    with pytest.raises(FractoInputError):
        stereo_height(a, a, tilt_difference_deg=8, pixel_size_um=None)


def test_cli_writes_npy_in_um(tmp_path, surf):
    import cv2

    from fracto.cli import cli
    from fracto.io import read_height_map

    z, tex = surf
    left, right = render(z, tex, PS, -4.0), render(z, tex, PS, 4.0)
    lp, rp = tmp_path / "l.png", tmp_path / "r.png"
    cv2.imwrite(str(lp), np.round(left * 255).astype(np.uint8))
    cv2.imwrite(str(rp), np.round(right * 255).astype(np.uint8))
    out = tmp_path / "h.npy"
    args = [
        "stereo",
        str(lp),
        str(rp),
        "--tilt-difference",
        "8deg",
        "--pixel-size",
        "0.1um",
        "-o",
        str(out),
        "--banner",
        "none",
    ]
    res = CliRunner().invoke(cli, [*args, "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert doc["valid_fraction"] > 0.9
    h = read_height_map(out, pixel_size="0.1um").z_um
    assert rms_error_over_sq(h, z) <= 0.05  # .npy holds micrometres
    res = CliRunner().invoke(cli, args)
    assert res.exit_code == 0 and "valid fraction" in res.output


def test_cli_mismatched_pair_exit_2(tmp_path):
    import subprocess
    import sys

    import cv2

    rng = np.random.default_rng(0)
    cv2.imwrite(str(tmp_path / "a.png"), (rng.random((80, 80)) * 255).astype(np.uint8))
    cv2.imwrite(str(tmp_path / "b.png"), (rng.random((80, 60)) * 255).astype(np.uint8))
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "fracto",
            "stereo",
            str(tmp_path / "a.png"),
            str(tmp_path / "b.png"),
            "--tilt-difference",
            "8deg",
            "--pixel-size",
            "0.1um",
            "-o",
            str(tmp_path / "h.npy"),
            "--banner",
            "none",
        ],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert "differ in size" in proc.stderr and proc.stderr.count("\n") == 1
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "fracto",
            "stereo",
            str(tmp_path / "a.png"),
            str(tmp_path / "missing.png"),
            "--tilt-difference",
            "8deg",
            "-o",
            "h.npy",
        ],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2


def test_sem_shaded_surface_pair(surf):
    # the surface's own SEM shading (fracto.synth.render_sem: secondary-electron yield
    # rising with tilt, Reimer 1998) attached to it as albedo together with fine
    # texture; projected to the two views as above. Same 5 %-of-Sq criterion.
    from fracto.synth import RenderSettings, render_sem

    z, tex = surf
    shade = np.asarray(render_sem(z, PS, RenderSettings(dose=None), seed=3), dtype=float)
    albedo = 0.5 * shade + 0.5 * tex
    left, right = render(z, albedo, PS, -4.0), render(z, albedo, PS, 4.0)
    res = stereo_height(left, right, tilt_difference_deg=8.0, pixel_size_um=PS)
    assert rms_error_over_sq(res.height_um, z) <= 0.05


def test_flip_parallax_one_at_zero(surf):
    # derived: views at 0 and -dtheta give p = x (cos dtheta - 1) - z sin dtheta, so
    # z = -(p + x (1 - cos dtheta)) / sin dtheta: the flip negates the whole relation
    z, tex = surf
    left, right = render(z, tex, PS, 0.0), render(z, tex, PS, -8.0)
    res = stereo_height(
        left,
        right,
        tilt_difference_deg=8.0,
        pixel_size_um=PS,
        mode="one-at-zero",
        flip_parallax=True,
    )
    assert rms_error_over_sq(res.height_um, z) <= 0.05
