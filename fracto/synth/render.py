"""Secondary-electron (SE) rendering of height maps.

The signal at each pixel is built from the local surface geometry:

1. **tilt contrast** — the SE yield rises with the angle θ between the surface
   normal and the beam as ``δ(θ) = δ0 · sec θ`` (Reimer 1998), capped at
   ``δ0 · secant_cap`` because the law fails at grazing incidence;
2. **edge effect** — more secondaries escape near convex edges and ridges:
   ``edge_gain · E/(1 + E)`` with ``E = max(0, -σ ∇²h_σ) · sec θ``, the positive
   part of the negative Laplacian of the height smoothed over the interaction
   radius σ (dimensionless: a slope change), scaled by the local tilt;
3. **detector direction** — a side-mounted detector collects more from faces
   that look at it: factor ``1 + detector_strength · (n · d)``, n the unit
   normal and d the unit vector towards the detector;
4. **valley darkening** — secondaries from deep narrow valleys are partly
   recaptured: factor ``1 - valley_strength · (1 - exp(-o / valley_depth_um))``
   with ``o`` = morphological closing of the height (radius
   ``valley_radius_um``) minus the height, an ambient-occlusion-like depth;
5. a slow **shading** gain across the field (``shading_variation``), beam
   **blur** (Gaussian, σ = ``blur_um``), **shot noise** (Poisson counts at
   ``dose`` electrons per pixel for signal 1), scan-line jitter, scan-line
   noise (a multiplicative gain noise of RMS ``scan_noise`` correlated along
   the rows over ``scan_noise_px`` pixels), then the
   amplifier: optional automatic levels, ``contrast``, ``brightness``,
   ``gamma``; quantisation to 8 or 16 bits, an optional JPEG round trip and an
   optional information banner (appended below the image).

With :meth:`RenderSettings.secant_only` only step 1 remains and a plane of tilt
θ renders as exactly ``δ0 sec θ``.

References
----------
.. [1] L. Reimer, *Scanning Electron Microscopy: Physics of Image Formation and
   Microanalysis*, 2nd ed., Springer, 1998 (secant law of the SE yield, edge
   effect, detector position).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import cv2
import numpy as np
from scipy import ndimage

from fracto.errors import FractoInputError

__all__ = ["RenderSettings", "banner_rows", "render_sem"]


@dataclass(frozen=True)
class RenderSettings:
    """Every effect of the SE renderer (see the module docstring).

    Lengths are in µm; set a strength to 0 (or `dose` to None) to switch an
    effect off.
    """

    yield_base: float = 0.30
    secant_cap: float = 3.5
    edge_gain: float = 0.7
    edge_sigma_um: float = 0.06
    edge_glow_gain: float = 1.0
    edge_glow_um: float = 0.3
    detector_strength: float = 0.9
    detector_azimuth_deg: float = 120.0
    detector_elevation_deg: float = 30.0
    detector_shadow: float = 0.35
    shadow_softness_um: float = 0.4
    valley_strength: float = 0.4
    valley_radius_um: float = 1.2
    valley_depth_um: float = 0.25
    shading_variation: float = 0.08
    blur_um: float = 0.05
    dose: float | None = 300.0
    line_jitter: float = 0.01
    scan_noise: float = 0.0
    scan_noise_px: float = 2.0
    auto_level: bool = True
    median_level: float = 0.32
    brightness: float = 0.0
    contrast: float = 1.15
    gamma: float = 1.0
    banner: bool = False
    bit_depth: int = 8
    jpeg_quality: int | None = None

    def __post_init__(self) -> None:
        if self.bit_depth not in (8, 16):
            raise FractoInputError("The bit depth of the SEM image must be 8 or 16.")
        if self.jpeg_quality is not None and not (1 <= int(self.jpeg_quality) <= 100):
            raise FractoInputError("The JPEG quality must lie in 1..100.")
        if self.jpeg_quality is not None and self.bit_depth != 8:
            raise FractoInputError("JPEG compression needs an 8-bit image.")
        if not (0.0 < self.median_level < 1.0):
            raise FractoInputError("The median grey level must lie between 0 and 1.")
        if not (self.yield_base > 0 and self.secant_cap >= 1 and self.gamma > 0):
            raise FractoInputError(
                "The base yield and gamma must be positive and the secant cap at least 1."
            )
        if not (self.scan_noise >= 0 and self.scan_noise_px >= 0):
            raise FractoInputError("The scan-line noise and its length must not be negative.")
        if self.dose is not None and not self.dose > 0:
            raise FractoInputError("The electron dose must be positive (or None for no noise).")

    @classmethod
    def secant_only(cls, *, yield_base: float = 0.30, secant_cap: float = 10.0) -> RenderSettings:
        """Pure secant-law tilt contrast: every other effect switched off."""
        return cls(
            yield_base=yield_base,
            secant_cap=secant_cap,
            edge_gain=0.0,
            edge_glow_gain=0.0,
            detector_strength=0.0,
            detector_shadow=0.0,
            valley_strength=0.0,
            shading_variation=0.0,
            blur_um=0.0,
            dose=None,
            line_jitter=0.0,
            scan_noise=0.0,
            auto_level=False,
            brightness=0.0,
            contrast=1.0,
            gamma=1.0,
            banner=False,
            bit_depth=16,
            jpeg_quality=None,
        )

    @classmethod
    def random(cls, rng: np.random.Generator) -> RenderSettings:
        """Randomised settings for domain randomisation of a classifier's training set."""
        return cls(
            yield_base=float(rng.uniform(0.2, 0.4)),
            secant_cap=float(rng.uniform(2.5, 5.0)),
            edge_gain=float(rng.uniform(0.15, 0.8)),
            edge_sigma_um=float(rng.uniform(0.03, 0.12)),
            edge_glow_gain=float(rng.uniform(0.1, 1.0)),
            edge_glow_um=float(rng.uniform(0.1, 0.6)),
            detector_strength=float(rng.uniform(0.2, 1.2)),
            detector_azimuth_deg=float(rng.uniform(0.0, 360.0)),
            detector_elevation_deg=float(rng.uniform(15.0, 60.0)),
            detector_shadow=float(rng.uniform(0.0, 0.7)),
            shadow_softness_um=float(rng.uniform(0.15, 0.8)),
            valley_strength=float(rng.uniform(0.2, 0.8)),
            valley_radius_um=float(rng.uniform(0.3, 1.2)),
            valley_depth_um=float(rng.uniform(0.1, 0.5)),
            shading_variation=float(rng.uniform(0.0, 0.2)),
            blur_um=float(rng.uniform(0.0, 0.1)),
            dose=float(rng.uniform(10.0, 200.0)) if rng.uniform() < 0.9 else None,
            line_jitter=float(rng.uniform(0.0, 0.03)),
            scan_noise=float(rng.uniform(0.0, 0.12)) if rng.uniform() < 0.6 else 0.0,
            scan_noise_px=float(rng.uniform(1.0, 4.0)),
            auto_level=bool(rng.uniform() < 0.8),
            median_level=float(rng.uniform(0.22, 0.5)),
            brightness=float(rng.uniform(-0.1, 0.1)),
            contrast=float(rng.uniform(0.75, 1.3)),
            gamma=float(rng.uniform(0.75, 1.35)),
            banner=bool(rng.uniform() < 0.3),
            bit_depth=16 if rng.uniform() < 0.15 else 8,
            jpeg_quality=None,
        ).with_jpeg(rng)

    def with_jpeg(self, rng: np.random.Generator) -> RenderSettings:
        """Copy with a random JPEG quality (or none) for 8-bit images."""
        if self.bit_depth != 8 or rng.uniform() < 0.5:
            return self
        return replace(self, jpeg_quality=int(rng.integers(60, 96)))

    def to_dict(self) -> dict:
        """JSON-ready form."""
        return asdict(self)


def banner_rows(shape: tuple[int, int], settings: RenderSettings) -> int:
    """Rows the information banner adds below an image of `shape` (0 without banner)."""
    if not settings.banner:
        return 0
    return max(24, round(0.075 * shape[0]))


def _tilt_and_normal(h: np.ndarray, px: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    gy, gx = np.gradient(h, px)
    sec = np.sqrt(1.0 + gx * gx + gy * gy)
    return gx, gy, sec


def _valley_depth(h: np.ndarray, radius_px: float) -> np.ndarray:
    r = max(1, round(radius_px))
    yy, xx = np.mgrid[-r : r + 1, -r : r + 1]
    disk = (xx * xx + yy * yy) <= r * r
    if r > 6:
        # closing on a 2x downsampled map keeps the cost bounded for large radii
        small = h[::2, ::2]
        rs = max(1, r // 2)
        yy, xx = np.mgrid[-rs : rs + 1, -rs : rs + 1]
        d2 = (xx * xx + yy * yy) <= rs * rs
        c = ndimage.grey_closing(small, footprint=d2)
        c = cv2.resize(c.astype(np.float32), (h.shape[1], h.shape[0]), cv2.INTER_LINEAR)
        return np.maximum(c - h, 0.0)
    c = ndimage.grey_closing(h, footprint=disk)
    return np.maximum(c - h, 0.0)


def _detector_shadow(
    h: np.ndarray, px: float, azimuth_deg: float, elevation_deg: float
) -> np.ndarray:
    """Height (µm) by which terrain towards the detector rises above the line of sight.

    The map is rotated so the detector lies towards +x; along each row the
    horizon is ``H(x) = max_{x' > x} [h(x') - (x' - x) tan(el)]``, found with a
    reversed running maximum; the result ``max(H - h, 0)`` is rotated back.
    """
    ny, nx = h.shape
    diag = math.ceil(math.hypot(ny, nx)) + 2
    cx, cy = nx / 2.0, ny / 2.0
    m = cv2.getRotationMatrix2D((cx, cy), -azimuth_deg, 1.0)
    m[0, 2] += (diag - nx) / 2.0
    m[1, 2] += (diag - ny) / 2.0
    fill = float(np.min(h))
    big = cv2.warpAffine(
        h.astype(np.float32),
        m,
        (diag, diag),
        flags=cv2.INTER_LINEAR,
        borderMode=cv2.BORDER_CONSTANT,
        borderValue=fill,
    ).astype(np.float64)
    slope = math.tan(math.radians(max(elevation_deg, 1.0))) * px
    ramp = np.arange(diag) * slope
    g = big + ramp[None, :]
    horizon = np.maximum.accumulate(g[:, ::-1], axis=1)[:, ::-1] - ramp[None, :]
    depth = np.maximum(horizon - big, 0.0).astype(np.float32)
    inv = cv2.invertAffineTransform(m)
    back = cv2.warpAffine(depth, inv, (nx, ny), flags=cv2.INTER_LINEAR)
    return back.astype(np.float64)


def _draw_banner(width: int, rows: int, px: float, rng: np.random.Generator) -> np.ndarray:
    """A strip with made-up acquisition text and a scale bar, values in [0, 1]."""
    strip = np.zeros((rows, width), np.uint8)
    field_um = width * px
    nice = [0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500]
    bar_um = max([v for v in nice if v <= field_um / 4] or [nice[0]])
    bar_px = round(bar_um / px)
    kv = float(rng.choice([5.0, 10.0, 15.0, 20.0]))
    wd = float(rng.uniform(5, 15))
    mag = round(127000 / max(field_um, 1e-6) / 10) * 10
    text = f"SE {kv:.0f}kV  WD {wd:.1f}mm  x{mag}  FS-{int(rng.integers(100, 999))}"
    font = cv2.FONT_HERSHEY_SIMPLEX
    # text height about 40 % of the strip, shrunk to fit the left 60 % of the width
    (tw, th), _ = cv2.getTextSize(text, font, 1.0, 1)
    fs = min(0.4 * rows / th, 0.6 * width / tw)
    cv2.putText(strip, text, (max(2, rows // 6), int(rows * 0.65)), font, fs, 230, 1, cv2.LINE_AA)
    x1 = width - bar_px - max(4, rows // 3)
    y = int(rows * 0.72)
    # cv2.rectangle fills both end columns: bar_px pixels run from x1 to x1 + bar_px - 1
    cv2.rectangle(strip, (x1, y - max(2, rows // 10)), (x1 + bar_px - 1, y), 255, -1)
    label = f"{bar_um:g} um"
    (lw, lh), _ = cv2.getTextSize(label, font, 1.0, 1)
    ls = min(0.3 * rows / lh, 0.9 * max(bar_px, 10) / lw)
    cv2.putText(strip, label, (x1, int(rows * 0.42)), font, ls, 230, 1, cv2.LINE_AA)
    return strip.astype(np.float32) / 255.0


def render_sem(
    height_um: np.ndarray,
    pixel_size_um: float,
    settings: RenderSettings | None = None,
    *,
    seed: int = 0,
) -> np.ndarray:
    """Render a secondary-electron image of a height map.

    Parameters
    ----------
    height_um : ndarray (ny, nx)
        Heights in µm (NaN points are filled by the nearest valid height).
    pixel_size_um : float
        Lateral sampling (µm per pixel).
    settings : RenderSettings, optional
        Effects and their strengths (default :class:`RenderSettings`).
    seed : int
        Seed of the shot noise, scan jitter and banner text.

    Returns
    -------
    ndarray of float32, values in [0, 1]
        Shape ``(ny + banner_rows, nx)``: the banner, if any, is appended
        below the image. Values are quantised to the chosen bit depth.

    References
    ----------
    .. [1] L. Reimer, *Scanning Electron Microscopy*, 2nd ed., Springer, 1998.
    """
    s = settings or RenderSettings()
    h = np.asarray(height_um, dtype=np.float64)
    if h.ndim != 2 or min(h.shape) < 3:
        raise FractoInputError("The height map must be a 2-D array of at least 3 × 3 points.")
    px = float(pixel_size_um)
    if not (math.isfinite(px) and px > 0):
        raise FractoInputError("The pixel size must be a positive length in µm.")
    bad = ~np.isfinite(h)
    if bad.all():
        raise FractoInputError("The height map has no valid points to render.")
    if bad.any():
        idx = ndimage.distance_transform_edt(bad, return_distances=False, return_indices=True)
        h = h[tuple(idx)]
    rng = np.random.default_rng(seed)

    gx, gy, sec = _tilt_and_normal(h, px)
    signal = s.yield_base * np.minimum(sec, s.secant_cap)

    if s.edge_gain > 0:
        sig_px = max(s.edge_sigma_um / px, 0.8)
        lap = ndimage.gaussian_laplace(h, sig_px) / (px * px)
        e = np.maximum(-lap * s.edge_sigma_um, 0.0) * sec
        e = e / (1.0 + e)
        signal += s.yield_base * s.edge_gain * 4.0 * e
        if s.edge_glow_gain > 0 and s.edge_glow_um > 0:
            # secondaries escaping near an edge over the interaction range: a soft glow
            glow = ndimage.gaussian_filter(e, max(s.edge_glow_um / px, 0.5))
            signal += s.yield_base * s.edge_glow_gain * 4.0 * glow

    # collection: what the side detector sees of the emitted signal
    if s.detector_strength > 0:
        az = math.radians(s.detector_azimuth_deg)
        el = math.radians(s.detector_elevation_deg)
        d = (math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el))
        ndot = (-gx * d[0] - gy * d[1] + d[2]) / sec
        signal *= np.maximum(1.0 + s.detector_strength * (ndot - d[2]), 0.05)

    if s.detector_shadow > 0:
        depth = _detector_shadow(h, px, s.detector_azimuth_deg, s.detector_elevation_deg)
        soft = max(s.shadow_softness_um / px, 0.5)
        occl = 1.0 - np.exp(-ndimage.gaussian_filter(depth, soft) / max(s.shadow_softness_um, px))
        signal *= 1.0 - s.detector_shadow * occl

    if s.valley_strength > 0:
        occ = _valley_depth(h, s.valley_radius_um / px)
        signal *= 1.0 - s.valley_strength * (1.0 - np.exp(-occ / s.valley_depth_um))

    if s.shading_variation > 0:
        # slow variation of collection efficiency across the field (detector geometry,
        # slight charging): a smooth multiplicative gain, 4 x 4 random nodes
        # interpolated bicubically over the image
        nodes = 1.0 + s.shading_variation * rng.standard_normal((4, 4)).astype(np.float32)
        gain = cv2.resize(nodes, (h.shape[1], h.shape[0]), interpolation=cv2.INTER_CUBIC)
        signal *= np.maximum(gain, 0.2)

    if s.blur_um > 0:
        signal = ndimage.gaussian_filter(signal, s.blur_um / px)

    if s.line_jitter > 0:
        signal *= (1.0 + s.line_jitter * rng.standard_normal(signal.shape[0]))[:, None]

    if s.scan_noise > 0:
        # scan-line noise: gain fluctuations of the beam and amplifier along the fast
        # scan direction (rows), correlated over scan_noise_px pixels, unit RMS
        wn = rng.standard_normal(signal.shape)
        if s.scan_noise_px > 0:
            wn = ndimage.gaussian_filter1d(wn, s.scan_noise_px, axis=1)
            wn /= math.sqrt(1.0 / (2.0 * math.sqrt(math.pi) * s.scan_noise_px))
        signal *= np.maximum(1.0 + s.scan_noise * wn, 0.0)

    if s.dose is not None:
        lam = np.maximum(signal, 0.0) * s.dose
        signal = rng.poisson(lam).astype(np.float64) / s.dose

    if s.auto_level:
        # automatic levels as an SEM operator sets them: the range spans the
        # image and the median sits a little below mid-grey
        lo, med, hi = np.percentile(signal, [0.5, 50.0, 99.7])
        t = np.clip((signal - lo) / max(hi - lo, 1e-9), 0.0, 1.0)
        m = float(np.clip((med - lo) / max(hi - lo, 1e-9), 0.02, 0.98))
        signal = 0.03 + 0.94 * t ** (math.log(s.median_level) / math.log(m))
        signal = s.contrast * (signal - 0.5) + 0.5 + s.brightness
    else:
        signal = s.contrast * signal + s.brightness
    signal = np.clip(signal, 0.0, 1.0)
    if s.gamma != 1.0:
        signal = signal ** (1.0 / s.gamma)

    rows = banner_rows(h.shape, s)
    if rows:
        signal = np.vstack([signal, _draw_banner(h.shape[1], rows, px, rng)])

    levels = 255.0 if s.bit_depth == 8 else 65535.0
    q = np.round(signal * levels)
    if s.jpeg_quality is not None:
        ok, buf = cv2.imencode(
            ".jpg", q.astype(np.uint8), [cv2.IMWRITE_JPEG_QUALITY, int(s.jpeg_quality)]
        )
        if not ok:  # pragma: no cover - opencv failure
            raise RuntimeError("JPEG encoding failed")
        q = cv2.imdecode(buf, cv2.IMREAD_GRAYSCALE).astype(np.float64)
    return (q / levels).astype(np.float32)
