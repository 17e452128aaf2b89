"""Heights from an SEM stereo pair (two images of one field at two eucentric tilts).

Geometry
--------
The SEM image is a parallel projection (at the magnifications of fractography
the beam's convergence is negligible). Let the tilt axis run along the image's
vertical axis through the image centre, x be the object's lateral coordinate
normal to the axis (measured from the axis), z its height, and θ the stage
tilt of one view. The point then appears at image position

    x' = x cos θ + z sin θ.

*Symmetric pair* (``mode="symmetric"``), views at -Δθ/2 (LEFT, the lower
tilt) and +Δθ/2 (RIGHT)::

    x'_L = x cos(Δθ/2) - z sin(Δθ/2),   x'_R = x cos(Δθ/2) + z sin(Δθ/2)
    p = x'_R - x'_L = 2 z sin(Δθ/2)     =>   z = p / (2 sin(Δθ/2))

(Piazzesi 1973), and the object's own lateral coordinate is
``x = (x'_L + x'_R) / (2 cos(Δθ/2))``: both views are foreshortened by
cos(Δθ/2), so the heights are resampled onto a grid whose x spacing is the
object's pixel size (otherwise a 2048-pixel field at Δθ = 8° would be
placed up to 2.5 pixels off at its edges).

*One view at 0°* (``mode="one-at-zero"``), LEFT at 0°, RIGHT at Δθ::

    x'_L = x,   x'_R = x cos Δθ + z sin Δθ
    p = x'_R - x'_L = x (cos Δθ - 1) + z sin Δθ
    =>   z = (p + x (1 - cos Δθ)) / sin Δθ,

with x = x'_L measured from the tilt axis (the term x (1 - cos Δθ) is the
foreshortening of the tilted view: without it a flat specimen would come out
tilted by about Δθ/2). The LEFT image is the object's own grid here.

A point that stands higher than its surroundings appears further to +x in
RIGHT than in LEFT (p > 0 for z > 0); ``flip_parallax=True`` is for the
opposite geometry (the stage tilts the other way) and negates z. Heights are
relative: the absolute level (the eucentric plane) is not defined by the
pair, so only height differences are meaningful.

For ``tilt_axis="horizontal"`` the same holds with x and y exchanged: the
parallax runs along the image rows' index (downwards = +y).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize

__all__ = ["StereoResult", "dense_parallax", "stereo_height"]


@dataclass(frozen=True)
class StereoResult:
    """Heights from a stereo pair, on the object's own lateral grid.

    Attributes
    ----------
    height_um : ndarray
        Heights in µm relative to their own median level; NaN where matching
        failed.
    confidence : ndarray
        Matching confidence in [0, 1] (1 - left-right disagreement / its limit).
    parallax_px : ndarray
        Parallax RIGHT minus LEFT in image pixels, on the same grid.
    pixel_size : PixelSize
        Lateral sampling of the height map (the object's).
    """

    height_um: np.ndarray = field(repr=False)
    confidence: np.ndarray = field(repr=False)
    parallax_px: np.ndarray = field(repr=False)
    pixel_size: PixelSize
    settings: dict

    @property
    def valid_fraction(self) -> float:
        return float(np.isfinite(self.height_um).mean())

    def to_dict(self) -> dict:
        h = self.height_um[np.isfinite(self.height_um)]
        return {
            "valid_fraction": self.valid_fraction,
            "height_min_um": float(h.min()) if h.size else None,
            "height_max_um": float(h.max()) if h.size else None,
            "height_range_um": float(h.max() - h.min()) if h.size else None,
            "height_rms_um": float(np.sqrt(np.mean((h - h.mean()) ** 2))) if h.size else None,
            "parallax_range_px": (
                float(np.nanmax(self.parallax_px) - np.nanmin(self.parallax_px))
                if h.size
                else None
            ),
            "shape": list(self.height_um.shape),
            "pixel_size": self.pixel_size.to_dict(),
            "settings": dict(self.settings),
        }


def _to_u8(img: np.ndarray) -> np.ndarray:
    lo, hi = np.percentile(img, (0.5, 99.5))
    if not hi > lo:
        lo, hi = float(img.min()), float(img.max())
    if not hi > lo:
        raise FractoInputError("One of the stereo images is blank (it has no contrast to match).")
    u = (img - lo) / (hi - lo)
    return np.clip(np.rint(u * 255.0), 0, 255).astype(np.uint8)


def _check_pair(left: np.ndarray, right: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    a = np.asarray(left, dtype=np.float64)
    b = np.asarray(right, dtype=np.float64)
    if a.ndim == 3:
        a = a.mean(axis=2)
    if b.ndim == 3:
        b = b.mean(axis=2)
    if a.ndim != 2 or b.ndim != 2:
        raise FractoInputError("Stereo images must be 2-D greyscale images.")
    if a.shape != b.shape:
        raise FractoInputError(
            f"The stereo images differ in size ({a.shape[1]}x{a.shape[0]} and "
            f"{b.shape[1]}x{b.shape[0]} pixels); give two images of one field."
        )
    if min(a.shape) < 32:
        raise FractoInputError("The stereo images are too small to match (under 32 pixels).")
    for img in (a, b):
        if not np.isfinite(img).all():
            raise FractoInputError("A stereo image holds non-finite pixel values.")
    return a, b


def dense_parallax(
    left: np.ndarray,
    right: np.ndarray,
    *,
    max_lr_error_px: float = 0.5,
    min_texture: float = 2.0,
    patch_px: int = 8,
    patch_stride_px: int = 3,
) -> tuple[np.ndarray, np.ndarray]:
    """Dense parallax along x (RIGHT minus LEFT, pixels) on the LEFT grid.

    Dense inverse-search optical flow (OpenCV ``DISOpticalFlow``, patches of
    ``patch_px`` every ``patch_stride_px`` pixels down to full resolution,
    with variational refinement) from LEFT to RIGHT and back; a point
    is kept when the backward flow at its match returns it within
    ``max_lr_error_px`` (left-right consistency) and its neighbourhood has
    texture (local standard deviation of the 8-bit image ≥ ``min_texture``).

    Returns
    -------
    parallax_px, confidence : ndarray
        NaN parallax where rejected; confidence ``1 - error / max_lr_error_px``
        (0 where rejected).

    References
    ----------
    T. Kroeger, R. Timofte, D. Dai and L. Van Gool, "Fast optical flow using
    dense inverse search", ECCV 2016 (the matcher); left-right consistency
    checking is common practice in dense stereo.
    """
    import cv2

    a, b = _check_pair(left, right)
    ua, ub = _to_u8(a), _to_u8(b)
    dis = cv2.DISOpticalFlow_create(cv2.DISOPTICAL_FLOW_PRESET_MEDIUM)
    # full resolution at the finest level (the preset stops one level short,
    # which smooths the parallax and biases heights low by ~10 %)
    dis.setFinestScale(0)
    dis.setPatchSize(patch_px)
    dis.setPatchStride(patch_stride_px)
    dis.setGradientDescentIterations(16)
    dis.setVariationalRefinementIterations(5)
    fwd = dis.calc(ua, ub, None)
    # the backward flow only checks the forward one: a sparser patch grid is enough
    dis.setPatchStride(patch_stride_px + 1)
    bwd = dis.calc(ub, ua, None)
    ny, nx = a.shape
    gx, gy = np.meshgrid(np.arange(nx, dtype=np.float32), np.arange(ny, dtype=np.float32))
    mx = gx + fwd[..., 0]
    my = gy + fwd[..., 1]
    back = cv2.remap(
        bwd,
        mx,
        my,
        interpolation=cv2.INTER_LINEAR,
        borderMode=cv2.BORDER_CONSTANT,
        borderValue=(np.nan, np.nan),
    )
    err = np.hypot(fwd[..., 0] + back[..., 0], fwd[..., 1] + back[..., 1])
    inside = (mx >= 0) & (mx <= nx - 1) & (my >= 0) & (my <= ny - 1)
    f = ua.astype(np.float32)
    mean = cv2.GaussianBlur(f, (0, 0), 3.0)
    sd = np.sqrt(np.maximum(cv2.GaussianBlur(f * f, (0, 0), 3.0) - mean * mean, 0))
    ok = inside & np.isfinite(err) & (err < max_lr_error_px) & (sd >= min_texture)
    conf = np.where(ok, 1.0 - err / max_lr_error_px, 0.0)
    par = np.where(ok, fwd[..., 0].astype(np.float64), np.nan)
    return par, conf


def _resample_rows(
    x_src: np.ndarray, values: list[np.ndarray], x_grid: np.ndarray, max_gap: float
) -> list[np.ndarray]:
    """Per row, interpolate values known at x_src (NaN = unknown) onto x_grid."""
    out = [np.full((x_src.shape[0], x_grid.size), np.nan) for _ in values]
    ref = values[0]
    for r in range(x_src.shape[0]):
        sel = np.isfinite(ref[r]) & np.isfinite(x_src[r])
        if sel.sum() < 2:
            continue
        xs = x_src[r, sel]
        order = np.argsort(xs, kind="stable")
        xs = xs[order]
        idx = np.searchsorted(xs, x_grid)
        lo = np.clip(idx - 1, 0, xs.size - 1)
        hi = np.clip(idx, 0, xs.size - 1)
        gap = xs[hi] - xs[lo]
        bad = (idx == 0) | (idx == xs.size) | (gap > max_gap)
        for k, v in enumerate(values):
            vs = v[r, sel][order]
            res = np.interp(x_grid, xs, vs)
            res[bad] = np.nan
            out[k][r] = res
    return out


def stereo_height(
    left: np.ndarray,
    right: np.ndarray,
    *,
    tilt_difference_deg: float,
    pixel_size_um: float,
    tilt_axis: str = "vertical",
    mode: str = "symmetric",
    flip_parallax: bool = False,
    max_lr_error_px: float = 0.5,
    axis_position_px: float | None = None,
) -> StereoResult:
    """Height map from two SEM images of one field at two eucentric tilts.

    Parameters
    ----------
    left, right : ndarray, shape (ny, nx)
        Greyscale images; LEFT is the lower stage tilt.
    tilt_difference_deg : float
        Difference of the two stage tilts, Δθ, in degrees (0 < Δθ < 90).
    pixel_size_um : float
        Image pixel size in µm (as calibrated by the microscope, i.e. in the
        image plane).
    tilt_axis : {"vertical", "horizontal"}
        Direction of the tilt axis in the image.
    mode : {"symmetric", "one-at-zero"}
        Views at ∓Δθ/2, or LEFT at 0° and RIGHT at Δθ (see the module notes).
    flip_parallax : bool
        The opposite tilt sense: higher points appear further to -x in RIGHT.
    max_lr_error_px : float
        Left-right consistency limit of the matcher.
    axis_position_px : float, optional
        Column of the tilt axis (row for a horizontal axis); default the image
        centre. Matters for the one-at-zero correction and the resampling.

    Returns
    -------
    StereoResult
        Heights in µm on the object's lateral grid (x spacing = pixel size),
        relative to their median; NaN where matching failed.

    References
    ----------
    C. Piazzesi, "Photogrammetry with the scanning electron microscope",
    *J. Phys. E: Sci. Instrum.* 6, 392–396, 1973 (h = p / (2 sin(Δθ/2)));
    Kroeger et al. (2016) for the matcher.
    """
    a, b = _check_pair(left, right)
    if not (0.0 < tilt_difference_deg < 90.0):
        raise FractoInputError("The tilt difference must lie between 0 and 90 degrees.")
    if not (pixel_size_um is not None and math.isfinite(pixel_size_um) and pixel_size_um > 0):
        raise FractoInputError(
            "Stereo heights need the image pixel size (e.g. --pixel-size 0.1um)."
        )
    if tilt_axis not in ("vertical", "horizontal"):
        raise FractoInputError("The tilt axis must be 'vertical' or 'horizontal'.")
    if mode not in ("symmetric", "one-at-zero"):
        raise FractoInputError("The stereo mode must be 'symmetric' or 'one-at-zero'.")
    if tilt_axis == "horizontal":
        a, b = a.T, b.T
    par, conf = dense_parallax(a, b, max_lr_error_px=max_lr_error_px)
    if np.isfinite(par).mean() < 0.05:
        raise FractoInputError(
            "The stereo images could not be matched (under 5 % of the points agree); "
            "check that they show one field at two tilts."
        )
    nx = a.shape[1]
    c = (nx - 1) / 2.0 if axis_position_px is None else float(axis_position_px)
    dth = math.radians(tilt_difference_deg)
    ps = float(pixel_size_um)
    sign = -1.0 if flip_parallax else 1.0
    u = np.arange(nx, dtype=np.float64)[None, :]
    p_um = par * ps
    if mode == "symmetric":
        z = sign * p_um / (2.0 * math.sin(dth / 2.0))
        # object x (in object pixels from the axis) of each matched LEFT pixel
        x_obj = (u - c + par / 2.0) / math.cos(dth / 2.0)
        x_grid = np.arange(nx, dtype=np.float64) - c
        z, conf_o, par_o = _resample_rows(
            x_obj, [z, np.where(np.isfinite(par), conf, np.nan), par], x_grid, max_gap=2.0
        )
        conf_o = np.where(np.isfinite(conf_o), conf_o, 0.0)
    else:
        x_um = (u - c) * ps
        z = sign * (p_um + x_um * (1.0 - math.cos(dth))) / math.sin(dth)
        conf_o, par_o = conf, par
    z = z - np.nanmedian(z)
    if tilt_axis == "horizontal":
        z, conf_o, par_o = z.T, conf_o.T, par_o.T
    settings = {
        "tilt_difference_deg": float(tilt_difference_deg),
        "pixel_size_um": ps,
        "tilt_axis": tilt_axis,
        "mode": mode,
        "flip_parallax": bool(flip_parallax),
        "axis_position_px": c,
        "matcher": "OpenCV DISOpticalFlow (8 px patches, stride 3, full resolution), "
        "left-right check",
        "max_lr_error_px": max_lr_error_px,
        "height_reference": "median of valid heights",
    }
    return StereoResult(
        height_um=z,
        confidence=conf_o,
        parallax_px=par_o,
        pixel_size=PixelSize.square(ps, "stereo (object grid)"),
        settings=settings,
    )
