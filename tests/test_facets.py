"""Facet orientation tests against outside references (named beside each check)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from click.testing import CliRunner

from fracto.errors import FractoInputError
from fracto.surface.facets import (
    facet_analysis,
    lambert_coordinates,
    lambert_projection_density,
    segment_facets,
    surface_normals,
    tilt_azimuth,
)

# Si(100) etched anisotropically is bounded by {111} planes at arccos(1/sqrt(3)) to the
# (100) surface (common practice in microfabrication).
SI111_DEG = math.degrees(math.acos(1 / math.sqrt(3)))  # 54.7356


def si_pyramids(n_cells: int = 3, cell_px: int = 128, dx: float = 0.1) -> np.ndarray:
    """Square pyramids on a square grid, faces at 54.7356 deg: z = min over the faces.

    Half-pixel offset so that valleys fall between samples, as they would on a real map.
    """
    n = n_cells * cell_px
    yy, xx = (np.mgrid[0:n, 0:n] + 0.5) * dx
    side = cell_px * dx
    u, v = xx % side, yy % side
    return math.tan(math.radians(SI111_DEG)) * np.minimum.reduce([u, side - u, v, side - v])


def test_plane_normal_and_tilt_analytic():
    # analytic: the plane z = a x + b y has the normal (-a, -b, 1)/sqrt(1+a^2+b^2),
    # tilt atan(sqrt(a^2+b^2)), azimuth atan2(-b, -a)
    a, b = 0.3, -0.4
    yy, xx = np.mgrid[0:40, 0:50] * 0.5
    z = a * xx + b * yy
    holed = z.copy()
    holed[5, 5] = np.nan
    holed[20:25, 30:33] = np.nan
    for zz in (z, holed):
        for scale in (None, 1.5):
            n = surface_normals(zz, 0.5, 0.5, scale_um=scale)
            ok = np.isfinite(n).all(axis=2)
            assert ok.mean() > 0.8
            t, az = tilt_azimuth(n[ok])  # everywhere, edges and hole rims included
            assert np.allclose(t, math.degrees(math.atan(math.hypot(a, b))), atol=1e-9)
            assert np.allclose(az, math.degrees(math.atan2(-b, -a)) % 360, atol=1e-9)


def test_normals_match_numpy_gradient_inside():
    # reference library: numpy.gradient of the 3-row mean (the 3x3 plane fit is the
    # Prewitt operator, Prewitt 1970) on a smooth surface
    yy, xx = np.mgrid[0:60, 0:60] * 0.2
    z = np.sin(xx) * np.cos(0.7 * yy)
    from scipy import ndimage

    zs = ndimage.uniform_filter1d(z, 3, axis=0)
    gy_ref, gx_ref = np.gradient(ndimage.uniform_filter1d(z, 3, axis=1), 0.2, 0.2)
    gx_ref = np.gradient(zs, 0.2, axis=1)
    n = surface_normals(z, 0.2, 0.2)
    assert np.allclose((-n[..., 0] / n[..., 2])[2:-2, 2:-2], gx_ref[2:-2, 2:-2], atol=1e-12)
    assert np.allclose((-n[..., 1] / n[..., 2])[2:-2, 2:-2], gy_ref[2:-2, 2:-2], atol=1e-12)


def test_nan_points_carried():
    z = np.zeros((30, 30))
    z[10, 10] = np.nan
    n = surface_normals(z, 1.0, 1.0)
    assert np.isnan(n[10, 10]).all()
    assert np.isfinite(n[20, 20]).all()


def test_si100_pyramids_recovered():
    z = si_pyramids()
    r = facet_analysis(z, 0.1, 0.1, planarity_tol_deg=5.0)
    # {111} facets at 54.7356 deg (microfabrication practice) within 1 deg
    assert abs(r.area_weighted_tilt_deg - SI111_DEG) < 1.0
    assert abs(r.facet_area_weighted_tilt_deg - SI111_DEG) < 1.0
    tilts = np.array([f.tilt_deg for f in r.facets])
    assert np.all(np.abs(tilts - SI111_DEG) < 1.0)
    # four faces per pyramid, 3 x 3 pyramids
    assert r.facet_count == 4 * 9
    # azimuths 90 deg apart: the four face directions 0, 90, 180, 270
    az = np.array([f.azimuth_deg for f in r.facets])
    k = np.round(az / 90.0) % 4
    assert np.all(np.abs(((az - 90 * k + 180) % 360) - 180) < 1.0)
    assert np.bincount(k.astype(int), minlength=4).tolist() == [9, 9, 9, 9]
    # true area = projected / cos(tilt) (Underwood 1970): a face of a pyramid of base
    # side s covers s^2/4 projected
    side = 128 * 0.1
    areas = np.array([f.area_um2 for f in r.facets])
    assert np.all(areas < side**2 / 4 / math.cos(math.radians(SI111_DEG)) * 1.001)
    assert np.median(areas) > 0.9 * side**2 / 4 / math.cos(math.radians(SI111_DEG))
    # dihedral angles: normals of neighbouring {111} faces meet at arccos(1/3) = 70.53 deg
    # (faces of one pyramid) and arccos(-1/3) = 109.47 deg (across a valley) —
    # crystallography of the cubic {111} set
    ang = np.array([d[2] for d in r.dihedral])
    near = np.minimum(
        np.abs(ang - math.degrees(math.acos(1 / 3))), np.abs(ang - math.degrees(math.acos(-1 / 3)))
    )
    assert len(ang) == 9 * 4 + 12
    assert np.all(near < 1.0)


def test_facet_to_grain_ratio_and_dict():
    r = facet_analysis(si_pyramids(2, 96), 0.1, 0.1, grain_size_um=9.6)
    d = r.to_dict()
    assert d["summary"]["facet_count"] == 16
    # each face's equivalent diameter from its own true area, sqrt(4A/pi)
    f = d["facets"][0]
    assert math.isclose(f["equivalent_diameter_um"], math.sqrt(4 * f["area_um2"] / math.pi))
    assert math.isclose(
        d["summary"]["facet_to_grain_size_ratio"], d["summary"]["mean_facet_diameter_um"] / 9.6
    )
    assert math.isclose(sum(d["tilt_histogram"]["area_fraction"]), 1.0)
    dist = d["equivalent_diameter_distribution"]
    assert sum(dist["count"]) == 16 and math.isclose(sum(dist["area_fraction"]), 1.0)


def test_lambert_projection_is_equal_area():
    # Lambert azimuthal equal-area projection (Snyder 1987): normals uniform over the
    # hemisphere give a flat density of 1 multiple of uniform
    rng = np.random.default_rng(3)
    v = rng.standard_normal((400_000, 3))
    v /= np.linalg.norm(v, axis=1)[:, None]
    v[:, 2] = np.abs(v[:, 2])
    dens, _ = lambert_projection_density(v, bins=12, weights=None)
    c = (np.arange(12) + 0.5) * (2 * math.sqrt(2) / 12) - math.sqrt(2)
    inner = (c[:, None] ** 2 + c[None, :] ** 2) < 1.6  # cells fully inside the disc
    assert abs(np.nanmean(dens[inner]) - 1.0) < 0.03
    assert np.nanstd(dens[inner]) < 0.05
    # radius of the 90 deg circle is sqrt(2)
    x, y = lambert_coordinates(np.array([[1.0, 0.0, 0.0]]))
    assert math.isclose(float(x[0]), math.sqrt(2)) and abs(float(y[0])) < 1e-12


def test_curved_surface_is_not_one_facet():
    # a sphere cap is nowhere planar within 5 deg over a large area
    yy, xx = np.mgrid[-100:100, -100:100] * 0.1
    z = np.sqrt(np.maximum(30.0**2 - xx**2 - yy**2, 0))
    n = surface_normals(z, 0.1, 0.1)
    lab = segment_facets(n, planarity_tol_deg=5.0, min_area_px=50)
    if lab.max():
        largest = np.bincount(lab.ravel())[1:].max()
        # a 5 deg cone of normals on a sphere of radius 30 um covers a disc of about
        # 30*tan(5 deg) = 2.6 um radius: ~ 2100 px; anything far larger would be wrong
        assert largest < 4000


def test_projection_png_written(tmp_path):
    from fracto.surface.facets import plot_lambert_projection

    r = facet_analysis(si_pyramids(1, 64), 0.1, 0.1)
    dens, ext = r.projection_density(bins=36)
    out = tmp_path / "p.png"
    plot_lambert_projection(dens, ext, out)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_bad_input():
    with pytest.raises(FractoInputError):
        facet_analysis(np.full((10, 10), np.nan), 1, 1)
    with pytest.raises(FractoInputError):
        facet_analysis(np.zeros(10), 1, 1)
    with pytest.raises(FractoInputError):
        segment_facets(np.zeros((5, 5, 3)), planarity_tol_deg=0)


def test_cli_json_and_errors(tmp_path):
    from fracto.cli import cli

    p = tmp_path / "pyr.npy"
    np.save(p, si_pyramids(2, 96))
    png = tmp_path / "proj.png"
    res = CliRunner().invoke(
        cli, ["facets", str(p), "--pixel-size", "0.1um", "--json", "--projection", str(png)]
    )
    assert res.exit_code == 0, res.output
    import json

    doc = json.loads(res.output)
    assert doc["summary"]["facet_count"] == 16
    assert abs(doc["summary"]["area_weighted_tilt_deg"] - SI111_DEG) < 1.0
    assert doc["summary"]["lateral_unit"] == "um"
    assert {"area_um2", "tilt_deg", "azimuth_deg", "centroid_x_um", "centroid_y_um"} <= set(
        doc["facets"][0]
    )
    assert "version" in doc and "processing" in doc and doc["pixel_size"]["calibrated"]
    assert png.exists()
    # readable table without --json
    res = CliRunner().invoke(cli, ["facets", str(p), "--pixel-size", "0.1um"])
    assert res.exit_code == 0 and "area-weighted tilt" in res.output
    # uncalibrated: lateral unit px, and said so
    res = CliRunner().invoke(cli, ["facets", str(p), "--json"])
    assert json.loads(res.output)["summary"]["lateral_unit"] == "px"


def test_cli_bad_file_exit_2(tmp_path):
    import subprocess
    import sys

    bad = tmp_path / "bad.npy"
    bad.write_bytes(b"not an array")
    proc = subprocess.run(
        [sys.executable, "-m", "fracto", "facets", str(bad)], capture_output=True, text=True
    )
    assert proc.returncode == 2
    assert proc.stderr.startswith("fracto: ") and proc.stderr.count("\n") == 1


@pytest.mark.parametrize("scale_um", [0.2, 0.4])
def test_noisy_pyramids_at_a_smoothing_scale(scale_um):
    # measurement noise (10 nm RMS on 100 nm pixels) with smoothed normals: still the
    # four {111} faces per pyramid (microfabrication practice, 54.7356 deg), and no extra
    # "facets" in the bands along the ridges where smoothed normals turn between faces
    rng = np.random.default_rng(5)
    z = si_pyramids() + rng.normal(0, 0.01, (384, 384))
    r = facet_analysis(z, 0.1, 0.1, scale_um=scale_um)
    assert r.facet_count == 36
    assert all(abs(f.tilt_deg - SI111_DEG) < 1.0 for f in r.facets)
