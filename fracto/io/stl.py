"""STL meshes (ASCII and binary, read with numpy-stl) rasterised to height maps.

The surface is seen from above (+z): each pixel takes the highest z of the
triangles that cover its centre, found by barycentric interpolation; pixels no
triangle covers are NaN. Triangles whose xy projection has no area (walls) are
skipped.

Raster (fracto convention): pixel centres lie on ``x = x_min + j * step`` and
``y = y_min + i * step`` (row ``i``, column ``j``), with ``x_min``, ``y_min`` the
smallest vertex coordinates; a mesh made from a height grid with its vertices
at the grid nodes therefore rasterises back onto the same nodes. The step is
``stl_pixel_size_um`` (or the explicit ``pixel_size``), else the median length
of the triangle edges projected on the xy plane, rounded to 6 significant
digits (STL holds float32 coordinates; source ``"STL mesh"``).
Coordinates are in ``z_unit``.
"""

from __future__ import annotations

import io
import os

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.io.heightmap import HeightMap, coerce_pixel_size, finish, read_file_bytes
from fracto.units import length_unit_factor

#: Largest raster produced (pixels).
MAX_PIXELS = 64_000_000
#: (triangle, pixel) candidate pairs handled per vectorised chunk.
CHUNK_PAIRS = 2_000_000


def _ascii_vectors(data: bytes) -> np.ndarray | None:
    """Fast reader for ASCII STL: the three numbers after each ``vertex`` keyword.

    Returns None when `data` does not look like a complete ASCII STL, so that
    numpy-stl gets the file instead.
    """
    head = data[:1024].lstrip()
    if not head[:5].lower() == b"solid" or b"facet" not in data[:4096]:
        return None
    tokens = np.array(data.split())
    at = np.nonzero((tokens == b"vertex") | (tokens == b"VERTEX"))[0]
    if at.size == 0 or at.size % 3 or at[-1] + 3 >= tokens.size:
        return None
    try:
        xyz = tokens[at[:, None] + np.arange(1, 4)].astype(np.float64)
    except ValueError:
        return None
    return xyz.reshape(-1, 3, 3)


def _load_mesh_vectors(data: bytes, name: str) -> np.ndarray:
    from stl import Mode, mesh

    fast = _ascii_vectors(data)
    if fast is not None:
        return fast

    last: Exception | None = None
    for mode in (Mode.AUTOMATIC, Mode.BINARY):
        try:
            m = mesh.Mesh.from_file(name, fh=io.BytesIO(data), mode=mode, speedups=False)
            v = np.asarray(m.vectors, dtype=np.float64)
            if v.ndim == 3 and v.shape[1:] == (3, 3) and v.shape[0] > 0:
                return v
        except Exception as exc:
            last = exc
    raise FractoInputError(f"'{name}' is not a readable STL mesh.") from last


def median_edge_length(vectors: np.ndarray) -> float:
    """Median length of the triangle edges projected on the xy plane (zero-length excluded)."""
    xy = vectors[:, :, :2]
    e = np.concatenate(
        [
            np.hypot(*(xy[:, 1] - xy[:, 0]).T),
            np.hypot(*(xy[:, 2] - xy[:, 1]).T),
            np.hypot(*(xy[:, 0] - xy[:, 2]).T),
        ]
    )
    e = e[e > 0]
    return float(np.median(e)) if e.size else 0.0


def rasterise_top(
    vectors: np.ndarray,
    step: float,
    *,
    origin: tuple[float, float] | None = None,
    shape: tuple[int, int] | None = None,
) -> tuple[np.ndarray, tuple[float, float]]:
    """Rasterise triangles to the highest z at each pixel centre.

    Parameters
    ----------
    vectors : ndarray, shape (n, 3, 3)
        Triangle vertices (x, y, z).
    step : float
        Pixel spacing in the mesh's length unit.
    origin : (x0, y0), optional
        Centre of pixel (0, 0); default the smallest vertex x and y.
    shape : (ny, nx), optional
        Raster shape; default just large enough to hold every vertex.

    Returns
    -------
    (ndarray, (x0, y0))
        Heights (NaN where no triangle covers the pixel centre) and the origin.
    """
    v = np.asarray(vectors, dtype=np.float64)
    if origin is None:
        origin = (float(v[:, :, 0].min()), float(v[:, :, 1].min()))
    x0, y0 = origin
    # Pixel coordinates (column u, row w) keep the arithmetic well conditioned.
    u = (v[:, :, 0] - x0) / step
    w = (v[:, :, 1] - y0) / step
    z = v[:, :, 2]
    # Tolerance in pixels: STL stores float32 coordinates, so a vertex meant to sit on a
    # pixel centre may miss it by a few float32 ulps of the absolute coordinate.
    mag = float(np.abs(v[:, :, :2]).max()) if v.size else 0.0
    eps = 1e-9 + 4.0 * float(np.finfo(np.float32).eps) * mag / step
    if shape is None:
        nx = int(np.floor(u.max() + eps)) + 1
        ny = int(np.floor(w.max() + eps)) + 1
    else:
        ny, nx = shape
    if nx * ny > MAX_PIXELS:
        raise FractoInputError(
            f"Rasterising this STL at that step would give {ny} x {nx} pixels; "
            "give a larger STL pixel size."
        )
    out = np.full(ny * nx, -np.inf)
    u1, u2, u3 = u[:, 0], u[:, 1], u[:, 2]
    w1, w2, w3 = w[:, 0], w[:, 1], w[:, 2]
    den = (w2 - w3) * (u1 - u3) + (u3 - u2) * (w1 - w3)
    keep = np.abs(den) > 1e-12 * (np.ptp(u, axis=1) * np.ptp(w, axis=1) + 1e-300)
    keep &= np.isfinite(den) & np.isfinite(z).all(axis=1)
    j0 = np.ceil(u.min(axis=1) - eps).astype(np.int64)
    j1 = np.floor(u.max(axis=1) + eps).astype(np.int64)
    i0 = np.ceil(w.min(axis=1) - eps).astype(np.int64)
    i1 = np.floor(w.max(axis=1) + eps).astype(np.int64)
    j0 = np.maximum(j0, 0)
    i0 = np.maximum(i0, 0)
    j1 = np.minimum(j1, nx - 1)
    i1 = np.minimum(i1, ny - 1)
    ext = np.maximum(np.ptp(u, axis=1), np.ptp(w, axis=1))
    wj = j1 - j0 + 1
    wi = i1 - i0 + 1
    keep &= (wj > 0) & (wi > 0)
    with np.errstate(divide="ignore"):
        inv = 1.0 / den
    d23w, d32u, d31w, d13u = w2 - w3, u3 - u2, w3 - w1, u1 - u3
    tri = np.nonzero(keep)[0]
    counts = (wj[tri] * wi[tri]).astype(np.int64)
    # Chunks of triangles whose pair counts sum to about CHUNK_PAIRS.
    csum = np.cumsum(counts)
    start = 0
    while start < tri.size:
        base = csum[start - 1] if start else 0
        stop = int(np.searchsorted(csum, base + CHUNK_PAIRS, side="right"))
        stop = max(stop, start + 1)
        t = tri[start:stop]
        c = counts[start:stop]
        rep = np.repeat(np.arange(t.size), c)
        first = np.concatenate(([0], np.cumsum(c)[:-1]))
        k = np.arange(int(c.sum())) - np.repeat(first, c)
        tt = t[rep]
        width = wj[tt]
        jj = j0[tt] + k % width
        ii = i0[tt] + k // width
        dx = jj - u3[tt]
        dy = ii - w3[tt]
        a = (d23w[tt] * dx + d32u[tt] * dy) * inv[tt]
        b = (d31w[tt] * dx + d13u[tt] * dy) * inv[tt]
        cc = 1.0 - a - b
        # Barycentric tolerance: `eps` pixels relative to the triangle's extent.
        tol = -eps / np.maximum(ext[tt], 1.0)
        inside = (a >= tol) & (b >= tol) & (cc >= tol)
        if inside.any():
            zz = a * z[tt, 0] + b * z[tt, 1] + cc * z[tt, 2]
            np.maximum.at(out, (ii * nx + jj)[inside], zz[inside])
        start = stop
    out[np.isneginf(out)] = np.nan
    return out.reshape(ny, nx), (x0, y0)


def read_stl(
    path: str | os.PathLike,
    *,
    pixel_size: PixelSize | str | None = None,
    z_unit: str = "um",
    stl_pixel_size_um: float | None = None,
    data: bytes | None = None,
) -> HeightMap:
    """Read an STL mesh (ASCII or binary) and rasterise it to a height map.

    Parameters
    ----------
    path : path-like
        ``.stl`` file; coordinates in `z_unit`.
    pixel_size : PixelSize or str, optional
        Raster step (its x value; square pixels) when `stl_pixel_size_um` is not given.
    z_unit : str
        Unit of all mesh coordinates.
    stl_pixel_size_um : float, optional
        Raster step in µm; default the median projected edge length.

    Returns
    -------
    HeightMap
        Highest surface z at each pixel centre (µm), NaN where uncovered.
    """
    name = os.fspath(path)
    factor = length_unit_factor(z_unit)
    if data is None:
        data = read_file_bytes(path)
    vectors = _load_mesh_vectors(data, name)
    if not np.isfinite(vectors).all():
        raise FractoInputError(f"'{name}' has mesh vertices that are not finite numbers.")
    explicit = coerce_pixel_size(pixel_size)
    if stl_pixel_size_um is not None:
        try:
            step_um = float(stl_pixel_size_um)
        except (TypeError, ValueError) as exc:
            raise FractoInputError(
                f"The STL pixel size must be a number of µm, not {stl_pixel_size_um!r}."
            ) from exc
        if not (np.isfinite(step_um) and step_um > 0):
            raise FractoInputError(f"The STL pixel size must be positive, not {step_um!r} µm.")
        source = "command line"
    elif explicit is not None and explicit.calibrated:
        if explicit.x_um != explicit.y_um:
            raise FractoInputError("An STL is rasterised on square pixels; give one pixel size.")
        step_um = float(explicit.x_um)  # type: ignore[arg-type]
        source = explicit.source
    else:
        edge = median_edge_length(vectors)
        if not edge > 0:
            raise FractoInputError(f"'{name}' has no triangle with an extent in x and y.")
        # STL stores float32 (about 7 significant digits): round the estimate to 6 so
        # that float32 noise in the vertices does not drift the raster off the nodes.
        step_um = float(f"{edge:.6g}") * factor
        source = "STL mesh"
    grid, (x0, y0) = rasterise_top(vectors, step_um / factor)
    meta = {
        "format": "stl",
        "n_triangles": int(vectors.shape[0]),
        "stl_origin": [x0 * factor, y0 * factor],
        "stl_step_um": step_um,
        "z_unit": z_unit,
        "z_unit_source": "argument",
    }
    return finish(
        grid, path, z_factor=factor, pixel_size=PixelSize.square(step_um, source), metadata=meta
    )


def grid_to_triangles(z: np.ndarray, step: float = 1.0) -> np.ndarray:
    """Triangulate a height grid (two triangles per cell; cells with NaN skipped).

    Vertices sit at ``(j * step, i * step, z[i, j])``. Returns shape (n, 3, 3).
    """
    z = np.asarray(z, dtype=np.float64)
    ny, nx = z.shape
    jj, ii = np.meshgrid(np.arange(nx - 1), np.arange(ny - 1))
    jj, ii = jj.ravel(), ii.ravel()

    def p(i: np.ndarray, j: np.ndarray) -> np.ndarray:
        return np.stack([j * step, i * step, z[i, j]], axis=-1)

    a, b, c, d = p(ii, jj), p(ii, jj + 1), p(ii + 1, jj), p(ii + 1, jj + 1)
    t1 = np.stack([a, b, d], axis=1)
    t2 = np.stack([a, d, c], axis=1)
    tris = np.concatenate([t1, t2])
    ok = np.isfinite(tris).all(axis=(1, 2))
    return tris[ok]
