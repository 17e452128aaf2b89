"""Facet orientation of height maps: local normals, tilt/azimuth distributions,
equal-area (Lambert) projection of the normals, planar-facet segmentation,
facet areas and sizes, and dihedral angles between neighbouring facets.

Conventions
-----------
* ``z_um`` has rows along y and columns along x; ``dx`` and ``dy`` are the
  column and row spacings (µm, or 1 pixel when uncalibrated).
* The upward unit normal of the surface ``z(x, y)`` is
  ``n = (-dz/dx, -dz/dy, 1) / sqrt(1 + |grad z|^2)``.
* **Tilt** is the angle between the normal and +z (0° = horizontal facet),
  **azimuth** the direction of the normal's horizontal part,
  ``atan2(n_y, n_x)`` in degrees in [0, 360), counted from +x towards +y
  (y = increasing row index): a facet that faces +x has azimuth 0°.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage, sparse
from scipy.sparse import csgraph

from fracto.errors import FractoInputError

__all__ = [
    "Facet",
    "FacetResult",
    "dihedral_angles",
    "facet_analysis",
    "lambert_coordinates",
    "lambert_projection_density",
    "plot_lambert_projection",
    "segment_facets",
    "surface_normals",
    "tilt_azimuth",
]


# ----------------------------------------------------------------------------- normals
def _check_map(z_um: np.ndarray) -> np.ndarray:
    z = np.asarray(z_um, dtype=np.float64)
    if z.ndim != 2 or min(z.shape) < 3:
        raise FractoInputError("The height map must be a 2-D array of at least 3 x 3 points.")
    if not np.isfinite(z).any():
        raise FractoInputError("The height map holds no valid (finite) heights.")
    return z


def surface_normals(
    z_um: np.ndarray, dx: float, dy: float, *, scale_um: float | None = None
) -> np.ndarray:
    """Unit surface normals of a height map at a chosen lateral scale.

    Without a scale the slopes are the least-squares plane fit over each
    3 x 3 neighbourhood (the Prewitt operator: ``dz/dx`` = mean of the right
    column minus mean of the left column over ``2 dx``). With ``scale_um`` the
    slopes are those of a Gaussian-weighted least-squares plane fit of standard
    deviation ``scale_um`` (along x and along y; for a full symmetric window
    this is the derivative of the Gaussian-smoothed map), with NaN points
    given zero weight.

    Parameters
    ----------
    z_um : ndarray, shape (ny, nx)
        Heights in µm; NaN for points not measured.
    dx, dy : float
        Column and row spacing in µm (or 1.0 each for an uncalibrated map,
        which then needs heights in pixel units to give meaningful angles).
    scale_um : float, optional
        Standard deviation of the Gaussian window in the same lateral unit.

    Returns
    -------
    ndarray, shape (ny, nx, 3)
        ``(n_x, n_y, n_z)``; NaN where the slope is undefined.

    References
    ----------
    J. M. S. Prewitt, "Object enhancement and extraction", in *Picture
    Processing and Psychopictorics*, 1970 (3 x 3 plane-fit gradient).
    """
    z = _check_map(z_um)
    if not (dx > 0 and dy > 0):
        raise FractoInputError("The pixel spacing must be positive.")
    valid = np.isfinite(z)
    zf = np.where(valid, z, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        gx, gy, bad = _slopes(z, zf, valid, dx, dy, scale_um)
        inv = 1.0 / np.sqrt(1.0 + gx * gx + gy * gy)
        n = np.stack((-gx * inv, -gy * inv, inv), axis=-1)
    n[bad] = np.nan
    return n


def _slopes(z, zf, valid, dx, dy, scale_um):
    if scale_um is None or scale_um <= 0:
        # 3x3 least-squares plane: mean over 3 rows of the central difference.
        w = valid.astype(np.float64)
        num = ndimage.uniform_filter1d(zf, 3, axis=0, mode="nearest")
        cnt = ndimage.uniform_filter1d(w, 3, axis=0, mode="nearest")
        with np.errstate(invalid="ignore", divide="ignore"):
            zs_y = num / cnt  # mean over the three rows
        gx = np.full_like(z, np.nan)
        gx[:, 1:-1] = (zs_y[:, 2:] - zs_y[:, :-2]) / (2 * dx)
        gx[:, 0] = (zs_y[:, 1] - zs_y[:, 0]) / dx
        gx[:, -1] = (zs_y[:, -1] - zs_y[:, -2]) / dx
        num = ndimage.uniform_filter1d(zf, 3, axis=1, mode="nearest")
        cnt = ndimage.uniform_filter1d(w, 3, axis=1, mode="nearest")
        with np.errstate(invalid="ignore", divide="ignore"):
            zs_x = num / cnt
        gy = np.full_like(z, np.nan)
        gy[1:-1, :] = (zs_x[2:, :] - zs_x[:-2, :]) / (2 * dy)
        gy[0, :] = (zs_x[1, :] - zs_x[0, :]) / dy
        gy[-1, :] = (zs_x[-1, :] - zs_x[-2, :]) / dy
        # a slope needs the neighbours it was computed from
        bad = ~valid | ~np.isfinite(gx) | ~np.isfinite(gy)
        bad |= ndimage.minimum_filter(valid.astype(np.uint8), 3, mode="nearest") == 0
    else:
        sx, sy = scale_um / dx, scale_um / dy
        w = valid.astype(np.float64)
        gx, gy, norm = _gaussian_plane_slopes(zf, w, sx, sy)
        gx, gy = gx / dx, gy / dy
        bad = ~valid | (norm < 0.2)
    return gx, gy, bad


def _gaussian_plane_slopes(
    zf: np.ndarray, w: np.ndarray, sx: float, sy: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Slopes (per pixel) of the Gaussian-weighted least-squares plane fit over
    each window, with weights w (0 at missing points).

    The normal equations of z = a + b x + c y with sums weighted by
    g(x) g(y) w, solved per pixel; exact on planes whatever the kernel
    truncation, also at the map's edges and next to holes.
    """

    def kern(sig: float, power: int) -> np.ndarray:
        r = max(1, math.ceil(4 * sig))
        x = np.arange(-r, r + 1, dtype=np.float64)
        g = np.exp(-0.5 * (x / sig) ** 2)
        return g * x**power

    def cx(a: np.ndarray, power: int) -> np.ndarray:
        return ndimage.correlate1d(a, kern(sx, power), axis=1, mode="constant")

    def cy(a: np.ndarray, power: int) -> np.ndarray:
        return ndimage.correlate1d(a, kern(sy, power), axis=0, mode="constant")

    ny, nx = zf.shape
    wz = zf * w
    yz = cy(wz, 0)
    sz, sxz = cx(yz, 0), cx(yz, 1)
    syz = cy(cx(wz, 0), 1)
    if w.all():
        # weights all one: the weight sums are outer products of 1-D profiles
        def prof(n: int, sig_power: tuple) -> np.ndarray:
            return ndimage.correlate1d(np.ones(n), kern(*sig_power), mode="constant")

        gx0, gx1, gx2 = (prof(nx, (sx, k)) for k in (0, 1, 2))
        gy0, gy1, gy2 = (prof(ny, (sy, k)) for k in (0, 1, 2))
        s0 = np.outer(gy0, gx0)
        with np.errstate(invalid="ignore", divide="ignore"):
            gx = (sxz - np.outer(gy0, gx1) * sz / s0) / np.outer(gy0, gx2 - gx1 * gx1 / gx0)
            gy = (syz - np.outer(gy1, gx0) * sz / s0) / np.outer(gy2 - gy1 * gy1 / gy0, gx0)
    else:
        # full weighted plane fit: with holes the window is no longer symmetric
        yw = cy(w, 0)
        sxv, sxx = cx(yw, 1), cx(yw, 2)
        xw = cx(w, 0)
        s0, syv, syy = cy(xw, 0), cy(xw, 1), cy(xw, 2)
        sxy = cy(cx(w, 1), 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            cxx = sxx - sxv * sxv / s0
            cyy = syy - syv * syv / s0
            cxy = sxy - sxv * syv / s0
            cxz = sxz - sxv * sz / s0
            cyz = syz - syv * sz / s0
            det = cxx * cyy - cxy * cxy
            gx = (cxz * cyy - cyz * cxy) / det
            gy = (cyz * cxx - cxz * cxy) / det
    g0 = kern(sx, 0).sum() * kern(sy, 0).sum()
    return gx, gy, s0 / g0


def tilt_azimuth(normals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Tilt (from +z) and azimuth (``atan2(n_y, n_x)``, [0, 360)) in degrees.

    Parameters
    ----------
    normals : ndarray, shape (..., 3)
        Unit normals (NaN allowed).

    Returns
    -------
    tilt_deg, azimuth_deg : ndarray
        Same leading shape as `normals`; NaN where the normal is NaN. The
        azimuth of an exactly horizontal facet (tilt 0) is reported as 0.
    """
    n = np.asarray(normals, dtype=np.float64)
    nz = np.clip(n[..., 2], -1.0, 1.0)
    tilt = np.degrees(np.arccos(nz))
    az = np.degrees(np.arctan2(n[..., 1], n[..., 0])) % 360.0
    az = np.where(az >= 360.0, 0.0, az)  # -0.0 % 360 gives 360.0
    return tilt, az


def lambert_coordinates(normals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Equal-area (Lambert azimuthal) projection of upper-hemisphere normals.

    A normal at polar angle θ (the tilt) and azimuth φ maps to
    ``(X, Y) = 2 sin(θ/2) (cos φ, sin φ)``; the upper hemisphere fills the
    disc of radius √2, and equal solid angles map to equal areas.

    References
    ----------
    J. P. Snyder, *Map Projections — A Working Manual*, USGS Professional
    Paper 1395, 1987, ch. 24 (Lambert azimuthal equal-area projection).
    """
    n = np.asarray(normals, dtype=np.float64)
    nz = np.clip(n[..., 2], -1.0, 1.0)
    # 2 sin(θ/2) / sin θ = sqrt(2 / (1 + cos θ))
    k = np.sqrt(2.0 / (1.0 + nz))
    return n[..., 0] * k, n[..., 1] * k


def lambert_projection_density(
    normals: np.ndarray,
    *,
    bins: int = 72,
    weights: str | np.ndarray | None = "true_area",
) -> tuple[np.ndarray, tuple[float, float, float, float]]:
    """Density of normals on the equal-area projection, in multiples of uniform.

    Parameters
    ----------
    normals : ndarray, shape (..., 3)
        Unit normals; NaN normals are skipped.
    bins : int
        Number of cells along each side of the square [-√2, √2]².
    weights : {"true_area", "projected_area"} or ndarray or None
        ``"true_area"`` weights each pixel by its inclined area (1 / n_z),
        so the density describes the surface itself; ``"projected_area"`` or
        None weights each pixel equally; an array gives the weights directly.

    Returns
    -------
    density : ndarray, shape (bins, bins)
        Rows along Y, columns along X; 1.0 everywhere for normals spread
        uniformly over the hemisphere (the projection is equal-area, the
        hemisphere's 2π sr maps onto the disc's area 2π). Cells outside the
        disc are NaN.
    extent : tuple
        ``(x_min, x_max, y_min, y_max)`` of the grid, for plotting.

    References
    ----------
    Snyder (1987), see :func:`lambert_coordinates`.
    """
    n = np.asarray(normals, dtype=np.float64).reshape(-1, 3)
    ok = np.isfinite(n).all(axis=1)
    if isinstance(weights, str):
        if weights == "true_area":
            w = 1.0 / np.clip(n[:, 2], 1e-6, None)
        elif weights == "projected_area":
            w = np.ones(len(n))
        else:
            raise FractoInputError(f"Unknown weighting '{weights}' for the projection density.")
    elif weights is None:
        w = np.ones(len(n))
    else:
        w = np.asarray(weights, dtype=np.float64).reshape(-1)
    ok &= np.isfinite(w)
    X, Y = lambert_coordinates(n[ok])
    r = math.sqrt(2.0)
    h, _, _ = np.histogram2d(Y, X, bins=bins, range=[[-r, r], [-r, r]], weights=w[ok])
    total = h.sum()
    cell = (2 * r / bins) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        dens = h / total / (cell / (2 * np.pi)) if total > 0 else np.zeros_like(h)
    c = (np.arange(bins) + 0.5) * (2 * r / bins) - r
    outside = (c[:, None] ** 2 + c[None, :] ** 2) > 2.0
    dens[outside] = np.nan
    return dens, (-r, r, -r, r)


def plot_lambert_projection(
    density: np.ndarray,
    extent: tuple[float, float, float, float],
    path: str | os.PathLike,
    *,
    title: str = "Facet normals, equal-area projection",
) -> None:
    """Write the projection density as a PNG picture (atomically).

    Tilt circles are drawn every 15°; the azimuth is marked at 0°, 90°, 180°
    and 270° (0° = normals facing +x). Colour: the perceptually uniform
    ``cividis`` map, readable with colour-vision deficiencies.
    """
    import io

    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    from fracto.io.safe import write_bytes_atomic

    fig = Figure(figsize=(5.6, 4.8), dpi=120)
    ax = fig.add_subplot(1, 1, 1)
    im = ax.imshow(
        density,
        origin="lower",
        extent=extent,
        cmap="cividis",
        interpolation="nearest",
    )
    cb = fig.colorbar(im, ax=ax)
    cb.set_label("density (multiples of uniform)")
    t = np.linspace(0, 2 * np.pi, 361)
    for tilt in range(15, 91, 15):
        r = 2 * math.sin(math.radians(tilt) / 2)
        ax.plot(r * np.cos(t), r * np.sin(t), color="0.6", lw=0.6)
        ax.text(
            r * math.cos(math.radians(60)),
            r * math.sin(math.radians(60)),
            f"{tilt}°",
            fontsize=7,
            color="0.35",
        )
    rr = math.sqrt(2) + 0.2
    for az in (0, 90, 180, 270):
        a = math.radians(az)
        ax.text(rr * math.cos(a), rr * math.sin(a), f"{az}°", ha="center", va="center", fontsize=8)
    ax.set_xlim(-1.75, 1.75)
    ax.set_ylim(-1.75, 1.75)
    ax.set_aspect("equal")
    ax.set_xlabel("X = 2 sin(tilt/2) cos(azimuth)")
    ax.set_ylabel("Y = 2 sin(tilt/2) sin(azimuth)  (+y = map rows)")
    ax.set_title(title, fontsize=10)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    write_bytes_atomic(path, buf.getvalue())


# ----------------------------------------------------------------------------- segmentation
def _region_means(labels: np.ndarray, n: np.ndarray, count: int) -> np.ndarray:
    lab = labels.ravel()
    m = np.empty((count + 1, 3))
    for k in range(3):
        m[:, k] = np.bincount(lab, weights=n[..., k].ravel(), minlength=count + 1)
    norm = np.linalg.norm(m, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        m /= norm[:, None]
    return m


def _adjacent_pairs(labels: np.ndarray, *, return_counts: bool = False):
    """Unique pairs (a < b) of different non-zero labels touching in 4-connectivity
    (with the number of touching pixel pairs when `return_counts`)."""
    lo_parts, hi_parts = [], []
    for a, b in ((labels[:, :-1], labels[:, 1:]), (labels[:-1, :], labels[1:, :])):
        sel = (a != b) & (a > 0) & (b > 0)
        av, bv = a[sel], b[sel]
        lo_parts.append(np.minimum(av, bv))
        hi_parts.append(np.maximum(av, bv))
    lo = np.concatenate(lo_parts)
    hi = np.concatenate(hi_parts)
    idx_t = np.int32 if labels.max(initial=0) < 2**31 - 1 else np.int64
    if len(lo) == 0:
        p = np.zeros((0, 2), dtype=idx_t)
        return (p, np.zeros(0, dtype=np.int64)) if return_counts else p
    m = int(labels.max()) + 1
    # duplicates summed by the sparse matrix conversion (linear time, no sort)
    g = sparse.csr_matrix((np.ones(len(lo), dtype=np.int32), (lo, hi)), shape=(m, m))
    g.sum_duplicates()
    rows = np.repeat(np.arange(m, dtype=idx_t), np.diff(g.indptr))
    out = np.stack((rows, g.indices.astype(idx_t)), axis=1)
    return (out, g.data.astype(np.int64)) if return_counts else out


def segment_facets(
    normals: np.ndarray,
    *,
    planarity_tol_deg: float = 5.0,
    min_area_px: int = 50,
    max_merge_rounds: int = 30,
    min_merge_fraction: float = 1e-4,
    min_half_width_px: float = 1.0,
) -> np.ndarray:
    """Planar facets by region growing on the normals.

    Vectorised region growing in three steps:

    1. the normals are quantised on a square grid of the equal-area (Lambert)
       projection with cells of side ``tol`` (in radians, about ``tol`` of
       arc), and 4-connected pixels in one cell form seed regions;
    2. neighbouring regions whose mean normals differ by less than ``tol/2``
       are merged (union of the graph of such neighbours), and the mean
       normals are updated, until nothing merges (fragments of one plane that
       a cell edge split have nearly the same mean normal, so they rejoin;
       a curved surface, whose neighbouring cells differ by about ``tol``,
       stays split);
    3. a region is kept as a facet when it covers at least ``min_area_px``
       pixels, at least a quarter of that number are interior pixels (all
       four neighbours in the region: one-pixel lines along ridges and
       valleys are no facets), and the RMS angle of its pixel normals from
       its mean normal is at most ``tol``.

    Parameters
    ----------
    normals : ndarray, shape (ny, nx, 3)
        Unit normals (NaN for undefined points), e.g. from :func:`surface_normals`.
    planarity_tol_deg : float
        Angular tolerance of a planar facet.
    min_area_px : int
        Smallest facet in pixels.
    max_merge_rounds : int
        Upper bound on merging rounds.
    min_half_width_px : float
        A facet must contain a disc of this radius (pixels). With normals
        smoothed at scale σ, the band along each ridge where the normals turn
        from one face to the next is about 2σ wide on either side; giving
        2σ here keeps those bands out (:func:`facet_analysis` does).
    min_merge_fraction : float
        Merging stops when a round would join fewer than this fraction of the
        regions (the tail of rounds that each join a handful of tiny regions
        changes no facet of useful size but costs a pass over the graph).

    Returns
    -------
    ndarray of int32, shape (ny, nx)
        Facet labels 1..N; 0 for pixels in no facet.

    References
    ----------
    R. Adams and L. Bischof, "Seeded region growing", *IEEE Trans. PAMI* 16,
    1994 (region growing on a homogeneity criterion; here applied to normals).
    """
    n = np.asarray(normals, dtype=np.float64)
    if n.ndim != 3 or n.shape[2] != 3:
        raise FractoInputError("The normals must be an array of shape (ny, nx, 3).")
    if not (0 < planarity_tol_deg < 90):
        raise FractoInputError("The planarity tolerance must lie between 0 and 90 degrees.")
    tol = math.radians(planarity_tol_deg)
    valid = np.isfinite(n).all(axis=2)
    X, Y = lambert_coordinates(np.where(valid[..., None], n, 0.0))
    nb = math.ceil(2 * math.sqrt(2) / tol) + 1
    qx = np.floor((X + math.sqrt(2)) / tol).astype(np.int64)
    qy = np.floor((Y + math.sqrt(2)) / tol).astype(np.int64)
    cell = qy * nb + qx + 1
    cell[~valid] = 0
    # connected components of pixels in the same cell: the seed regions
    labels0 = _label_equal(cell)
    n0 = int(labels0.max())
    nn = np.where(valid[..., None], n, 0.0)
    cos_merge = math.cos(tol / 2)
    # the merging works on region sums and on the region adjacency graph, so the
    # pixels are visited only once
    lab0 = labels0.ravel()
    sums0 = np.stack(
        [np.bincount(lab0, weights=nn[..., k].ravel(), minlength=n0 + 1) for k in range(3)],
        axis=1,
    )
    pairs = _adjacent_pairs(labels0)  # region adjacency graph, in current labels
    mapping = np.arange(n0 + 1, dtype=np.int64)
    count = n0
    changed = np.ones(n0 + 1, dtype=bool)  # regions whose mean moved last round
    for _ in range(max_merge_rounds):
        if count < 2 or len(pairs) == 0:
            break
        sums = np.stack(
            [np.bincount(mapping, weights=sums0[:, k], minlength=count + 1) for k in range(3)],
            axis=1,
        )
        with np.errstate(invalid="ignore", divide="ignore"):
            means = sums / np.sqrt(np.einsum("ij,ij->i", sums, sums))[:, None]
        # only pairs next to a region that changed can have become mergeable
        cand = pairs[changed[pairs[:, 0]] | changed[pairs[:, 1]]]
        cand = cand[cand[:, 0] != cand[:, 1]]  # pairs inside one merged region
        cosang = np.einsum("ij,ij->i", means[cand[:, 0]], means[cand[:, 1]])
        p = cand[cosang > cos_merge]
        if len(p) == 0 or len(p) < min_merge_fraction * count:
            break
        g = sparse.coo_matrix(
            (np.ones(len(p), dtype=np.int8), (p[:, 0], p[:, 1])), shape=(count + 1, count + 1)
        )
        ncomp, comp = csgraph.connected_components(g, directed=False)
        # renumber so that the background (node 0, which has no edges) stays 0
        comp = comp.astype(pairs.dtype)
        bg = comp[0]
        comp = np.where(comp > bg, comp, comp + 1)
        comp[0] = 0
        size = np.bincount(comp, minlength=ncomp)
        changed = size[comp] > 1  # old label -> merged this round
        changed = np.bincount(comp, weights=changed, minlength=ncomp) > 0
        mapping = comp[mapping]
        pairs = comp[pairs]
        count = ncomp - 1
    labels = mapping[labels0].astype(np.int32)
    if count == 0:
        return labels
    means = _region_means(labels, nn, count)
    lab = labels.ravel()
    area = np.bincount(lab, minlength=count + 1)
    cosdev = np.einsum("ij,ij->i", nn.reshape(-1, 3), means[lab])
    ang2 = np.arccos(np.clip(cosdev, -1, 1)) ** 2
    ang2[lab == 0] = 0
    with np.errstate(invalid="ignore", divide="ignore"):
        rms = np.sqrt(np.bincount(lab, weights=ang2, minlength=count + 1) / area)
    # a facet needs an interior: pixels whose four neighbours share its label
    # (one-pixel-wide lines along ridges and valleys are not facets)
    inner = labels.copy()
    inner[1:, :][labels[1:, :] != labels[:-1, :]] = 0
    inner[:-1, :][labels[:-1, :] != labels[1:, :]] = 0
    inner[:, 1:][labels[:, 1:] != labels[:, :-1]] = 0
    inner[:, :-1][labels[:, :-1] != labels[:, 1:]] = 0
    interior = np.bincount(inner.ravel(), minlength=count + 1)
    keep = (area >= min_area_px) & (rms <= tol) & (interior >= max(1, min_area_px // 4))
    if min_half_width_px > 1.0:
        # a facet must hold a disc of radius min_half_width_px: bands along ridges,
        # where smoothed normals turn gradually from one face to the next, are thinner.
        # Distance to the region's own border (the image edge is no border), computed
        # on each candidate's bounding box only.
        r = math.ceil(min_half_width_px) + 1
        ny, nx = labels.shape
        keep[0] = False
        cand = np.nonzero(keep)[0]
        cid = np.zeros(count + 1, dtype=np.int32)
        cid[cand] = np.arange(1, len(cand) + 1)
        clab = cid[labels]
        for j, box in enumerate(ndimage.find_objects(clab)):
            if box is None:
                continue
            sy, sx = box
            y0, y1 = max(sy.start - r, 0), min(sy.stop + r, ny)
            x0, x1 = max(sx.start - r, 0), min(sx.stop + r, nx)
            m = clab[y0:y1, x0:x1] == j + 1
            pad = ((int(y0 == 0), int(y1 == ny)), (int(x0 == 0), int(x1 == nx)))
            m = np.pad(m, pad, mode="edge")
            keep[cand[j]] = ndimage.distance_transform_edt(m).max() > min_half_width_px
    keep[0] = False
    new = np.zeros(count + 1, dtype=np.int64)
    new[keep] = np.arange(1, keep.sum() + 1)
    return new[labels].astype(np.int32)


def _label_equal(cell: np.ndarray) -> np.ndarray:
    """4-connected components of pixels with equal non-zero value."""
    from skimage.measure import label

    lab = label(cell, background=0, connectivity=1)
    return lab.astype(np.int32)


# ----------------------------------------------------------------------------- facet properties
def _plane_fits(
    z: np.ndarray, labels: np.ndarray, count: int, dx: float, dy: float
) -> dict[str, np.ndarray]:
    """Least-squares plane z = a + b (x - xc) + c (y - yc) per label, by moments."""
    ny, nx = z.shape
    yy, xx = np.mgrid[0:ny, 0:nx]
    x = (xx * dx).ravel()
    y = (yy * dy).ravel()
    zz = z.ravel()
    lab = labels.ravel().copy()
    lab[~np.isfinite(zz)] = 0
    zz = np.where(np.isfinite(zz), zz, 0.0)

    def s(w: np.ndarray | None = None) -> np.ndarray:
        return np.bincount(lab, weights=w, minlength=count + 1)[1:]

    n = s()
    with np.errstate(invalid="ignore", divide="ignore"):
        xc, yc, zc = s(x) / n, s(y) / n, s(zz) / n
        lx = x - np.r_[0.0, xc][lab]
        ly = y - np.r_[0.0, yc][lab]
        lz = zz - np.r_[0.0, zc][lab]
        sxx, syy, sxy = s(lx * lx), s(ly * ly), s(lx * ly)
        sxz, syz = s(lx * lz), s(ly * lz)
        det = sxx * syy - sxy * sxy
        b = (sxz * syy - syz * sxy) / det
        c = (syz * sxx - sxz * sxy) / det
    return {"n": n, "xc": xc, "yc": yc, "zc": zc, "b": b, "c": c}


def dihedral_angles(
    labels: np.ndarray, facet_normals: np.ndarray, *, gap_px: int = 2, min_contact_px: int = 3
) -> list[tuple[int, int, float]]:
    """Angles between the normals of neighbouring facets.

    Two facets are neighbours when they come within ``gap_px`` pixels of each
    other (pixels near a ridge often belong to no facet) and share a border
    of at least ``min_contact_px`` pixel edges (facets that meet only at a
    corner point are not neighbours). The angle between
    the two planes' normals, ``arccos(n_a · n_b)``, is reported: 0° for
    parallel planes; the interior angle of the solid at a convex ridge is 180°
    minus this value.

    Parameters
    ----------
    labels : ndarray of int, shape (ny, nx)
        Facet labels 1..N (0 = none).
    facet_normals : ndarray, shape (N, 3)
        Unit normal of each facet, row ``i`` for label ``i + 1``.
    gap_px : int
        Largest unlabelled gap between neighbours.
    min_contact_px : int
        Shortest shared border, in pixel edges.

    Returns
    -------
    list of (label_a, label_b, angle_deg)
    """
    labels = np.asarray(labels)
    if labels.max(initial=0) == 0:
        return []
    grown = labels.copy()
    # grow the labels into the unlabelled gap, one pixel at a time
    for _ in range(max(gap_px, 0)):
        empty = grown == 0
        if not empty.any():
            break
        dil = ndimage.grey_dilation(grown, size=(3, 3))
        grown = np.where(empty, dil, grown)
    pairs, counts = _adjacent_pairs(grown, return_counts=True)
    pairs = pairs[counts >= min_contact_px]
    out = []
    fn = np.asarray(facet_normals, dtype=np.float64)
    for a, b in pairs:
        cosang = float(np.clip(np.dot(fn[a - 1], fn[b - 1]), -1.0, 1.0))
        out.append((int(a), int(b), math.degrees(math.acos(cosang))))
    return out


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True)
class Facet:
    """One planar facet; lateral lengths in µm (or px when uncalibrated)."""

    label: int
    area_px: int
    area_um2: float
    projected_area_um2: float
    equivalent_diameter_um: float
    projected_equivalent_diameter_um: float
    tilt_deg: float
    azimuth_deg: float
    centroid_x_um: float
    centroid_y_um: float
    normal: tuple[float, float, float]

    def to_dict(self) -> dict:
        return {
            "label": self.label,
            "area_px": self.area_px,
            "area_um2": self.area_um2,
            "projected_area_um2": self.projected_area_um2,
            "equivalent_diameter_um": self.equivalent_diameter_um,
            "projected_equivalent_diameter_um": self.projected_equivalent_diameter_um,
            "tilt_deg": self.tilt_deg,
            "azimuth_deg": self.azimuth_deg,
            "centroid_x_um": self.centroid_x_um,
            "centroid_y_um": self.centroid_y_um,
            "normal": list(self.normal),
        }


@dataclass(frozen=True)
class FacetResult:
    """Outcome of :func:`facet_analysis`.

    Lateral quantities carry ``_um`` in their names; when the map is not
    calibrated (``lateral_unit == "px"``) they are in pixels instead, and
    ``lateral_unit`` says so.
    """

    labels: np.ndarray = field(repr=False)
    normals: np.ndarray = field(repr=False)
    facets: tuple[Facet, ...]
    dihedral: tuple[tuple[int, int, float], ...]
    area_weighted_tilt_deg: float
    facet_area_weighted_tilt_deg: float
    tilt_histogram: tuple[np.ndarray, np.ndarray] = field(repr=False)
    azimuth_histogram: tuple[np.ndarray, np.ndarray] = field(repr=False)
    valid_fraction: float
    faceted_fraction: float
    mean_facet_diameter_um: float
    grain_size_um: float | None
    lateral_unit: str
    settings: dict

    @property
    def facet_count(self) -> int:
        return len(self.facets)

    @property
    def facet_to_grain_size_ratio(self) -> float | None:
        if self.grain_size_um is None or not np.isfinite(self.mean_facet_diameter_um):
            return None
        return self.mean_facet_diameter_um / self.grain_size_um

    def projection_density(self, bins: int = 72):
        """Equal-area projection density of the pixel normals (see
        :func:`lambert_projection_density`)."""
        return lambert_projection_density(self.normals, bins=bins)

    def diameter_distribution(self, bins: int = 20) -> dict:
        """Histogram of the facets' equivalent diameters (from their true areas):
        number of facets and true-area fraction per bin."""
        d = np.array([f.equivalent_diameter_um for f in self.facets])
        a = np.array([f.area_um2 for f in self.facets])
        if d.size == 0:
            return {"edges_um": [], "count": [], "area_fraction": []}
        edges = np.linspace(0.0, float(d.max()) * 1.0001, bins + 1)
        cnt, _ = np.histogram(d, bins=edges)
        area, _ = np.histogram(d, bins=edges, weights=a)
        return {
            "edges_um": edges.tolist(),
            "count": cnt.tolist(),
            "area_fraction": (area / a.sum()).tolist(),
        }

    def summary(self) -> dict:
        diam = np.array([f.equivalent_diameter_um for f in self.facets])
        areas = np.array([f.area_um2 for f in self.facets])
        dih = np.array([d[2] for d in self.dihedral])
        return {
            "area_weighted_tilt_deg": self.area_weighted_tilt_deg,
            "facet_area_weighted_tilt_deg": self.facet_area_weighted_tilt_deg,
            "facet_count": self.facet_count,
            "mean_facet_diameter_um": self.mean_facet_diameter_um,
            "median_facet_diameter_um": float(np.median(diam)) if len(diam) else None,
            "mean_facet_area_um2": float(areas.mean()) if len(areas) else None,
            "faceted_fraction": self.faceted_fraction,
            "valid_fraction": self.valid_fraction,
            "median_dihedral_angle_deg": float(np.median(dih)) if len(dih) else None,
            "grain_size_um": self.grain_size_um,
            "facet_to_grain_size_ratio": self.facet_to_grain_size_ratio,
            "lateral_unit": self.lateral_unit,
        }

    def to_dict(self) -> dict:
        th, te = self.tilt_histogram
        ah, ae = self.azimuth_histogram
        return {
            "summary": self.summary(),
            "facets": [f.to_dict() for f in self.facets],
            "dihedral_angles": [
                {"facet_a": a, "facet_b": b, "angle_deg": ang} for a, b, ang in self.dihedral
            ],
            "equivalent_diameter_distribution": self.diameter_distribution(),
            "tilt_histogram": {"edges_deg": te.tolist(), "area_fraction": th.tolist()},
            "azimuth_histogram": {"edges_deg": ae.tolist(), "area_fraction": ah.tolist()},
            "settings": dict(self.settings),
        }


def _hist(values: np.ndarray, edges: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted histogram on equal bins starting at edges[0] (np.histogram's
    convention: the last bin includes its right edge), by bincount."""
    width = edges[1] - edges[0]
    nb = len(edges) - 1
    k = np.floor((values - edges[0]) / width).astype(np.int64)
    k[values == edges[-1]] = nb - 1
    sel = (k >= 0) & (k < nb)
    return np.bincount(k[sel], weights=weights[sel], minlength=nb)[:nb]


def facet_analysis(
    z_um: np.ndarray,
    dx: float,
    dy: float,
    *,
    scale_um: float | None = None,
    planarity_tol_deg: float = 5.0,
    min_area_px: int = 50,
    grain_size_um: float | None = None,
    lateral_unit: str = "um",
    tilt_bin_deg: float = 2.0,
    azimuth_bin_deg: float = 10.0,
) -> FacetResult:
    """Facet orientations, sizes and angles of a height map.

    Parameters
    ----------
    z_um : ndarray, shape (ny, nx)
        Heights in µm (NaN = not measured). Tilts are taken against the map's
        own xy plane: remove the specimen's form first where needed.
    dx, dy : float
        Column and row spacing in µm (1.0 and ``lateral_unit="px"`` when
        uncalibrated; heights must then be in pixel units for true angles).
    scale_um : float, optional
        Lateral scale of the normals (see :func:`surface_normals`).
    planarity_tol_deg : float
        Angular tolerance of a planar facet (see :func:`segment_facets`).
    min_area_px : int
        Smallest facet, in pixels.
    grain_size_um : float, optional
        Known grain size to compare the mean facet diameter with (reported as
        the ratio; give it in the same measure you want compared, e.g. the
        mean equivalent-circle diameter of the grains).
    lateral_unit : {"um", "px"}
        Unit of ``dx``/``dy`` and hence of every lateral output.
    tilt_bin_deg, azimuth_bin_deg : float
        Histogram bin widths.

    Returns
    -------
    FacetResult
        ``area_weighted_tilt_deg`` is the mean of the pixel tilts (normals at
        the analysis scale, so smoothing rounds ridges and lowers it) weighted
        by each pixel's inclined (true) area 1/n_z; ``facet_area_weighted_tilt_deg``
        the mean of the facets' fitted tilts weighted by their true areas.
        Each facet's orientation is the least-squares plane through its own
        heights (not the smoothed normals), its true area the projected area
        divided by cos(tilt), its equivalent diameter sqrt(4 A / π).

    References
    ----------
    E. E. Underwood, *Quantitative Stereology*, Addison-Wesley, 1970
    (true versus projected areas of inclined facets); Snyder (1987) for the
    equal-area projection; Adams and Bischof (1994) for region growing.
    """
    z = _check_map(z_um)
    normals = surface_normals(z, dx, dy, scale_um=scale_um)
    tilt, az = tilt_azimuth(normals)
    ok = np.isfinite(tilt)
    w_true = np.where(ok, 1.0 / np.clip(normals[..., 2], 1e-9, None), 0.0)
    tsel = tilt[ok]
    area_weighted_tilt = (
        float(np.sum(tsel * w_true[ok]) / np.sum(w_true[ok])) if ok.any() else float("nan")
    )
    te = np.arange(0.0, 90.0 + tilt_bin_deg, tilt_bin_deg)
    th = _hist(tsel, te, w_true[ok])
    ae = np.arange(0.0, 360.0 + azimuth_bin_deg, azimuth_bin_deg)
    ah = _hist(az[ok], ae, w_true[ok])
    tot = w_true[ok].sum()
    th = th / tot if tot > 0 else th
    ah = ah / tot if tot > 0 else ah

    half_width = 2.0 * scale_um / min(dx, dy) if scale_um else 1.0
    labels = segment_facets(
        normals,
        planarity_tol_deg=planarity_tol_deg,
        min_area_px=min_area_px,
        min_half_width_px=half_width,
    )
    count = int(labels.max())
    facets: list[Facet] = []
    dih: list[tuple[int, int, float]] = []
    fnorm = np.zeros((0, 3))
    if count:
        fit = _plane_fits(z, labels, count, dx, dy)
        b, c = fit["b"], fit["c"]
        inv = 1.0 / np.sqrt(1 + b * b + c * c)
        fnorm = np.stack((-b * inv, -c * inv, inv), axis=1)
        ftilt, faz = tilt_azimuth(fnorm)
        proj = fit["n"] * dx * dy
        true = proj / inv
        for i in range(count):
            facets.append(
                Facet(
                    label=i + 1,
                    area_px=int(fit["n"][i]),
                    area_um2=float(true[i]),
                    projected_area_um2=float(proj[i]),
                    equivalent_diameter_um=float(math.sqrt(4 * true[i] / math.pi)),
                    projected_equivalent_diameter_um=float(math.sqrt(4 * proj[i] / math.pi)),
                    tilt_deg=float(ftilt[i]),
                    azimuth_deg=float(faz[i]),
                    centroid_x_um=float(fit["xc"][i]),
                    centroid_y_um=float(fit["yc"][i]),
                    normal=(float(fnorm[i, 0]), float(fnorm[i, 1]), float(fnorm[i, 2])),
                )
            )
        dih = dihedral_angles(labels, fnorm)
        facet_tilt = float(np.sum(ftilt * true) / np.sum(true))
        mean_d = float(np.mean([f.equivalent_diameter_um for f in facets]))
    else:
        facet_tilt = float("nan")
        mean_d = float("nan")
    settings = {
        "scale_um": scale_um,
        "planarity_tol_deg": planarity_tol_deg,
        "min_area_px": min_area_px,
        "min_half_width_px": half_width,
        "normals": "3x3 plane fit" if not scale_um else "Gaussian-weighted plane fit",
        "tilt_bin_deg": tilt_bin_deg,
        "azimuth_bin_deg": azimuth_bin_deg,
        "azimuth_convention": "atan2(n_y, n_x), 0 deg = facing +x, y = row index",
    }
    return FacetResult(
        labels=labels,
        normals=normals,
        facets=tuple(facets),
        dihedral=tuple(dih),
        area_weighted_tilt_deg=area_weighted_tilt,
        facet_area_weighted_tilt_deg=facet_tilt,
        tilt_histogram=(th, te),
        azimuth_histogram=(ah, ae),
        valid_fraction=float(np.isfinite(z).mean()),
        faceted_fraction=float((labels > 0).sum() / max(ok.sum(), 1)),
        mean_facet_diameter_um=mean_d,
        grain_size_um=grain_size_um,
        lateral_unit=lateral_unit,
        settings=settings,
    )
