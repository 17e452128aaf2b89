"""Fatigue striation spacing and the local crack-growth direction.

Under constant-amplitude loading a fatigue crack leaves one striation per load
cycle, parallel ridges normal to the local direction of crack growth (ASM
Handbook Vol. 12, *Fractography*, 1987). Their spacing is the crack growth per
cycle.

Method (spectral peak)
----------------------
The image (or the fatigue regions of it, `mask`) is cut into disjoint square
windows of `window_px` pixels; a window counts when at least
:data:`MIN_MASK_FRACTION` of it lies in the mask. In each window the
least-squares plane is removed, a separable 2-D Hann window applied and the
power spectrum computed by an FFT zero-padded to twice the window (finer
frequency sampling). Each power value is divided by the median power of its
ring |k| (the striations put their power in one direction, the rest of the
relief spreads it over all directions, and its steep fall with |k| would
otherwise hide the striations). The frequency with the largest ratio, with
a wavelength between 2 px (Nyquist) and a quarter of the window
(:data:`MIN_PERIODS` periods in the window) and a power of at least
:data:`POWER_FLOOR` of the band's strongest, must exceed :data:`MIN_PEAK_RATIO`;
if a sub-harmonic k/j (j = 4, 3, 2, in that order) in the same direction
exceeds it too, that is the fundamental (the sawtooth-like striation profile
has harmonics) and is taken. It is the striation frequency; its position is
refined by fitting a parabola through the logarithm of the power at the peak
and its two neighbours, separately in kx and ky (the log-parabola is exact for
a Gaussian peak, and the Hann window's main lobe is close to one). Then

* spacing = 1 / |k| (pixels, times `pixel_size_um` for µm);
* direction = atan2(ky, kx): the striations' **normal**, the local direction
  of crack growth, in degrees from the +x axis (image columns, to the right)
  towards +y (image rows, downwards), folded into [0, 180). A spectrum cannot
  tell growth towards θ from growth towards θ + 180°: that ambiguity stays.

A window without such a frequency has no clear striations and is dropped.
The image estimate is the median spacing over the windows and the axial mean
direction (mean of exp(2iθ), halved); the 95 % interval is the percentile
interval of the median over a bootstrap of the windows (resampled with
replacement, `n_boot` times, seeded). The windows are disjoint, so the
bootstrap treats them as independent; striations that run on across windows
make it somewhat narrow.

References
----------
.. [1] ASM Handbook Vol. 12, *Fractography*, ASM International, 1987
   (striations, one per cycle, normal to the crack growth direction).
.. [2] F. J. Harris, "On the use of windows for harmonic analysis with the
   discrete Fourier transform", Proc. IEEE 66 (1978) 51-83 (Hann window).
.. [3] B. Efron & R. Tibshirani, *An Introduction to the Bootstrap*, 1993
   (percentile interval).
.. [4] N. I. Fisher, *Statistical Analysis of Circular Data*, 1993 (axial data:
   mean of the doubled angles).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fracto.errors import FractoInputError

__all__ = ["StriationResult", "striation_spacing", "striations_from_mode_result"]

#: Share of a window that must lie in the mask.
MIN_MASK_FRACTION = 0.75
#: Fewest striation periods a window must hold (longest wavelength = window / this).
MIN_PERIODS = 4.0
#: Frequencies with less power than this share of the band's strongest are ignored.
POWER_FLOOR = 1e-4
#: A window's spectral peak must exceed this multiple of the median power of its ring.
MIN_PEAK_RATIO = 18.0


@dataclass(frozen=True)
class StriationResult:
    """Striation spacing of an image or region.

    Parameters
    ----------
    spacing : float
        Median striation spacing over the windows, in `unit`.
    ci95 : tuple of float
        95 % bootstrap interval of the median (over windows), in `unit`.
    unit : str
        ``"um"`` when the pixel size is known, else ``"px"``.
    direction_deg : float
        Striation normal = local crack growth direction, degrees from +x
        towards +y (image rows downwards), in [0, 180); growth may run either
        way along it (180° ambiguity).
    direction_spread_deg : float
        Circular standard deviation of the window directions (axial).
    n_windows : int
        Windows used.
    window_px : int
    method : str
    """

    spacing: float
    ci95: tuple[float, float]
    unit: str
    direction_deg: float
    direction_spread_deg: float
    n_windows: int
    window_px: int
    method: str

    def to_dict(self) -> dict:
        """JSON-ready form (the spacing key carries the unit)."""
        u = self.unit
        return {
            f"spacing_{u}": self.spacing,
            f"ci95_{u}": list(self.ci95),
            "unit": u,
            "direction_deg": self.direction_deg,
            "direction_convention": (
                "striation normal (crack growth direction), degrees from +x towards +y "
                "(image rows downwards), 0..180; growth may run either way along it"
            ),
            "direction_spread_deg": self.direction_spread_deg,
            "n_windows": self.n_windows,
            "window_px": self.window_px,
            "method": self.method,
        }


def _window_peak(
    w: np.ndarray, hann: np.ndarray, design: np.ndarray
) -> tuple[float, float, float] | None:
    """(kx, ky, peak-to-ring ratio) in cycles/px of a window's striation peak, or None."""
    n = w.shape[0]
    m = 2 * n
    coef, *_ = np.linalg.lstsq(design, w.ravel(), rcond=None)
    resid = w - (design @ coef).reshape(w.shape)  # plane removed: no tilt leakage
    if not float(resid.std()) > 1e-9 * (float(np.abs(w).mean()) + 1e-30):
        return None  # no texture at all
    a = resid * hann
    p = np.fft.fftshift(np.abs(np.fft.fft2(a, s=(m, m))) ** 2)
    c = m // 2
    k = (np.arange(m) - c) / m  # cycles per pixel
    kk = np.hypot(k[:, None], k[None, :])
    band = (kk >= MIN_PERIODS / n) & (kk <= 0.5)
    # relative to the median power of its ring |k|: the striations are one direction,
    # the rest of the relief (roughness, facets) spreads over all directions
    ring = np.rint(kk * m).astype(np.int64)
    med = np.zeros(ring.max() + 1)
    for r in np.unique(ring[band]):
        med[r] = np.median(p[ring == r])
    rel = np.where(band, p / np.maximum(med[ring], 1e-300), 0.0)
    # half-plane: the spectrum of a real window is symmetric
    rel[: c + 1] = np.where((k[: c + 1, None] == 0) & (k[None, :] > 0), rel[: c + 1], 0.0)
    # the most directional frequency, among those with a power that is not
    # numerical dust (>= POWER_FLOOR of the band's peak power)
    floor = POWER_FLOOR * float(np.max(np.where(band, p, 0.0)))
    rel = np.where(p >= floor, rel, 0.0)
    iy, ix = np.unravel_index(int(np.argmax(rel)), rel.shape)
    ratio = float(rel[iy, ix])
    if ratio < MIN_PEAK_RATIO:
        return None
    # it may be a harmonic of the sawtooth-like striation profile: take the lowest
    # sub-harmonic k/j (j = 4, 3, 2) in the same direction that stands out as well
    for j in (4, 3, 2):
        sy, sx = round(c + (iy - c) / j), round(c + (ix - c) / j)
        nb = rel[sy - 1 : sy + 2, sx - 1 : sx + 2]
        if nb.size == 9 and float(nb.max()) >= MIN_PEAK_RATIO:
            dy, dx = np.unravel_index(int(np.argmax(nb)), nb.shape)
            iy, ix = sy - 1 + int(dy), sx - 1 + int(dx)
            ratio = float(rel[iy, ix])
            break
    if not (1 <= iy < m - 1 and 1 <= ix < m - 1):
        return None

    def refine(lm: float, l0: float, lp: float) -> float:
        den = lm - 2.0 * l0 + lp
        return 0.0 if den >= 0 else float(np.clip(0.5 * (lm - lp) / den, -0.5, 0.5))

    lg = np.log(np.maximum(p[iy - 1 : iy + 2, ix - 1 : ix + 2], 1e-300))
    dx = refine(lg[1, 0], lg[1, 1], lg[1, 2])
    dy = refine(lg[0, 1], lg[1, 1], lg[2, 1])
    return (ix - c + dx) / m, (iy - c + dy) / m, ratio


def striation_spacing(
    image: np.ndarray,
    *,
    pixel_size_um: float | None,
    mask: np.ndarray | None = None,
    window_px: int = 128,
    n_boot: int = 1000,
    seed: int = 0,
) -> StriationResult:
    """Striation spacing and crack-growth direction from an SEM image (or height map).

    Parameters
    ----------
    image : ndarray (ny, nx)
        Grey image or height map; NaN points are set to the window mean.
    pixel_size_um : float or None
        Pixel size in µm; None gives the spacing in pixels.
    mask : ndarray of bool, optional
        Where to measure (e.g. the fatigue regions of a mode map).
    window_px : int
        Side of the analysis windows (at least 16; should hold four or more
        striations).
    n_boot : int
        Bootstrap replicates for the interval.
    seed : int
        Seed of the bootstrap.

    Returns
    -------
    StriationResult
        With ``n_windows == 0`` and NaN values when no window shows striations.

    Raises
    ------
    FractoInputError
        For a non-2-D image, a mask of another shape or a bad window size.

    References
    ----------
    See the module docstring.
    """
    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2:
        raise FractoInputError("The striation analysis needs a 2-D image.")
    window_px = int(window_px)
    if window_px < 16 or window_px > min(img.shape):
        raise FractoInputError(
            f"The striation window ({window_px} px) must be at least 16 px and fit in the image "
            f"({img.shape[1]} x {img.shape[0]} px)."
        )
    if pixel_size_um is not None and not (math.isfinite(pixel_size_um) and pixel_size_um > 0):
        raise FractoInputError("The pixel size must be a positive length in µm.")
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != img.shape:
            raise FractoInputError("The striation mask must have the shape of the image.")
    n = window_px
    hann = np.outer(np.hanning(n), np.hanning(n))
    gy, gx = np.mgrid[0:n, 0:n].astype(np.float64)
    design = np.column_stack([np.ones(n * n), gx.ravel(), gy.ravel()])
    ny, nx = img.shape
    # centre the window grid on the image
    oy, ox = (ny % n) // 2, (nx % n) // 2
    spacings, angles = [], []
    for y0 in range(oy, ny - n + 1, n):
        for x0 in range(ox, nx - n + 1, n):
            if mask is not None and mask[y0 : y0 + n, x0 : x0 + n].mean() < MIN_MASK_FRACTION:
                continue
            w = img[y0 : y0 + n, x0 : x0 + n]
            ok = np.isfinite(w)
            if ok.mean() < MIN_MASK_FRACTION:
                continue
            if not ok.all():
                w = np.where(ok, w, w[ok].mean())
            pk = _window_peak(w, hann, design)
            if pk is None or pk[2] < MIN_PEAK_RATIO:
                continue
            kx, ky = pk[0], pk[1]
            spacings.append(1.0 / math.hypot(kx, ky))
            angles.append(math.atan2(ky, kx))
    scale = 1.0 if pixel_size_um is None else float(pixel_size_um)
    unit = "px" if pixel_size_um is None else "um"
    method = (
        f"2-D power-spectrum peak (Hann window, 2x zero padding, log-parabolic "
        f"refinement) in disjoint {n} px windows; median over windows; 95 % "
        f"percentile bootstrap over windows ({n_boot} replicates, seed {seed})"
    )
    if not spacings:
        nan = float("nan")
        return StriationResult(nan, (nan, nan), unit, nan, nan, 0, n, method)
    s = np.array(spacings) * scale
    th = np.array(angles)
    z = np.exp(2j * th)
    zbar = z.mean()
    direction = (math.degrees(0.5 * math.atan2(zbar.imag, zbar.real))) % 180.0
    r = min(abs(zbar), 1.0)
    spread = math.degrees(0.5 * math.sqrt(max(-2.0 * math.log(max(r, 1e-12)), 0.0)))
    rng = np.random.default_rng(seed)
    if len(s) > 1:
        idx = rng.integers(0, len(s), size=(int(n_boot), len(s)))
        med = np.median(s[idx], axis=1)
        lo, hi = (float(v) for v in np.percentile(med, [2.5, 97.5]))
    else:
        lo = hi = float(s[0])
    return StriationResult(
        spacing=float(np.median(s)),
        ci95=(lo, hi),
        unit=unit,
        direction_deg=float(direction),
        direction_spread_deg=float(spread),
        n_windows=len(s),
        window_px=n,
        method=method,
    )


def striations_from_mode_result(
    image: np.ndarray,
    mode_result: object,
    pixel_size_um: float | None,
    *,
    window_px: int = 128,
    seed: int = 0,
) -> StriationResult | None:
    """Striation spacing in the regions the classifier labelled fatigue.

    Parameters
    ----------
    image : ndarray
        The classified image.
    mode_result : fracto.modes.pipeline.ModeResult
        Its ``label_map`` (value i + 1 = ``classes[i]``) gives the fatigue regions.
    pixel_size_um : float or None
        Pixel size in µm (None: spacing in pixels).
    window_px, seed
        As for :func:`striation_spacing`.

    Returns
    -------
    StriationResult or None
        None when the model has no fatigue class, no pixel is labelled fatigue
        or no window of the fatigue regions shows striations.
    """
    classes = tuple(getattr(mode_result, "classes", ()))
    if "fatigue" not in classes:
        return None
    lab = np.asarray(mode_result.label_map)
    mask = lab == classes.index("fatigue") + 1
    if not mask.any():
        return None
    win = min(int(window_px), *np.asarray(image).shape)
    res = striation_spacing(
        image, pixel_size_um=pixel_size_um, mask=mask, window_px=win, seed=seed
    )
    return res if res.n_windows > 0 else None
