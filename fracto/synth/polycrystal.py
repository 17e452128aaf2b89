"""Three-dimensional polycrystals: Laguerre (power) tessellations of seeded points.

A polycrystal is a set of seed points ``s_i`` (µm) with weights ``w_i`` (µm²)
in a slab around the nominal crack plane. Grain ``i`` is the power cell

.. math:: C_i = \\{p : |p - s_i|^2 - w_i \\le |p - s_j|^2 - w_j \\ \\forall j\\},

a convex polyhedron; with all weights zero this is the Voronoi tessellation
(Poisson–Voronoi when the seeds are uniform). Every inequality is linear in
``p``, so each grain face is a plane and a fracture surface that follows the
boundaries is made of exact planar facets.

Grain sizes are given by :class:`GrainSize`:

* ``lognormal`` — equivalent-sphere diameters ``d`` with number mean
  ``mean_um`` and ``spread`` = σ of ln d. ``spread = 0`` gives uniform
  (Poisson) seeds and zero weights, the Poisson–Voronoi structure, with mean
  cell volume ``π mean_um³ / 6``. With ``spread > 0`` the seeds stay uniform
  at density ``1 / E[π d³/6]`` and each gets weight ``(d_i / 2)²``: larger
  weights give larger cells, so the cell sizes spread further; the realised
  distribution is approximate and is measured and reported.
* ``bimodal`` — a two-level tessellation: Poisson–Voronoi parent cells of
  mean size ``coarse_um``; each stays one coarse grain with probability
  ``coarse_volume_fraction`` (so that is the expected volume fraction), the
  others are split into fine Poisson–Voronoi grains of size ``fine_um`` cut
  by the parent cell. Coarse grains stay polyhedral (a weighted diagram with
  a few heavy seeds among many light ones would round them into spheres).

Grain size here is the equivalent-sphere diameter of the mean cell volume.
For Poisson–Voronoi grains the mean lineal intercept is then
``L = 0.6872 λ^(-1/3) = 0.5539 d`` (Meijering 1953, λ = 6/(π d³)).

References
----------
.. [1] J. L. Meijering, "Interface area, edge length, and number of vertices in
   crystal aggregates with random nucleation", *Philips Res. Rep.* 8 (1953)
   270-290.
.. [2] F. Aurenhammer, "Power diagrams: properties, algorithms and
   applications", *SIAM J. Comput.* 16 (1987) 78-96 (the power diagram as the
   projection of the lower convex hull of lifted points).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import asdict, dataclass

import numpy as np
from scipy.spatial import ConvexHull, cKDTree
from scipy.spatial.transform import Rotation

from fracto.errors import FractoInputError
from fracto.units import parse_length_um

__all__ = [
    "MEIJERING_INTERCEPT",
    "GrainSize",
    "Polycrystal",
    "column_extent",
    "make_polycrystal",
    "mean_lineal_intercept_px",
]

#: Mean lineal intercept of the Poisson–Voronoi structure in units of λ^(-1/3)
#: (Meijering 1953: S_V = 2.9105 λ^(1/3), L = 2 / S_V).
MEIJERING_INTERCEPT = 2.0 / 2.9105


@dataclass(frozen=True)
class GrainSize:
    """Grain-size distribution of a synthetic polycrystal.

    Parameters
    ----------
    kind : {"lognormal", "bimodal"}
        Family of the distribution.
    mean_um : float
        Lognormal: number mean of the equivalent-sphere diameter (µm).
    spread : float
        Lognormal: σ of ln d (0 = Poisson–Voronoi grains).
    fine_um, coarse_um : float or None
        Bimodal: equivalent-sphere diameters of the two populations (µm).
    coarse_volume_fraction : float or None
        Bimodal: volume fraction of the coarse population (0..0.6).

    Text form (:meth:`parse`): ``2um`` (Poisson–Voronoi, mean 2 µm),
    ``lognormal:2um,0.3`` (mean 2 µm, σ of ln d 0.3),
    ``bimodal:1um,5um,0.3`` (fine 1 µm, coarse 5 µm, coarse volume fraction 0.3).
    """

    kind: str = "lognormal"
    mean_um: float = 2.0
    spread: float = 0.0
    fine_um: float | None = None
    coarse_um: float | None = None
    coarse_volume_fraction: float | None = None

    def __post_init__(self) -> None:
        if self.kind == "lognormal":
            if not (math.isfinite(self.mean_um) and self.mean_um > 0):
                raise FractoInputError("The mean grain size must be a positive length.")
            if not (math.isfinite(self.spread) and 0 <= self.spread <= 1.5):
                raise FractoInputError("The grain-size spread (σ of ln d) must lie in 0..1.5.")
        elif self.kind == "bimodal":
            f, c, v = self.fine_um, self.coarse_um, self.coarse_volume_fraction
            if f is None or c is None or v is None:
                raise FractoInputError(
                    "A bimodal grain size needs the fine size, the coarse size and the "
                    "coarse volume fraction."
                )
            if not (f > 0 and c > f):
                raise FractoInputError("The coarse grain size must exceed the fine grain size.")
            if not (0 < v <= 0.6):
                raise FractoInputError("The coarse volume fraction must lie in (0, 0.6].")
        else:
            raise FractoInputError(
                f"Unknown grain-size distribution '{self.kind}'; use lognormal or bimodal."
            )

    @classmethod
    def parse(cls, text: str) -> GrainSize:
        """Read ``2um``, ``lognormal:2um,0.3`` or ``bimodal:1um,5um,0.3``."""
        t = str(text).strip()
        m = re.fullmatch(r"(?:(\w+)\s*:)?\s*(.+)", t)
        kind = (m.group(1) or "lognormal").lower() if m else ""
        args = [a.strip() for a in (m.group(2) if m else "").split(",") if a.strip()]
        try:
            if kind == "lognormal" and len(args) in (1, 2):
                mean = parse_length_um(args[0], what="grain size")
                spread = float(args[1]) if len(args) == 2 else 0.0
                return cls("lognormal", mean, spread)
            if kind == "bimodal" and len(args) == 3:
                fine = parse_length_um(args[0], what="fine grain size")
                coarse = parse_length_um(args[1], what="coarse grain size")
                return cls(
                    "bimodal",
                    mean_um=fine,
                    fine_um=fine,
                    coarse_um=coarse,
                    coarse_volume_fraction=float(args[2]),
                )
        except ValueError as exc:
            if isinstance(exc, FractoInputError):
                raise
        raise FractoInputError(
            f"Cannot read the grain size '{text}'; write '2um', 'lognormal:2um,0.3' "
            "or 'bimodal:1um,5um,0.3'."
        )

    @property
    def largest_um(self) -> float:
        """A size that few grains exceed (used for slab thickness and margins)."""
        if self.kind == "bimodal":
            return float(self.coarse_um)  # type: ignore[arg-type]
        return float(self.mean_um * math.exp(2.0 * self.spread))

    @property
    def nominal_um(self) -> float:
        """Volume-weighted typical size (for scaling the relief)."""
        if self.kind == "bimodal":
            v = float(self.coarse_volume_fraction)  # type: ignore[arg-type]
            return float((1 - v) * self.fine_um + v * self.coarse_um)  # type: ignore[operator]
        return float(self.mean_um)

    def to_dict(self) -> dict:
        """JSON-ready form."""
        return asdict(self)


@dataclass(frozen=True)
class Polycrystal:
    """Seeds, weights and orientations of a 3-D power tessellation (µm).

    Attributes
    ----------
    seeds_um : ndarray (n, 3)
        Seed points (x, y, z); z = 0 is the nominal crack plane.
    weights_um2 : ndarray (n,)
        Power weights (0 for a Voronoi tessellation).
    rotations : ndarray (n, 3, 3)
        Crystal orientation of each grain (crystal axes as columns).
    population : ndarray (n,) of uint8
        0 = fine / main population, 1 = coarse (bimodal).
    neighbours : list of ndarray
        Indices of the grains sharing a face with each grain (power
        tessellation; empty for a two-level tessellation).
    slab_half_um : float
        Heights beyond ±this are outside the seeded slab.
    parent_seeds_um, parent_grain, grain_parent, parent_planes
        Two-level tessellation (bimodal grains): Voronoi cells of the
        ``parent_seeds_um`` are either one coarse grain (``parent_grain[c]`` ≥ 0)
        or split into fine grains (Voronoi cells of the fine seeds inside,
        cut by the parent cell; `neighbours` then lists the fine neighbours
        within the same parent). ``parent_planes[c] = (A, b, across)`` are the
        planes ``A p ≤ b`` of parent cell ``c`` and the grain across each (−1
        when a search must find it).
    """

    seeds_um: np.ndarray
    weights_um2: np.ndarray
    rotations: np.ndarray
    population: np.ndarray
    neighbours: tuple
    slab_half_um: float
    parent_seeds_um: np.ndarray | None = None
    parent_grain: np.ndarray | None = None
    grain_parent: np.ndarray | None = None
    parent_planes: tuple | None = None

    def halfspace(self, grain: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Planes ``A p ≤ b`` bounding one grain, and the grain across each (−1 unknown)."""
        _, A, b, across = self.planes(np.array([grain]))
        return A, b, across

    def planes(self, grains: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Bounding planes ``A p ≤ b`` of the given grains.

        Returns
        -------
        row : ndarray (m,)
            Position in `grains` the plane belongs to.
        A : ndarray (m, 3), b : ndarray (m,)
        across : ndarray (m,)
            Grain on the other side of the plane (−1: not known without a search).
        """
        grains = np.asarray(grains, np.int64)
        s = self.seeds_um
        pw = np.sum(s**2, axis=1) - self.weights_um2
        counts = np.array([len(self.neighbours[i]) for i in grains], np.int64)
        row = np.repeat(np.arange(grains.size), counts)
        nj = (
            np.concatenate([self.neighbours[i] for i in grains])
            if counts.sum()
            else np.zeros(0, np.int64)
        )
        si = grains[row]
        # |p - s_i|² - w_i <= |p - s_j|² - w_j  <=>  2 (s_j - s_i)·p <= pw_j - pw_i
        A, b = 2.0 * (s[nj] - s[si]), pw[nj] - pw[si]
        if self.parent_planes is None:
            return row, A, b, nj
        assert self.grain_parent is not None
        parts = [self.parent_planes[c] for c in self.grain_parent[grains]]
        pc = np.array([len(p[1]) for p in parts], np.int64)
        prow = np.repeat(np.arange(grains.size), pc)
        return (
            np.concatenate([prow, row]),
            np.concatenate([np.concatenate([p[0] for p in parts]), A]),
            np.concatenate([np.concatenate([p[1] for p in parts]), b]),
            np.concatenate([np.concatenate([p[2] for p in parts]), nj]),
        )

    def _owner_two_level(self, pts: np.ndarray) -> np.ndarray:
        return _owner_two_level_impl(self, pts)

    def lifted(self) -> tuple[np.ndarray, float]:
        """Seeds lifted to 4-D so a Euclidean nearest-neighbour search finds power cells.

        ``|p - s_j|² - w_j + W = |(p, 0) - (s_j, sqrt(W - w_j))|²`` with
        ``W = max w``: the nearest lifted seed is the power-cell owner.
        """
        w_max = float(self.weights_um2.max()) if self.weights_um2.size else 0.0
        extra = np.sqrt(np.maximum(w_max - self.weights_um2, 0.0))
        return np.c_[self.seeds_um, extra], w_max

    def owner(self, points_um: np.ndarray) -> np.ndarray:
        """Index of the grain containing each 3-D point (power-cell owner).

        With up to three distinct weights, within one weight class the
        power-nearest seed is the Euclidean nearest: one 3-D k-d tree query
        per class, then the least power distance ``d² − w`` over the classes.
        With more weights: start at the Euclidean-nearest seed with a
        non-empty cell and walk to the face neighbour of least power distance
        until none is better. The power distance ``pw_j − 2 s_j·p`` is linear
        in the lifted seeds ``(s_j, pw_j)`` and the lower convex hull of those
        is a convex piecewise-linear graph, so a vertex that beats all its
        edge neighbours is the global minimum (exact).
        """
        pts = np.asarray(points_um, np.float64)
        if self.parent_seeds_um is not None:
            return self._owner_two_level(pts)
        classes = np.unique(self.weights_um2)
        if len(classes) <= 3:
            best = np.full(len(pts), np.inf)
            owner = np.zeros(len(pts), np.int64)
            for w in classes:
                members = np.flatnonzero(self.weights_um2 == w)
                dist, k = cKDTree(self.seeds_um[members]).query(pts, k=1, workers=2)
                power = dist * dist - w
                better = power < best
                best[better] = power[better]
                owner[better] = members[k[better]]
            return owner
        return _owner_by_walk(self, pts)


def _owner_by_walk(poly: Polycrystal, pts: np.ndarray) -> np.ndarray:
    s = poly.seeds_um
    pw = np.sum(s**2, axis=1) - poly.weights_um2
    deg = np.array([len(nb) for nb in poly.neighbours], np.int64)
    visible = np.flatnonzero(deg > 0)
    if visible.size == 0:
        return np.zeros(len(pts), np.int64)
    _, k = cKDTree(s[visible]).query(pts, k=1, workers=2)
    owner = visible[k].astype(np.int64)
    # neighbour tables in buckets of similar degree (self first, then neighbours)
    limits = (16, 24, 32, 48, 64, 128, 256, 1 << 30)
    bucket = np.searchsorted(np.array(limits), deg)
    tables = {}
    for b_i in range(len(limits)):
        members = np.flatnonzero(bucket == b_i)
        if members.size == 0:
            continue
        width = int(deg[members].max()) + 1
        tab = np.repeat(members[:, None], width, axis=1)  # pad with self (never better)
        for r, i in enumerate(members):
            tab[r, 1 : 1 + deg[i]] = poly.neighbours[i]
        row = np.full(len(s), -1, np.int64)
        row[members] = np.arange(members.size)
        tables[b_i] = (tab, row)
    active = np.arange(len(pts))
    for _ in range(500):
        if active.size == 0:
            break
        moved = np.zeros(active.size, bool)
        ab = bucket[owner[active]]
        for b_i, (tab, row) in tables.items():
            idx = np.flatnonzero(ab == b_i)
            step = max(1, 2_000_000 // tab.shape[1])
            for st in range(0, idx.size, step):
                sub = idx[st : st + step]
                a = active[sub]
                cand = tab[row[owner[a]]]
                p = pts[a]
                val = pw[cand] - 2.0 * (
                    s[cand, 0] * p[:, 0:1] + s[cand, 1] * p[:, 1:2] + s[cand, 2] * p[:, 2:3]
                )
                j = np.argmin(val, axis=1)
                new = cand[np.arange(a.size), j]
                mv = new != owner[a]
                owner[a] = new
                moved[sub] = mv
        active = active[moved]
    return owner


def _owner_two_level_impl(poly: Polycrystal, pts: np.ndarray) -> np.ndarray:
    assert poly.parent_seeds_um is not None and poly.parent_grain is not None
    assert poly.grain_parent is not None
    _, c = cKDTree(poly.parent_seeds_um).query(pts, k=1, workers=2)
    own = poly.parent_grain[c].astype(np.int64)
    todo = np.flatnonzero(own < 0)
    if todo.size:
        fine = np.flatnonzero(
            (poly.grain_parent >= 0) & (poly.parent_grain[poly.grain_parent] < 0)
        )
        tree = cKDTree(poly.seeds_um[fine])
        k = min(8, fine.size)
        _, idx = tree.query(pts[todo], k=k, workers=2)
        idx = idx.reshape(todo.size, k)
        cand = fine[idx]
        same = poly.grain_parent[cand] == c[todo][:, None]
        hit = same.any(axis=1)
        first = np.argmax(same, axis=1)
        own[todo[hit]] = cand[np.arange(todo.size), first][hit]
        rest = todo[~hit]
        if rest.size:  # far from the seeds of its parent: search that parent's seeds only
            for cc in np.unique(c[rest]):
                members = fine[poly.grain_parent[fine] == cc]
                sel = rest[c[rest] == cc]
                _, j = cKDTree(poly.seeds_um[members]).query(pts[sel], k=1)
                own[sel] = members[j]
    return own


def _power_neighbours(seeds: np.ndarray, weights: np.ndarray) -> tuple:
    """Face neighbours of every power cell, from the lower convex hull of lifted seeds."""
    n = len(seeds)
    lifted = np.c_[seeds, np.sum(seeds**2, axis=1) - weights]
    hull = ConvexHull(lifted)
    lower = hull.simplices[hull.equations[:, 3] < 0]
    # every pair of vertices of a lower-hull simplex shares a face of the power diagram
    pairs = np.concatenate([lower[:, [a, b]] for a in range(4) for b in range(a + 1, 4)])
    pairs = np.concatenate([pairs, pairs[:, ::-1]]).astype(np.int64)
    code = np.unique(pairs[:, 0] * n + pairs[:, 1])
    pairs = np.c_[code // n, code % n]
    splits = np.searchsorted(pairs[:, 0], np.arange(n + 1))
    return tuple(pairs[splits[i] : splits[i + 1], 1] for i in range(n))


def make_polycrystal(
    extent_um: tuple[float, float],
    grain_size: GrainSize,
    *,
    seed: int = 0,
    slab_half_um: float | None = None,
    margin_um: float | None = None,
    crack_um: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> Polycrystal:
    """Seed a 3-D polycrystal over a field of view and tessellate it.

    Parameters
    ----------
    extent_um : (float, float)
        (height, width) of the field of view in µm; the field spans
        ``[0, width] × [0, height]`` in (x, y).
    grain_size : GrainSize
        Distribution of grain sizes.
    seed : int
        Seed of the random generator.
    slab_half_um : float, optional
        Half-thickness of the seeded slab around z = 0 (default 2.5 × the
        largest grain size).
    margin_um : float, optional
        Extra width seeded around the field so its edges are interior
        (default 1.5 × the largest grain size).
    crack_um : callable, optional
        ``z = crack_um(x, y)``: the seeded slab follows this surface (seeds
        uniform in ``|z - crack(x, y)| <= slab_half_um``, still a Poisson
        process), so a wandering crack needs no thicker slab.

    Returns
    -------
    Polycrystal

    References
    ----------
    .. [1] Meijering (1953); Aurenhammer (1987) — see the module docstring.
    """
    rng = np.random.default_rng(seed)
    big = grain_size.largest_um
    zh = float(slab_half_um if slab_half_um is not None else 2.5 * big)
    mg = float(margin_um if margin_um is not None else 1.5 * big)
    h, w = extent_um
    lo = np.array([-mg, -mg, -zh])
    hi = np.array([w + mg, h + mg, zh])
    vol = float(np.prod(hi - lo))

    if grain_size.kind == "lognormal":
        d0, s = grain_size.mean_um, grain_size.spread
        # number mean of a lognormal: exp(mu + s²/2); E[d³] = exp(3 mu + 9 s²/2)
        mu = math.log(d0) - 0.5 * s * s
        mean_v = math.pi / 6.0 * math.exp(3 * mu + 4.5 * s * s)
        n = rng.poisson(vol / mean_v)
        if n > 400_000:
            raise FractoInputError(
                "The grains are too small for this field of view; use a larger grain size "
                "or fewer pixels."
            )
        seeds = rng.uniform(lo, hi, size=(n, 3))
        if crack_um is not None:
            seeds[:, 2] += crack_um(seeds[:, 0], seeds[:, 1])
        if s > 0:
            d = np.exp(mu + s * rng.standard_normal(n))
            weights = (0.5 * d) ** 2
        else:
            weights = np.zeros(n)
        population = np.zeros(n, np.uint8)
    else:
        return _two_level(rng, grain_size, lo, hi, vol, zh, crack_um)
    rot = Rotation.random(len(seeds), random_state=rng).as_matrix()
    neighbours = _power_neighbours(seeds, weights)
    if crack_um is not None and len(seeds):
        zh = float(np.max(np.abs(seeds[:, 2]))) + zh
    return Polycrystal(seeds, weights, rot, population, neighbours, zh)


def _two_level(
    rng: np.random.Generator,
    grain_size: GrainSize,
    lo: np.ndarray,
    hi: np.ndarray,
    vol: float,
    zh: float,
    crack_um: Callable[[np.ndarray, np.ndarray], np.ndarray] | None,
) -> Polycrystal:
    """Bimodal polycrystal: coarse Voronoi cells, a share of them split into fine grains.

    Parent seeds are uniform at density 1/v_c (v_c = π d_c³/6) and each parent
    cell stays one coarse grain with probability equal to the coarse volume
    fraction (cells are exchangeable, so the expected volume fraction is that
    probability); the others are filled with fine Voronoi grains of seed
    density 1/v_f, cut by the parent cell. Every grain is an intersection of
    half-spaces, so faces stay planar and coarse grains polyhedral.
    """
    from scipy.spatial import Delaunay

    dc, df = float(grain_size.coarse_um), float(grain_size.fine_um)  # type: ignore[arg-type]
    f = float(grain_size.coarse_volume_fraction)  # type: ignore[arg-type]
    n_p = max(2, int(rng.poisson(vol / (math.pi / 6.0 * dc**3))))
    n_f = int(rng.poisson(vol / (math.pi / 6.0 * df**3)))
    if n_f + n_p > 400_000:
        raise FractoInputError(
            "The fine grains are too small for this field of view; use a larger fine "
            "grain size or fewer pixels."
        )
    parents = rng.uniform(lo, hi, size=(n_p, 3))
    fine = rng.uniform(lo, hi, size=(n_f, 3))
    if crack_um is not None:
        parents[:, 2] += crack_um(parents[:, 0], parents[:, 1])
        fine[:, 2] += crack_um(fine[:, 0], fine[:, 1])
    kept = rng.uniform(size=n_p) < f
    _, fparent = cKDTree(parents).query(fine, k=1)
    fine, fparent = fine[~kept[fparent]], fparent[~kept[fparent]]
    has_fine = np.bincount(fparent, minlength=n_p) > 0
    whole = kept | ~has_fine  # parent cells that are one grain
    parent_grain = np.full(n_p, -1, np.int64)
    parent_grain[whole] = np.arange(int(whole.sum()))
    n_whole = int(whole.sum())
    order = np.argsort(fparent, kind="stable")
    fine, fparent = fine[order], fparent[order]
    seeds = np.concatenate([parents[whole], fine])
    grain_parent = np.concatenate([np.flatnonzero(whole), fparent]).astype(np.int64)
    population = np.concatenate([kept[whole].astype(np.uint8), np.zeros(len(fine), np.uint8)])
    # parent-cell faces from the Delaunay triangulation of the parent seeds
    tri = Delaunay(parents)
    sim = tri.simplices
    pairs = np.concatenate([sim[:, [a, b]] for a in range(4) for b in range(a + 1, 4)])
    pairs = np.concatenate([pairs, pairs[:, ::-1]]).astype(np.int64)
    code = np.unique(pairs[:, 0] * n_p + pairs[:, 1])
    pa, pb = code // n_p, code % n_p
    split = np.searchsorted(pa, np.arange(n_p + 1))
    sq = np.sum(parents**2, axis=1)
    parent_planes = []
    for c in range(n_p):
        nb = pb[split[c] : split[c + 1]]
        A = 2.0 * (parents[nb] - parents[c])
        b = sq[nb] - sq[c]
        parent_planes.append((A, b, parent_grain[nb]))
    neighbours: list = [np.zeros(0, np.int64)] * n_whole
    starts = np.searchsorted(fparent, np.arange(n_p + 1))
    for c in range(n_p):
        lo_i, hi_i = starts[c], starts[c + 1]
        m = hi_i - lo_i
        if m == 0:
            continue
        if m <= 40:
            full = np.arange(m)
            nbs = [np.delete(full, i) for i in range(m)]
        else:
            t = Delaunay(fine[lo_i:hi_i])
            pr = np.concatenate(
                [t.simplices[:, [a, b]] for a in range(4) for b in range(a + 1, 4)]
            )
            pr = np.concatenate([pr, pr[:, ::-1]]).astype(np.int64)
            cd = np.unique(pr[:, 0] * m + pr[:, 1])
            qa, qb = cd // m, cd % m
            sp = np.searchsorted(qa, np.arange(m + 1))
            nbs = [qb[sp[i] : sp[i + 1]] for i in range(m)]
        neighbours.extend(n_whole + lo_i + nb for nb in nbs)
    rot = Rotation.random(len(seeds), random_state=rng).as_matrix()
    if crack_um is not None and len(seeds):
        zh = float(np.max(np.abs(seeds[:, 2]))) + zh
    return Polycrystal(
        seeds,
        np.zeros(len(seeds)),
        rot,
        population,
        tuple(neighbours),
        zh,
        parent_seeds_um=parents,
        parent_grain=parent_grain,
        grain_parent=grain_parent,
        parent_planes=tuple(parent_planes),
    )


def mean_lineal_intercept_px(grain_ids: np.ndarray) -> float:
    """Mean lineal intercept (pixels) of a grain map along its rows and columns.

    Test lines are the pixel rows and columns; each change of grain id between
    neighbouring pixels is one boundary crossing, and the intercept length is
    total line length / number of crossings (ASTM E112, intercept procedure).
    """
    g = np.asarray(grain_ids)
    ny, nx = g.shape
    cross = int(np.count_nonzero(g[:, 1:] != g[:, :-1]) + np.count_nonzero(g[1:] != g[:-1]))
    length = ny * (nx - 1) + nx * (ny - 1)
    return float(length / cross) if cross else math.inf


def column_extent(
    poly: Polycrystal,
    grain: np.ndarray,
    x_um: np.ndarray,
    y_um: np.ndarray,
    *,
    chunk: int = 32768,
    resolve: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Top and bottom of each grain along vertical lines (exact planar faces).

    For a point (x, y) owned by grain ``i`` at some height, the vertical line
    through it stays in the power cell while ``2 z a_z <= b`` for every face
    neighbour ``j``, with ``a = s_j - s_i``,
    ``b = (|s_j|² - w_j) - (|s_i|² - w_i) - 2 x a_x - 2 y a_y``. Neighbours
    above (``a_z > 0``) bound z from above, neighbours below from below; the
    binding neighbour names the face (facet) the line leaves through.

    Parameters
    ----------
    poly : Polycrystal
    grain : ndarray of int
        Owner grain of each point (flat).
    x_um, y_um : ndarray
        Coordinates of the points (flat, µm).

    Returns
    -------
    z_top, z_bot : ndarray of float64
        Heights (µm) where the line leaves the grain, clipped to the slab.
    face_top, face_bot : ndarray of int64
        Neighbour grain across the top and the bottom face (-1 at the slab,
        and where a two-level tessellation does not store it unless `resolve`).
    """
    grain = np.asarray(grain, np.int64)
    x_um = np.asarray(x_um, np.float64)
    y_um = np.asarray(y_um, np.float64)
    n = grain.size
    zh = poly.slab_half_um
    z_top = np.full(n, zh)
    z_bot = np.full(n, -zh)
    f_top = np.full(n, -1, np.int64)
    f_bot = np.full(n, -1, np.int64)
    if n == 0:
        return z_top, z_bot, f_top, f_bot
    present, pix_row = np.unique(grain, return_inverse=True)
    # every bounding plane A·p <= b of the grains present, as z <=/>= α + β x + γ y
    gi, Apl, bpl, nj = poly.planes(present)
    az = Apl[:, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = bpl / az
        beta = -Apl[:, 0] / az
        gamma = -Apl[:, 1] / az
    for up in (True, False):
        sel = az > 0 if up else az < 0
        g_s, j_s = gi[sel], nj[sel]
        al, be, ga = alpha[sel], beta[sel], gamma[sel]
        order = np.argsort(g_s, kind="stable")
        g_s, j_s, al, be, ga = g_s[order], j_s[order], al[order], be[order], ga[order]
        cnt = np.bincount(g_s, minlength=present.size)
        start = np.concatenate([[0], np.cumsum(cnt)[:-1]])
        slot = np.arange(g_s.size) - start[g_s]
        m_all = int(cnt.max()) if cnt.size else 0
        if m_all == 0:
            continue
        fill = np.inf if up else -np.inf
        A = np.full((present.size, m_all), fill)
        B = np.zeros((present.size, m_all))
        G = np.zeros((present.size, m_all))
        J = np.full((present.size, m_all), -1, np.int64)
        A[g_s, slot], B[g_s, slot], G[g_s, slot], J[g_s, slot] = al, be, ga, j_s
        pix_cnt = cnt[pix_row]
        lo = 0
        for hi in (8, 12, 16, 24, 32, 48, 64, 128, 256, 1 << 30):
            pix = np.flatnonzero((pix_cnt > lo) & (pix_cnt <= hi))
            m = min(hi, m_all)
            lo = hi
            step = max(1, chunk * 32 // m)
            for st in range(0, pix.size, step):
                p = pix[st : st + step]
                r = pix_row[p]
                bound = A[r, :m] + B[r, :m] * x_um[p, None] + G[r, :m] * y_um[p, None]
                k = np.argmin(bound, axis=1) if up else np.argmax(bound, axis=1)
                rows = np.arange(p.size)
                val = bound[rows, k]
                if up:
                    ok = np.isfinite(val) & (val < zh)
                    z_top[p[ok]] = val[ok]
                    f_top[p[ok]] = J[r, k][ok]
                else:
                    ok = np.isfinite(val) & (val > -zh)
                    z_bot[p[ok]] = val[ok]
                    f_bot[p[ok]] = J[r, k][ok]
    # faces whose far side is not stored (two-level tessellation): look it up
    eps = 1e-6
    for f, z, sign in ((f_top, z_top, 1.0), (f_bot, z_bot, -1.0)) if resolve else ():
        unknown = np.flatnonzero((f < 0) & (np.abs(z) < zh))
        if unknown.size:
            q = np.c_[x_um[unknown], y_um[unknown], z[unknown] + sign * eps]
            f[unknown] = poly.owner(q)
    return z_top, z_bot, f_top, f_bot
