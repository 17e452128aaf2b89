"""Fracture-surface geometry of each mode, built on the polycrystal.

All heights are in µm, coordinates in µm, arrays flat over the pixels of one
mode unless stated otherwise. What each mode looks like follows common
practice of fractography (ASM Handbook Vol. 12, *Fractography*, 1987):

* **intergranular** — the crack runs over the boundary faces of the grain:
  the grain either stays on this half (its top faces show, a polyhedral
  "rock-candy" cap) or is pulled out (its bottom faces show, a faceted
  socket). Faces are planes of the power tessellation, bent gently as a
  whole (a dome over each grain section: caps bulge out, sockets hollow in),
  triple-junction ridges sharp. A few boundaries open as secondary cracks
  (narrow deep grooves).
* **transgranular cleavage** — one plane per grain from a cleavage plane family
  (``{100}`` by default) turned by the grain's orientation, the member
  closest to the crack plane taken; a step at every grain boundary because
  the plane changes; dense river lines that start fine at the boundary where
  the crack enters, fan in and merge downstream (see :func:`river_steps`);
  occasional larger cleavage steps; faint conchoidal ripples and chipped
  terraces on some facets.
* **ductile** — microvoid coalescence: paraboloidal cups around random
  nucleation sites of a lognormal size distribution; where neighbouring cups
  meet, the lower envelope leaves sharp tear ridges; shear stretches the
  cups along the shear direction and tilts their floors; some cups hold a
  particle at the bottom.
* **fatigue** — fine striations (one per load cycle) of a chosen spacing:
  arcs about a distant crack origin, normal to the local direction of crack
  travel, on plateaus tilted by at most 1°.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy.spatial import cKDTree

from fracto.errors import FractoInputError

__all__ = [
    "CLEAVAGE_FAMILIES",
    "FractureSettings",
    "cleavage_normals",
    "dimple_field",
    "river_steps",
    "striations",
]

#: Plane normals of cubic plane families (crystal axes), one per ± pair.
CLEAVAGE_FAMILIES: dict[str, np.ndarray] = {
    "100": np.eye(3),
    "110": np.array([[1, 1, 0], [1, -1, 0], [1, 0, 1], [1, 0, -1], [0, 1, 1], [0, 1, -1]])
    / math.sqrt(2.0),
    "111": np.array([[1, 1, 1], [1, 1, -1], [1, -1, 1], [-1, 1, 1]]) / math.sqrt(3.0),
}


@dataclass(frozen=True)
class FractureSettings:
    """Geometry of the fracture modes (lengths in µm; None = scaled to the grain size).

    Parameters
    ----------
    crack_roughness : float
        RMS of the long-wavelength wander of the crack plane, in grain sizes.
    crack_direction_deg : float or None
        Mean direction of crack travel in the image (degrees from +x towards
        +y); None = random.
    cleavage_family : {"100", "110", "111"}
        Cleavage plane family of the crystals.
    river_spacing : float
        Spacing of the fine river lines where they start, as a factor of
        sqrt(grain size × 1 µm) (µm): 0.12 gives 0.27 µm on 5 µm grains and
        0.45 µm on 14 µm grains.
    river_step_um : float or None
        Height of one river step (default 0.1 × the local line spacing).
    river_merge : int
        Fine river lines that merge into one downstream.
    river_fraction : float
        Share of cleavage facets that show river lines (the others are smooth).
    cleavage_step_um : float or None
        Height of the occasional larger cleavage steps (default 0.06 × grain size).
    cleavage_curvature : float
        RMS bending of cleavage facets (height change at the grain edge over
        half a grain size); 0 keeps them exactly planar.
    ripple_fraction : float
        Share of cleavage facets with faint conchoidal ripples.
    ripple_height : float
        Amplitude of the ripples, in grain sizes.
    terrace_fraction : float
        Share of cleavage facets with a chipped side (a staircase of small
        terraces, steps of about 3 % of the grain size).
    boundary_curvature : float
        Bending of intergranular faces: rise of the dome over a grain section
        (cap outwards, socket inwards) in grain sizes, scattered ±70 % per grain.
    secondary_crack_probability : float
        Share of intergranular grain boundaries that open as secondary cracks.
    pullout_bias : float
        How strongly a grain's position decides whether it stays or is pulled
        out (0 = coin toss, larger = the nearer side wins).
    dimple_um : float
        Mean dimple diameter.
    dimple_spread : float
        σ of ln(dimple diameter).
    dimple_depth_ratio : float
        Dimple depth / dimple radius.
    particle_fraction : float
        Share of dimples with a particle at the bottom.
    shear_elongation : float
        Length / width of the dimples (1 = equiaxed, tension).
    shear_angle_deg : float
        Direction of shear elongation (degrees from +x).
    striation_spacing_um : float
        Spacing of fatigue striations (one per cycle).
    striation_height_um : float
        Peak-to-valley height of a striation.
    debris_per_um2 : float
        Number density of small loose fragments lying on the surface.
    debris_um : float
        Mean diameter of the fragments.
    fragment_clusters : float
        Clusters of small flakes per grain-section area (d²) of the field.
    fragments_per_cluster : float
        Mean number of flakes in a cluster.
    fragment_um : float or None
        Median diameter of a flake in a cluster (default 0.06 × grain size).
    edge_rounding_um : float
        σ of a Gaussian smoothing of the final map: edges and steps are
        rounded over about this length, as real ones are (0 = sharp).
    """

    crack_roughness: float = 0.45
    crack_direction_deg: float | None = None
    cleavage_family: str = "100"
    river_spacing: float = 0.12
    river_step_um: float | None = None
    river_merge: int = 3
    river_fraction: float = 0.85
    cleavage_step_um: float | None = None
    ripple_fraction: float = 0.5
    ripple_height: float = 0.006
    terrace_fraction: float = 0.35
    boundary_curvature: float = 0.08
    secondary_crack_probability: float = 0.05
    cleavage_curvature: float = 0.06
    pullout_bias: float = 1.0
    dimple_um: float = 1.0
    dimple_spread: float = 0.35
    dimple_depth_ratio: float = 0.9
    particle_fraction: float = 0.12
    shear_elongation: float = 1.0
    shear_angle_deg: float = 0.0
    striation_spacing_um: float = 0.4
    striation_height_um: float = 0.08
    edge_rounding_um: float = 0.1
    debris_per_um2: float = 0.003
    debris_um: float = 0.25
    fragment_clusters: float = 0.12
    fragments_per_cluster: float = 60.0
    fragment_um: float | None = None

    def __post_init__(self) -> None:
        if self.cleavage_family not in CLEAVAGE_FAMILIES:
            raise FractoInputError(
                f"Unknown cleavage plane family '{self.cleavage_family}'; use 100, 110 or 111."
            )
        for name in ("dimple_um", "striation_spacing_um", "river_spacing", "shear_elongation"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise FractoInputError(f"The fracture setting {name} must be positive.")
        if not (0 <= self.secondary_crack_probability <= 1):
            raise FractoInputError("The secondary-crack probability must lie in 0..1.")
        if self.river_merge < 1:
            raise FractoInputError("river_merge must be a positive whole number.")

    def to_dict(self) -> dict:
        """JSON-ready form."""
        return asdict(self)


def cleavage_normals(rotations: np.ndarray, family: str = "100") -> np.ndarray:
    """Unit normal (n_z > 0) of the family plane closest to the crack plane, per grain.

    Parameters
    ----------
    rotations : ndarray (n, 3, 3)
        Grain orientations (crystal axes as columns, sample frame rows).
    family : str
        Plane family key of :data:`CLEAVAGE_FAMILIES`.
    """
    fam = CLEAVAGE_FAMILIES[family]
    normals = np.einsum("nij,kj->nki", rotations, fam)  # (n, k, 3) in the sample frame
    best = np.argmax(np.abs(normals[..., 2]), axis=1)
    n = normals[np.arange(len(rotations)), best]
    n *= np.sign(n[:, 2:3])
    return n


def river_steps(
    u: np.ndarray, v: np.ndarray, wobble: np.ndarray, spacing_um: np.ndarray, merge: int
) -> np.ndarray:
    """River-pattern step count (an integer field) on a cleavage facet.

    Parameters
    ----------
    u : ndarray
        Position along the crack travel, 0 where the crack enters the grain,
        1 where it leaves.
    v : ndarray
        Position across the travel (µm).
    wobble : ndarray
        Smooth random displacement of the lines (in units of the spacing).
    spacing_um : ndarray
        Spacing of the fine lines at entry (µm).
    merge : int
        Lines per merged river downstream.

    Returns
    -------
    ndarray of float
        ``floor(f)`` with ``f = merge · S(L / merge)``, ``L = v/spacing + wobble``
        and ``S(c) = floor(c) + ½ + ½ sign(2t−1)|2t−1|^p``, ``t = frac(c)``,
        ``p = 1 + 10 u``: at entry S is the identity (evenly spaced fine
        steps); downstream it becomes a staircase, so ``merge`` fine steps
        crowd into one cliff — tributaries joining into a river.
    """
    # the lines fan in towards the exit side: spacing shrinks by up to 75 %
    lines = v / (spacing_um * (1.0 - 0.75 * np.clip(u, 0.0, 1.0))) + wobble
    c = lines / merge
    fl = np.floor(c)
    t = c - fl
    p = 1.0 + 10.0 * np.clip(u, 0.0, 1.0) ** 1.2
    z = 2.0 * t - 1.0
    s = fl + 0.5 + 0.5 * np.sign(z) * np.abs(z) ** p
    return np.floor(merge * s)


def dimple_field(
    shape: tuple[int, int],
    pixel_size_um: float,
    settings: FractureSettings,
    rng: np.random.Generator,
    mask: np.ndarray | None = None,
) -> np.ndarray:
    """Height field (µm) of coalesced microvoids over the whole map.

    With `mask` (boolean, the map's shape) only those pixels are computed
    (the others are 0); the field itself does not depend on the mask.

    The height is the lower envelope of paraboloidal cups
    ``D_k ((r_k/R_k)² − 1)`` around nucleation sites ``k`` (radius ``R_k``,
    depth ``D_k = depth_ratio · R_k``), with ``r_k`` measured in coordinates
    stretched by the shear elongation; ridges form where cups meet.
    """
    ny, nx = shape
    px = float(pixel_size_um)
    e = float(settings.shear_elongation)
    a = math.radians(settings.shear_angle_deg)
    ca, sa = math.cos(a), math.sin(a)
    yy, xx = np.mgrid[0:ny, 0:nx].astype(np.float64) * px
    # rotate into (along-shear, across) and compress the along-shear axis by e
    p_al = (xx * ca + yy * sa) / e
    p_ac = -xx * sa + yy * ca
    mean_d = settings.dimple_um / math.sqrt(e)  # area-equivalent size in stretched space
    lo = np.array([p_al.min(), p_ac.min()]) - 2 * mean_d
    hi = np.array([p_al.max(), p_ac.max()]) + 2 * mean_d
    area = float(np.prod(hi - lo))
    # dense packing of cups: about one site per (0.8 d)² of area
    n = max(4, rng.poisson(area / (0.8 * mean_d) ** 2))
    sites = rng.uniform(lo, hi, size=(n, 2))
    s = settings.dimple_spread
    radii = 0.5 * mean_d * np.exp(s * rng.standard_normal(n) - 0.5 * s * s)
    depth = settings.dimple_depth_ratio * radii
    tilt = (e - 1.0) / e * 0.6 * rng.uniform(0.5, 1.0, n)  # shear tilts the cup floors
    particle = rng.uniform(size=n) < settings.particle_fraction
    tree = cKDTree(sites)
    flat = np.flatnonzero(mask.ravel()) if mask is not None else np.arange(ny * nx)
    pts = np.c_[p_al.ravel()[flat], p_ac.ravel()[flat]]
    k = 5
    dist, idx = tree.query(pts, k=k, workers=2)
    r = radii[idx]
    du = pts[:, 0:1] - sites[idx, 0]
    cups = depth[idx] * ((dist / r) ** 2 - 1.0) + tilt[idx] * depth[idx] * du / r
    best = np.argmin(cups, axis=1)
    rows = np.arange(len(pts))
    h = cups[rows, best]
    kb = idx[rows, best]
    dd = dist[rows, best] / radii[kb]
    bump = np.where(particle[kb] & (dd < 0.3), np.sqrt(np.maximum(0.09 - dd * dd, 0.0)), 0.0)
    out = np.zeros(ny * nx)
    out[flat] = h + bump * radii[kb] * 0.9
    return out.reshape(ny, nx)


def striations(
    along_um: np.ndarray, wobble_um: np.ndarray, spacing_um: float, height_um: float
) -> np.ndarray:
    """Fatigue striation relief: a rounded sawtooth of the given spacing.

    ``h = A · (φ − ½ − ...)`` with φ the fractional cycle ``(along + wobble) /
    spacing``; the profile rises slowly over a cycle and drops quickly (the
    blunting–resharpening shape), peak-to-valley ``A``.
    """
    phase = (along_um + wobble_um) / spacing_um
    t = phase - np.floor(phase)
    # smooth sawtooth: slow rise over 80 % of the cycle, fast fall over 20 %
    rise = np.where(t < 0.8, t / 0.8, (1.0 - t) / 0.2)
    return height_um * (np.sin(0.5 * math.pi * rise) ** 2 - 0.5)
