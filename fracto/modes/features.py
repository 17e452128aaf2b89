"""Region features of SEM fractographs (and height maps) for the mode classifier.

The image is first brought to a *working grid* on which one texture scale
spans a fixed number of pixels (:data:`WORK_SCALE_PX`), so that a feature
means the same thing at every magnification. The texture scale comes either
from the calibration (a physical scale in µm divided by the pixel size) or,
when the image has no calibration or the model is scale-free, from the image
itself: the lag at which the radially averaged autocorrelation of the lightly
smoothed image falls to one half (see :func:`estimate_texture_scale_px`).

On the working grid a filter bank is computed once, at three scales (¼, ½ and 1
texture scale), and pooled per square tile with block reductions; each tile
also carries the mean of every feature over its 3 × 3 neighbourhood of tiles
(``ctx_`` columns: the surroundings of a region). Tiles are
2 × 2 blocks of :data:`BLOCK_SCALES` texture scales each and overlap by half,
so each block (the unit of the mode map) is covered by up to four tiles.

Every feature has a one-line description in :data:`FEATURE_DESCRIPTIONS`; the
list changes only together with :data:`FEATURE_SET_VERSION`.

References
----------
.. [1] Haralick, R. M. (1979). Statistical and structural approaches to texture.
   Proc. IEEE 67(5), 786-804 (texture statistics pooled over regions).
.. [2] Ojala, T., Pietikäinen, M., Mäenpää, T. (2002). Multiresolution grey-scale and
   rotation invariant texture classification with local binary patterns. IEEE TPAMI
   24(7), 971-987 (uniform LBP, as in skimage.feature.local_binary_pattern).
.. [3] Bigün, J., Granlund, G. H. (1987). Optimal orientation detection of linear
   symmetry. Proc. ICCV, 433-438 (structure tensor and its coherence).
.. [4] Lindeberg, T. (1998). Feature detection with automatic scale selection.
   IJCV 30(2), 79-116 (scale-normalised derivatives and Hessian eigenvalues).
.. [5] ISO 25178-2 (2012) for Sq and Sdr of the height-map features.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from fracto.errors import FractoInputError

#: Changes whenever a feature is added, removed or computed differently.
FEATURE_SET_VERSION = "fracto-modes-2"

#: Texture scale on the working grid, in pixels.
WORK_SCALE_PX = 6.0
#: Filter scales as multiples of the texture scale.
SIGMA_FACTORS: tuple[float, ...] = (0.25, 0.5, 1.0)
#: Side of one block (the mode-map cell) in texture scales; a tile is 2 × 2 blocks.
BLOCK_SCALES = 8.0 / 3.0  # 16 px on the working grid
#: Zoom limits from the image to the working grid (never blow a small texture up more).
ZOOM_LIMITS = (1.0 / 32.0, 1.5)
#: Smallest working grid side (three blocks) that can be classified.
MIN_BLOCKS = 3
#: Append the 3 × 3-tile neighbourhood mean of every feature ("ctx_" columns).
CONTEXT = True

_SCALE_NAMES = ("s1", "s2", "s3")  # ¼, ½, 1 texture scale


def _describe() -> dict[str, str]:
    d: dict[str, str] = {}
    for name, frac in zip(_SCALE_NAMES, SIGMA_FACTORS, strict=True):
        at = f"at σ = {frac:g} texture scale"
        d[f"grad_mean_{name}"] = f"mean scale-normalised gradient magnitude {at}"
        d[f"grad_std_{name}"] = f"spread of the gradient magnitude {at}"
        d[f"log_mean_{name}"] = (
            f"mean scale-normalised Laplacian of Gaussian {at} (bright blobs < 0)"
        )
        d[f"log_std_{name}"] = f"spread of the Laplacian of Gaussian {at}"
        d[f"log_absmean_{name}"] = f"mean absolute Laplacian of Gaussian {at}"
        d[f"hess_min_mean_{name}"] = f"mean smaller Hessian eigenvalue {at} (bright ridges)"
        d[f"hess_max_mean_{name}"] = f"mean larger Hessian eigenvalue {at} (dark valleys)"
        d[f"hess_aniso_mean_{name}"] = f"mean Hessian anisotropy |λ1-λ2|/(|λ1|+|λ2|) {at}"
        d[f"ridge_frac_{name}"] = f"fraction of pixels on a bright ridge or edge {at}"
        d[f"coh_local_{name}"] = f"mean local structure-tensor coherence {at}"
        d[f"coh_tile_{name}"] = f"structure-tensor coherence of the whole tile {at}"
    d["int_mean"] = "tile mean of the robustly normalised intensity"
    d["int_std_s1"] = "intensity standard deviation in the tile after smoothing at ¼ scale"
    d["int_p10"] = "10th percentile of the smoothed intensity in the tile"
    d["int_p50"] = "median of the smoothed intensity in the tile"
    d["int_p90"] = "90th percentile of the smoothed intensity in the tile"
    d["int_skew"] = "skewness of the smoothed intensity in the tile (bright rims/edges > 0)"
    d["fine_std"] = "standard deviation of the detail below ¼ texture scale (noise, fine texture)"
    d["smooth_frac"] = "fraction of the tile with gradient below one tenth of the image median"
    for k in range(10):
        d[f"lbp_{k}"] = f"share of uniform local binary pattern code {k} (P=8, R=½ scale)"
    d["lbp_entropy"] = "entropy of the local binary pattern histogram in bits"
    d["spec_peak_frac"] = "share of the tile's power in its strongest spatial frequency"
    d["spec_peak_wavelength"] = "wavelength of the strongest spatial frequency in texture scales"
    d["spec_aniso"] = "anisotropy of the tile power spectrum (0 isotropic, 1 one direction)"
    d["int_rel_image"] = "tile median intensity minus the image median"
    return d


def _describe_height() -> dict[str, str]:
    return {
        "h_slope_mean": "mean surface slope |∇z| (dimensionless)",
        "h_slope_std": "spread of the surface slope",
        "h_sdr": "developed interfacial area ratio Sdr of the tile (ISO 25178-2), as a fraction",
        "h_sq_rel": "Sq of the tile after plane removal divided by the texture scale",
        "h_curv_abs": "mean |Laplacian| of the heights times the texture scale",
        "h_curv_mean": "mean Laplacian of the heights times the texture scale (cups > 0)",
        "h_planarity": "share of the tile's height variance explained by its best plane",
        "h_plane_tilt": "slope of the tile's best plane (dimensionless)",
    }


def _with_context(d: dict[str, str]) -> dict[str, str]:
    ctx = {f"ctx_{k}": f"mean over the 3 x 3 neighbouring tiles of: {v}" for k, v in d.items()}
    return {**d, **ctx}


_BASE = _describe()
_BASE_HEIGHT = _describe_height()
#: One line per image feature, in column order (tile features, then their context means).
FEATURE_DESCRIPTIONS: dict[str, str] = _with_context(_BASE)
#: One line per height-map feature (tile features, then context means).
HEIGHT_FEATURE_DESCRIPTIONS: dict[str, str] = _with_context(_BASE_HEIGHT)


def feature_names(*, with_height: bool = False) -> list[str]:
    """Column names of the feature matrix, in order."""
    base = list(_BASE) + (list(_BASE_HEIGHT) if with_height else [])
    return base + [f"ctx_{n}" for n in base] if CONTEXT else base


@dataclass(frozen=True)
class ScaleChoice:
    """How the texture scale of an image was chosen.

    Parameters
    ----------
    texture_scale_px : float
        Texture scale on the original image in pixels.
    zoom : float
        Resampling factor from the image to the working grid.
    basis : str
        ``"calibrated"`` (physical scale / pixel size) or ``"texture"``
        (autocorrelation of the image itself).
    scale_um : float or None
        The physical scale used when `basis` is ``"calibrated"``.
    note : str
        A sentence for the report.
    """

    texture_scale_px: float
    zoom: float
    basis: str
    scale_um: float | None
    note: str

    def to_dict(self) -> dict:
        return {
            "texture_scale_px": self.texture_scale_px,
            "zoom_to_working_grid": self.zoom,
            "basis": self.basis,
            "scale_um": self.scale_um,
            "note": self.note,
        }


@dataclass(frozen=True)
class RegionFeatures:
    """Features of the tiles of one image and the grid they sit on.

    Parameters
    ----------
    X : ndarray, shape (n_tiles, n_features)
        One row per tile, tiles in row-major order of the tile grid.
    names : list of str
        Column names.
    tile_grid : tuple of int
        (rows, columns) of the tile grid = block grid minus one each way.
    block_grid : tuple of int
        (rows, columns) of the block grid.
    block_px : float
        Block side in pixels of the *original* image.
    image_shape : tuple of int
        Shape of the original image.
    scale : ScaleChoice
        How the scale was chosen.
    """

    X: np.ndarray
    names: list[str]
    tile_grid: tuple[int, int]
    block_grid: tuple[int, int]
    block_px: float
    image_shape: tuple[int, int]
    scale: ScaleChoice

    def block_weights(self) -> np.ndarray:
        """Share of each block that lies inside the image (edge blocks are partial)."""
        return block_weights(self.block_grid, self.block_px, self.image_shape)


def block_weights(
    block_grid: tuple[int, int], block_px: float, image_shape: tuple[int, int]
) -> np.ndarray:
    """Area share of each block of the grid that falls inside the image."""
    out = []
    for nb, n in zip(block_grid, image_shape, strict=True):
        edges = np.arange(nb + 1) * block_px
        inside = np.clip(np.minimum(edges[1:], n) - edges[:-1], 0, None) / block_px
        out.append(inside)
    return np.outer(out[0], out[1])


def normalise_intensity(
    image: np.ndarray, *, low_percentile: float = 1.0, high_percentile: float = 99.0
) -> np.ndarray:
    """Map the robust intensity range of an image to [0, 1] (float32).

    Brightness and contrast settings of the microscope then do not change
    the features. NaN pixels are set to the median.

    Raises
    ------
    FractoInputError
        If the image is blank (no contrast between the percentiles).
    """
    img = np.asarray(image, dtype=np.float32)
    if img.ndim != 2:
        raise FractoInputError("The image must be a single grey channel (2-D array).")
    finite = np.isfinite(img)
    if not finite.any():
        raise FractoInputError("The image holds no valid pixels.")
    vals = img[finite]
    lo, hi = np.percentile(vals, [low_percentile, high_percentile])
    if not hi - lo > 1e-3 * max(abs(float(hi)), 1e-6) or hi - lo < 1e-6:
        raise FractoInputError("The image is blank or saturated: it has no contrast to classify.")
    out = (img - lo) / (hi - lo)
    out[~finite] = float(np.median((vals - lo) / (hi - lo)))
    return np.clip(out, 0.0, 1.0).astype(np.float32)


def estimate_texture_scale_px(image: np.ndarray, *, max_side: int = 512) -> float:
    """Texture scale of an image: the radius where its autocorrelation falls to ½.

    The image is smoothed with σ = 1 px (to keep pixel noise and JPEG blocks
    out of the estimate), de-meaned, windowed (Hann) and its autocorrelation
    obtained by the Wiener-Khinchin theorem (inverse FFT of the power
    spectrum); the radially averaged autocorrelation, normalised to 1 at lag
    zero, is searched for its first crossing of 0.5 (linear interpolation).
    Large images are reduced by block averaging to at most `max_side` first and
    the result scaled back, so a coarse texture is still seen whole.

    Parameters
    ----------
    image : ndarray
        Grey image (any range).
    max_side : int
        Longest side analysed.

    Returns
    -------
    float
        Texture scale in pixels of `image` (at least 1).

    References
    ----------
    .. [1] Wiener-Khinchin theorem; the 0.5 threshold is common practice for a
       correlation length (cf. the 0.2 threshold of Sal in ISO 25178-2).
    """
    img = np.asarray(image, dtype=np.float32)
    factor = max(1, int(np.ceil(max(img.shape) / max_side)))
    if factor > 1:
        ny, nx = (s // factor * factor for s in img.shape)
        img = img[:ny, :nx].reshape(ny // factor, factor, nx // factor, factor).mean(axis=(1, 3))
    r = _acf_half_radius(img)
    if factor > 1 and r < 2.0:
        # texture finer than the reduced grid resolves: look at a full-resolution crop
        full = np.asarray(image, dtype=np.float32)
        cy, cx = (s // 2 for s in full.shape)
        h = max_side // 2
        crop = full[max(cy - h, 0) : cy + h, max(cx - h, 0) : cx + h]
        return max(1.0, _acf_half_radius(crop))
    return max(1.0, r * factor)


def _acf_half_radius(img: np.ndarray) -> float:
    from scipy import fft

    g = ndimage.gaussian_filter(img, 1.0)
    g = g - g.mean()
    wy = np.hanning(g.shape[0]).astype(np.float32)
    wx = np.hanning(g.shape[1]).astype(np.float32)
    g = g * wy[:, None] * wx[None, :]
    shape = (2 * g.shape[0], 2 * g.shape[1])  # zero padding: no wrap-around
    f = fft.rfft2(g, s=shape)
    acf = fft.irfft2(np.abs(f) ** 2, s=shape)
    if not acf[0, 0] > 0:
        return 1.0
    acf = acf / acf[0, 0]
    ny, nx = shape
    ky = np.minimum(np.arange(ny), ny - np.arange(ny))
    kx = np.minimum(np.arange(nx), nx - np.arange(nx))
    rr = np.hypot(ky[:, None], kx[None, :])
    rmax = min(img.shape) // 2
    ri = np.rint(rr).astype(int)
    sel = ri <= rmax
    prof = np.bincount(ri[sel], weights=acf[sel], minlength=rmax + 1)
    cnt = np.bincount(ri[sel], minlength=rmax + 1)
    prof = prof / np.maximum(cnt, 1)
    below = np.nonzero(prof < 0.5)[0]
    if below.size == 0:
        return float(rmax)
    i = int(below[0])
    if i == 0:
        return 1.0
    a, b = prof[i - 1], prof[i]
    return float(i - 1 + (a - 0.5) / (a - b))


def choose_scale(
    image: np.ndarray,
    *,
    pixel_size_um: float | None,
    scale_um: float | None,
) -> ScaleChoice:
    """Pick the texture scale of an image and the zoom to the working grid.

    With a model scale in µm (`scale_um`) and a calibrated image, the texture
    scale is ``scale_um / pixel_size_um`` pixels; otherwise it is estimated from
    the image (:func:`estimate_texture_scale_px`).
    """
    if scale_um is not None and pixel_size_um is not None:
        s_px = scale_um / pixel_size_um
        basis, note = (
            "calibrated",
            (f"Texture scale {scale_um:g} um from the model and the pixel size ({s_px:.2f} px)."),
        )
    else:
        s_px = estimate_texture_scale_px(image)
        basis = "texture"
        why = "the image has no calibration" if scale_um is not None else "the model is scale-free"
        note = (
            f"Texture scale {s_px:.2f} px estimated from the image autocorrelation "
            f"(half-correlation radius) because {why}."
        )
    zoom = float(np.clip(WORK_SCALE_PX / s_px, *ZOOM_LIMITS))
    return ScaleChoice(float(s_px), zoom, basis, scale_um if basis == "calibrated" else None, note)


def _resample(arr: np.ndarray, zoom: float) -> np.ndarray:
    import cv2

    if abs(zoom - 1.0) < 1e-6:
        return np.ascontiguousarray(arr, dtype=np.float32)
    ny, nx = arr.shape
    size = (max(1, round(nx * zoom)), max(1, round(ny * zoom)))
    interp = cv2.INTER_AREA if zoom < 1 else cv2.INTER_LINEAR
    return cv2.resize(np.ascontiguousarray(arr, dtype=np.float32), size, interpolation=interp)


def _blocks(m: np.ndarray, b: int) -> np.ndarray:
    """Block sums (nby, nbx) of a map whose sides are multiples of b."""
    ny, nx = m.shape
    return m.reshape(ny // b, b, nx // b, b).sum(axis=(1, 3), dtype=np.float64)


def _tiles(bs: np.ndarray) -> np.ndarray:
    """Sums over 2 × 2 blocks (tiles) from block sums; flattened row-major."""
    t = bs[:-1, :-1] + bs[1:, :-1] + bs[:-1, 1:] + bs[1:, 1:]
    return t.reshape(-1)


class _Pool:
    """Tile means/standard deviations of maps on the padded working grid."""

    def __init__(self, b: int):
        self.b = b
        self.n = 4.0 * b * b

    def mean(self, m: np.ndarray) -> np.ndarray:
        return _tiles(_blocks(m, self.b)) / self.n

    def mean_std(self, m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        mu = self.mean(m)
        m2 = _tiles(_blocks(m.astype(np.float64) ** 2, self.b)) / self.n
        return mu, np.sqrt(np.clip(m2 - mu**2, 0, None))


def _tile_windows(m: np.ndarray, b: int) -> np.ndarray:
    """(n_tiles, 2b, 2b) view of the overlapping tiles (step b)."""
    from numpy.lib.stride_tricks import sliding_window_view

    w = sliding_window_view(m, (2 * b, 2 * b))[::b, ::b]
    return w.reshape(-1, 2 * b, 2 * b)


def region_features(
    image: np.ndarray,
    *,
    pixel_size_um: float | None = None,
    scale_um: float | None = None,
    height_um: np.ndarray | None = None,
) -> RegionFeatures:
    """Feature vectors of the overlapping tiles of an SEM image.

    Parameters
    ----------
    image : ndarray, shape (ny, nx)
        Grey image (any range; normalised by robust percentiles here).
    pixel_size_um : float or None
        Pixel size in µm, or None when uncalibrated.
    scale_um : float or None
        Physical texture scale of the model in µm; None for a scale-free model
        (texture scale from the image itself).
    height_um : ndarray or None
        Height map on the same grid as `image` (µm); adds the height features.
        Needs `pixel_size_um`.

    Returns
    -------
    RegionFeatures

    Raises
    ------
    FractoInputError
        If the image is blank or too small for three blocks at its texture scale,
        or the height map does not match.

    References
    ----------
    See the module docstring.
    """
    img = normalise_intensity(image)
    if min(img.shape) < 32:
        raise FractoInputError(
            f"The image ({img.shape[1]} x {img.shape[0]} px) is too small to classify; "
            "it needs at least 32 px on each side."
        )
    scale = choose_scale(img, pixel_size_um=pixel_size_um, scale_um=scale_um)
    work = _resample(img, scale.zoom)
    s = scale.texture_scale_px * scale.zoom  # texture scale on the working grid
    b = max(4, round(BLOCK_SCALES * s))
    nby, nbx = (int(np.ceil(n / b)) for n in work.shape)
    if min(nby, nbx) < MIN_BLOCKS:
        raise FractoInputError(
            f"The image ({img.shape[1]} x {img.shape[0]} px) is too small to classify at its "
            f"texture scale ({scale.texture_scale_px:.1f} px): it needs at least "
            f"{MIN_BLOCKS} regions of {b / scale.zoom:.0f} px on each side."
        )
    pad = ((0, nby * b - work.shape[0]), (0, nbx * b - work.shape[1]))
    w = np.pad(work, pad, mode="reflect") if any(p[1] for p in pad) else work
    cols = _image_columns(w, s, b)
    names = list(_BASE)
    if height_um is not None:
        if pixel_size_um is None:
            raise FractoInputError(
                "Height-map features need the lateral pixel size; give --pixel-size."
            )
        h = np.asarray(height_um, dtype=np.float64)
        if h.shape != img.shape:
            raise FractoInputError(
                f"The height map ({h.shape[1]} x {h.shape[0]}) does not match the image "
                f"({img.shape[1]} x {img.shape[0]})."
            )
        hw = _resample(np.where(np.isfinite(h), h, np.nanmedian(h)), scale.zoom).astype(np.float64)
        hw = np.pad(hw, pad, mode="reflect") if any(p[1] for p in pad) else hw
        cols.update(_height_columns(hw, s, b, pixel_size_um / scale.zoom))
        names += list(_BASE_HEIGHT)
    X = np.column_stack([cols[n] for n in names]).astype(np.float32)
    X[~np.isfinite(X)] = 0.0
    if CONTEXT:
        X = np.hstack([X, context_mean(X, (nby - 1, nbx - 1))])
        names = names + [f"ctx_{n}" for n in names]
    return RegionFeatures(
        X=X,
        names=names,
        tile_grid=(nby - 1, nbx - 1),
        block_grid=(nby, nbx),
        block_px=b / scale.zoom,
        image_shape=img.shape,
        scale=scale,
    )


def context_mean(X: np.ndarray, tile_grid: tuple[int, int]) -> np.ndarray:
    """Mean of each feature over the 3 × 3 tiles centred on each tile (fewer at edges)."""
    ty, tx = tile_grid
    a = X.reshape(ty, tx, -1).astype(np.float64)
    num = ndimage.uniform_filter(a, size=(3, 3, 1), mode="constant")
    den = ndimage.uniform_filter(np.ones((ty, tx, 1)), size=(3, 3, 1), mode="constant")
    return (num / den).reshape(ty * tx, -1).astype(np.float32)


def _image_columns(w: np.ndarray, s: float, b: int) -> dict[str, np.ndarray]:
    from skimage.feature import local_binary_pattern

    pool = _Pool(b)
    cols: dict[str, np.ndarray] = {}
    eps = 1e-6
    g1 = None
    grad_med = None
    for name, frac in zip(_SCALE_NAMES, SIGMA_FACTORS, strict=True):
        sig = max(0.7, frac * s)
        g = ndimage.gaussian_filter(w, sig)
        gy, gx = np.gradient(g)
        gy *= sig
        gx *= sig
        gm = np.hypot(gx, gy)
        hyy, hyx = np.gradient(gy)
        hxy, hxx = np.gradient(gx)
        hxy = 0.5 * (hxy + hyx) * sig
        hxx *= sig
        hyy *= sig
        tr = hxx + hyy
        disc = np.sqrt((0.5 * (hxx - hyy)) ** 2 + hxy**2)
        lmin, lmax = 0.5 * tr - disc, 0.5 * tr + disc
        cols[f"grad_mean_{name}"], cols[f"grad_std_{name}"] = pool.mean_std(gm)
        cols[f"log_mean_{name}"], cols[f"log_std_{name}"] = pool.mean_std(tr)
        cols[f"log_absmean_{name}"] = pool.mean(np.abs(tr))
        cols[f"hess_min_mean_{name}"] = pool.mean(lmin)
        cols[f"hess_max_mean_{name}"] = pool.mean(lmax)
        cols[f"hess_aniso_mean_{name}"] = pool.mean(2 * disc / (np.abs(lmin) + np.abs(lmax) + eps))
        thr = 2.0 * float(np.median(np.abs(lmin))) + eps
        cols[f"ridge_frac_{name}"] = pool.mean((lmin < -thr).astype(np.float32))
        jxx, jyy, jxy = gx * gx, gy * gy, gx * gy
        si = 2.0 * sig
        sxx = ndimage.gaussian_filter(jxx, si)
        syy = ndimage.gaussian_filter(jyy, si)
        sxy = ndimage.gaussian_filter(jxy, si)
        coh = np.sqrt((sxx - syy) ** 2 + 4 * sxy**2) / (sxx + syy + eps)
        cols[f"coh_local_{name}"] = pool.mean(coh)
        txx, tyy, txy = pool.mean(jxx), pool.mean(jyy), pool.mean(jxy)
        cols[f"coh_tile_{name}"] = np.sqrt((txx - tyy) ** 2 + 4 * txy**2) / (txx + tyy + eps)
        if g1 is None:
            g1 = g
            grad_med = float(np.median(gm)) + eps
            cols["smooth_frac"] = pool.mean((gm < 0.1 * grad_med).astype(np.float32))
    assert g1 is not None
    cols["int_mean"] = pool.mean(w)
    mu, sd = pool.mean_std(g1)
    cols["int_std_s1"] = sd
    m3 = pool.mean((g1.astype(np.float64)) ** 3)
    cols["int_skew"] = (m3 - 3 * mu * sd**2 - mu**3) / (sd**3 + eps)
    cols["fine_std"] = pool.mean_std(w - g1)[1]
    tiles = _tile_windows(g1, b).reshape(-1, 4 * b * b)
    p10, p50, p90 = np.percentile(tiles, [10, 50, 90], axis=1)
    cols["int_p10"], cols["int_p50"], cols["int_p90"] = p10, p50, p90
    cols["int_rel_image"] = p50 - float(np.median(g1))
    radius = max(1.0, 0.5 * s)
    g8 = np.clip(g1 * 255.0 + 0.5, 0, 255).astype(np.uint8)
    lbp = local_binary_pattern(g8, 8, radius, method="uniform").astype(np.int8)
    hist = np.column_stack([pool.mean((lbp == k).astype(np.float32)) for k in range(10)])
    for k in range(10):
        cols[f"lbp_{k}"] = hist[:, k]
    p = np.clip(hist, 1e-12, None)
    cols["lbp_entropy"] = -(hist * np.log2(p)).sum(axis=1)
    cols.update(_spectral_columns(w, b, s))
    return cols


def _spectral_columns(w: np.ndarray, b: int, s: float) -> dict[str, np.ndarray]:
    from scipy import fft

    t = _tile_windows(w, b).astype(np.float32)
    n = t.shape[1]
    t = t - t.mean(axis=(1, 2), keepdims=True)
    win = np.hanning(n).astype(np.float32)
    t = t * win[:, None] * win[None, :]
    p = np.abs(fft.rfft2(t, axes=(1, 2))) ** 2
    ky = np.fft.fftfreq(n)[:, None]
    kx = np.fft.rfftfreq(n)[None, :]
    kr = np.hypot(ky, kx) * n  # cycles per tile
    weight = np.where(kx == 0, 1.0, 2.0)  # rfft half-plane counts twice off axis
    valid = (kr >= 1.5).astype(np.float32) * weight
    pw = p * valid
    tot = pw.sum(axis=(1, 2)) + 1e-12
    flat = pw.reshape(pw.shape[0], -1)
    idx = flat.argmax(axis=1)
    peak = flat[np.arange(flat.shape[0]), idx] / tot
    krf = np.broadcast_to(kr, p.shape[1:]).reshape(-1)
    wavelength = n / np.maximum(krf[idx], 1e-6) / s
    # spectral anisotropy from the second moments of the power over frequency
    kyy = np.broadcast_to(ky * ky, p.shape[1:])
    kxx = np.broadcast_to(kx * kx, p.shape[1:])
    kxy = np.broadcast_to(ky * kx, p.shape[1:])
    myy = (pw * kyy).sum(axis=(1, 2)) / tot
    mxx = (pw * kxx).sum(axis=(1, 2)) / tot
    # P(k) = P(-k) and kx*ky keeps its sign under k -> -k, so the half plane suffices
    mxy = (pw * kxy).sum(axis=(1, 2)) / tot
    aniso = np.sqrt((mxx - myy) ** 2 + 4 * mxy**2) / (mxx + myy + 1e-12)
    return {"spec_peak_frac": peak, "spec_peak_wavelength": wavelength, "spec_aniso": aniso}


def _height_columns(h: np.ndarray, s: float, b: int, px_um: float) -> dict[str, np.ndarray]:
    pool = _Pool(b)
    s_um = s * px_um
    gy, gx = np.gradient(h, px_um)
    slope = np.hypot(gx, gy)
    cols: dict[str, np.ndarray] = {}
    cols["h_slope_mean"], cols["h_slope_std"] = pool.mean_std(slope)
    cols["h_sdr"] = pool.mean(np.sqrt(1.0 + slope**2)) - 1.0
    hs = ndimage.gaussian_filter(h, max(0.7, 0.5 * s))
    lap = np.gradient(np.gradient(hs, px_um, axis=0), px_um, axis=0) + np.gradient(
        np.gradient(hs, px_um, axis=1), px_um, axis=1
    )
    cols["h_curv_abs"] = pool.mean(np.abs(lap)) * s_um
    cols["h_curv_mean"] = pool.mean(lap) * s_um
    # least-squares plane per tile with a fixed design matrix (centred coordinates)
    t = _tile_windows(h, b).reshape(-1, 4 * b * b)
    n = 2 * b
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float64)
    xx = (xx - xx.mean()).reshape(-1) * px_um
    yy = (yy - yy.mean()).reshape(-1) * px_um
    tc = t - t.mean(axis=1, keepdims=True)
    ax = tc @ xx / (xx @ xx)
    ay = tc @ yy / (yy @ yy)
    resid = tc - ax[:, None] * xx[None, :] - ay[:, None] * yy[None, :]
    var_t = (tc**2).mean(axis=1)
    var_r = (resid**2).mean(axis=1)
    cols["h_sq_rel"] = np.sqrt(var_r) / s_um
    cols["h_planarity"] = 1.0 - var_r / (var_t + 1e-30)
    cols["h_plane_tilt"] = np.hypot(ax, ay)
    return cols
