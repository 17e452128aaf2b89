"""STL meshes rasterised to height maps (files written with numpy-stl, ASCII and binary).

Checks: analytic surfaces (a tilted plane, a square pyramid) sampled at the
pixel centres; the highest of two overlapping surfaces; NaN outside the mesh;
and linear interpolation on a random triangulated surface against
matplotlib.tri.LinearTriInterpolator, a general-purpose reference.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from stl import Mode, mesh

from fracto.errors import FractoInputError
from fracto.io import read_height_map
from fracto.io.stl import grid_to_triangles, median_edge_length, rasterise_top


def _save(path, tris, binary=True):
    m = mesh.Mesh(np.zeros(len(tris), dtype=mesh.Mesh.dtype))
    m.vectors[:] = np.asarray(tris, dtype=np.float32)
    m.save(str(path), mode=Mode.BINARY if binary else Mode.ASCII)
    return path


def _plane_square(a, b, c, size):
    """Two triangles covering [0, size]^2 with z = a x + b y + c."""

    def p(x, y):
        return (x, y, a * x + b * y + c)

    s = size
    return [[p(0, 0), p(s, 0), p(s, s)], [p(0, 0), p(s, s), p(0, s)]]


@pytest.mark.parametrize("binary", [True, False])
def test_tilted_plane_analytic(tmp_path, binary):
    # Plane z = 0.25 x - 0.5 y + 2 over [0, 8]^2 (coordinates in um); raster step 0.5 um:
    # pixel (i, j) is at x = 0.5 j, y = 0.5 i, so z = 0.125 j - 0.25 i + 2 exactly.
    p = _save(tmp_path / "plane.stl", _plane_square(0.25, -0.5, 2.0, 8.0), binary)
    hm = read_height_map(p, stl_pixel_size_um=0.5)
    assert hm.shape == (17, 17)
    ii, jj = np.mgrid[0:17, 0:17]
    np.testing.assert_allclose(hm.z_um, 0.125 * jj - 0.25 * ii + 2.0, atol=1e-5)
    assert hm.pixel_size.x_um == 0.5 and hm.pixel_size.source == "command line"
    assert hm.metadata["n_triangles"] == 2


def test_pyramid_analytic_and_units(tmp_path):
    # Square pyramid, base [-1, 1]^2 mm, apex 0.5 mm: z = 0.5 (1 - max(|x|, |y|)) mm.
    apex = (0.0, 0.0, 0.5)
    corners = [(-1, -1, 0), (1, -1, 0), (1, 1, 0), (-1, 1, 0)]
    tris = [[corners[k], corners[(k + 1) % 4], apex] for k in range(4)]
    p = _save(tmp_path / "pyr.stl", tris)
    hm = read_height_map(p, z_unit="mm", stl_pixel_size_um=100.0)  # 0.1 mm steps
    n = hm.shape[0]
    assert hm.shape == (21, 21) and n == 21
    x = -1.0 + 0.1 * np.arange(n)
    xx, yy = np.meshgrid(x, x)
    exact_mm = 0.5 * (1 - np.maximum(np.abs(xx), np.abs(yy)))
    # 1 mm = 1000 um (SI prefix milli).
    np.testing.assert_allclose(hm.z_um, exact_mm * 1e3, atol=1e-3)
    np.testing.assert_allclose(hm.metadata["stl_origin"], [-1000.0, -1000.0], atol=1e-3)


def test_highest_surface_wins_and_uncovered_is_nan(tmp_path):
    low = _plane_square(0.0, 0.0, 1.0, 4.0)
    high = [[(0, 0, 3.0), (2, 0, 3.0), (0, 2, 3.0)]]  # a small triangle above, lower-left corner
    p = _save(tmp_path / "two.stl", low + high)
    hm = read_height_map(p, stl_pixel_size_um=1.0)
    assert hm.shape == (5, 5)
    inside_high = np.add.outer(np.arange(5), np.arange(5)) <= 2  # x + y <= 2 (pixels = um)
    np.testing.assert_allclose(hm.z_um[inside_high], 3.0)
    np.testing.assert_allclose(hm.z_um[~inside_high], 1.0)
    # A single triangle: pixels with x + y > 4 are outside and must be NaN.
    p = _save(tmp_path / "tri.stl", [[(0, 0, 0.0), (4, 0, 1.0), (0, 4, 2.0)]])
    hm = read_height_map(p, stl_pixel_size_um=1.0)
    outside = np.add.outer(np.arange(5), np.arange(5)) > 4
    assert np.isnan(hm.z_um[outside]).all() and np.isfinite(hm.z_um[~outside]).all()
    # Barycentric plane through the three vertices: z = x/4 + 2 y/4.
    ii, jj = np.nonzero(~outside)
    np.testing.assert_allclose(hm.z_um[ii, jj], jj / 4 + 2 * ii / 4, atol=1e-6)


def test_grid_mesh_round_trip_and_median_edge(tmp_path):
    rng = np.random.default_rng(0)
    z = rng.normal(size=(30, 40))
    tris = grid_to_triangles(z, step=0.2)
    # Edges of a right-triangle grid mesh: two of length 0.2, one diagonal 0.2*sqrt(2) per
    # triangle, so the median is 0.2.
    assert median_edge_length(tris) == pytest.approx(0.2, rel=1e-12)
    p = _save(tmp_path / "grid.stl", tris)
    hm = read_height_map(p)
    assert hm.pixel_size.source == "STL mesh"
    assert hm.pixel_size.x_um == pytest.approx(0.2, rel=1e-6)
    # Vertices are stored as float32 in STL; the raster reproduces them at the nodes.
    np.testing.assert_allclose(hm.z_um, z.astype(np.float32), atol=1e-5)


def test_against_matplotlib_linear_tri_interpolator():
    import matplotlib.tri as mtri

    rng = np.random.default_rng(5)
    z = rng.normal(size=(12, 15))
    tris = grid_to_triangles(z, step=1.0)
    step = 0.37
    grid, (x0, y0) = rasterise_top(tris, step)
    # Reference: the same triangles (a b d and a d c per cell, a = (i, j), b = (i, j+1),
    # c = (i+1, j), d = (i+1, j+1)) given to matplotlib's linear interpolator.
    ny0, nx0 = z.shape
    node = np.arange(ny0 * nx0).reshape(ny0, nx0)
    a, b = node[:-1, :-1].ravel(), node[:-1, 1:].ravel()
    c, d = node[1:, :-1].ravel(), node[1:, 1:].ravel()
    triangles = np.concatenate([np.stack([a, b, d], 1), np.stack([a, d, c], 1)])
    jn, in_ = np.meshgrid(np.arange(nx0), np.arange(ny0))
    tri = mtri.Triangulation(jn.ravel() * 1.0, in_.ravel() * 1.0, triangles)
    interp = mtri.LinearTriInterpolator(tri, z.ravel())
    ny, nx = grid.shape
    xx, yy = np.meshgrid(x0 + step * np.arange(nx), y0 + step * np.arange(ny))
    ref = np.ma.filled(interp(xx, yy), np.nan)
    ok = np.isfinite(ref)
    assert ok.mean() > 0.9
    np.testing.assert_allclose(grid[ok], ref[ok], atol=1e-9)


def test_explicit_pixel_size_is_raster_step(tmp_path):
    p = _save(tmp_path / "plane.stl", _plane_square(0.0, 1.0, 0.0, 2.0))
    hm = read_height_map(p, pixel_size="0.5um")
    assert hm.shape == (5, 5) and hm.pixel_size.source == "command line"


@pytest.mark.parametrize(
    "content",
    [
        b"solid nothing\nendsolid nothing\n",
        b"solid x\n facet normal 0 0 1\n outer loop\n vertex 0 0 zz\n",
        b"\x00" * 80 + (5).to_bytes(4, "little") + b"\x00" * 20,  # truncated binary
    ],
)
def test_bad_stl(tmp_path, content):
    p = tmp_path / "bad.stl"
    p.write_bytes(content)
    with pytest.raises(FractoInputError):
        read_height_map(p)


def test_bad_stl_step_and_walls(tmp_path):
    p = _save(tmp_path / "plane.stl", _plane_square(0.0, 1.0, 0.0, 2.0))
    for bad in (0.0, -1.0, float("nan")):
        with pytest.raises(FractoInputError):
            read_height_map(p, stl_pixel_size_um=bad)
    with pytest.raises(FractoInputError):
        read_height_map(p, stl_pixel_size_um=1e-5)  # raster far too large
    wall = _save(tmp_path / "wall.stl", [[(0, 0, 0), (1, 0, 0), (1, 0, 1)]])
    with pytest.raises(FractoInputError):
        read_height_map(wall)


@settings(
    max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(blob=st.binary(max_size=400), prefix=st.sampled_from([b"", b"solid a\n", b"\x00" * 80]))
def test_property_garbage_only_input_errors(tmp_path, blob, prefix):
    p = tmp_path / "g.stl"
    p.write_bytes(prefix + blob)
    try:
        read_height_map(p, stl_pixel_size_um=0.5)
    except FractoInputError:
        pass


def test_fast_ascii_parser_matches_numpy_stl(tmp_path):
    from fracto.io.stl import _ascii_vectors

    rng = np.random.default_rng(7)
    tris = rng.normal(size=(50, 3, 3))
    p = _save(tmp_path / "r.stl", tris, binary=False)
    ours = _ascii_vectors(p.read_bytes())
    ref = mesh.Mesh.from_file(str(p), mode=Mode.ASCII).vectors  # numpy-stl's own parser
    # numpy-stl holds float32; ours keeps the printed decimals in float64.
    np.testing.assert_array_equal(ours.astype(np.float32), ref)
    np.testing.assert_allclose(ours, ref, rtol=1e-6)
