"""ISO 16610 Gaussian filters, spike removal and the surface-conditioning chain.

The Gaussian weighting function of ISO 16610-21 (profiles) and ISO 16610-61
(areal) is

    s(x) = 1/(α λc) · exp(−π (x / (α λc))²),   α = √(ln 2 / π),

whose Fourier transform is exp(−π (α λc / λ)²): 50 % amplitude transmission
at the cutoff (nesting index) λc. Matching exp(−π x²/(αλc)²) with
exp(−x²/(2σ²)) gives the standard deviation σ = α λc / √(2π).

Edges and non-measured points are handled by normalised convolution: the
heights times the validity mask w and the mask itself are filtered with the
same kernel (zero outside the map) and divided, so only measured points
contribute and nothing is biased towards zero at the borders. This is the
zero-order moment retention end correction (ISO/TS 16610-28, from memory):
a constant is kept exactly everywhere, a plane exactly wherever the kernel
support is complete; at a border or a hole a sloped surface is shifted by
slope × (centroid offset of the remaining weights). ``edge_order=1`` fits a
Gaussian-weighted local plane instead (first-order normalised convolution),
which keeps any plane everywhere and equals order 0 where the kernel is
complete.

Short kernels use scipy.ndimage.gaussian_filter1d; long ones the same sampled
kernel through a zero-padded real FFT (scipy.fft.rfft) in blocks of lines,
which keeps the cost near that of one FFT and the memory to a few map copies.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.fft
from scipy import ndimage

from fracto.errors import FractoInputError
from fracto.surface.checks import check_spacing
from fracto.surface.form import parse_form, remove_form

#: α = √(ln 2 / π) ≈ 0.4697 of the ISO 16610-21 Gaussian weighting function.
GAUSSIAN_ALPHA: float = math.sqrt(math.log(2.0) / math.pi)

#: Kernel lengths (taps) above which the FFT path is used.
_DIRECT_MAX_TAPS = 97
#: Bytes of complex workspace per FFT block.
_BLOCK_BYTES = 1 << 25


def gaussian_sigma_um(cutoff_um: float) -> float:
    """Standard deviation σ = αλc/√(2π) (µm) of the ISO 16610-21 weighting function."""
    return GAUSSIAN_ALPHA * cutoff_um / math.sqrt(2.0 * math.pi)


def _kernel(sigma_px: float, radius: int) -> np.ndarray:
    """Sampled Gaussian normalised to unit sum, as scipy.ndimage builds it."""
    x = np.arange(-radius, radius + 1, dtype=np.float64)
    k = np.exp(-0.5 * (x / sigma_px) ** 2)
    return k / k.sum()


def _radius(cutoff_um: float, spacing: float, truncate: float) -> int:
    """Half-width in samples of a kernel that spans ±truncate·λc."""
    return max(1, math.floor(truncate * cutoff_um / spacing + 0.5))


def _filter_axis(
    a: np.ndarray, sigma_px: float, radius: int, axis: int, *, inplace: bool = False
) -> np.ndarray:
    """Gaussian-filter float64 `a` along `axis`, zero outside the data.

    With ``inplace`` the result overwrites `a` (each line is read before it is
    written, for both paths), which saves one map-sized array.
    """
    n = a.shape[axis]
    taps = 2 * radius + 1
    out = a if inplace else np.empty_like(a, dtype=np.float64)
    if taps <= _DIRECT_MAX_TAPS:
        return ndimage.gaussian_filter1d(
            a,
            sigma_px,
            axis=axis,
            output=out,
            mode="constant",
            cval=0.0,
            truncate=radius / sigma_px,
            radius=radius,
        )
    length = scipy.fft.next_fast_len(n + 2 * radius, real=True)
    kpad = np.zeros(length)
    kpad[:taps] = _kernel(sigma_px, radius)
    kspec = scipy.fft.rfft(kpad)
    if a.ndim == 1:
        full = scipy.fft.irfft(scipy.fft.rfft(a, n=length) * kspec, n=length)
        out[:] = full[radius : radius + n]
        return out
    other = a.shape[1 - axis]
    block = max(1, min(other, _BLOCK_BYTES // (16 * (length // 2 + 1))))
    shape = [1, 1]
    shape[axis] = kspec.size
    kspec = kspec.reshape(shape)
    for s in range(0, other, block):
        sl = (slice(None), slice(s, s + block)) if axis == 0 else (slice(s, s + block),)
        spec = scipy.fft.rfft(a[sl], n=length, axis=axis)
        spec *= kspec
        full = scipy.fft.irfft(spec, n=length, axis=axis)
        del spec
        if axis == 0:
            out[:, s : s + block] = full[radius : radius + n]
        else:
            out[s : s + block] = full[:, radius : radius + n]
        del full
    return out


def _correlate_multi(a: np.ndarray, kernels: list[np.ndarray], axis: int) -> list[np.ndarray]:
    """Correlate float64 2-D `a` along `axis` with each centred odd-length kernel.

    out_k[i] = Σ_t kernel_k[r + t] · a[i + t], zero outside the data. Long
    kernels share one forward FFT per block of lines.
    """
    taps = kernels[0].size
    radius = taps // 2
    if taps <= _DIRECT_MAX_TAPS:
        return [ndimage.correlate1d(a, k, axis=axis, mode="constant", cval=0.0) for k in kernels]
    n = a.shape[axis]
    length = scipy.fft.next_fast_len(n + 2 * radius, real=True)
    shape = [1, 1]
    shape[axis] = length // 2 + 1
    specs = []
    for k in kernels:
        kpad = np.zeros(length)
        kpad[:taps] = k[::-1]  # convolution with the reversed kernel = correlation
        specs.append(scipy.fft.rfft(kpad).reshape(shape))
    outs = [np.empty_like(a, dtype=np.float64) for _ in kernels]
    other = a.shape[1 - axis]
    block = max(1, min(other, _BLOCK_BYTES // (16 * (length // 2 + 1))))
    for s in range(0, other, block):
        sl = (slice(None), slice(s, s + block)) if axis == 0 else (slice(s, s + block),)
        spec = scipy.fft.rfft(a[sl], n=length, axis=axis)
        for ks, out in zip(specs, outs, strict=True):
            full = scipy.fft.irfft(spec * ks, n=length, axis=axis)
            if axis == 0:
                out[:, s : s + block] = full[radius : radius + n]
            else:
                out[s : s + block] = full[:, radius : radius + n]
            del full
        del spec
    return outs


def _moment_kernels(sigma_px: float, radius: int) -> list[np.ndarray]:
    """Gaussian kernel g and its first two moments t·g, t²·g (t in samples)."""
    g = _kernel(sigma_px, radius)
    t = np.arange(-radius, radius + 1, dtype=np.float64)
    return [g, t * g, t * t * g]


#: Columns per block in the second pass of the first-order filter.
_COLUMN_BLOCK = 256


def _local_linear_mean(
    z: np.ndarray,
    valid: np.ndarray,
    sigma_x: float,
    rx: int,
    sigma_y: float,
    ry: int,
    min_weight: float,
) -> np.ndarray:
    """Gaussian-weighted local plane fit at every point (first-order normalised convolution).

    At each point the plane a + b·tx + c·ty minimising Σ g w (z − plane)² over
    the kernel (t = offset in samples) is fitted; `a` is the mean surface. The
    moments are separable correlations: along x with g, t·g, t²·g, then along y
    per block of columns; the 3 × 3 normal equations are solved by Cramer's rule.
    """
    gx = _moment_kernels(sigma_x, rx)
    gy = _moment_kernels(sigma_y, ry)
    w = valid.astype(np.float64)
    zw = np.where(valid, z, 0.0)
    w0, w1, w2 = _correlate_multi(w, gx, 1)
    del w
    z0, z1 = _correlate_multi(zw, gx[:2], 1)
    del zw
    ny, nx = z.shape
    out = np.empty((ny, nx))
    for c in range(0, nx, _COLUMN_BLOCK):
        sl = (slice(None), slice(c, c + _COLUMN_BLOCK))
        m00, m01, m02 = _correlate_multi(np.ascontiguousarray(w0[sl]), gy, 0)
        m10, m11 = _correlate_multi(np.ascontiguousarray(w1[sl]), gy[:2], 0)
        (m20,) = _correlate_multi(np.ascontiguousarray(w2[sl]), gy[:1], 0)
        b0, b2 = _correlate_multi(np.ascontiguousarray(z0[sl]), gy[:2], 0)
        (b1,) = _correlate_multi(np.ascontiguousarray(z1[sl]), gy[:1], 0)
        # M = [[m00, m10, m01], [m10, m20, m11], [m01, m11, m02]], rhs (b0, b1, b2).
        c00 = m20 * m02 - m11 * m11
        c01 = m10 * m02 - m11 * m01
        c02 = m10 * m11 - m20 * m01
        det = m00 * c00 - m10 * c01 + m01 * c02
        a = b0 * c00 - m10 * (b1 * m02 - m11 * b2) + m01 * (b1 * m11 - m20 * b2)
        with np.errstate(invalid="ignore", divide="ignore"):
            a /= det
            # Degenerate support (all weights on a line): keep the zero-order mean.
            bad = ~(det > 1e-9 * m00 * np.abs(m20 * m02)) | ~np.isfinite(a)
            a[bad] = (b0 / m00)[bad]
        a[~(m00 >= min_weight)] = np.nan
        out[sl] = a
    return out


def _check_spacing(d: float, name: str = "dx") -> None:
    """One spacing, checked by the shared rule (`fracto.surface.checks`)."""
    if name == "dy":
        check_spacing(1.0, d)
    else:
        check_spacing(d, 1.0)


def _check_cutoff(
    cutoff_um: float, spacings: tuple[float, ...], extents: tuple[float, ...], what: str
) -> None:
    """Refuse cutoffs that are not finite, shorter than 2 pixels or longer than the map."""
    if not (isinstance(cutoff_um, int | float) and math.isfinite(cutoff_um) and cutoff_um > 0):
        raise FractoInputError(f"The {what} must be a positive length, not {cutoff_um!r}.")
    if cutoff_um < 2.0 * max(spacings):
        raise FractoInputError(
            f"The {what} of {cutoff_um:g} is shorter than 2 pixels ({2.0 * max(spacings):g})."
        )
    if cutoff_um > max(extents):
        raise FractoInputError(
            f"The {what} of {cutoff_um:g} is longer than the data ({max(extents):g})."
        )


def _as_map(z: np.ndarray) -> np.ndarray:
    z = np.asarray(z, dtype=np.float64)
    if z.ndim != 2:
        raise FractoInputError("The height map must be a 2-D array.")
    return z


def gaussian_mean_surface(
    z: np.ndarray,
    cutoff_um: float,
    dx: float,
    dy: float,
    *,
    truncate: float = 1.0,
    min_weight: float = 1e-3,
    edge_order: int = 0,
) -> np.ndarray:
    """Mean (long-wave) surface of the ISO 16610-61 areal Gaussian filter.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights (µm), NaN where not measured.
    cutoff_um : float
        Nesting index λc (µm; pixels when dx = dy = 1), the wavelength
        transmitted at 50 % amplitude.
    dx, dy : float
        Column and row spacing (µm).
    truncate : float
        Half-width of the kernel in multiples of λc (1.0: the kernel spans
        ±λc, where the weight has fallen to 7e-7 of its peak).
    min_weight : float
        Points where the normalised weight (sum of kernel weights on measured
        points, 1 in the interior) is below this are returned as NaN.
    edge_order : {0, 1}
        Moment retention at borders and holes. 0: normalised convolution,
        the weighted mean of the measured points under the kernel — keeps a
        constant everywhere, a plane only where the kernel lies wholly on
        measured points. 1: a Gaussian-weighted local plane fit (first-order
        normalised convolution) — keeps any plane everywhere; identical to 0
        where the kernel is complete (the first moments vanish there), so the
        transmission is the same. Order 1 takes two to three times as long
        and needs about seven map-sized arrays at its peak.

    Returns
    -------
    ndarray
        The mean surface, float64, same shape. It is also estimated at
        non-measured points that have enough measured neighbours.

    References
    ----------
    ISO 16610-61 (2015): linear areal filters, Gaussian filter.
    ISO 16610-21 (2011): Gaussian profile filter, weighting function and α.
    Knutsson, H. & Westin, C.-F. (1993). Normalized and differential
    convolution. Proc. IEEE CVPR, 515–523 (orders 0 and 1).
    ISO/TS 16610-28 (2016): end effects, moment retention (from memory).
    """
    z = _as_map(z)
    _check_spacing(dx, "dx")
    _check_spacing(dy, "dy")
    ny, nx = z.shape
    _check_cutoff(cutoff_um, (dx, dy), (nx * dx, ny * dy), "filter nesting index")
    if edge_order not in (0, 1):
        raise FractoInputError(f"The filter edge order must be 0 or 1, not {edge_order!r}.")
    valid = np.isfinite(z)
    sigma_um = gaussian_sigma_um(cutoff_um)
    rx, ry = _radius(cutoff_um, dx, truncate), _radius(cutoff_um, dy, truncate)
    if edge_order == 1:
        return _local_linear_mean(z, valid, sigma_um / dx, rx, sigma_um / dy, ry, min_weight)
    num = np.where(valid, z, 0.0)
    _filter_axis(num, sigma_um / dx, rx, 1, inplace=True)
    _filter_axis(num, sigma_um / dy, ry, 0, inplace=True)
    if valid.all():
        # The weight is separable: product of the 1-D border weights.
        wx = _filter_axis(np.ones(nx), sigma_um / dx, rx, 0)
        wy = _filter_axis(np.ones(ny), sigma_um / dy, ry, 0)
        den = wy[:, None] * wx[None, :]
    else:
        den = valid.astype(np.float64)
        _filter_axis(den, sigma_um / dx, rx, 1, inplace=True)
        _filter_axis(den, sigma_um / dy, ry, 0, inplace=True)
    ok = den >= min_weight
    np.divide(num, den, out=num, where=ok)
    num[~ok] = np.nan
    return num


def l_filter(
    z: np.ndarray, nesting_index_um: float, dx: float, dy: float, *, edge_order: int = 0
) -> np.ndarray:
    """Remove wavelengths longer than the nesting index (Gaussian L-filter).

    Returns ``z − mean surface`` (the S-L surface when `z` was S-filtered);
    NaN where `z` is NaN or the mean surface could not be estimated.
    `edge_order` as in `gaussian_mean_surface`.

    References
    ----------
    ISO 25178-2 (2012), clause 3.1.6 (S-L surface); ISO 16610-61 (2015).
    """
    z = _as_map(z)
    mean = gaussian_mean_surface(z, nesting_index_um, dx, dy, edge_order=edge_order)
    np.subtract(z, mean, out=mean)
    return mean


def s_filter(
    z: np.ndarray, nesting_index_um: float, dx: float, dy: float, *, edge_order: int = 0
) -> np.ndarray:
    """Remove wavelengths shorter than the nesting index (Gaussian S-filter).

    Returns the Gaussian mean surface, NaN where `z` was not measured.
    `edge_order` as in `gaussian_mean_surface`.

    References
    ----------
    ISO 25178-2 (2012), clause 3.1 (S-filter); ISO 16610-61 (2015).
    """
    z = _as_map(z)
    mean = gaussian_mean_surface(z, nesting_index_um, dx, dy, edge_order=edge_order)
    mean[~np.isfinite(z)] = np.nan
    return mean


def gaussian_profile_filter(
    profile: np.ndarray,
    cutoff_um: float,
    dx: float,
    *,
    truncate: float = 1.0,
    min_weight: float = 1e-3,
) -> np.ndarray:
    """Mean line of the ISO 16610-21 Gaussian profile filter.

    Parameters
    ----------
    profile : ndarray, shape (n,) or (m, n)
        Heights (µm), NaN where not measured. A 2-D array is a stack of
        profiles along its last axis, each filtered on its own.
    cutoff_um : float
        Cutoff wavelength λc (µm), transmitted at 50 % amplitude.
    dx : float
        Sampling interval (µm).
    truncate, min_weight : float
        As in `gaussian_mean_surface`.

    Returns
    -------
    ndarray
        The mean line (same shape); roughness profile = profile − mean line.

    References
    ----------
    ISO 16610-21 (2011): linear profile filters, Gaussian filters.
    """
    p = np.asarray(profile, dtype=np.float64)
    if p.ndim not in (1, 2):
        raise FractoInputError("A profile must be a 1-D array (or a stack of them).")
    _check_spacing(dx)
    n = p.shape[-1]
    _check_cutoff(cutoff_um, (dx,), (n * dx,), "profile filter cutoff")
    valid = np.isfinite(p)
    sigma_px = gaussian_sigma_um(cutoff_um) / dx
    r = _radius(cutoff_um, dx, truncate)
    axis = p.ndim - 1
    num = _filter_axis(np.where(valid, p, 0.0), sigma_px, r, axis, inplace=True)
    den = _filter_axis(valid.astype(np.float64), sigma_px, r, axis, inplace=True)
    ok = den >= min_weight
    np.divide(num, den, out=num, where=ok)
    num[~ok] = np.nan
    return num


#: Compare-exchange pairs of a 19-step sorting network whose element 4 is the
#: median of 9 (the "opt_med9" network, Devillard 1998 / Paeth 1990, from
#: memory; the tests check it against scipy.ndimage.median_filter).
_MED9_NETWORK = (
    (1, 2), (4, 5), (7, 8), (0, 1), (3, 4), (6, 7), (1, 2), (4, 5), (7, 8), (0, 3),
    (5, 8), (4, 7), (3, 6), (1, 4), (2, 5), (4, 7), (4, 2), (6, 4), (4, 2),
)  # fmt: skip

_MEDIAN_ROWS = 256


def _median_filter(a: np.ndarray, size: int) -> np.ndarray:
    """size × size median with edge replication (scipy's mode="nearest").

    For 3 × 3 a sorting network over the nine shifted neighbours, in blocks of
    rows (float64, a few block-sized arrays); other sizes use scipy.
    """
    if size != 3:
        return ndimage.median_filter(a, size=size, mode="nearest")
    ny, nx = a.shape
    out = np.empty_like(a)
    for r0 in range(0, ny, _MEDIAN_ROWS):
        r1 = min(ny, r0 + _MEDIAN_ROWS)
        rows = np.clip(np.arange(r0 - 1, r1 + 1), 0, ny - 1)
        p = np.pad(a[rows], ((0, 0), (1, 1)), mode="edge")
        h = r1 - r0
        v = [p[i : i + h, j : j + nx].copy() for i in range(3) for j in range(3)]
        for i, j in _MED9_NETWORK:
            lo = np.minimum(v[i], v[j])
            np.maximum(v[i], v[j], out=v[j])
            v[i] = lo
        out[r0:r1] = v[4]
    return out


def remove_spikes(
    z: np.ndarray, *, threshold: float = 5.0, size: int = 3
) -> tuple[np.ndarray, int]:
    """Mark spikes and outliers as not measured.

    A point becomes NaN when it differs from the median of its ``size × size``
    neighbourhood by more than `threshold` robust σ, σ being 1.4826 × the
    median absolute deviation of those differences over the map. This local
    median test is common practice for optical height maps (no standard
    prescribes it). Only measured neighbours enter the median (see the code
    comment for how); points with fewer than ``size²//2 + 1`` measured
    neighbours are not judged. On maps of more than 2^22 judged points the
    scale comes from a regular subsample of them.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights (µm), NaN where not measured.
    threshold : float
        Limit in robust σ (> 0).
    size : int
        Odd window side in pixels (≥ 3).

    Returns
    -------
    (ndarray, int)
        The map with spikes set to NaN (a new array) and how many were removed.

    References
    ----------
    Hampel, F. R. (1974). The influence curve and its role in robust
    estimation. J. Amer. Statist. Assoc. 69, 383–393 (the MAD scale).
    """
    z = _as_map(z)
    if not (math.isfinite(threshold) and threshold > 0):
        raise FractoInputError(
            f"The spike threshold must be a positive number, not {threshold!r}."
        )
    if not (isinstance(size, int | np.integer) and size >= 3 and size % 2 == 1):
        raise FractoInputError(
            f"The spike window must be an odd number of pixels ≥ 3, not {size!r}."
        )
    valid = np.isfinite(z)
    out = z.copy()
    if valid.sum() < size * size:
        return out, 0
    if valid.all():
        med = _median_filter(z, int(size))
    else:
        # Median over the measured neighbours only: with the k missing ones set to
        # +inf the window median is the valid value of rank (h+1), with -inf that of
        # rank (h+1-k), h = size²//2; their mean is the median of the valid values for
        # k <= 1 and a symmetric central estimate for larger k. Windows with fewer
        # than h+1 measured points are not judged.
        hi = _median_filter(np.where(valid, z, np.inf), int(size))
        lo = _median_filter(np.where(valid, z, -np.inf), int(size))
        with np.errstate(invalid="ignore"):
            med = 0.5 * (hi + lo)
        del hi, lo
        med[~np.isfinite(med)] = np.nan
    np.subtract(z, med, out=med)  # residual, NaN where not measured or not judged
    judged = np.isfinite(med)
    r = med[judged]
    if r.size == 0:
        return out, 0
    if r.size > 1 << 22:  # the scale from a regular 1-in-k subsample of 2^22 or more points
        r = r[:: r.size >> 22]
    centre = np.median(r)
    sigma = 1.4826 * float(np.median(np.abs(r - centre)))
    if sigma == 0.0:
        spikes = judged & (med != centre)
    else:
        with np.errstate(invalid="ignore"):
            spikes = np.abs(med - centre) > threshold * sigma
    n = int(spikes.sum())
    out[spikes] = np.nan
    return out, n


@dataclass(frozen=True, eq=False)
class ConditionResult:
    """A conditioned height map and what was done to it.

    Attributes
    ----------
    z : ndarray
        The conditioned heights (µm), NaN where not measured or removed.
    processing : dict
        JSON-ready record of every step applied, in order, with its settings.
    """

    z: np.ndarray
    processing: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """The processing record (no arrays)."""
        return dict(self.processing)


def condition_surface(
    z: np.ndarray,
    dx: float,
    dy: float,
    *,
    form: str = "plane",
    order: int = 2,
    s_filter_um: float | None = None,
    l_filter_um: float | None = None,
    despike: bool = False,
    edge_order: int = 0,
) -> ConditionResult:
    """Condition a height map: spike removal, form removal, S-filter, L-filter.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights (µm), NaN where not measured.
    dx, dy : float
        Column and row spacing (µm; 1.0 = pixels when uncalibrated).
    form : str
        ``"plane"``, ``"poly"``, ``"poly:N"``, ``"robust"`` or ``"none"``.
    order : int
        Polynomial order for a bare ``"poly"``.
    s_filter_um, l_filter_um : float or None
        Nesting indices of the Gaussian S- and L-filters (µm); None skips them.
    despike : bool
        Run `remove_spikes` first (threshold 5 robust σ, 3 × 3 window).
    edge_order : {0, 1}
        Border and hole handling of both Gaussian filters (see
        `gaussian_mean_surface`): 0 normalised convolution, 1 local plane fit.

    Returns
    -------
    ConditionResult
        ``processing`` holds ``"steps"`` (the steps applied, in order) and one
        entry per step kind with its settings (``"applied": false`` when skipped).

    Raises
    ------
    FractoInputError
        For a bad form text, an S nesting index not below the L nesting
        index, or a nesting index shorter than 2 pixels or longer than the map.

    References
    ----------
    ISO 25178-2 (2012), clause 3.1 (S-F and S-L surfaces); ISO 16610-61 (2015).
    """
    z = _as_map(z)
    _check_spacing(dx, "dx")
    _check_spacing(dy, "dy")
    method, form_order = parse_form(form, default_order=order)
    if edge_order not in (0, 1):
        raise FractoInputError(f"The filter edge order must be 0 or 1, not {edge_order!r}.")
    ny, nx = z.shape
    spacings, extents = (dx, dy), (nx * dx, ny * dy)
    if s_filter_um is not None:
        _check_cutoff(s_filter_um, spacings, extents, "S-filter nesting index")
    if l_filter_um is not None:
        _check_cutoff(l_filter_um, spacings, extents, "L-filter nesting index")
    if s_filter_um is not None and l_filter_um is not None and s_filter_um >= l_filter_um:
        raise FractoInputError(
            f"The S-filter nesting index ({s_filter_um:g}) must be smaller than the "
            f"L-filter nesting index ({l_filter_um:g})."
        )
    steps: list[str] = []
    processing: dict = {"valid_points_in": int(np.isfinite(z).sum())}
    if despike:
        z, n_removed = remove_spikes(z)
        steps.append("despike")
        processing["despike"] = {
            "applied": True,
            "method": "local median, MAD scale",
            "threshold_sigma": 5.0,
            "window_px": 3,
            "removed_points": n_removed,
        }
    else:
        processing["despike"] = {"applied": False}
    result = remove_form(z, method, order=form_order, dx=dx, dy=dy)
    z = result.residual
    processing["form"] = {"applied": method != "none", **result.to_dict()}
    if method != "none":
        steps.append("form")
    for key, value, func in (
        ("s_filter", s_filter_um, s_filter),
        ("l_filter", l_filter_um, l_filter),
    ):
        if value is None:
            processing[key] = {"applied": False}
            continue
        z = func(z, float(value), dx, dy, edge_order=edge_order)
        steps.append(key)
        processing[key] = {
            "applied": True,
            "type": "Gaussian (ISO 16610-61)",
            "nesting_index_um": float(value),
            "edge_handling": (
                "normalised convolution (zero-order moment retention)"
                if edge_order == 0
                else "local plane fit (first-order normalised convolution)"
            ),
            "kernel_half_width_cutoffs": 1.0,
        }
    processing["steps"] = steps
    processing["valid_points_out"] = int(np.isfinite(z).sum())
    return ConditionResult(z, processing)
