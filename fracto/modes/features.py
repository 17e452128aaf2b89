"""Region features of SEM fractographs (and height maps) for the mode classifier.

The image is first brought to a *working grid* on which one texture scale
spans a fixed number of pixels (:data:`WORK_SCALE_PX`), so that a feature
means the same thing at every magnification. The texture scale comes either
from the calibration (a physical scale in µm divided by the pixel size) or,
when the image has no calibration or the model is scale-free, from the image
itself: the lag at which the radially averaged autocorrelation of the lightly
smoothed image falls to one half (see :func:`estimate_texture_scale_px`).

On the working grid a filter bank is computed once, at four scales (¼, ½, 1
and 2 texture scales), and pooled per square tile with block reductions; the
coarse scales are computed on the working grid reduced by block averaging
(2^k px into one, as long as σ stays at least 1.5 reduced pixels), which gives
the same tiles at a fraction of the cost. Filters are OpenCV float32
(Gaussian blur, central differences); tile quantiles come from per-block
intensity histograms. Besides gradient, Laplacian, Hessian, structure-tensor,
intensity, local-binary-pattern and spectral statistics, a tile carries the
orientation coherence of its fine lines (river lines fan out, striations are
parallel) and the distance to the nearest ridge or valley line (the size of
flat facets). Each tile also carries the mean of every feature over its 3 × 3
and its 7 × 7 neighbourhood of tiles (``ctx_`` and ``ctx7_`` columns: the
surroundings of a region). Tiles are 2 × 2 blocks of :data:`BLOCK_SCALES`
texture scales each and overlap by half, so each block (the unit of the mode
map) is covered by up to four tiles.

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
.. [6] Burt, P. J., Adelson, E. H. (1983). The Laplacian pyramid as a compact image
   code. IEEE Trans. Commun. 31(4), 532-540 (filtering coarse scales on reduced grids).
.. [7] Borgefors, G. (1986). Distance transformations in digital images. CVGIP 34,
   344-371 (distance to the nearest line pixel, as in cv2.distanceTransform).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from fracto.errors import FractoInputError

#: Changes whenever a feature is added, removed or computed differently.
FEATURE_SET_VERSION = "fracto-modes-3"

#: Texture scale on the working grid, in pixels.
WORK_SCALE_PX = 6.0
#: Filter scales as multiples of the texture scale.
SIGMA_FACTORS: tuple[float, ...] = (0.25, 0.5, 1.0, 2.0)
#: Side of one block (the mode-map cell) in texture scales; a tile is 2 × 2 blocks.
BLOCK_SCALES = 8.0 / 3.0  # 16 px on the working grid
#: Zoom limits from the image to the working grid (never blow a small texture up more).
ZOOM_LIMITS = (1.0 / 32.0, 1.5)
#: Smallest working grid side (three blocks) that can be classified.
MIN_BLOCKS = 3
#: Append the 3 × 3- and 7 × 7-tile neighbourhood means of every feature
#: ("ctx_" and "ctx7_" columns).
CONTEXT = True
#: Neighbourhood sides (in tiles) of the context columns and their name prefixes.
CONTEXT_SIZES: tuple[tuple[int, str], ...] = ((3, "ctx_"), (7, "ctx7_"))
#: Smallest Gaussian σ, in reduced pixels, a coarse scale is filtered at after reduction.
MIN_REDUCED_SIGMA = 1.5
#: Largest reduction factor of the working grid for the coarse scales.
MAX_REDUCTION = 8
#: Intensity histogram bins of the tile quantiles.
QUANTILE_BINS = 128

_SCALE_NAMES = ("s1", "s2", "s3", "s4")  # ¼, ½, 1, 2 texture scales


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
    for name in ("s1", "s2"):
        frac = SIGMA_FACTORS[_SCALE_NAMES.index(name)]
        d[f"line_coh_{name}"] = (
            f"orientation coherence of the tile's ridge and valley lines at σ = {frac:g} "
            "texture scale (1 parallel, 0 fanned or random)"
        )
    d["line_align_s1_s3"] = (
        "cosine of twice the angle between the fine lines (¼ scale) and the coarse "
        "gradient (1 scale): -1 lines along coarse structures, +1 across them"
    )
    d["facet_dist_mean"] = (
        "mean distance to the nearest ridge or valley line at ½ scale, in texture scales"
    )
    d["facet_dist_max"] = (
        "largest distance to a ridge or valley line at ½ scale in the tile, in texture scales"
    )
    d["facet_dist_mean_s3"] = (
        "mean distance to the nearest ridge or valley line at 1 scale, in texture scales"
    )
    d["facet_interior_frac"] = (
        "share of the tile farther than ½ texture scale from a line at 1 scale (facet interiors)"
    )
    d["facet_line_frac_s1"] = (
        "share of the facet interiors on a ridge or valley line at ¼ scale (river lines)"
    )
    d["facet_grad_rel_s1"] = (
        "mean gradient at ¼ scale in the facet interiors over its tile mean (flat facets < 1)"
    )
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
    out = dict(d)
    for size, prefix in CONTEXT_SIZES:
        out.update(
            {
                f"{prefix}{k}": f"mean over the {size} x {size} neighbouring tiles of: {v}"
                for k, v in d.items()
            }
        )
    return out


_BASE = _describe()
_BASE_HEIGHT = _describe_height()
#: One line per image feature, in column order (tile features, then their context means).
FEATURE_DESCRIPTIONS: dict[str, str] = _with_context(_BASE)
#: One line per height-map feature (tile features, then context means).
HEIGHT_FEATURE_DESCRIPTIONS: dict[str, str] = _with_context(_BASE_HEIGHT)


def feature_names(*, with_height: bool = False) -> list[str]:
    """Column names of the feature matrix, in order."""
    base = list(_BASE) + (list(_BASE_HEIGHT) if with_height else [])
    return _context_names(base) if CONTEXT else base


def _context_names(base: list[str]) -> list[str]:
    return base + [f"{prefix}{n}" for _, prefix in CONTEXT_SIZES for n in base]


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


def _tiles(bs: np.ndarray) -> np.ndarray:
    """Sums over 2 × 2 blocks (tiles) from block sums; flattened row-major."""
    t = bs[:-1, :-1] + bs[1:, :-1] + bs[:-1, 1:] + bs[1:, 1:]
    return t.reshape(-1)


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
        grid = (nby - 1, nbx - 1)
        X = np.hstack([X] + [context_mean(X, grid, size=k) for k, _ in CONTEXT_SIZES])
        names = _context_names(names)
    return RegionFeatures(
        X=X,
        names=names,
        tile_grid=(nby - 1, nbx - 1),
        block_grid=(nby, nbx),
        block_px=b / scale.zoom,
        image_shape=img.shape,
        scale=scale,
    )


def context_mean(X: np.ndarray, tile_grid: tuple[int, int], *, size: int = 3) -> np.ndarray:
    """Mean of each feature over the size × size tiles centred on each tile (fewer at edges)."""
    ty, tx = tile_grid
    a = X.reshape(ty, tx, -1).astype(np.float64)
    num = ndimage.uniform_filter(a, size=(size, size, 1), mode="constant")
    den = ndimage.uniform_filter(np.ones((ty, tx, 1)), size=(size, size, 1), mode="constant")
    return (num / den).reshape(ty * tx, -1).astype(np.float32)


def _blur(m: np.ndarray, sigma: float) -> np.ndarray:
    import cv2

    return cv2.GaussianBlur(m, (0, 0), sigmaX=sigma, sigmaY=sigma, borderType=cv2.BORDER_REFLECT)


#: Five-point central difference stencils (correlation order, offsets -2..2): errors of
#: order h^4, so derivatives stay accurate when σ is only 1.5 px on a reduced grid.
_D1 = np.array([1.0, -8.0, 0.0, 8.0, -1.0], np.float32) / 12.0
_D2 = np.array([-1.0, 16.0, -30.0, 16.0, -1.0], np.float32) / 12.0
_D0 = np.array([0.0, 0.0, 1.0, 0.0, 0.0], np.float32)


def _diff(m: np.ndarray, axis: int, scale: float, *, order: int = 1) -> np.ndarray:
    """First or second derivative along `axis` (five-point stencil) times `scale`."""
    import cv2

    k = (_D1 if order == 1 else _D2) * np.float32(scale)
    kx, ky = (k, _D0) if axis == 1 else (_D0, k)
    return cv2.sepFilter2D(m, cv2.CV_32F, kx, ky, borderType=cv2.BORDER_REFLECT)


def _reduce(m: np.ndarray, f: int) -> np.ndarray:
    """Block mean over f × f pixels (the sides are multiples of f)."""
    import cv2

    if f == 1:
        return m
    ny, nx = m.shape
    return cv2.resize(m, (nx // f, ny // f), interpolation=cv2.INTER_AREA)


def _reduction(sig: float, b: int) -> int:
    """Largest power of two that keeps σ ≥ MIN_REDUCED_SIGMA and whole blocks of ≥ 2 px."""
    f = 1
    while (
        2 * f <= MAX_REDUCTION
        and sig / (2 * f) >= MIN_REDUCED_SIGMA
        and b % (2 * f) == 0
        and b // (2 * f) >= 2
    ):
        f *= 2
    return f


def _median(m: np.ndarray) -> float:
    step = 2 if m.size > 250_000 else 1
    return float(np.median(m[::step, ::step]))


def _tile_quantiles(g: np.ndarray, b: int, qs: tuple[float, ...]) -> list[np.ndarray]:
    """Quantiles of [0, 1] values per tile from per-block histograms (linear in a bin)."""
    nb = QUANTILE_BINS
    ny, nx = g.shape
    nby, nbx = ny // b, nx // b
    q = np.minimum((np.clip(g, 0.0, 1.0) * nb).astype(np.int32), nb - 1)
    blk = (np.arange(ny) // b)[:, None] * nbx + (np.arange(nx) // b)[None, :]
    h = np.bincount((blk * nb + q).ravel(), minlength=nby * nbx * nb).reshape(nby, nbx, nb)
    t = (h[:-1, :-1] + h[1:, :-1] + h[:-1, 1:] + h[1:, 1:]).reshape(-1, nb)
    cum = np.cumsum(t, axis=1)
    n = cum[:, -1:].astype(np.float64)
    out = []
    rows = np.arange(t.shape[0])
    for p in qs:
        target = p * n[:, 0]
        i = np.minimum((cum < target[:, None]).sum(axis=1), nb - 1)
        below = np.where(i > 0, cum[rows, np.maximum(i - 1, 0)], 0)
        frac = (target - below) / np.maximum(t[rows, i], 1)
        out.append((i + np.clip(frac, 0.0, 1.0)) / nb)
    return out


def _lbp_uniform(g8: np.ndarray, radius: float) -> np.ndarray:
    """Rotation-invariant uniform LBP codes 0..9 (P = 8), bilinear neighbours.

    Same definition as skimage.feature.local_binary_pattern(method="uniform"):
    a neighbour counts when it is at least the centre; codes with at most two
    0/1 transitions around the circle are their number of ones, others are 9.
    """
    import cv2

    ny, nx = g8.shape
    ones = np.zeros((ny, nx), np.uint8)
    trans = np.zeros((ny, nx), np.uint8)
    first = prev = None
    for p in range(8):
        a = 2.0 * np.pi * p / 8
        dy, dx = -radius * np.sin(a), radius * np.cos(a)
        M = np.array([[1.0, 0.0, dx], [0.0, 1.0, dy]], np.float32)
        nb = cv2.warpAffine(
            g8,
            M,
            (nx, ny),
            flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
            borderMode=cv2.BORDER_REFLECT,
        )
        bit = (nb >= g8 - 1e-4).view(np.uint8)
        ones += bit
        if prev is None:
            first = bit
        else:
            trans += bit ^ prev
        prev = bit
    trans += first ^ prev
    return np.where(trans <= 2, ones, 9).astype(np.int32)


class _Pool:
    """Tile means/standard deviations of maps on the padded (possibly reduced) grid."""

    def __init__(self, b: int):
        self.b = b

    def blocks(self, m: np.ndarray) -> np.ndarray:
        return _reduce(np.ascontiguousarray(m, dtype=np.float32), self.b).astype(np.float64)

    def mean(self, m: np.ndarray) -> np.ndarray:
        bs = self.blocks(m)
        return 0.25 * _tiles(bs)

    def mean_std(self, m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        m = np.ascontiguousarray(m, dtype=np.float32)
        mu = self.mean(m)
        m2 = self.mean(m * m)
        return mu, np.sqrt(np.clip(m2 - mu**2, 0, None))

    def max(self, m: np.ndarray) -> np.ndarray:
        b = self.b
        ny, nx = m.shape
        bs = m.reshape(ny // b, b, nx // b, b).max(axis=(1, 3))
        t = np.maximum(np.maximum(bs[:-1, :-1], bs[1:, :-1]), np.maximum(bs[:-1, 1:], bs[1:, 1:]))
        return t.reshape(-1)


def _expand(mask: np.ndarray, f: int) -> np.ndarray:
    """A mask of the grid reduced by f back on the full grid (each pixel f × f times)."""
    if f == 1:
        return mask
    return np.repeat(np.repeat(mask, f, axis=0), f, axis=1)


def _facet_distance(mask: np.ndarray, f: int, s: float) -> np.ndarray:
    """Distance (texture scales) of every pixel to the nearest True pixel of `mask`."""
    import cv2

    src = np.ascontiguousarray(~mask, dtype=np.uint8)
    if not mask.any():
        return np.full(mask.shape, 16.0, np.float32)
    d = cv2.distanceTransform(src, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    return np.minimum(d * (f / s), 16.0).astype(np.float32)


def _image_columns(w: np.ndarray, s: float, b: int) -> dict[str, np.ndarray]:
    w = np.ascontiguousarray(w, dtype=np.float32)
    cols: dict[str, np.ndarray] = {}
    eps = 1e-6
    g1 = None
    line_vec: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    grad_vec: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for name, frac in zip(_SCALE_NAMES, SIGMA_FACTORS, strict=True):
        sig = max(0.7, frac * s)
        f = 1 if name == "s1" else _reduction(sig, b)
        pool = _Pool(b // f)
        d = _reduce(w, f)
        sd = float(np.sqrt(max(sig**2 - (f * f - 1) / 12.0, 0.25))) / f
        sn = sig / f  # scale normalisation in reduced pixels
        g = _blur(d, sd)
        gx, gy = _diff(g, 1, sn), _diff(g, 0, sn)
        gm = cv2_magnitude(gx, gy)
        hxx, hyy = _diff(g, 1, sn * sn, order=2), _diff(g, 0, sn * sn, order=2)
        hxy = _diff(gx, 0, sn)
        tr = hxx + hyy
        dxy = hxx - hyy
        disc = 0.5 * cv2_magnitude(dxy, 2.0 * hxy)
        lmin, lmax = 0.5 * tr - disc, 0.5 * tr + disc
        cols[f"grad_mean_{name}"], cols[f"grad_std_{name}"] = pool.mean_std(gm)
        cols[f"log_mean_{name}"], cols[f"log_std_{name}"] = pool.mean_std(tr)
        cols[f"log_absmean_{name}"] = pool.mean(np.abs(tr))
        cols[f"hess_min_mean_{name}"] = pool.mean(lmin)
        cols[f"hess_max_mean_{name}"] = pool.mean(lmax)
        cols[f"hess_aniso_mean_{name}"] = pool.mean(2 * disc / (np.abs(lmin) + np.abs(lmax) + eps))
        thr = 2.0 * _median(np.abs(lmin)) + eps
        ridge = lmin < -thr
        cols[f"ridge_frac_{name}"] = pool.mean(ridge)
        jxx, jyy, jxy = gx * gx, gy * gy, gx * gy
        si = 2.0 * sn
        sxx, syy, sxy = _blur(jxx, si), _blur(jyy, si), _blur(jxy, si)
        coh = cv2_magnitude(sxx - syy, 2 * sxy) / (sxx + syy + eps)
        cols[f"coh_local_{name}"] = pool.mean(coh)
        txx, tyy, txy = pool.mean(jxx), pool.mean(jyy), pool.mean(jxy)
        cols[f"coh_tile_{name}"] = np.sqrt((txx - tyy) ** 2 + 4 * txy**2) / (txx + tyy + eps)
        grad_vec[name] = (txx - tyy, 2 * txy)
        if name in ("s1", "s2"):
            # doubled-angle line direction: bright ridges (trace < 0) and dark valleys alike
            sgn = np.where(tr < 0, 1.0, -1.0).astype(np.float32)
            vx, vy = pool.mean(sgn * dxy), pool.mean(sgn * 2.0 * hxy)
            cols[f"line_coh_{name}"] = np.hypot(vx, vy) / (pool.mean(2 * disc) + eps)
            line_vec[name] = (vx, vy)
        lines = ridge | (lmax > 2.0 * _median(np.abs(lmax)) + eps)
        if name in ("s2", "s3"):
            dist = _facet_distance(lines, f, s)
            key = "facet_dist_mean" if name == "s2" else "facet_dist_mean_s3"
            cols[key] = pool.mean(dist)
            if name == "s2":
                cols["facet_dist_max"] = pool.max(dist)
            else:
                interior = _expand(dist > 0.5, f)
        if name == "s1":
            g1, gm1, lines1 = g, gm, lines
            grad_med = _median(gm) + eps
            cols["smooth_frac"] = pool.mean(gm < 0.1 * grad_med)
    assert g1 is not None
    pool = _Pool(b)
    inside = pool.mean(interior)
    cols["facet_interior_frac"] = inside
    cols["facet_line_frac_s1"] = pool.mean(interior & lines1) / (inside + eps)
    cols["facet_grad_rel_s1"] = pool.mean(np.where(interior, gm1, 0.0)) / (
        (inside + eps) * (pool.mean(gm1) + eps)
    )
    (ax, ay), (bx, by) = line_vec["s1"], grad_vec["s3"]
    cols["line_align_s1_s3"] = (ax * bx + ay * by) / (np.hypot(ax, ay) * np.hypot(bx, by) + 1e-12)
    cols["int_mean"] = pool.mean(w)
    mu, sd = pool.mean_std(g1)
    cols["int_std_s1"] = sd
    m3 = pool.mean(g1 * g1 * g1)
    cols["int_skew"] = (m3 - 3 * mu * sd**2 - mu**3) / (sd**3 + eps)
    cols["fine_std"] = pool.mean_std(w - g1)[1]
    p10, p50, p90 = _tile_quantiles(g1, b, (0.10, 0.50, 0.90))
    cols["int_p10"], cols["int_p50"], cols["int_p90"] = p10, p50, p90
    cols["int_rel_image"] = p50 - _median(g1)
    radius = max(1.0, 0.5 * s)
    g8 = np.rint(np.clip(g1, 0.0, 1.0) * 255.0).astype(np.float32)
    code = _lbp_uniform(g8, radius)
    ny, nx = code.shape
    nby, nbx = ny // b, nx // b
    blk = (np.arange(ny) // b)[:, None] * nbx + (np.arange(nx) // b)[None, :]
    h = np.bincount((blk * 10 + code).ravel(), minlength=nby * nbx * 10).reshape(nby, nbx, 10)
    hist = (h[:-1, :-1] + h[1:, :-1] + h[:-1, 1:] + h[1:, 1:]).reshape(-1, 10) / (4.0 * b * b)
    for k in range(10):
        cols[f"lbp_{k}"] = hist[:, k]
    p = np.clip(hist, 1e-12, None)
    cols["lbp_entropy"] = -(hist * np.log2(p)).sum(axis=1)
    cols.update(_spectral_columns(w, b, s))
    return cols


def cv2_magnitude(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """sqrt(x² + y²) of two float32 maps (OpenCV)."""
    import cv2

    return cv2.magnitude(np.ascontiguousarray(x, np.float32), np.ascontiguousarray(y, np.float32))


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
