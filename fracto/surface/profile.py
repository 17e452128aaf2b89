"""Profile parameters of ISO 21920-2 (2021): Ra, Rq, Rz, Rsk, Rku, RSm, Rdq.

All computations run on stacks of profiles (rows of a 2-D array) at once;
`profile_parameters` is the one-profile case and `areal_profile_parameters`
averages over the rows, the columns or lines at any angle of a height map.

Conventions (each one written here because the standards leave choices):

* Reference line: the least-squares straight line over the valid points is
  always removed; with a cutoff λc the Gaussian mean line of ISO 16610-21 is
  removed as well and half a cutoff is dropped at each end of the measured
  span (common practice, from ISO 4288: the filter needs λc/2 of run-in and
  run-out).
* Rz: mean over the sections of the largest peak-to-valley height in each
  section. Without a cutoff the evaluation length is split into `n_sampling`
  equal sections (ISO 21920-2 calls their number the number of sections; 5
  is the default of ISO 4287/ISO 4288 and common practice). With a cutoff the
  sections are one cutoff long (sampling length = λc, ISO 4288, from memory)
  and every whole section in the evaluation length is used.
* RSm: mean width of the profile elements (a peak and the adjacent valley,
  i.e. the spacing of successive upward mean-line crossings). A part of the
  profile between two mean-line crossings counts only if its height is at
  least 10 % of Rz and its width at least 1 % of the section length (height
  and width discrimination of ISO 4287:1997, clause 3.2.20, from memory);
  smaller parts are absorbed by their neighbours. Crossings are located by
  linear interpolation; the widths are averaged over the whole evaluation
  length. Parts cut by the ends or by non-measured points are not counted.
* Rdq: RMS of the local slope, the slope taken with the seven-point
  central-difference formula dz/dx_i = (z_{i+3} − 9 z_{i+2} + 45 z_{i+1}
  − 45 z_{i−1} + 9 z_{i−2} − z_{i−3}) / (60 Δx) (ISO 4287:1997 annex / ISO
  25178-2 practice, from memory). Only points whose seven neighbours are all
  measured contribute.
* Non-measured points (NaN) are excluded from every sum; a profile with fewer
  than `MIN_VALID_POINTS` measured points gives NaN for every parameter.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
from scipy import ndimage

from fracto.errors import FractoInputError
from fracto.surface.filters import gaussian_profile_filter

#: Names of the parameters returned, in order.
PROFILE_PARAMETERS: tuple[str, ...] = ("Ra", "Rq", "Rz", "Rsk", "Rku", "RSm", "Rdq")

#: Fewest measured points for which parameters are computed.
MIN_VALID_POINTS = 16

#: Height discrimination for RSm as a fraction of Rz (ISO 4287, from memory).
RSM_HEIGHT_FRACTION = 0.10
#: Width discrimination for RSm as a fraction of the section length (ISO 4287, from memory).
RSM_WIDTH_FRACTION = 0.01

_LINE_BLOCK = 256

#: Seven-point first-derivative weights (correlation order, divide by Δx).
_D7 = np.array([-1.0, 9.0, -45.0, 0.0, 45.0, -9.0, 1.0]) / 60.0


def _check_inputs(dx: float, cutoff_um: float | None, n_sampling: int) -> None:
    if not (math.isfinite(dx) and dx > 0):
        raise FractoInputError(f"The sampling interval must be a positive number, not {dx!r}.")
    if not (isinstance(n_sampling, int | np.integer) and n_sampling >= 1):
        raise FractoInputError(
            f"The number of sections must be a whole number ≥ 1, not {n_sampling!r}."
        )
    if cutoff_um is not None and not (math.isfinite(cutoff_um) and cutoff_um > 0):
        raise FractoInputError(f"The profile cutoff must be a positive length, not {cutoff_um!r}.")


def _detrend_rows(z: np.ndarray) -> np.ndarray:
    """Subtract each row's least-squares straight line over its valid points (new array)."""
    valid = np.isfinite(z)
    n = z.shape[1]
    x = np.arange(n, dtype=np.float64) - (n - 1) / 2.0
    if valid.all():
        sw = np.full(z.shape[0], float(n))
        sx = np.zeros(z.shape[0])
        sxx = np.full(z.shape[0], float(x @ x))
        sz = z.sum(axis=1)
        sxz = z @ x
    else:
        w = valid.astype(np.float64)
        z0 = np.where(valid, z, 0.0)
        sw = w.sum(axis=1)
        sx = w @ x
        sxx = w @ (x * x)
        sz = z0.sum(axis=1)
        sxz = z0 @ x
        del w, z0
    det = sw * sxx - sx * sx
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(det > 0, (sw * sxz - sx * sz) / np.where(det > 0, det, 1.0), 0.0)
        icpt = np.where(sw > 0, (sz - slope * sx) / np.where(sw > 0, sw, 1.0), 0.0)
    out = z - icpt[:, None]
    out -= slope[:, None] * x[None, :]
    return out


def _span(valid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """First and last valid index of each row (0, -1 for an empty row)."""
    n = valid.shape[1]
    has = valid.any(axis=1)
    first = np.where(has, np.argmax(valid, axis=1), 0)
    last = np.where(has, n - 1 - np.argmax(valid[:, ::-1], axis=1), -1)
    return first, last


def _roughness_rows(z: np.ndarray, dx: float, cutoff_um: float | None) -> np.ndarray:
    """Profiles relative to their mean line, NaN outside the evaluation length."""
    r = _detrend_rows(z)
    if cutoff_um is None:
        return r
    r -= gaussian_profile_filter(r, cutoff_um, dx)
    valid = np.isfinite(r)
    first, last = _span(valid)
    m = round(0.5 * cutoff_um / dx)
    j = np.arange(r.shape[1])
    keep = (j[None, :] >= (first + m)[:, None]) & (j[None, :] <= (last - m)[:, None])
    r[~keep] = np.nan
    return r


def _rsm_rows(
    r: np.ndarray, dx: float, height_min: np.ndarray, width_min: np.ndarray
) -> np.ndarray:
    """Mean width of profile elements of each row (see module notes), vectorised.

    The rows are joined into one sequence with a non-measured point between
    rows, so each row (and each measured run inside a row) is its own run.
    """
    ny, n = r.shape
    flat = np.concatenate([r, np.full((ny, 1), np.nan)], axis=1).ravel()
    valid = np.isfinite(flat)
    pos = flat > 0
    both = valid[:-1] & valid[1:]
    cross = both & (pos[:-1] != pos[1:])
    brk = ~both
    ev = np.flatnonzero(cross | brk)  # gap g lies between samples g and g + 1
    out = np.full(ny, np.nan)
    if ev.size < 3:
        return out
    starts = np.concatenate(([0], ev + 1))
    n_parts = starts.size
    ev_cross = cross[ev]
    complete = np.zeros(n_parts, dtype=bool)
    complete[1:-1] = ev_cross[:-1] & ev_cross[1:]
    height = np.maximum.reduceat(np.where(valid, np.abs(flat), 0.0), starts)
    xc = np.full(ev.size, np.nan)
    g = ev[ev_cross]
    xc[ev_cross] = g + flat[g] / (flat[g] - flat[g + 1])
    width = np.full(n_parts, np.nan)
    width[1:-1] = (xc[1:] - xc[:-1]) * dx
    row_part = starts // (n + 1)
    with np.errstate(invalid="ignore"):
        significant = complete & (height >= height_min[row_part]) & (width >= width_min[row_part])
    idx = np.flatnonzero(significant)
    if idx.size < 3:
        return out
    run_part = np.concatenate(([0], np.cumsum(brk[ev])))
    sign = pos[starts[idx]]
    runs = run_part[idx]
    up = (sign[1:] != sign[:-1]) & (runs[1:] == runs[:-1]) & sign[1:]
    k = idx[1:][up]
    if k.size < 2:
        return out
    xb = xc[k - 1]  # the crossing that opens part k
    rk = run_part[k]
    same = rk[1:] == rk[:-1]
    widths = np.diff(xb)[same] * dx
    rows = row_part[k][1:][same]
    cnt = np.bincount(rows, minlength=ny)
    tot = np.bincount(rows, weights=widths, minlength=ny)
    has = cnt > 0
    out[has] = tot[has] / cnt[has]
    return out


def _rz_rows(
    r: np.ndarray, valid: np.ndarray, dx: float, n_sampling: int, section_um: float | None
) -> tuple[np.ndarray, np.ndarray]:
    """Rz of every row and the section length (µm) used.

    Sections start at each row's first measured point: `n_sampling` equal
    parts of the measured span, or, with `section_um`, as many whole sections
    of that length as fit (the rest of the span is left out of Rz).
    All rows are handled at once: the (row, section) group of each sample is
    non-decreasing in row-major order, so ufunc.reduceat gives every group's
    extremes in one pass.
    """
    ny, n = r.shape
    first, last = _span(valid)
    span = np.maximum(last - first + 1, 0)
    uniform = bool(np.all(first == first[0]) and np.all(span == span[0]))
    rows_sec = slice(0, 1) if uniform else slice(None)  # one row stands for all
    j = np.arange(n, dtype=np.int32)
    rel = j[None, :] - first[rows_sec].astype(np.int32)[:, None]
    if section_um is None:
        n_sec = np.where(span > 0, n_sampling, 0)
        sec = (rel.astype(np.int64) * n_sampling) // np.maximum(span[rows_sec], 1)[:, None]
        section_len = span * dx / n_sampling
    else:
        length = max(1, round(section_um / dx))
        n_sec = span // length
        sec = rel // length
        section_len = np.full(ny, length * dx, dtype=np.float64)
    rz = np.full(ny, np.nan)
    if uniform:
        # Same sections on every row (the usual case): column slices; fmax/fmin
        # skip non-measured points.
        if n_sec[0] == 0:
            return rz, section_len
        bounds = [int(np.argmax(sec[0] == k)) for k in range(int(n_sec[0]))]
        bounds.append(int(np.flatnonzero(sec[0] == n_sec[0] - 1)[-1]) + 1)
        heights = np.stack(
            [
                np.fmax.reduce(r[:, a:b], axis=1) - np.fmin.reduce(r[:, a:b], axis=1)
                for a, b in itertools.pairwise(bounds)
            ],
            axis=1,
        )
        ok = np.isfinite(heights)
        cnt = ok.sum(axis=1)
        has = cnt > 0
        rz[has] = np.where(ok, heights, 0.0).sum(axis=1)[has] / cnt[has]
        return rz, section_len
    use = (rel >= 0) & (sec < n_sec[:, None]) & valid
    if not use.any():
        return rz, section_len
    width = int(n_sec.max()) + 1
    group = (np.arange(ny)[:, None] * width + sec)[use]
    vals = r[use]
    del sec, rel, use
    starts = np.concatenate(([0], np.flatnonzero(np.diff(group)) + 1))
    heights = np.maximum.reduceat(vals, starts) - np.minimum.reduceat(vals, starts)
    rows = group[starts] // width
    cnt = np.bincount(rows, minlength=ny)
    tot = np.bincount(rows, weights=heights, minlength=ny)
    has = cnt > 0
    rz[has] = tot[has] / cnt[has]
    return rz, section_len


def _row_parameters(
    r: np.ndarray, dx: float, n_sampling: int, section_um: float | None = None
) -> dict[str, np.ndarray]:
    """Parameters of every row of a stack of roughness profiles (NaN = excluded)."""
    valid = np.isfinite(r)
    nv = valid.sum(axis=1).astype(np.float64)
    enough = nv >= MIN_VALID_POINTS
    nvs = np.where(enough, nv, 1.0)
    r0 = np.where(valid, r, 0.0)
    ra = np.abs(r0).sum(axis=1) / nvs
    m2 = np.einsum("ij,ij->i", r0, r0) / nvs
    r2 = r0 * r0
    m3 = np.einsum("ij,ij->i", r2, r0) / nvs
    m4 = np.einsum("ij,ij->i", r2, r2) / nvs
    del r2
    rq = np.sqrt(m2)
    with np.errstate(invalid="ignore", divide="ignore"):
        rsk = m3 / rq**3
        rku = m4 / m2**2
    # Seven-point derivative (see module notes); NaN wherever a neighbour is NaN.
    n = r.shape[1]
    if n >= 7:
        d = ndimage.correlate1d(r, _D7 / dx, axis=1, mode="constant", cval=np.nan)
        dv = np.isfinite(d)
        nd = dv.sum(axis=1)
        np.copyto(d, 0.0, where=~dv)
        with np.errstate(invalid="ignore", divide="ignore"):
            rdq = np.sqrt(np.einsum("ij,ij->i", d, d) / nd)
        rdq[nd == 0] = np.nan
        del d, dv
    else:
        rdq = np.full(r.shape[0], np.nan)
    rz, section_len = _rz_rows(r, valid, dx, n_sampling, section_um)
    rsm = _rsm_rows(r, dx, RSM_HEIGHT_FRACTION * rz, RSM_WIDTH_FRACTION * section_len)
    out = {"Ra": ra, "Rq": rq, "Rz": rz, "Rsk": rsk, "Rku": rku, "RSm": rsm, "Rdq": rdq}
    for v in out.values():
        v[~enough] = np.nan
    return out


def profile_parameters(
    profile: np.ndarray,
    dx: float,
    *,
    cutoff_um: float | None = None,
    n_sampling: int = 5,
) -> dict[str, float]:
    """ISO 21920-2 profile parameters of one height profile.

    Parameters
    ----------
    profile : ndarray, shape (n,)
        Heights (µm), NaN where not measured.
    dx : float
        Sampling interval (µm; 1.0 = pixels).
    cutoff_um : float, optional
        Gaussian cutoff λc (µm). When given, the roughness profile is the
        profile minus its ISO 16610-21 mean line and half a cutoff is dropped
        at each end; otherwise only the least-squares line is removed.
    n_sampling : int
        Number of sections for Rz (and the RSm width discrimination) when no
        cutoff is given; with a cutoff the sections are λc long.

    Returns
    -------
    dict
        ``Ra``, ``Rq``, ``Rz``, ``RSm`` (µm), ``Rsk``, ``Rku`` (1) and ``Rdq``
        (µm/µm); NaN when there are too few measured points.

    References
    ----------
    ISO 21920-2 (2021): profile surface texture, terms, definitions and
    parameters. ISO 4287 (1997) and ISO 4288 (1996), which it replaces, for
    the discrimination limits and the default number of sections (from memory).
    ISO 16610-21 (2011): the Gaussian mean line.
    """
    p = np.asarray(profile, dtype=np.float64)
    if p.ndim != 1:
        raise FractoInputError("A profile must be a 1-D array.")
    _check_inputs(dx, cutoff_um, n_sampling)
    if np.isfinite(p).sum() < MIN_VALID_POINTS:
        return dict.fromkeys(PROFILE_PARAMETERS, math.nan)
    r = _roughness_rows(p[None, :], dx, cutoff_um)
    res = _row_parameters(r, dx, int(n_sampling), cutoff_um)
    return {k: float(res[k][0]) for k in PROFILE_PARAMETERS}


def _centred(n_min: int, parity_of: int) -> np.ndarray:
    """n ≥ n_min positions k − (n − 1)/2 with n of the parity of `parity_of`.

    With that parity the positions fall on the map's own rows or columns
    when the lines run along an axis, so angle 0 reproduces the rows exactly.
    """
    n = n_min + ((n_min - parity_of) % 2)
    return np.arange(n) - (n - 1) / 2.0


def _angle_lines(z: np.ndarray, dx: float, dy: float, angle_deg: float):
    """Yield blocks of profiles sampled along `angle_deg` from the x axis, and their spacing.

    Linear interpolation; a sample is NaN unless every grid point with a
    non-zero interpolation weight was measured.
    """
    ny, nx = z.shape
    h = min(dx, dy)
    th = math.radians(angle_deg)
    c, s = math.cos(th), math.sin(th)
    if abs(c) < 1e-15:
        c = 0.0
    if abs(s) < 1e-15:
        s = 0.0
    cx, cy = (nx - 1) * dx / 2.0, (ny - 1) * dy / 2.0
    n_min = math.floor(2 * math.hypot(cx, cy) / h) + 1
    t = _centred(n_min, nx if abs(c) >= abs(s) else ny) * h
    offsets = _centred(n_min, ny if abs(c) >= abs(s) else nx) * h
    # Keep only lines that cross the map.
    reach = abs(cx * s) + abs(cy * c)
    offsets = offsets[np.abs(offsets) <= reach + 1e-9 * h]
    valid = np.isfinite(z)
    z0 = np.where(valid, z, 0.0)
    w = valid.astype(np.float64)
    for b in range(0, offsets.size, _LINE_BLOCK):
        off = offsets[b : b + _LINE_BLOCK]
        coords = [
            (cy + t[None, :] * s + off[:, None] * c) / dy,
            (cx + t[None, :] * c - off[:, None] * s) / dx,
        ]
        prof = ndimage.map_coordinates(z0, coords, order=1, mode="constant", cval=0.0)
        cover = ndimage.map_coordinates(w, coords, order=1, mode="constant", cval=0.0)
        prof[cover < 1.0 - 1e-9] = np.nan
        yield prof, h


def areal_profile_parameters(
    z: np.ndarray,
    dx: float,
    dy: float,
    *,
    direction: str | float = "x",
    cutoff_um: float | None = None,
    n_sampling: int = 5,
) -> dict[str, float]:
    """Mean ISO 21920-2 profile parameters over the profiles of a height map.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights (µm), NaN where not measured.
    dx, dy : float
        Column and row spacing (µm).
    direction : "x", "y" or float
        ``"x"``: every row; ``"y"``: every column; a number: parallel lines at
        that angle in degrees from the x axis (towards +y), sampled by linear
        interpolation (scipy.ndimage.map_coordinates) every min(dx, dy) along
        and across the lines.
    cutoff_um : float, optional
        Gaussian cutoff λc (µm) for the roughness profiles.
    n_sampling : int
        Number of sections for Rz.

    Returns
    -------
    dict
        The mean of each parameter over the profiles that give a value,
        each profile weighted by its number of evaluated points (all rows of
        a map weigh the same; short lines near the corners of an angled
        set weigh little).

    References
    ----------
    ISO 21920-2 (2021); see `profile_parameters`.
    """
    z = np.asarray(z, dtype=np.float64)
    if z.ndim != 2:
        raise FractoInputError("The height map must be a 2-D array.")
    _check_inputs(dx, cutoff_um, n_sampling)
    _check_inputs(dy, cutoff_um, n_sampling)
    if isinstance(direction, str):
        d = direction.strip().lower()
        if d == "x":
            blocks = [(z, dx)]
        elif d == "y":
            blocks = [(z.T, dy)]
        else:
            try:
                angle = float(d)
            except ValueError:
                raise FractoInputError(
                    f"Unknown profile direction '{direction}'; use x, y or an angle in degrees."
                ) from None
            blocks = _angle_lines(z, dx, dy, angle)
    else:
        angle = float(direction)
        if not math.isfinite(angle):
            raise FractoInputError(
                f"The profile direction must be a finite angle, not {direction!r}."
            )
        blocks = _angle_lines(z, dx, dy, angle)
    sums = dict.fromkeys(PROFILE_PARAMETERS, 0.0)
    weights = dict.fromkeys(PROFILE_PARAMETERS, 0.0)
    for prof, h in blocks:
        r = _roughness_rows(prof, h, cutoff_um)
        length = np.isfinite(r).sum(axis=1).astype(np.float64)
        res = _row_parameters(r, h, int(n_sampling), cutoff_um)
        for k in PROFILE_PARAMETERS:
            ok = np.isfinite(res[k])
            sums[k] += float(res[k][ok] @ length[ok])
            weights[k] += float(length[ok].sum())
    return {k: (sums[k] / weights[k] if weights[k] > 0 else math.nan) for k in PROFILE_PARAMETERS}
