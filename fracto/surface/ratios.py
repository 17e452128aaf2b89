"""Fractography ratios of a height map: profile roughness ratio RL and surface area ratio RS.

* RL = true profile length / projected length, along x, y, any angle, or
  averaged over profile directions;
* RS = true surface area / projected area, from a triangulation of the map
  (two triangles per grid cell). RS − 1 is ISO 25178-2 Sdr / 100 by definition;
  `triangulated_area` is the single routine both should use;
* the Pickens–Gurland estimate of RS from RL, an approximation.

Inputs: ``z`` a 2-D float array of heights in µm (NaN = not measured; rows = y,
columns = x; form already removed by the caller), ``dx``/``dy`` the column and
row spacings in µm (pass 1 for pixel units). Only valid points are used: a
profile segment counts when both ends are valid, a grid cell when its four
corners are.

References
----------
.. [1] E. E. Underwood, *Quantitative Stereology*, Addison-Wesley, 1970.
.. [2] E. E. Underwood and K. Banerji, "Quantitative fractography", in
   *ASM Handbook Vol. 12, Fractography*, ASM International, 1987, pp. 193-210.
.. [3] J. R. Pickens and J. Gurland, "Metallographic characterization of
   fracture surface profiles on sectioning planes", in *Proc. 4th Int. Congress
   for Stereology*, NBS Special Publication 431, 1976, pp. 269-272
   (publication details from memory).
.. [4] ISO 25178-2:2012, Geometrical product specifications (GPS) — Surface
   texture: Areal — Part 2, clause 4.3.2 (Sdr, developed interfacial area ratio).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from fracto.errors import FractoInputError
from fracto.surface.checks import check_spacing

__all__ = [
    "fractography_ratios",
    "pickens_gurland_rs",
    "profile_length_ratio",
    "profile_length_ratio_mean",
    "surface_area_ratio",
    "triangulated_area",
]

_CHUNK_ROWS = 256  # rows per block: bounds temporaries to a few MB on large maps
DEFAULT_MAX_SAMPLES = 300_000  # interpolated samples per oblique direction


def _check_map(z: np.ndarray, dx: float, dy: float) -> np.ndarray:
    z = np.asarray(z)
    if z.ndim != 2:
        raise FractoInputError(f"The height map must be a 2-D array, not {z.ndim}-D.")
    if not np.issubdtype(z.dtype, np.floating) and not np.issubdtype(z.dtype, np.integer):
        raise FractoInputError("The height map must hold numbers.")
    if z.shape[0] < 2 or z.shape[1] < 2:
        raise FractoInputError("The height map must have at least 2 rows and 2 columns.")
    check_spacing(dx, dy)
    return z


def _no_valid(what: str) -> FractoInputError:
    return FractoInputError(f"The height map has no valid {what} to measure.")


def _finite_sum(a: np.ndarray) -> tuple[float, int]:
    """Sum and count of the finite entries (fast path when all are finite)."""
    total = float(np.sum(a))
    if math.isfinite(total):
        return total, int(a.size)
    ok = np.isfinite(a)
    return float(np.sum(a, where=ok)), int(np.count_nonzero(ok))


def _axis_lengths(z: np.ndarray, step: float, axis: int) -> tuple[float, int]:
    """Sum of true segment lengths and number of valid segments along `axis` (0 or 1)."""
    total = 0.0
    count = 0
    n = z.shape[0]
    for r0 in range(0, n, _CHUNK_ROWS):
        if axis == 1:
            block = np.asarray(z[r0 : r0 + _CHUNK_ROWS], dtype=np.float64)
            seg = np.diff(block, axis=1)
        else:
            block = np.asarray(z[r0 : r0 + _CHUNK_ROWS + 1], dtype=np.float64)
            if block.shape[0] < 2:
                break
            seg = np.diff(block, axis=0)
        seg *= seg
        seg += step * step
        np.sqrt(seg, out=seg)  # segment lengths, NaN where an end is not measured
        t, c = _finite_sum(seg)
        total += t
        count += c
    return total, count


def _oblique_lengths(
    z: np.ndarray, dx: float, dy: float, angle_deg: float, max_samples: int
) -> tuple[float, int, float]:
    """True length, valid segment count and step of profiles at `angle_deg`.

    Parallel lines at the angle (counter-clockwise from +x towards +y, y = row
    direction) are sampled at step h = min(dx, dy) by bilinear interpolation
    (scipy.ndimage.map_coordinates, order=1). Lines are spaced h apart, or a
    multiple of h chosen so that at most `max_samples` points are taken; the
    spacing of the lines does not bias the ratio, it only thins the average.
    """
    ny, nx = z.shape
    h = min(dx, dy)
    a = math.radians(angle_deg)
    ex, ey = math.cos(a), math.sin(a)  # along the line
    nxv, nyv = -ey, ex  # across the lines
    w, hgt = (nx - 1) * dx, (ny - 1) * dy
    corners = np.array([[0.0, 0.0], [w, 0.0], [0.0, hgt], [w, hgt]])
    t = corners @ np.array([ex, ey])
    c = corners @ np.array([nxv, nyv])
    n_t = math.floor((t.max() - t.min()) / h) + 1
    n_c_full = math.floor((c.max() - c.min()) / h) + 1
    thin = max(1, math.ceil(n_t * n_c_full / max(int(max_samples), 1)))
    spacing = h * thin
    n_c = max(1, math.floor((c.max() - c.min()) / spacing))
    offsets = c.min() + (np.arange(n_c) + 0.5) * (c.max() - c.min()) / n_c
    ts = t.min() + np.arange(n_t) * h
    px = offsets[:, None] * nxv + ts[None, :] * ex  # µm
    py = offsets[:, None] * nyv + ts[None, :] * ey
    col = px / dx
    row = py / dy
    eps = 1e-9
    inside = (col >= -eps) & (col <= nx - 1 + eps) & (row >= -eps) & (row <= ny - 1 + eps)
    coords = np.stack([np.clip(row, 0, ny - 1), np.clip(col, 0, nx - 1)])
    data = z if np.issubdtype(z.dtype, np.floating) else z.astype(np.float64)
    # order=1 interpolation: a NaN corner of the cell makes the sample NaN.
    vals = ndimage.map_coordinates(
        data, coords.reshape(2, -1), output=np.float64, order=1, mode="nearest"
    )
    vals = vals.reshape(px.shape)
    vals[~inside] = np.nan
    dz = np.diff(vals, axis=1)
    dz = dz[np.isfinite(dz)]
    return float(np.sum(np.sqrt(h * h + dz * dz))), int(dz.size), h


def profile_length_ratio(
    z: np.ndarray,
    dx: float,
    dy: float,
    *,
    direction: str | float = "x",
    max_samples: int = DEFAULT_MAX_SAMPLES,
) -> float:
    """Profile roughness ratio RL: true profile length over projected length.

    The profiles are the rows (``"x"``), the columns (``"y"``) or straight
    lines at an angle in degrees (counter-clockwise from +x towards +y, the row
    index direction). Along rows and columns the map's own samples are joined
    by straight segments; at other angles the lines are sampled at spacing
    min(dx, dy) by bilinear interpolation. The average over all valid profiles
    is length-weighted: total true length over total projected length of the
    valid segments (both ends measured). Angles that are multiples of 90° use
    the rows/columns directly.

    Parameters
    ----------
    z : ndarray, 2-D
        Heights (µm), NaN where not measured.
    dx, dy : float
        Column and row spacing (µm).
    direction : {"x", "y"}, float or str
        Profile direction: ``"x"``, ``"y"``, or an angle in degrees given as
        a number or as text (``"45"``, ``"45deg"``).
    max_samples : int
        At most this many interpolated samples per oblique direction (the
        lines are thinned evenly on large maps; this only affects speed and
        the sampling scatter).

    Returns
    -------
    float
        RL ≥ 1.

    References
    ----------
    .. [1] E. E. Underwood, *Quantitative Stereology*, 1970.
    .. [2] E. E. Underwood and K. Banerji, ASM Handbook Vol. 12, 1987.
    """
    z = _check_map(z, dx, dy)
    if isinstance(direction, str):
        key = direction.strip().lower()
        if key == "x":
            angle = 0.0
        elif key == "y":
            angle = 90.0
        else:
            try:
                angle = float(key.removesuffix("deg"))
            except ValueError:
                angle = float("nan")
        if not math.isfinite(angle):
            raise FractoInputError(
                "The profile direction must be 'x', 'y' or an angle in degrees, "
                f"not '{direction}'."
            )
    else:
        try:
            angle = float(direction)
        except (TypeError, ValueError):
            raise FractoInputError("The profile direction must be 'x', 'y' or an angle.") from None
        if not math.isfinite(angle):
            raise FractoInputError("The profile direction angle must be a finite number.")
    a = angle % 180.0
    if math.isclose(a, 0.0, abs_tol=1e-12) or math.isclose(a, 180.0, abs_tol=1e-12):
        total, count = _axis_lengths(z, dx, axis=1)
        step = dx
    elif math.isclose(a, 90.0, abs_tol=1e-12):
        total, count = _axis_lengths(z, dy, axis=0)
        step = dy
    else:
        total, count, step = _oblique_lengths(z, dx, dy, a, max_samples)
    if count == 0:
        raise _no_valid("profile segments")
    return total / (count * step)


def profile_length_ratio_mean(
    z: np.ndarray,
    dx: float,
    dy: float,
    *,
    n_directions: int = 12,
    max_samples: int = DEFAULT_MAX_SAMPLES,
) -> float:
    """RL averaged over `n_directions` profile directions equally spaced in [0°, 180°).

    Each direction contributes its own RL (see `profile_length_ratio`) with
    equal weight. For a surface of planar facets of tilt θ facing every
    azimuth equally the direction mean is (2/π)·sec θ·E(sin²θ), E the complete
    elliptic integral of the second kind (Underwood & Banerji 1987).

    References
    ----------
    .. [1] E. E. Underwood and K. Banerji, ASM Handbook Vol. 12, 1987.
    """
    z = _check_map(z, dx, dy)
    n = int(n_directions)
    if n < 1:
        raise FractoInputError("The number of profile directions must be at least 1.")
    values = [
        profile_length_ratio(z, dx, dy, direction=180.0 * k / n, max_samples=max_samples)
        for k in range(n)
    ]
    return float(np.mean(values))


def _tri(a: np.ndarray, b: np.ndarray, dx: float, dy: float) -> np.ndarray:
    """Twice the triangle area √((dy·a)² + (dx·b)² + (dx·dy)²); overwrites `a` and `b`."""
    a *= dy
    a *= a
    b *= dx
    b *= b
    a += b
    a += (dx * dy) ** 2
    return np.sqrt(a, out=a)


def triangulated_area(z: np.ndarray, dx: float, dy: float) -> tuple[float, float]:
    """True and projected area (µm²) of the triangulated surface over valid cells.

    Each grid cell with four valid corners is split along the diagonal from
    (x+dx, y) to (x, y+dy) into two triangles; the cross product of two edge
    vectors gives each triangle's area:

    * ``T1 = ½·√((dy·(z10 − z00))² + (dx·(z01 − z00))² + (dx·dy)²)``
    * ``T2 = ½·√((dy·(z01 − z11))² + (dx·(z10 − z11))² + (dx·dy)²)``

    with z00 = z(x, y), z10 = z(x+dx, y), z01 = z(x, y+dy), z11 = z(x+dx, y+dy).
    The projected area is dx·dy per valid cell. Sdr (ISO 25178-2) is
    ``100·(true/projected − 1)`` of these two numbers.

    Returns
    -------
    (float, float)
        (true_area_um2, projected_area_um2).

    References
    ----------
    .. [1] ISO 25178-2:2012, clause 4.3.2 (Sdr).
    .. [2] E. E. Underwood and K. Banerji, ASM Handbook Vol. 12, 1987 (RS).
    """
    z = _check_map(z, dx, dy)
    ny = z.shape[0]
    cell = dx * dy
    true_area = 0.0
    n_cells = 0
    for r0 in range(0, ny - 1, _CHUNK_ROWS):
        b = np.asarray(z[r0 : r0 + _CHUNK_ROWS + 1], dtype=np.float64)
        z00, z10, z01, z11 = b[:-1, :-1], b[:-1, 1:], b[1:, :-1], b[1:, 1:]
        t1 = _tri(z10 - z00, z01 - z00, dx, dy)
        t1 += _tri(z01 - z11, z10 - z11, dx, dy)
        t, c = _finite_sum(t1)
        true_area += 0.5 * t
        n_cells += c
    return true_area, n_cells * cell


def surface_area_ratio(z: np.ndarray, dx: float, dy: float) -> float:
    """Surface area ratio RS = true area / projected area.

    The true area is that of the bilinear interpolant of the grid
    (:func:`fracto.surface.areal.developed_area`), the same area ISO 25178-2
    Sdr is computed from, so ``RS − 1 = Sdr / 100`` exactly. For any single
    plane of tilt θ, RS = sec θ exactly. (:func:`triangulated_area` gives the
    two-triangle area, an upper bound kept for comparison.)

    References
    ----------
    .. [1] E. E. Underwood and K. Banerji, ASM Handbook Vol. 12, 1987.
    .. [2] ISO 25178-2:2012, clause 4.3.2 (Sdr).
    """
    from fracto.surface.areal import developed_area

    z = _check_map(z, dx, dy)
    true_area, projected = developed_area(z, dx, dy)
    if projected == 0:
        raise _no_valid("grid cells (four valid corners)")
    return true_area / projected


def pickens_gurland_rs(rl: float) -> float:
    """Pickens–Gurland estimate of RS from RL: RS ≈ (4/π)(RL − 1) + 1.

    This is an *approximation*, not an identity. On single-valued isotropic
    height maps the ratio (RS − 1)/(RL − 1) runs from about 2 for gentle slopes
    towards π/2 for steep ones (Gaussian fields with RMS slope 0.3, 1 and 3
    give about 1.96, 1.85 and 1.72), never 4/π ≈ 1.27; the estimate therefore
    falls short of the measured RS on such maps. Report it as an estimate.

    Parameters
    ----------
    rl : float
        Profile roughness ratio (≥ 1), ideally the mean over directions.

    Returns
    -------
    float
        Estimated RS.

    References
    ----------
    .. [1] J. R. Pickens and J. Gurland, NBS Special Publication 431, 1976.
    .. [2] E. E. Underwood and K. Banerji, ASM Handbook Vol. 12, 1987.
    """
    try:
        v = float(rl)
    except (TypeError, ValueError):
        raise FractoInputError("The profile roughness ratio RL must be a number.") from None
    if not (math.isfinite(v) and v >= 1.0 - 1e-12):
        raise FractoInputError(f"The profile roughness ratio RL must be at least 1, not {rl!r}.")
    return 4.0 / math.pi * (v - 1.0) + 1.0


def fractography_ratios(
    z: np.ndarray,
    dx: float,
    dy: float,
    *,
    n_directions: int = 12,
    max_samples: int = DEFAULT_MAX_SAMPLES,
    rs: float | None = None,
) -> dict[str, float]:
    """All fractography ratios of a height map in one call.

    Pass `rs` when the caller already has it (``1 + Sdr/100`` from
    :func:`fracto.surface.areal.gradient_parameters`, the same area) to save
    computing the developed area twice.

    Returns
    -------
    dict
        ``RL_x`` and ``RL_y`` (profiles along rows and columns), ``RL`` (mean
        over `n_directions` directions), ``RS`` (triangulated area ratio),
        ``RS_pickens_gurland`` (the Pickens–Gurland estimate from ``RL``) and
        ``RS_measured_to_predicted`` = RS / RS_pickens_gurland.

    Notes
    -----
    ``RS_measured_to_predicted`` is *not* an anisotropy indicator. It only
    says how far the Pickens–Gurland approximation is off for this surface: on
    single-valued isotropic maps it is above 1 (the true (RS − 1)/(RL − 1)
    lies between about 2 and π/2, not 4/π). Use RL by direction (RL_x / RL_y)
    and the texture aspect ratio Str of ISO 25178-2 to judge anisotropy.

    References
    ----------
    .. [1] E. E. Underwood and K. Banerji, ASM Handbook Vol. 12, 1987.
    .. [2] J. R. Pickens and J. Gurland, NBS Special Publication 431, 1976.
    """
    z = _check_map(z, dx, dy)
    n = int(n_directions)
    if n < 1:
        raise FractoInputError("The number of profile directions must be at least 1.")
    by_angle = {
        180.0 * k / n: profile_length_ratio(
            z, dx, dy, direction=180.0 * k / n, max_samples=max_samples
        )
        for k in range(n)
    }
    rl = float(np.mean(list(by_angle.values())))
    rl_x = by_angle[0.0]
    rl_y = by_angle[90.0] if 90.0 in by_angle else profile_length_ratio(z, dx, dy, direction="y")
    if rs is None:
        rs = surface_area_ratio(z, dx, dy)
    rs_pg = pickens_gurland_rs(rl)
    return {
        "RL_x": rl_x,
        "RL_y": rl_y,
        "RL": rl,
        "RS": rs,
        "RS_pickens_gurland": rs_pg,
        "RS_measured_to_predicted": rs / rs_pg,
    }
