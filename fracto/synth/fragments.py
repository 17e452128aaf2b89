"""Loose fragments lying on a fracture surface: isolated debris and clusters.

Brittle fracture leaves small broken-off pieces on the surface: single
particles and clusters of many small flakes where the crack branched or two
crack fronts met (ASM Handbook Vol. 12, *Fractography*, 1987, on debris and
crushed zones). Each fragment is a flat flake: a superellipse outline
``|a/r|^p + |b/(r/e)|^p <= 1`` (``p`` between 1, a diamond, and 3, a rounded
square; aspect ratio ``e``), turned by a random angle, lying on the local
surface with a random tilt and a thickness proportional to its size. Where
flakes overlap the higher one shows. Everything is vectorised: the pixels
near any fragment are found with a k-d tree of the fragment centres.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
from scipy.spatial import cKDTree

__all__ = ["fragment_sites", "place_fragments"]


def fragment_sites(
    extent_px: tuple[int, int],
    rng: np.random.Generator,
    *,
    n_single: float,
    n_clusters: float,
    per_cluster: float,
    single_radius_px: float,
    cluster_radius_px: float,
    fragment_radius_px: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centres (row, column), radii (pixels) and cluster flags of the fragments of a field.

    Parameters
    ----------
    extent_px : (int, int)
        Rows and columns of the map.
    n_single, n_clusters : float
        Expected numbers of isolated fragments and of clusters (Poisson).
    per_cluster : float
        Expected fragments per cluster (Poisson, at least one).
    single_radius_px : float
        Median radius of an isolated fragment (lognormal, σ of ln r 0.4).
    cluster_radius_px : float
        Median radius of a cluster (lognormal, σ 0.4); fragments are placed
        Gaussian about its centre with that standard deviation.
    fragment_radius_px : float
        Median radius of a fragment in a cluster (lognormal, σ 0.5).
    """
    ny, nx = extent_px
    ns = int(rng.poisson(max(n_single, 0.0)))
    nc = int(rng.poisson(max(n_clusters, 0.0)))
    c_single = rng.uniform((0, 0), (ny, nx), size=(ns, 2))
    r_single = single_radius_px * np.exp(0.4 * rng.standard_normal(ns))
    centres = rng.uniform((0, 0), (ny, nx), size=(nc, 2))
    spread = cluster_radius_px * np.exp(0.4 * rng.standard_normal(nc))
    counts = np.maximum(rng.poisson(max(per_cluster, 1.0), size=nc), 1)
    owner = np.repeat(np.arange(nc), counts)
    pos = centres[owner] + spread[owner, None] * rng.standard_normal((owner.size, 2))
    # fragments near the centre of a cluster are the smaller, crushed ones
    r_cl = fragment_radius_px * np.exp(0.5 * rng.standard_normal(owner.size))
    pts = np.concatenate([c_single, pos])
    rad = np.concatenate([r_single, r_cl])
    clustered = np.r_[np.zeros(ns, bool), np.ones(owner.size, bool)]
    keep = (pts[:, 0] > -rad) & (pts[:, 0] < ny + rad)
    keep &= (pts[:, 1] > -rad) & (pts[:, 1] < nx + rad) & (rad >= 0.75)
    return pts[keep], rad[keep], clustered[keep]


def place_fragments(
    height: np.ndarray,
    pixel_size_um: float,
    centres: np.ndarray,
    radii_px: np.ndarray,
    rng: np.random.Generator,
    *,
    thickness: float = 0.5,
    max_tilt_deg: float = 35.0,
    k: int = 4,
) -> np.ndarray:
    """Put flakes on a height map; return the new map (µm), the input unchanged.

    Parameters
    ----------
    height : ndarray (ny, nx)
        Heights in µm.
    pixel_size_um : float
    centres : ndarray (n, 2)
        Fragment centres (row, column) in pixels.
    radii_px : ndarray (n,)
        Fragment radii in pixels.
    rng : numpy Generator
        Shapes, orientations and tilts.
    thickness : float
        Flake thickness as a share of its radius.
    max_tilt_deg : float
        Largest tilt of a flake against the local surface.
    k : int
        Overlapping fragments considered per pixel (the k nearest centres).
    """
    out = np.array(height, dtype=np.float64, copy=True)
    n = len(radii_px)
    if n == 0:
        return out
    ny, nx = out.shape
    px = float(pixel_size_um)
    theta = rng.uniform(0, math.pi, n)
    p = rng.uniform(1.0, 3.0, n)
    ecc = rng.uniform(1.0, 2.0, n)
    tilt = np.radians(max_tilt_deg) * np.sqrt(rng.uniform(size=n))
    tilt_dir = rng.uniform(0, 2 * math.pi, n)
    ci = np.clip(np.round(centres[:, 0] - 0.5).astype(int), 0, ny - 1)
    cj = np.clip(np.round(centres[:, 1] - 0.5).astype(int), 0, nx - 1)
    # a flake rests on the highest point under it: the local maximum near its centre
    base = out[ci, cj]
    r_int = np.ceil(radii_px).astype(int)
    for rr in np.unique(np.minimum(r_int, 64)):
        sel = np.flatnonzero(np.minimum(r_int, 64) == rr)
        offs = np.arange(-rr, rr + 1, max(1, rr // 3))
        for di in offs:
            for dj in offs:
                ii = np.clip(ci[sel] + di, 0, ny - 1)
                jj = np.clip(cj[sel] + dj, 0, nx - 1)
                base[sel] = np.maximum(base[sel], out[ii, jj])
    top = base + thickness * radii_px * px
    # pixels near any fragment
    rmax = float(radii_px.max())
    # mark the centres, grown by the largest radius (a superset of every flake)
    seeds = np.zeros((ny, nx), np.uint8)
    ok = (centres[:, 0] >= 0) & (centres[:, 0] < ny) & (centres[:, 1] >= 0) & (centres[:, 1] < nx)
    seeds[centres[ok, 0].astype(int), centres[ok, 1].astype(int)] = 1
    rk = math.ceil(rmax) + 1
    grown = cv2.dilate(seeds, np.ones((2 * rk + 1, 2 * rk + 1), np.uint8))
    # flakes centred just outside the map reach into it: include a border band
    grown[:rk] = grown[-rk:] = 1
    grown[:, :rk] = grown[:, -rk:] = 1
    ii, jj = np.nonzero(grown)
    if ii.size == 0:
        return out
    q = np.c_[ii + 0.5, jj + 0.5]
    kk = min(k, n)
    dist, idx = cKDTree(centres).query(q, k=kk, distance_upper_bound=rmax + 1.0, workers=2)
    dist = dist.reshape(q.shape[0], kk)
    idx = idx.reshape(q.shape[0], kk)
    valid = np.isfinite(dist)
    idx_c = np.where(valid, idx, 0)
    d_r = q[:, None, 0] - centres[idx_c, 0]
    d_c = q[:, None, 1] - centres[idx_c, 1]
    ct, st = np.cos(theta[idx_c]), np.sin(theta[idx_c])
    a = (d_c * ct + d_r * st) / radii_px[idx_c]
    b = (-d_c * st + d_r * ct) * ecc[idx_c] / radii_px[idx_c]
    inside = valid & (np.abs(a) ** p[idx_c] + np.abs(b) ** p[idx_c] <= 1.0)
    slope = np.tan(tilt[idx_c])
    ramp = slope * px * (d_c * np.cos(tilt_dir[idx_c]) + d_r * np.sin(tilt_dir[idx_c]))
    zf = np.where(inside, top[idx_c] + ramp, -np.inf)
    best = zf.max(axis=1)
    hit = np.isfinite(best)
    cur = out[ii[hit], jj[hit]]
    out[ii[hit], jj[hit]] = np.maximum(cur, best[hit])
    return out
