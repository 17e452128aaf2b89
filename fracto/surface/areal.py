"""ISO 25178-2 areal field parameters of a height map.

Every function takes a height map ``z`` (2-D array of heights in µm, rows = y,
columns = x, NaN = not measured) that the caller has already levelled and
filtered (form removal, S- and L-filters). The reference surface is then the
mean plane of the valid points: all heights below are measured from the mean
of the valid heights. Only valid points enter any sum.

Parameter families
------------------
* :func:`height_parameters` – Sa, Sq, Ssk, Sku, Sp, Sv, Sz (ISO 25178-2 §4.1).
* :func:`gradient_parameters` – Sdq, Sdr (§4.3 hybrid parameters).
* :func:`spatial_parameters` – Sal, Str, Std (§4.2 spatial parameters).
* :func:`material_ratio_curve`, :func:`material_ratio_parameters` – Smr(c),
  Smc(mr), Sxp, Vm, Vv, Vmp, Vmc, Vvc, Vvv (§4.4 functions and related parameters).
* :func:`sk_parameters` – Sk, Spk, Svk, Smr1, Smr2 (ISO 13565-2 construction
  applied areally, as ISO 25178-2 does).
* :func:`areal_parameters` – all of the above plus the feature parameters of
  :mod:`fracto.surface.features`, sharing one sorted copy of the heights.

Units: heights in µm, lateral lengths in the unit of ``dx``/``dy`` (µm, or
pixels when the caller passes 1.0 for an uncalibrated map), volumes per unit
area in µm³/µm² (= µm; ISO 25178-2 quotes ml/m², 1 ml/m² = 1 µm³/µm²),
material ratios in % where the result is a ratio, Sdr in %, Std in degrees.

References
----------
.. [1] ISO 25178-2:2012, Geometrical product specifications (GPS) — Surface
   texture: Areal — Part 2: Terms, definitions and surface texture parameters.
.. [2] ISO 25178-3:2012, Part 3: Specification operators (default s = 0.2 for
   Sal/Str, p = 10 % and q = 80 % for the volume parameters; from memory).
.. [3] ISO 13565-2:1996, Surfaces having stratified functional properties —
   Part 2: Height characterization using the linear material ratio curve.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.fft as sfft

from fracto.errors import FractoInputError
from fracto.surface.checks import check_spacing

__all__ = [
    "MaterialRatioCurve",
    "areal_parameters",
    "gradient_parameters",
    "height_parameters",
    "material_ratio_curve",
    "material_ratio_parameters",
    "sk_parameters",
    "spatial_parameters",
]

# Rows processed at a time in the streaming passes (bounded temporaries).
_CHUNK_ELEMS = 1 << 20
_STD_SMOOTH_DEG = 5.0  # circular Gaussian smoothing of the angular spectrum (sd, degrees)


# --------------------------------------------------------------------------- checks
def _check_map(z: np.ndarray) -> np.ndarray:
    z = np.asarray(z)
    if z.ndim != 2:
        raise FractoInputError(f"The height map must be a 2-D array, not {z.ndim}-D.")
    if not np.issubdtype(z.dtype, np.floating):
        if np.issubdtype(z.dtype, np.integer) or z.dtype == bool:
            z = z.astype(np.float64)
        else:
            raise FractoInputError("The height map must hold real numbers.")
    if z.shape[0] < 2 or z.shape[1] < 2:
        raise FractoInputError("The height map must be at least 2 × 2 points.")
    if np.isinf(z).any():
        raise FractoInputError("The height map holds infinite values; mark missing points NaN.")
    return z


_check_spacing = check_spacing


def _check_fraction(value: float, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise FractoInputError(f"The material ratio {name} must be a number.") from None
    if not (0.0 <= v <= 1.0):
        raise FractoInputError(
            f"The material ratio {name} must be a fraction from 0 to 1 (not percent), not {v!r}."
        )
    return v


def _row_blocks(shape: tuple[int, int], halo: int = 0):
    ny, nx = shape
    step = max(1, _CHUNK_ELEMS // max(nx, 1))
    for r0 in range(0, ny - halo, step):
        yield r0, min(ny, r0 + step + halo)


def _valid_mean(z: np.ndarray) -> tuple[float, int]:
    """Mean of the valid heights and their count (streamed, float64)."""
    total = 0.0
    count = 0
    for r0, r1 in _row_blocks(z.shape):
        b = z[r0:r1]
        m = ~np.isnan(b)
        c = int(np.count_nonzero(m))
        if c:
            total += float(np.sum(b, where=m, dtype=np.float64))
            count += c
    if count == 0:
        raise FractoInputError("The height map has no valid (non-NaN) points.")
    return total / count, count


# --------------------------------------------------------------------------- height
def height_parameters(z: np.ndarray) -> dict[str, float]:
    """Height parameters of ISO 25178-2 §4.1 over the valid points.

    Heights are measured from the mean of the valid heights (the mean plane of
    a levelled map).

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm, NaN where not measured.

    Returns
    -------
    dict
        ``Sa`` arithmetic mean height (µm), ``Sq`` root mean square height (µm),
        ``Ssk`` skewness and ``Sku`` kurtosis (dimensionless; Sku = 3 for a
        Gaussian height distribution, not excess), ``Sp`` maximum peak height
        (µm, highest height above the mean plane), ``Sv`` maximum pit height
        (µm, the *absolute value* of the lowest height, so Sv ≥ 0 as in
        ISO 25178-2), ``Sz`` = Sp + Sv (µm). Ssk and Sku are NaN for a flat map.

    References
    ----------
    .. [1] ISO 25178-2:2012, §4.1.1–4.1.7.
    """
    z = _check_map(z)
    mean, n = _valid_mean(z)
    s1 = s2 = s3 = s4 = 0.0
    zmax, zmin = -math.inf, math.inf
    all_valid = n == z.size
    for r0, r1 in _row_blocks(z.shape):
        b = z[r0:r1]
        v = np.subtract(b if all_valid else b[~np.isnan(b)], mean, dtype=np.float64).ravel()
        if v.size == 0:
            continue
        zmax = max(zmax, float(v.max()))
        zmin = min(zmin, float(v.min()))
        s1 += float(np.abs(v).sum())
        v2 = v * v
        s2 += float(v2.sum())
        s3 += float(np.dot(v2, v))
        s4 += float(np.dot(v2, v2))
    sq = math.sqrt(s2 / n)
    if sq > 0:
        ssk = (s3 / n) / sq**3
        sku = (s4 / n) / sq**4
    else:
        ssk = sku = math.nan
    sp, sv = zmax + 0.0, 0.0 - zmin  # + 0.0: no negative zero
    return {
        "Sa": s1 / n,
        "Sq": sq,
        "Ssk": ssk,
        "Sku": sku,
        "Sp": sp,
        "Sv": sv,
        "Sz": sp + sv,
    }


# --------------------------------------------------------------------------- gradient
_GAUSS_2 = (0.5 - 0.5 / math.sqrt(3.0), 0.5 + 0.5 / math.sqrt(3.0))


def developed_area(z: np.ndarray, dx: float, dy: float) -> tuple[float, float]:
    """Developed (true) and projected area of the bilinear interpolant of the grid.

    Each grid cell with four valid corners is the bilinear patch through them.
    On that patch ``zx`` varies linearly across y and ``zy`` across x::

        zx(v) = ((z10 − z00)(1 − v) + (z11 − z01) v) / dx
        zy(u) = ((z01 − z00)(1 − u) + (z11 − z10) u) / dy

    and the area element is dx·dy·√(1 + zx² + zy²), integrated over the cell by
    2×2 Gauss–Legendre quadrature (exact for planes; the integrand is smooth, so
    the quadrature error is far below the sampling error of the grid itself).
    The cell-centre gradient alone gives a lower bound of this area and a
    two-triangle split an upper bound that depends on the diagonal chosen; the
    bilinear patch has neither bias and no preferred diagonal.

    Sdr (ISO 25178-2) and the surface area ratio RS (Underwood) are the same
    quantity, ``Sdr = 100·(RS − 1)``; both are computed from this one function.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm, NaN where not measured.
    dx, dy : float
        Sampling intervals along x (columns) and y (rows), in the unit of z.

    Returns
    -------
    (float, float)
        (developed_area, projected_area) in µm² (lateral unit squared); the
        projected area counts only complete cells.

    References
    ----------
    .. [1] ISO 25178-2:2012, §4.3.2 (Sdr, from memory).
    .. [2] E. E. Underwood and K. Banerji, "Quantitative fractography", ASM
       Handbook Vol. 12, 1987 (surface area ratio RS).
    """
    z = _check_map(z)
    dx, dy = _check_spacing(dx, dy)
    ny, nx = z.shape
    excess = 0.0  # sum over cells of mean(√(1 + g²) − 1) at the Gauss points
    cells = 0
    step = max(1, _CHUNK_ELEMS // nx)
    g0, g1 = _GAUSS_2
    for r0 in range(0, ny - 1, step):
        b = z[r0 : min(ny, r0 + step + 1)].astype(np.float64, copy=False)
        ex = np.diff(b, axis=1) * (1.0 / dx)  # x slopes on row edges, (rows, nx-1)
        ey = np.diff(b, axis=0) * (1.0 / dy)  # y slopes on column edges, (rows-1, nx)
        ex_lo, ex_hi = ex[:-1], ex[1:]
        ey_lo, ey_hi = ey[:, :-1], ey[:, 1:]
        acc = np.zeros((ex_lo.shape[0], ex_lo.shape[1]))
        zx2 = np.empty_like(acc)
        g = np.empty_like(acc)
        t = np.empty_like(acc)
        for v in (g0, g1):
            np.multiply(ex_lo, 1.0 - v, out=zx2)
            zx2 += ex_hi * v
            zx2 *= zx2
            for u in (g0, g1):
                np.multiply(ey_lo, 1.0 - u, out=g)
                g += ey_hi * u
                g *= g
                g += zx2
                # √(1 + g) − 1 = g / (√(1 + g) + 1): no cancellation on gentle slopes
                np.add(g, 1.0, out=t)
                np.sqrt(t, out=t)
                t += 1.0
                g /= t
                acc += g
        ok = ~np.isnan(acc)
        c = int(np.count_nonzero(ok))
        if c:
            excess += 0.25 * float(acc[ok].sum())
            cells += c
    cell = dx * dy
    return (cells + excess) * cell, cells * cell


def gradient_parameters(z: np.ndarray, dx: float, dy: float) -> dict[str, float]:
    """Root mean square gradient Sdq and developed interfacial area ratio Sdr.

    Sdq uses the gradient of the bilinear interpolant at each cell centre
    (central differences on the cell)::

        zx = ((z[i, j+1] - z[i, j]) + (z[i+1, j+1] - z[i+1, j])) / (2 dx)
        zy = ((z[i+1, j] - z[i, j]) + (z[i+1, j+1] - z[i, j+1])) / (2 dy)

    Sdr is the developed area of the same bilinear interpolant
    (:func:`developed_area`) over the projected area of the complete cells.
    A cell with any NaN corner is left out. Both are exact for planes; for a
    sinusoid the cell slope is the true slope times sinc(π dx/λ): −0.16 % at
    32 samples per wavelength.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm, NaN where not measured.
    dx, dy : float
        Sampling intervals along x (columns) and y (rows), in the same unit as
        the heights (µm) for Sdq and Sdr to be meaningful.

    Returns
    -------
    dict
        ``Sdq`` root mean square gradient (dimensionless), ``Sdr`` developed
        interfacial area ratio in %: (developed area / projected area − 1)·100.
        NaN when no complete cell exists.

    References
    ----------
    .. [1] ISO 25178-2:2012, §4.3.1 (Sdq) and §4.3.2 (Sdr) (clauses from memory).
    """
    z = _check_map(z)
    dx, dy = _check_spacing(dx, dy)
    ny, _nx = z.shape
    sum_g2 = 0.0
    cells = 0
    step = max(1, _CHUNK_ELEMS // z.shape[1])
    for r0 in range(0, ny - 1, step):
        r1 = min(ny, r0 + step + 1)
        b = z[r0:r1].astype(np.float64, copy=False)
        ddx = np.diff(b, axis=1)  # (rows, nx-1)
        zx = (ddx[:-1] + ddx[1:]) * (0.5 / dx)
        del ddx
        ddy = np.diff(b, axis=0)  # (rows-1, nx)
        zy = (ddy[:, :-1] + ddy[:, 1:]) * (0.5 / dy)
        del ddy
        g2 = zx * zx
        g2 += zy * zy
        del zx, zy
        ok = ~np.isnan(g2)
        c = int(np.count_nonzero(ok))
        if c == 0:
            continue
        sum_g2 += float(g2[ok].sum())
        cells += c
    if cells == 0:
        return {"Sdq": math.nan, "Sdr": math.nan}
    developed, projected = developed_area(z, dx, dy)
    return {"Sdq": math.sqrt(sum_g2 / cells), "Sdr": 100.0 * (developed / projected - 1.0)}


# --------------------------------------------------------------------------- spatial
def _centered_float32(z: np.ndarray) -> tuple[np.ndarray, np.ndarray | None, float]:
    """(z - mean) as float32 with NaN set to 0, the validity mask (None if all valid)."""
    mean, n = _valid_mean(z)
    zc = np.empty(z.shape, dtype=np.float32)
    mask = None if n == z.size else np.empty(z.shape, dtype=np.float32)
    for r0, r1 in _row_blocks(z.shape):
        b = z[r0:r1]
        out = zc[r0:r1]
        np.subtract(b, mean, out=out, casting="unsafe")
        if mask is not None:
            bad = np.isnan(b)
            out[bad] = 0.0
            mask[r0:r1] = ~bad
    return zc, mask, mean


def _circular_autocorrelation(a: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Σ a(x) a(x + t) for all lags, zero-padded to `shape` (float32, in place)."""
    f = sfft.rfft2(a, s=shape)  # complex64 for float32 input
    step = max(1, _CHUNK_ELEMS // f.shape[1])
    for r0 in range(0, f.shape[0], step):
        blk = f[r0 : r0 + step]
        p = blk.real * blk.real
        p += blk.imag * blk.imag
        blk[...] = p
    return sfft.irfft2(f, s=shape, overwrite_x=True)


def _angular_lay_direction(
    zc: np.ndarray, dx: float, dy: float, nbins: int = 360, smooth_deg: float = _STD_SMOOTH_DEG
) -> float:
    """Lay direction (degrees in [0, 180)) from the angular power spectrum."""
    ny, nx = zc.shape
    wy = np.hanning(ny).astype(np.float32)
    wx = np.hanning(nx).astype(np.float32)
    win = np.empty_like(zc)
    for r0, r1 in _row_blocks(zc.shape):
        np.multiply(zc[r0:r1], wy[r0:r1, None], out=win[r0:r1])
        win[r0:r1] *= wx[None, :]
    f = sfft.rfft2(win)
    del win
    power = np.empty(f.shape, dtype=np.float32)
    step = max(1, _CHUNK_ELEMS // f.shape[1])
    for r0 in range(0, f.shape[0], step):
        blk = f[r0 : r0 + step]
        np.multiply(blk.real, blk.real, out=power[r0 : r0 + step])
        power[r0 : r0 + step] += blk.imag * blk.imag
    del f
    # Polar resampling (bilinear) of the power spectrum: f_APS(θ) = ∫ P(p, θ) p dp over
    # 0 < p <= the inscribed Nyquist radius; a direction θ and θ + 180° are the same
    # because P(q) = P(-q) for a real map, so rays with cos θ < 0 use -q (rfft half-plane).
    fx, fy = 1.0 / (nx * dx), 1.0 / (ny * dy)  # frequency steps
    dq = 0.5 * min(fx, fy)
    qmax = min(0.5 / dx, 0.5 / dy)
    p = np.arange(1, int(qmax / dq) + 1) * dq
    theta = (np.arange(nbins) + 0.5) * (math.pi / nbins)
    sgn = np.where(np.cos(theta) >= 0, 1.0, -1.0)
    aps = np.zeros(nbins)
    for j0 in range(0, p.size, 256):
        pp = p[None, j0 : j0 + 256]
        cx = (sgn * np.cos(theta))[:, None] * pp / fx  # column position >= 0
        cy = (sgn * np.sin(theta))[:, None] * pp / fy  # row position, may be < 0
        x0 = np.floor(cx).astype(np.int64)
        y0 = np.floor(cy).astype(np.int64)
        tx, ty = cx - x0, cy - y0
        x1 = np.minimum(x0 + 1, power.shape[1] - 1)
        v = (
            power[y0 % ny, x0] * (1 - tx) * (1 - ty)
            + power[y0 % ny, x1] * tx * (1 - ty)
            + power[(y0 + 1) % ny, x0] * (1 - tx) * ty
            + power[(y0 + 1) % ny, x1] * tx * ty
        )
        aps += (v * pp).sum(axis=1)
    del power
    if not np.any(aps > 0):
        return math.nan
    if smooth_deg > 0:
        # circular Gaussian smoothing of the noisy periodogram-based curve
        d = (np.arange(nbins) - nbins // 2) * (180.0 / nbins)
        ker = np.exp(-0.5 * (d / smooth_deg) ** 2)
        ker = np.roll(ker / ker.sum(), -(nbins // 2))
        aps = np.real(np.fft.ifft(np.fft.fft(aps) * np.fft.fft(ker)))
    k = int(np.argmax(aps))
    # parabolic refinement on the circular neighbours
    ym, y0_, yp = aps[(k - 1) % nbins], aps[k], aps[(k + 1) % nbins]
    denom = ym - 2 * y0_ + yp
    off = 0.5 * (ym - yp) / denom if denom < 0 else 0.0
    spectrum_deg = (k + 0.5 + off) * (180.0 / nbins)
    # The spectrum peaks across the lay; the lay runs at +90°.
    return float((spectrum_deg + 90.0) % 180.0)


def spatial_parameters(
    z: np.ndarray, dx: float, dy: float, *, s: float = 0.2, n_directions: int = 360
) -> dict[str, float]:
    """Autocorrelation length Sal, texture aspect ratio Str, texture direction Std.

    Autocorrelation (ACF): the mean is removed, NaN set to 0, the map zero-padded
    (by half its size, so lags up to half the map carry no wrap-around) and the
    ACF obtained with one float32 real FFT pair; each lag is divided by the
    number of valid point pairs at that lag (the ACF of the mask, analytic when
    no point is missing, otherwise a second FFT), then by the value at lag 0.

    Decay distances: along `n_directions` rays over 0–180° (the ACF is even)
    from the origin, the ACF is sampled by bilinear interpolation every half
    sampling interval, and the first distance at which it falls to `s` is found
    by linear interpolation between samples. Sal is the smallest decay distance
    over all directions, Str the smallest divided by the largest. Rays are
    limited to half the map extent; a direction in which the ACF does not fall
    to `s` within that range counts as decaying at the end of the ray (our
    choice where the standard leaves the case open: Str is then an upper bound,
    and small, as for a surface with a strong lay). If the ACF does not decay
    to `s` in any direction, Sal and Str are NaN.

    Std: the angular power spectrum f_APS(θ) = ∫ P(p, θ) p dp (Hann-windowed
    map, its power spectrum resampled bilinearly on 360 rays over 180° out to
    the inscribed Nyquist radius, DC left out, then smoothed with a circular
    Gaussian of 5° standard deviation because a single periodogram is noisy —
    our choice) peaks across the lay; Std is reported as the *lay direction*, the
    peak direction turned by 90°. Angle convention: degrees in [0, 180),
    0° = the +x axis (along a row, increasing column index), increasing towards
    +y (increasing row index) — on an image drawn with row 0 at the top that is
    clockwise. A surface with grooves running along x has Std = 0°, along y 90°.
    Std is meaningless for an isotropic surface (Str near 1). Note: ISO 25178-2
    words Std as the angle of the maximum of the angular power spectrum; read
    literally that is the direction across the lay, 90° from what we report —
    we give the lay direction, as the parameter's name (texture direction)
    intends (from memory; check against the text before comparing numbers).
    Maps with fewer than 4 points along x or y give Sal = Str = NaN.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm, NaN where not measured.
    dx, dy : float
        Sampling intervals along x and y (µm, or 1.0 for pixels).
    s : float
        Threshold of the normalised ACF, 0 < s < 1 (ISO 25178-3 default 0.2,
        from memory).
    n_directions : int
        Number of ray directions over 180°.

    Returns
    -------
    dict
        ``Sal`` (lateral unit of dx), ``Str`` (0..1), ``Std`` (degrees).

    References
    ----------
    .. [1] ISO 25178-2:2012, §4.2.1 (Sal), §4.2.2 (Str), §4.2.3 (Std).
    .. [2] ISO 25178-3:2012, default s = 0.2 (from memory).
    """
    z = _check_map(z)
    dx, dy = _check_spacing(dx, dy)
    s = float(s)
    n_directions = int(n_directions)
    if n_directions < 4:
        raise FractoInputError("Give at least 4 ray directions for Sal and Str.")
    if not (0.0 < s < 1.0):
        raise FractoInputError(
            f"The autocorrelation threshold s must lie between 0 and 1, not {s}."
        )
    ny, nx = z.shape
    zc, mask, _mean = _centered_float32(z)
    ly, lx = ny // 2, nx // 2
    shape = (
        sfft.next_fast_len(ny + ly, real=True),
        sfft.next_fast_len(nx + lx, real=True),
    )
    acf = _circular_autocorrelation(zc, shape)
    cnt = _circular_autocorrelation(mask, shape) if mask is not None else None
    std_deg = _angular_lay_direction(zc, dx, dy)
    del zc, mask
    py, px = shape

    def acf_at(iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """Covariance / pair count at integer lags (iy, ix), may be negative."""
        c = acf[iy % py, ix % px].astype(np.float64)
        if cnt is None:
            pairs = (ny - np.abs(iy)) * (nx - np.abs(ix)).astype(np.float64)
        else:
            pairs = cnt[iy % py, ix % px].astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(pairs > 0.5, c / np.maximum(pairs, 1.0), np.nan)

    c0 = float(acf_at(np.array([0]), np.array([0]))[0])
    if not (c0 > 0) or min(lx, ly) < 2:  # flat map, or too few lags in some direction
        return {"Sal": math.nan, "Str": math.nan, "Std": std_deg}

    theta = np.arange(n_directions) * (math.pi / n_directions)
    ct, st = np.cos(theta), np.sin(theta)
    dr = 0.5 * min(dx, dy)
    # end of each ray: the lag box |tx| <= lx-1, |ty| <= ly-1 (physical units)
    with np.errstate(divide="ignore", invalid="ignore"):
        rx = np.where(np.abs(ct) > 1e-12, (lx - 1) * dx / np.abs(ct), np.inf)
        ry = np.where(np.abs(st) > 1e-12, (ly - 1) * dy / np.abs(st), np.inf)
    rend = np.minimum(rx, ry)
    decay = np.full(n_directions, np.nan)
    prev = np.ones(n_directions)  # ACF at the previous sample (1 at r = 0)
    k0 = 1
    block = 64
    kmax = int(np.ceil(rend.max() / dr)) + 1
    active = np.ones(n_directions, dtype=bool)
    while k0 <= kmax and active.any():
        ks = np.arange(k0, min(k0 + block, kmax + 1))
        idx = np.nonzero(active)[0]
        r = ks[None, :] * dr  # (1, K)
        fx = (r * ct[idx, None]) / dx
        fy = (r * st[idx, None]) / dy
        x0 = np.floor(fx).astype(np.int64)
        y0 = np.floor(fy).astype(np.int64)
        wx = fx - x0
        wy = fy - y0
        val = (
            acf_at(y0, x0) * (1 - wx) * (1 - wy)
            + acf_at(y0, x0 + 1) * wx * (1 - wy)
            + acf_at(y0 + 1, x0) * (1 - wx) * wy
            + acf_at(y0 + 1, x0 + 1) * wx * wy
        ) / c0
        inside = r <= rend[idx, None]
        below = (val <= s) & inside
        first = np.where(below.any(axis=1), below.argmax(axis=1), -1)
        for j, ray in enumerate(idx):
            f = first[j]
            if f >= 0:
                v1 = val[j, f]
                v0 = prev[ray] if f == 0 else val[j, f - 1]
                r1 = ks[f] * dr
                t = (v0 - s) / (v0 - v1) if v0 != v1 else 1.0
                decay[ray] = r1 - dr + t * dr
                active[ray] = False
            elif not inside[j, -1]:
                active[ray] = False  # ray ended without decaying
            else:
                prev[ray] = val[j, -1]
        k0 = ks[-1] + 1
    if np.all(np.isnan(decay)):
        return {"Sal": math.nan, "Str": math.nan, "Std": std_deg}
    longest = np.where(np.isnan(decay), rend, decay)
    sal = float(np.nanmin(decay))
    return {"Sal": sal, "Str": float(sal / longest.max()), "Std": std_deg}


# --------------------------------------------------------------------------- material ratio
_BLOCK = 4096


@dataclass(frozen=True, eq=False)
class MaterialRatioCurve:
    """The areal material ratio curve of a map: its valid heights, sorted once.

    Build it with :func:`material_ratio_curve` and pass it to
    :func:`material_ratio_parameters` and :func:`sk_parameters` so that the
    heights are sorted only once.

    Each valid point stands for an equal share 1/n of the evaluation area, so
    the curve is the step function Smc(mr) = h_k for mr in ((k−1)/n, k/n],
    h_1 ≥ h_2 ≥ … the heights in descending order. Heights are relative to the
    mean of the valid heights (µm); material ratios `mr`, `p` are fractions
    0..1; :meth:`smr` returns percent.

    Attributes
    ----------
    heights : ndarray, float32, shape (n,)
        Valid heights minus their mean, ascending (µm).
    mean_um : float
        The mean that was removed (µm).
    """

    heights: np.ndarray = field(repr=False)
    mean_um: float
    _prefix: np.ndarray = field(repr=False)

    @property
    def n(self) -> int:
        """Number of valid points."""
        return int(self.heights.size)

    def to_dict(self) -> dict[str, float]:
        """Summary of the curve (not the heights)."""
        return {"n_points": self.n, "mean_um": self.mean_um}

    def _sum_below(self, i: int) -> float:
        """Σ heights[:i] in float64 from block prefix sums plus a remainder."""
        b = i // _BLOCK
        out = float(self._prefix[b])
        if i > b * _BLOCK:
            out += float(np.sum(self.heights[b * _BLOCK : i], dtype=np.float64))
        return out

    def _first_at_or_above(self, c: float) -> int:
        """Index of the first sorted height >= c (exact for float64 c, no upcast copy)."""
        c32 = np.float32(c)
        side = "right" if float(c32) < c else "left"
        return int(np.searchsorted(self.heights, c32, side=side))

    def _first_above(self, c: float) -> int:
        """Index of the first sorted height > c (exact for float64 c, no upcast copy)."""
        c32 = np.float32(c)
        side = "left" if float(c32) > c else "right"
        return int(np.searchsorted(self.heights, c32, side=side))

    def smr(self, c: float | np.ndarray) -> float | np.ndarray:
        """Areal material ratio Smr(c) in %: share of the area at or above height `c`.

        `c` is a height in µm measured from the mean plane.
        """
        c = np.asarray(c, dtype=np.float64)
        first = np.array([self._first_at_or_above(float(v)) for v in c.ravel()])
        above = self.n - first.reshape(c.shape)
        out = 100.0 * above / self.n
        return float(out) if out.ndim == 0 else out

    def _rank(self, mr: np.ndarray) -> np.ndarray:
        # k = ceil(mr n), clipped to 1..n; rounding guards mr·n that is an integer
        k = np.ceil(np.round(mr * self.n, 6)).astype(np.int64)
        return np.clip(k, 1, self.n)

    def smc(self, mr: float | np.ndarray) -> float | np.ndarray:
        """Inverse areal material ratio Smc(mr): the height (µm, from the mean plane)
        at which the material ratio is `mr` (fraction 0..1).

        The generalised inverse of the step curve: the height of the k-th highest
        point, k = ⌈mr·n⌉ (k = 1, the highest point, for mr = 0).
        """
        mr = np.asarray(mr, dtype=np.float64)
        if np.any((mr < 0) | (mr > 1)) or np.any(np.isnan(mr)):
            raise FractoInputError("Material ratios must be fractions from 0 to 1 (not percent).")
        out = self.heights[self.n - self._rank(mr)].astype(np.float64)
        return float(out) if out.ndim == 0 else out

    def _excess_above(self, c: float) -> float:
        """(1/n) Σ max(z − c, 0)."""
        i = self._first_above(c)
        total = float(self._prefix[-1])
        top = total - float(self._sum_below(i))
        return (top - (self.n - i) * c) / self.n

    def _deficit_below(self, c: float) -> float:
        """(1/n) Σ max(c − z, 0)."""
        i = self._first_at_or_above(c)
        return (i * c - float(self._sum_below(i))) / self.n

    def vm(self, p: float) -> float:
        """Material volume Vm(p) per unit area (µm³/µm² = µm) at material ratio `p`.

        ISO 25178-2: Vm(p) = ∫₀^p (Smc(q) − Smc(p)) dq. On the step curve this is
        exactly (1/n) Σ max(z_i − Smc(p), 0): the volume of material above the
        plane at height Smc(p), per unit area.
        """
        p = _check_fraction(p, "p")
        return self._excess_above(float(self.smc(p)))

    def vv(self, p: float) -> float:
        """Void volume Vv(p) per unit area (µm³/µm² = µm) at material ratio `p`.

        ISO 25178-2: Vv(p) = ∫_p^1 (Smc(p) − Smc(q)) dq, exactly
        (1/n) Σ max(Smc(p) − z_i, 0) on the step curve.
        """
        p = _check_fraction(p, "p")
        return self._deficit_below(float(self.smc(p)))


def material_ratio_curve(z: np.ndarray) -> MaterialRatioCurve:
    """Sort the valid heights of `z` once (float32, relative to their mean).

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm, NaN where not measured.

    Returns
    -------
    MaterialRatioCurve

    References
    ----------
    .. [1] ISO 25178-2:2012, §3.1.9 areal material ratio function (from memory).
    """
    z = _check_map(z)
    mean, n = _valid_mean(z)
    out = np.empty(n, dtype=np.float32)
    pos = 0
    for r0, r1 in _row_blocks(z.shape):
        b = z[r0:r1]
        v = b[~np.isnan(b)]
        np.subtract(v, mean, out=out[pos : pos + v.size], casting="unsafe")
        pos += v.size
    out.sort()
    nb = n // _BLOCK
    sums = out[: nb * _BLOCK].reshape(nb, _BLOCK).sum(axis=1, dtype=np.float64)
    prefix = np.zeros(nb + 2, dtype=np.float64)
    np.cumsum(sums, out=prefix[1 : nb + 1])
    # last entry: the full total (index n // _BLOCK may point at a partial block)
    prefix[nb + 1] = prefix[nb] + float(np.sum(out[nb * _BLOCK :], dtype=np.float64))
    return MaterialRatioCurve(heights=out, mean_um=mean, _prefix=prefix)


def _as_curve(z_or_curve: np.ndarray | MaterialRatioCurve) -> MaterialRatioCurve:
    if isinstance(z_or_curve, MaterialRatioCurve):
        return z_or_curve
    return material_ratio_curve(z_or_curve)


def material_ratio_parameters(
    z_or_curve: np.ndarray | MaterialRatioCurve,
    *,
    c: float | None = None,
    mr: float = 0.1,
    p: float = 0.1,
    q: float = 0.8,
) -> dict[str, float]:
    """Material ratio, inverse material ratio and volume parameters.

    Parameters
    ----------
    z_or_curve : ndarray or MaterialRatioCurve
        Height map (µm, NaN = not measured) or its curve.
    c : float or None
        Height (µm, from the mean plane) for Smr(c). The standard names no
        default; ours is c = 0, the mean plane (a choice of this project).
    mr : float
        Material ratio (fraction 0..1) for Smc(mr); default 10 % (our choice,
        matching the default p of the volume parameters, ISO 25178-3 from memory).
    p, q : float
        Material ratios (fractions) of the volume parameters, defaults 10 % and
        80 % (ISO 25178-3, from memory).

    Returns
    -------
    dict
        ``Smr`` (%), ``Smc`` (µm), ``Sxp`` = Smc(2.5 %) − Smc(50 %) (µm),
        ``Vm`` = Vm(p), ``Vv`` = Vv(p), ``Vmp`` = Vm(p), ``Vmc`` = Vm(q) − Vm(p),
        ``Vvc`` = Vv(p) − Vv(q), ``Vvv`` = Vv(q) (all µm³/µm² = µm).

    References
    ----------
    .. [1] ISO 25178-2:2012, §4.4 (Smr, Smc, Sxp) and §4.5 (volume parameters).
    .. [2] ISO 25178-3:2012, defaults p = 10 %, q = 80 %, Sxp 2.5 %/50 % (from memory).
    """
    curve = _as_curve(z_or_curve)
    c = 0.0 if c is None else float(c)
    if not math.isfinite(c):
        raise FractoInputError("The height c for Smr(c) must be a finite number of µm.")
    mr = _check_fraction(mr, "mr")
    p = _check_fraction(p, "p")
    q = _check_fraction(q, "q")
    if p > q:
        raise FractoInputError(f"The material ratio p ({p}) must not exceed q ({q}).")
    vm_p, vm_q = curve.vm(p), curve.vm(q)
    vv_p, vv_q = curve.vv(p), curve.vv(q)
    return {
        "Smr": float(curve.smr(c)),
        "Smc": float(curve.smc(mr)),
        "Sxp": float(curve.smc(0.025) - curve.smc(0.5)),
        "Vm": vm_p,
        "Vv": vv_p,
        "Vmp": vm_p,
        "Vmc": vm_q - vm_p,
        "Vvc": vv_p - vv_q,
        "Vvv": vv_q + 0.0,
    }


def sk_parameters(
    z_or_curve: np.ndarray | MaterialRatioCurve, *, n_samples: int = 4000
) -> dict[str, float]:
    """Sk, Spk, Svk, Smr1, Smr2 by the ISO 13565-2 construction on the areal curve.

    1. The curve Smc(mr) is resampled at ``n_samples + 1`` equally spaced
       material ratios 0..1.
    2. Among all secants spanning 40 % of material ratio, the one of least
       gradient (smallest height drop; the first from the top on ties) is the
       equivalent straight line.
    3. Its heights at mr = 0 and mr = 1 bound the core: Sk is their difference.
    4. Smr1, Smr2 = material ratios (%) at the upper and lower core limits
       (counted exactly on the points).
    5. A1 = area above the upper limit, (1/n) Σ max(z − upper, 0) (in µm times
       fraction), Spk = 2·A1/Smr1 (the height of the right triangle of equal area
       on base Smr1); A2 = (1/n) Σ max(lower − z, 0), Svk = 2·A2/(1 − Smr2).
       Spk = 0 when no point lies above the core (Svk likewise).

    Parameters
    ----------
    z_or_curve : ndarray or MaterialRatioCurve
        Height map (µm, NaN = not measured) or its curve.
    n_samples : int
        Resolution of the window search (must be a multiple of 5).

    Returns
    -------
    dict
        ``Sk``, ``Spk``, ``Svk`` (µm), ``Smr1``, ``Smr2`` (%).

    References
    ----------
    .. [1] ISO 13565-2:1996, §4–5 (Rk, Rpk, Rvk, Mr1, Mr2).
    .. [2] ISO 25178-2:2012, §4.4 (areal Sk family, from memory).
    """
    curve = _as_curve(z_or_curve)
    n_samples = int(n_samples)
    if n_samples < 5 or n_samples % 5:
        raise FractoInputError("The Sk resampling count must be a positive multiple of 5.")
    grid = np.arange(n_samples + 1) / n_samples
    h = curve.smc(grid)
    w = (2 * n_samples) // 5  # 40 % window
    drop = h[:-w] - h[w:]
    i = int(np.argmin(drop))
    slope = drop[i] / 0.4  # height lost per unit material ratio
    upper = h[i] + slope * grid[i]
    lower = upper - slope
    sk = upper - lower
    smr1 = float(curve.smr(upper)) / 100.0
    # Smr2: share of the area above the lower limit
    smr2 = float(curve.smr(lower)) / 100.0
    a1 = curve._excess_above(upper)
    a2 = curve._deficit_below(lower)
    spk = 2.0 * a1 / smr1 if smr1 > 0 else 0.0
    svk = 2.0 * a2 / (1.0 - smr2) if smr2 < 1 else 0.0
    return {
        "Sk": float(sk),
        "Spk": float(spk),
        "Svk": float(svk),
        "Smr1": 100.0 * smr1,
        "Smr2": 100.0 * smr2,
    }


# --------------------------------------------------------------------------- all
def areal_parameters(
    z: np.ndarray,
    dx: float,
    dy: float,
    *,
    s: float = 0.2,
    pruning: float = 0.05,
    features: bool = True,
    workers: int = 1,
) -> dict[str, float]:
    """The full ISO 25178-2 parameter set of a levelled, filtered map.

    Sorts the heights once for the material ratio family. See the individual
    functions for definitions, units and conventions.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm, NaN where not measured.
    dx, dy : float
        Sampling intervals along x and y (µm, or 1.0 for pixels).
    s : float
        ACF threshold for Sal and Str.
    pruning : float
        Wolf pruning threshold as a fraction of Sz for the feature parameters.
    features : bool
        Include the feature parameters (Spd, Spc, S10z, S5p, S5v).
    workers : int
        Threads for the feature parameters (hills and dales at the same time).

    Returns
    -------
    dict
        All parameters keyed by ISO symbol.

    References
    ----------
    .. [1] ISO 25178-2:2012.
    """
    out: dict[str, float] = {}
    out.update(height_parameters(z))
    out.update(gradient_parameters(z, dx, dy))
    out.update(spatial_parameters(z, dx, dy, s=s))
    curve = material_ratio_curve(z)
    out.update(material_ratio_parameters(curve))
    out.update(sk_parameters(curve))
    del curve
    if features:
        from fracto.surface.features import feature_parameters

        out.update(feature_parameters(z, dx, dy, pruning=pruning, workers=workers))
    return out
