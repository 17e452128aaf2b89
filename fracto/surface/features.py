"""ISO 25178-2 feature parameters: Spd, Spc, S5p, S5v, S10z.

Segmentation and pruning
------------------------
ISO 25178-2 segments the surface into hills (and, on the inverted surface,
dales) by watershed and simplifies the segmentation by Wolf pruning: the
motif whose height to its saddle is smallest is merged into its neighbour
across that saddle, and this repeats while the smallest motif height is below
the threshold (5 % of Sz by default, ISO 25178-3 from memory).

Merging the smallest first is the *elder rule* of 0-dimensional persistence:
the smallest motif always merges into a higher neighbour, its height being its
*dynamic* (Grimaud 1992) — the drop from the peak to the highest saddle over
which a higher point can be reached. A peak therefore survives Wolf pruning at
threshold h exactly when its dynamic is ≥ h (its persistence in the sense of
Edelsbrunner et al. 2002); this is also the peak set of the h-maxima transform
(Vincent 1993). The tests check this against a literal merge-smallest-first
implementation and against :func:`skimage.morphology.h_maxima`.

We compute the dynamic of *every* regional maximum at once, exactly, without a
pixel-by-pixel priority queue:

1. Every valid pixel points to its highest 8-neighbour when that is higher in
   the total order (height, then flat index), else to itself (a regional
   maximum). Pointer jumping labels every pixel with the maximum its steepest
   ascent reaches. This is the first contraction round of the Borůvka scheme
   below on the pixel graph (the edge between two pixels has weight = the lower
   of the two heights; a pixel's heaviest edge leads to its highest neighbour).
2. The region adjacency graph: the weight of the edge between two regions is
   the highest saddle between them, max over adjacent pixel pairs of the lower
   height of the pair. A diagonal pair is skipped when one of the two pixels
   beside it is at least as high as the pair's weight (the path through that
   pixel has the same bottleneck; orthogonal pairs are never skipped, so the
   argument is not circular). Pairs are de-duplicated per row block with one
   sort of (pair, weight) packed into 64-bit integers.
3. Contraction rounds: a node whose heaviest edge leads to a higher node dies
   at that edge's weight (no higher node can be reached over a higher saddle)
   and is merged into it. Contracting along the heaviest edge of a node keeps
   every bottleneck (max-min) distance between the remaining nodes, so the
   dynamics of the remaining nodes do not change. When a round merges few
   nodes, the rest is finished by a sequential union-find in descending saddle
   order (Kruskal with the elder rule).

Dales
-----
Only the five deepest surviving pits enter (S5v), so dales are not segmented
in full: local minima are taken from the bottom and each is tested directly
(its component of {z < z_p + h} must hold no lower point); a pit inside the
component of a deeper one fails at once. Same result as the full dynamics of
−z (tested), at a fraction of the cost.

Cost
----
All steps are vectorised NumPy passes over the map (no per-pixel Python loop);
on a noisy 4096² map the hills take about 3 s of CPU, split roughly into
steepest ascent 25 %, pointer jumping 25 %, region graph 30 %, the rest
(contraction rounds, bookkeeping) 20 %; the top-down pit search about 0.3 s.
Peak memory is about 3× the float64
map (the float32 copy, parent/label arrays, per-block temporaries).

Conventions
-----------
* 8-connectivity; peaks on the map border and next to missing points count
  like any other (the standard does not exclude them, as far as we know).
* Heights are measured from the mean of the valid heights.
* A plateau counts once (ties are broken by flat index; its other pixels have
  dynamic 0 and never survive). Of two equally high peaks the later one in
  raster order counts as the higher, as Wolf pruning merges one of two equal
  hills (:func:`skimage.morphology.h_maxima` would keep both).

References
----------
.. [1] ISO 25178-2:2012, §4.3 feature parameters (Spd, Spc, S10z, S5p, S5v) and
   §6 / Annex on Wolf pruning (from memory).
.. [2] Wolf, G. W. (1991). A FORTRAN subroutine for cartographic generalization.
   Computers & Geosciences 17(10), 1359–1381.
.. [3] Grimaud, M. (1992). A new measure of contrast: the dynamics. Proc. SPIE
   1769, Image Algebra and Morphological Image Processing III, 292–305.
.. [4] Vincent, L. (1993). Morphological grayscale reconstruction in image
   analysis: applications and efficient algorithms. IEEE Trans. Image Process.
   2(2), 176–201.
.. [5] Edelsbrunner, H., Letscher, D., Zomorodian, A. (2002). Topological
   persistence and simplification. Discrete Comput. Geom. 28, 511–533.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage as ndi

from fracto.errors import FractoInputError
from fracto.surface.areal import _check_map, _check_spacing, _valid_mean

__all__ = ["feature_parameters", "peak_dynamics"]

_CHUNK = 1 << 20
# finish with the sequential union-find once a contraction round merges fewer
# than max(_SEQUENTIAL_MIN, nodes // _SEQUENTIAL_FRACTION) nodes
_SEQUENTIAL_MIN = 64
# smallest pool of highest pixels searched for the deepest pits
_POOL_MIN = 4096
_SEQUENTIAL_FRACTION = 50

# neighbour offsets (dy, dx) in ascending order of linear offset, self in the middle
_OFFSETS = [(-1, -1), (-1, 0), (-1, 1), (0, -1), (0, 0), (0, 1), (1, -1), (1, 0), (1, 1)]
_FORWARD = [(0, 1), (1, -1), (1, 0), (1, 1)]


def _steepest_ascent(f: np.ndarray) -> np.ndarray:
    """Flat index of each pixel's highest neighbour-or-self in (height, index) order."""
    ny, nx = f.shape
    fp = np.pad(f, 1, mode="constant", constant_values=-np.inf)
    itype = np.int64 if ny * nx >= 2**31 else np.int32
    parent = np.empty(ny * nx, dtype=itype)
    lin = np.array([oy * nx + ox for oy, ox in _OFFSETS], dtype=itype)
    step = max(1, _CHUNK // nx)
    take = np.empty((step, nx), dtype=bool)
    for r0 in range(0, ny, step):
        r1 = min(ny, r0 + step)
        m = r1 - r0
        tt = take[:m]
        out = parent[r0 * nx : r1 * nx].reshape(m, nx)
        out.fill(0)  # offset of the chosen neighbour; 0 = the pixel itself
        # highest value in the 3 × 3 window (C, separable)
        top = ndi.maximum_filter(fp[r0 : r1 + 2], size=3, mode="nearest")[1:-1, 1:-1]
        for k, (oy, ox) in enumerate(_OFFSETS):
            if k == 4:
                continue
            nb = fp[1 + r0 + oy : 1 + r1 + oy, 1 + ox : 1 + ox + nx]
            np.equal(nb, top, out=tt)
            if k < 4:
                # an earlier (smaller-index) neighbour wins only if it is strictly higher
                # than the pixel itself; ties with the pixel go to the pixel
                tt &= out == 0
                tt &= nb > f[r0:r1]
            np.copyto(out, lin[k], where=tt)
        out += np.arange(r0 * nx, r1 * nx, dtype=itype).reshape(m, nx)
    return parent


def _jump(parent: np.ndarray) -> np.ndarray:
    """Pointer jumping to the roots of a forest (in place)."""
    act = np.flatnonzero(parent[parent] != parent)
    p = parent[act]
    while act.size:
        pp = parent[p]
        parent[act] = pp
        keep = parent[pp] != pp
        act = act[keep]
        p = pp[keep]
    return parent


def _jump_neighbour_forest(parent: np.ndarray, nx: int, rows_per_block: int = 64) -> np.ndarray:
    """Pointer jumping for a forest whose pointers go to 8-neighbours (in place).

    First within row blocks that fit in cache (pointers leaving the block are
    held fixed), then over the whole array, where chains are now short.
    """
    n = parent.size
    blk = rows_per_block * nx
    for s0 in range(0, n, blk):
        s1 = min(n, s0 + blk)
        loc = parent[s0:s1] - s0
        out = (loc < 0) | (loc >= s1 - s0)
        ar = np.arange(s1 - s0, dtype=loc.dtype)
        target = parent[s0:s1][out]
        loc[out] = ar[out]
        _jump(loc)
        # a pixel whose local root points out of the block takes that outside target
        ext = np.full(s1 - s0, -1, dtype=loc.dtype)
        ext[out] = target
        e = ext[loc]
        res = loc + s0
        np.copyto(res, e, where=e >= 0)
        parent[s0:s1] = res
    return _jump(parent)


def _sortable_u32(w: np.ndarray) -> np.ndarray:
    """Monotone map of float32 to uint32 (order-preserving, NaN-free input)."""
    b = np.ascontiguousarray(w, dtype=np.float32).view(np.uint32)
    neg = (b >> 31).astype(bool)
    return np.where(neg, ~b, b | np.uint32(0x80000000))


def _from_sortable_u32(u: np.ndarray) -> np.ndarray:
    u = u.astype(np.uint32)
    pos = (u >> 31).astype(bool)
    return np.where(pos, u & np.uint32(0x7FFFFFFF), ~u).view(np.float32)


def _dedupe_max(key: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unique keys with the maximum weight of each."""
    if key.size == 0:
        return key, w
    order = np.argsort(key, kind="stable")
    ks = key[order]
    ws = w[order]
    starts = np.flatnonzero(np.concatenate(([True], ks[1:] != ks[:-1])))
    return ks[starts], np.maximum.reduceat(ws, starts)


def _dedupe_pairs(a: np.ndarray, b: np.ndarray, w: np.ndarray, n_nodes: int):
    """(min, max) label pairs, unique, with their largest float32 weight.

    Runs of equal consecutive pairs are first reduced in one linear pass; then
    (pair, weight) are packed into one uint64 when the local pair range fits in
    32 bits, so a plain sort (no argsort) finds the maximum of every pair.
    """
    lo = np.minimum(a, b)
    hi = np.maximum(a, b)
    brk = np.empty(lo.size, dtype=bool)
    brk[0] = True
    np.not_equal(lo[1:], lo[:-1], out=brk[1:])
    brk[1:] |= hi[1:] != hi[:-1]
    starts = np.flatnonzero(brk)
    if starts.size < lo.size:
        w = np.maximum.reduceat(w, starts)
        lo, hi = lo[starts], hi[starts]
    lo0, hi0 = int(lo.min()), int(hi.min())
    span = int(hi.max()) - hi0 + 1
    if (int(lo.max()) - lo0 + 1) * span < 2**32:
        key = (lo - lo0).astype(np.uint64)
        key *= np.uint64(span)
        key += (hi - hi0).astype(np.uint64)
        key <<= np.uint64(32)
        key |= _sortable_u32(w)
        key.sort()
        k = key >> np.uint64(32)
        last = np.flatnonzero(np.concatenate((k[1:] != k[:-1], [True])))
        kk = k[last].astype(np.int64)
        ww = _from_sortable_u32(key[last] & np.uint64(0xFFFFFFFF))
        return (kk // span + lo0) * n_nodes + (kk % span + hi0), ww
    return _dedupe_max(lo.astype(np.int64) * n_nodes + hi, w)


def _region_graph(f: np.ndarray, labels: np.ndarray, n_nodes: int):
    """Edges (u < v) between adjacent regions, weight = highest saddle."""
    ny, nx = f.shape
    ff = f.ravel()
    keys, weights = [], []
    step = max(1, _CHUNK // nx)
    for oy, ox in _FORWARD:
        o = oy * nx + ox
        for r0 in range(0, ny - oy, step):
            r1 = min(ny - oy, r0 + step)
            s0, s1 = r0 * nx, r1 * nx
            if ox < 0:  # the first pair of a row would wrap to the previous row's end
                s0 += 1
            elif ox > 0:
                s1 -= 1
            la = labels[s0:s1]
            lb = labels[s0 + o : s1 + o]
            sel = la != lb
            if ox:
                # pairs that wrap around a row end: column nx-1 (ox=+1) / 0 (ox=-1)
                first = (nx - 1 - (s0 % nx)) % nx if ox > 0 else (-s0) % nx
                sel[first::nx] = False
            i = np.flatnonzero(sel)
            if i.size == 0:
                continue
            w = np.minimum(ff[s0 + i], ff[s0 + o + i])
            if ox and oy:
                # A diagonal pair is redundant when one of the two pixels beside it is
                # at least as high as its weight: the path through that pixel has the
                # same bottleneck, so every max-min path value, hence every dynamic,
                # stays the same without it.
                side = np.maximum(ff[s0 + i + ox], ff[s0 + i + nx])
                need = side < w
                i, w = i[need], w[need]
                if i.size == 0:
                    continue
            a = la[i]
            b = lb[i]
            ok = (a >= 0) & (b >= 0)
            if not ok.all():
                a, b, w = a[ok], b[ok], w[ok]
                if a.size == 0:
                    continue
            k, ww = _dedupe_pairs(a, b, w, n_nodes)
            keys.append(k)
            weights.append(ww)
    if not keys:
        return np.empty(0, np.int64), np.empty(0, np.int64), np.empty(0, f.dtype)
    k, w = _dedupe_max(np.concatenate(keys), np.concatenate(weights))
    return k // n_nodes, k % n_nodes, w


def _kruskal(z: np.ndarray, u: np.ndarray, v: np.ndarray, w: np.ndarray, death: np.ndarray):
    """Sequential elder-rule union-find; fills death[] for nodes that die."""
    n = z.size
    parent = list(range(n))
    top = list(range(n))  # highest node of each component
    zl = z.tolist()

    def find(a: int) -> int:
        root = a
        while parent[root] != root:
            root = parent[root]
        while parent[a] != root:
            parent[a], a = root, parent[a]
        return root

    order = np.argsort(-w.astype(np.float64), kind="stable")
    for a, b, ww in zip(u[order].tolist(), v[order].tolist(), w[order].tolist(), strict=True):
        ra, rb = find(a), find(b)
        if ra == rb:
            continue
        ta, tb = top[ra], top[rb]
        # lower of the two component maxima (total order: height, then index)
        if (zl[ta], ta) < (zl[tb], tb):
            death[ta] = ww
            parent[ra] = rb
        else:
            death[tb] = ww
            parent[rb] = ra
            # top[ra] stays ta


def peak_dynamics(f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Regional maxima of `f` and their dynamics (Wolf-pruning motif heights).

    Parameters
    ----------
    f : ndarray, shape (ny, nx)
        Heights; NaN = not measured (excluded, not a barrier-free path).

    Returns
    -------
    index : ndarray of int
        Flat indices of the regional maxima (one pixel per plateau).
    dynamic : ndarray of float
        Their dynamics: height minus the highest saddle over which a higher
        point is reachable; ``inf`` for the highest point of each connected
        valid component.

    References
    ----------
    .. [1] Grimaud, M. (1992). A new measure of contrast: the dynamics.
    .. [2] Edelsbrunner, H., Letscher, D., Zomorodian, A. (2002). Topological
       persistence and simplification.
    """
    f = np.asarray(f, dtype=np.float32)
    invalid = np.isnan(f)
    has_nan = bool(invalid.any())
    if has_nan:
        f = np.where(invalid, np.float32(-np.inf), f)
    else:
        invalid = None
    n = f.size
    parent = _steepest_ascent(f)
    idx = np.arange(n, dtype=parent.dtype)
    if has_nan:
        bad = invalid.ravel()
        parent[bad] = idx[bad]
        is_root = parent == idx
        is_root &= ~bad
    else:
        is_root = parent == idx
    roots = np.flatnonzero(is_root)
    del idx, is_root
    _jump_neighbour_forest(parent, f.shape[1])
    comp = np.full(n, -1, dtype=np.int32 if roots.size < 2**31 else np.int64)
    comp[roots] = np.arange(roots.size, dtype=comp.dtype)
    labels = np.take(comp, parent)
    del parent, comp
    if has_nan:
        labels[bad] = -1
    n_nodes = roots.size
    u, v, w = _region_graph(f, labels, n_nodes)
    del labels
    z_node = f.ravel()[roots].astype(np.float64)
    death = np.full(n_nodes, -np.inf)
    w = w.astype(np.float64)

    # Borůvka-style contraction rounds
    ids = np.arange(n_nodes)  # original id of each current node
    zc = z_node
    while u.size:
        m = ids.size
        mw = np.full(m, -np.inf)
        np.maximum.at(mw, u, w)
        np.maximum.at(mw, v, w)
        src = np.concatenate((u, v))
        dst = np.concatenate((v, u))
        ww = np.concatenate((w, w))
        hi = (zc[dst] > zc[src]) | ((zc[dst] == zc[src]) & (dst > src))
        sel = hi & (ww == mw[src])
        src, dst = src[sel], dst[sel]
        if src.size == 0:  # cannot happen (the heaviest edge always hooks); stay exact
            _kruskal_finish(zc, ids, u, v, w, death)
            break
        tgt = np.arange(m)
        tgt[src] = dst
        mark = np.zeros(m, dtype=bool)
        mark[src] = True
        hooked = np.flatnonzero(mark)
        death[ids[hooked]] = mw[hooked]
        if hooked.size < max(_SEQUENTIAL_MIN, m // _SEQUENTIAL_FRACTION):
            # few merges per round: finish sequentially
            _kruskal_finish(zc, ids, u, v, w, death)
            u = u[:0]
            break
        _jump(tgt)
        uu, vv = tgt[u], tgt[v]
        keep = uu != vv
        uu, vv, w = uu[keep], vv[keep], w[keep]
        alive = np.flatnonzero(tgt == np.arange(m))
        newid = np.full(m, -1, dtype=np.int64)
        newid[alive] = np.arange(alive.size)
        a, b = newid[uu], newid[vv]
        ma = alive.size
        key, w = _dedupe_max(np.minimum(a, b) * ma + np.maximum(a, b), w)
        u, v = key // ma, key % ma
        ids = ids[alive]
        zc = zc[alive]
    dyn = z_node - death
    return roots, dyn


def _kruskal_finish(zc, ids, u, v, w, death):
    """Sequential finish on the contracted graph, but only for nodes still alive.

    The caller has already written deaths of the nodes hooked in this round;
    those are correct, and the sequential pass recomputes them identically.
    """
    local = np.full(ids.size, -np.inf)
    _kruskal(zc, u, v, w, local)
    died = np.isfinite(local)
    death[ids[died]] = local[died]


def _select(f: np.ndarray, threshold: float) -> np.ndarray:
    idx, dyn = peak_dynamics(f)
    keep = (dyn >= threshold) & (dyn > 0)
    return idx[keep]


def _select_all(f: np.ndarray, threshold: float, k: int) -> np.ndarray:
    """The `k` highest surviving peaks, from the full dynamics (any threshold)."""
    idx = _select(f, threshold)
    order = np.lexsort((-idx, -f.ravel()[idx]))
    return idx[order[:k]]


def _is_local_max(f: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """True where f[idx] >= all its valid 8-neighbours (NaN-free f at idx)."""
    ny, nx = f.shape
    y, x = np.divmod(idx, nx)
    v = f.ravel()[idx]
    ok = np.ones(idx.size, dtype=bool)
    for oy, ox in _OFFSETS:
        if oy == 0 and ox == 0:
            continue
        yy, xx = y + oy, x + ox
        inside = (yy >= 0) & (yy < ny) & (xx >= 0) & (xx < nx)
        nb = np.full(idx.size, -np.inf, dtype=f.dtype)
        nb[inside] = f[yy[inside], xx[inside]]
        ok &= ~(nb > v)  # NaN neighbours do not count
    return ok


def _top_surviving_peaks(f: np.ndarray, threshold: float, k: int) -> np.ndarray:
    """Flat indices of the (up to) `k` highest peaks of `f` with dynamic >= threshold.

    Same total order and result as selecting from :func:`peak_dynamics`, but only
    the few highest candidates are examined: a regional maximum p survives
    exactly when the 8-connected component of {f > f_p − threshold} holding p has
    no point higher than p (height, then flat index). Candidates (local maxima)
    are taken from the top, out of a pool of the highest pixels that grows when
    it runs out; one that lies inside the component found for a higher candidate
    dies at once (its own component contains that one). Each component is found
    by labelling a window around p that grows until the component stays inside.
    Needs threshold > 0.
    """
    ny, nx = f.shape
    flat = f.ravel()
    n_valid = int(np.count_nonzero(~np.isnan(flat)))
    pool = min(n_valid, max(_POOL_MIN, n_valid // 1000))
    eight = np.ones((3, 3), dtype=bool)
    while True:
        if pool < n_valid:
            key = np.where(np.isnan(flat), np.float32(-np.inf), flat)
            top = np.argpartition(key, key.size - pool)[key.size - pool :]
            del key
        else:
            top = np.flatnonzero(~np.isnan(flat))
        # values equal to the pool's lowest may be cut off in part: stop before them
        floor = float(flat[top].min()) if pool < n_valid else -np.inf
        cand = top[_is_local_max(f, top)]
        fv = flat[cand]
        order = np.lexsort((-cand, -fv))  # height descending, then index descending
        dead = np.zeros(f.shape, dtype=bool)
        found: list[int] = []
        for p in cand[order].tolist():
            py, px = divmod(p, nx)
            if dead[py, px]:
                continue
            fp = f[py, px]
            if fp <= floor:
                break
            half = 32
            while True:
                y0, y1 = max(0, py - half), min(ny, py + half + 1)
                x0, x1 = max(0, px - half), min(nx, px + half + 1)
                win = f[y0:y1, x0:x1]
                lab, _ = ndi.label(win > fp - threshold, structure=eight)
                comp = lab == lab[py - y0, px - x0]
                touches = (
                    (y0 > 0 and comp[0].any())
                    or (y1 < ny and comp[-1].any())
                    or (x0 > 0 and comp[:, 0].any())
                    or (x1 < nx and comp[:, -1].any())
                )
                if not touches:
                    break
                half *= 2
            vals = win[comp]
            higher = bool((vals > fp).any())
            if not higher:
                ties = np.flatnonzero(comp.ravel() & (win.ravel() == fp))
                ty, tx = np.divmod(ties, x1 - x0)
                higher = bool((((ty + y0) * nx + (tx + x0)) > p).any())
            dead[y0:y1, x0:x1] |= comp
            if not higher:
                found.append(p)
                if len(found) == k:
                    return np.array(found, dtype=np.int64)
        if pool >= n_valid:
            return np.array(found, dtype=np.int64)
        # the pool ran out before k survivors: a larger pool repeats the same
        # candidates in the same order and goes on below
        pool = min(n_valid, pool * 16)


def feature_parameters(
    z: np.ndarray, dx: float, dy: float, *, pruning: float = 0.05, workers: int = 1
) -> dict[str, float]:
    """Feature parameters of ISO 25178-2 from Wolf-pruned hills and dales.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm (levelled, filtered), NaN where not measured.
    dx, dy : float
        Sampling intervals along x and y (µm, or 1.0 for pixels).
    pruning : float
        Wolf pruning threshold as a fraction of Sz (ISO 25178-3 default 5 %,
        from memory).
    workers : int
        Threads: with 2 or more, hills and dales are segmented at the same time
        (NumPy releases the GIL in the heavy steps; the results are identical).

    Returns
    -------
    dict
        ``Spd`` density of peaks, surviving hills per unit valid area (1/µm²,
        or 1/px²). ``Spc`` arithmetic mean peak curvature (1/µm), ISO 25178-2:
        Spc = −(1/2n) Σ (∂²z/∂x² + ∂²z/∂y²) over the peaks, i.e. the mean of the
        two principal curvatures with the sign that makes a peak positive
        (z = h·exp(−r²/2w²) gives h/w²). We use 3-point second differences at the
        peak pixel; peaks on the border or next to a missing point are left out
        of Spc (NaN if none remains). ``S5p`` mean height of the (up to) five
        highest surviving peaks above the mean plane, ``S5v`` mean depth
        (positive) of the (up to) five lowest surviving pits below the mean
        plane, ``S10z`` = S5p + S5v (µm). With fewer than five peaks (pits) the
        mean of those found is given (our choice).

    References
    ----------
    .. [1] ISO 25178-2:2012, §4.3 (feature parameters) (from memory).
    .. [2] Wolf, G. W. (1991), Computers & Geosciences 17(10), 1359–1381.
    """
    z = _check_map(z)
    dx, dy = _check_spacing(dx, dy)
    try:
        pruning = float(pruning)
    except (TypeError, ValueError):
        raise FractoInputError("The Wolf pruning threshold must be a number.") from None
    if not (0.0 <= pruning < 1.0):
        raise FractoInputError(
            f"The Wolf pruning threshold is a fraction of Sz from 0 to 1, not {pruning!r}."
        )
    mean, n_valid = _valid_mean(z)
    zmax, zmin = float(np.nanmax(z)), float(np.nanmin(z))
    h = pruning * (zmax - zmin)
    z32 = z.astype(np.float32)
    # Dales: only the five deepest surviving pits enter (S5v), so they are searched
    # from the bottom instead of segmenting the whole inverted surface.
    find_pits = _top_surviving_peaks if h > 0 else _select_all
    if int(workers) >= 2:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(max_workers=2) as pool:
            fut_pits = pool.submit(find_pits, np.negative(z32), h, 5)
            peaks = _select(z32, h)
            pits = fut_pits.result()
    else:
        peaks = _select(z32, h)
        np.negative(z32, out=z32)
        pits = find_pits(z32, h, 5)
    del z32
    area = n_valid * dx * dy
    ny, nx = z.shape
    flat = z.ravel()
    peak_h = flat[peaks] - mean
    pit_d = mean - flat[pits]
    # curvature at peaks with a complete 5-point stencil
    py, px = np.divmod(peaks, nx)
    inner = (py > 0) & (py < ny - 1) & (px > 0) & (px < nx - 1)
    py, px = py[inner], px[inner]
    c = z[py, px]
    zxx = (z[py, px + 1] - 2 * c + z[py, px - 1]) / (dx * dx)
    zyy = (z[py + 1, px] - 2 * c + z[py - 1, px]) / (dy * dy)
    lap = zxx + zyy
    lap = lap[~np.isnan(lap)]
    spc = float(-0.5 * lap.mean()) if lap.size else math.nan
    s5p = float(np.mean(np.sort(peak_h)[::-1][:5])) if peak_h.size else math.nan
    s5v = float(np.mean(np.sort(pit_d)[::-1][:5])) if pit_d.size else math.nan
    return {
        "Spd": peaks.size / area,
        "Spc": spc,
        "S10z": s5p + s5v,
        "S5p": s5p,
        "S5v": s5v,
    }
