"""SEM fractographs: reading 8/16-bit images and removing the information banner.

Microscopes burn an information strip (a uniform background with text and a
scale bar) into the bottom, sometimes the top, of each frame. ``banner="auto"``
finds it from row statistics, ``"bottom:N"`` / ``"top:N"`` crop N rows,
``"none"`` keeps the frame whole.

Banner detection (fracto's own method)
--------------------------------------
A pixel is *flat* when the grey levels in a horizontal window of
``max(7, width // 40)`` pixels centred on it span at most 0.03 (of full
scale): banner backgrounds are flat, fractograph texture and detector noise
are not. For each candidate banner height ``k`` (1.5 % to 40 % of the frame)
measured from an edge, the band of ``k`` edge rows is accepted when

1. the mean flat fraction of the band is at least 0.5 and every band row but
   a tenth has flat pixels on at least 10 % of its width (text rows keep
   background between glyphs);
2. the rows just inside the boundary are image: the mean flat fraction of
   the next ``min(20, max(4, k))`` rows is at most 0.25 and none of the first
   three exceeds 0.4 (a sharp boundary, not a gradual shadow or glare);
3. the flat background spans the width: each of 8 column segments is flat on
   at least 25 % of the band's pixels;
4. the band holds marks (text, scale bar) that differ from its background by
   more than 0.25 on at least 0.2 % of its pixels.

Among accepted heights the one with the largest contrast between band and
image flat fractions wins; the bottom is tried before the top. A frame with
no accepted band is kept whole, so shadowed or glaring edges, which lack the
flat background, the sharp boundary or the marks, are not cropped.

Grey conversion of colour files uses the ITU-R BT.601 luma weights
0.299 R + 0.587 G + 0.114 B (alpha dropped); 16-bit data are scaled by
1/65535 and 8-bit by 1/255 in float64 before the result is stored as float32.

References
----------
ITU-R Recommendation BT.601-7 (2011), Studio encoding parameters of digital
television (luma coefficients).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.io.heightmap import coerce_pixel_size, read_file_bytes

#: Smallest accepted image side in pixels.
MIN_SEM_SIDE = 16
LUMA_BT601 = (0.299, 0.587, 0.114)
FLAT_RANGE = 0.03
MARK_CONTRAST = 0.25


@dataclass(frozen=True)
class SemImage:
    """A grey SEM fractograph with its banner removed.

    Parameters
    ----------
    image : ndarray of float32, shape (ny, nx)
        Grey levels in [0, 1].
    raw_dtype : str
        Data type of the pixels in the file (``"uint8"``, ``"uint16"``).
    bit_depth : int
        8 or 16.
    banner : dict
        ``{"side": "bottom" | "top" | None, "rows": int, "detected": bool}``.
    banner_image : ndarray of float32 or None
        The strip cut off (grey, [0, 1]) for reading the scale bar, or None.
    pixel_size : PixelSize
        Calibration and its source.
    source : str
        The file read.
    """

    image: np.ndarray
    raw_dtype: str
    bit_depth: int
    banner: dict
    banner_image: np.ndarray | None
    pixel_size: PixelSize
    source: str

    @property
    def shape(self) -> tuple[int, int]:
        return self.image.shape  # type: ignore[return-value]

    def to_dict(self) -> dict:
        """JSON-ready description (no arrays)."""
        return {
            "source": self.source,
            "shape": list(self.image.shape),
            "raw_dtype": self.raw_dtype,
            "bit_depth": self.bit_depth,
            "banner": dict(self.banner),
            "banner_shape": None if self.banner_image is None else list(self.banner_image.shape),
            "pixel_size": self.pixel_size.to_dict(),
        }


# ----------------------------------------------------------------------------- decoding


def _decode_tiff(data: bytes, name: str) -> tuple[np.ndarray, PixelSize | None, str]:
    from fracto.io.tiff import read_tiff_page, tiff_calibration

    arr, page, _ = read_tiff_page(data, name)
    ps, _facts = tiff_calibration(page)
    photometric = str(getattr(page, "photometric", "")).upper()
    order = "rgb"
    if arr.ndim == 3 and arr.shape[0] in (3, 4) and arr.shape[-1] not in (3, 4):
        arr = np.moveaxis(arr, 0, -1)  # planar configuration
    if "PALETTE" in photometric and arr.ndim == 2:
        cmap = getattr(page, "colormap", None)
        if cmap is not None:
            arr = np.moveaxis(np.asarray(cmap)[:, arr], 0, -1)
    if "MINISWHITE" in photometric and arr.dtype.kind == "u":
        arr = np.iinfo(arr.dtype).max - arr
    return arr, ps, order


def _decode_cv2(data: bytes, name: str) -> np.ndarray:
    import cv2

    buf = np.frombuffer(data, dtype=np.uint8)
    try:
        arr = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)
    except cv2.error as exc:
        raise FractoInputError(f"'{name}' is not a readable image file.") from exc
    if arr is None:
        raise FractoInputError(
            f"'{name}' is not a readable image (TIFF, PNG, JPEG or BMP) or is truncated."
        )
    return arr


def to_grey(arr: np.ndarray, name: str, order: str = "bgr") -> tuple[np.ndarray, str, int]:
    """Convert decoded pixels to float32 grey in [0, 1].

    Returns (image, raw dtype name, bit depth). `order` names the colour
    channel order of 3/4-channel data (OpenCV gives ``"bgr"``).
    """
    if arr.dtype == np.uint8:
        full, depth = 255.0, 8
    elif arr.dtype == np.uint16:
        full, depth = 65535.0, 16
    elif arr.dtype == np.bool_:
        raise FractoInputError(
            f"'{name}' is a 1-bit image; fracto reads 8- or 16-bit grey levels."
        )
    elif arr.dtype.kind == "f":
        raise FractoInputError(
            f"'{name}' holds floating-point values, which look like a height map; "
            "read it as a height map instead."
        )
    else:
        raise FractoInputError(
            f"'{name}' holds {arr.dtype} pixels; fracto reads 8- or 16-bit images."
        )
    a = arr.astype(np.float64)
    if a.ndim == 3:
        c = a.shape[2]
        if c == 1:
            a = a[:, :, 0]
        elif c == 2:  # grey + alpha
            a = a[:, :, 0]
        elif c in (3, 4):
            r, g, b = (
                (a[:, :, 2], a[:, :, 1], a[:, :, 0])
                if order == "bgr"
                else (a[:, :, 0], a[:, :, 1], a[:, :, 2])
            )
            wr, wg, wb = LUMA_BT601
            a = wr * r + wg * g + wb * b
        else:
            raise FractoInputError(f"'{name}' has {c} channels; expected grey or colour.")
    if a.ndim != 2:
        raise FractoInputError(f"'{name}' is not a single 2-D image (shape {arr.shape}).")
    return np.clip(a / full, 0.0, 1.0).astype(np.float32), str(arr.dtype), depth


# ----------------------------------------------------------------------------- banner


def _flat_mask(g: np.ndarray) -> np.ndarray:
    from scipy.ndimage import maximum_filter1d, minimum_filter1d

    win = max(7, g.shape[1] // 40)
    return (maximum_filter1d(g, win, axis=1) - minimum_filter1d(g, win, axis=1)) <= FLAT_RANGE


def _band_ok(g_band: np.ndarray, flat_band: np.ndarray) -> bool:
    """Checks 3 and 4 of the module docstring on an edge band (edge row first)."""
    segs = np.array_split(np.arange(g_band.shape[1]), 8)
    if min(float(flat_band[:, s].mean()) for s in segs) < 0.25:
        return False
    bg = float(np.median(g_band[flat_band]))
    marks = np.abs(g_band - bg) > MARK_CONTRAST
    return float(marks.mean()) >= 0.002


def detect_banner(image: np.ndarray) -> dict:
    """Find an information banner at the bottom or top edge of a grey image.

    Parameters
    ----------
    image : ndarray, 2-D, grey levels in [0, 1]

    Returns
    -------
    dict
        ``{"side": "bottom" | "top" | None, "rows": int, "detected": bool}``.
        The method is described in the module docstring.
    """
    g = np.asarray(image, dtype=np.float32)
    h = g.shape[0]
    none = {"side": None, "rows": 0, "detected": False}
    if h < 32 or g.shape[1] < 16:
        return none
    flat = _flat_mask(g)
    rowf = flat.mean(axis=1)
    kmin = max(4, round(0.015 * h))
    kmax = int(0.4 * h)
    best: tuple[float, str, int] | None = None
    for side in ("bottom", "top"):
        r = rowf[::-1] if side == "bottom" else rowf
        csum = np.concatenate(([0.0], np.cumsum(r)))
        low = np.concatenate(([0], np.cumsum(r < 0.1)))
        for k in range(kmin, kmax + 1):
            w = min(20, max(4, k))
            if k + w > h:
                break
            band = csum[k] / k
            if band < 0.5 or low[k] > 0.1 * k:
                continue
            above = (csum[k + w] - csum[k]) / w
            if above > 0.25 or r[k : k + 3].max() > 0.4:
                continue
            score = band - above
            if best is not None and score <= best[0]:
                continue
            sl = slice(h - k, h) if side == "bottom" else slice(0, k)
            if _band_ok(g[sl], flat[sl]):
                best = (score, side, k)
        if best is not None:
            break
    if best is None:
        return none
    return {"side": best[1], "rows": int(best[2]), "detected": True}


_BANNER_SPEC = re.compile(r"^\s*(bottom|top)\s*:\s*(\d+)\s*$", re.IGNORECASE)


def _banner_from_spec(spec: str, image: np.ndarray, name: str) -> dict:
    s = str(spec).strip().lower()
    if s == "auto":
        return detect_banner(image)
    if s == "none":
        return {"side": None, "rows": 0, "detected": False}
    m = _BANNER_SPEC.match(s)
    if not m:
        raise FractoInputError(
            f"Cannot read the banner setting '{spec}'; use auto, none, bottom:N or top:N."
        )
    rows = int(m.group(2))
    if rows >= image.shape[0] - MIN_SEM_SIDE + 1:
        raise FractoInputError(
            f"A banner of {rows} rows would leave too little of '{name}' "
            f"({image.shape[0]} rows high)."
        )
    return {"side": m.group(1), "rows": rows, "detected": False}


# ----------------------------------------------------------------------------- reader


def read_sem_image(
    path: str | os.PathLike,
    *,
    banner: str = "auto",
    pixel_size: PixelSize | str | None = None,
) -> SemImage:
    """Read an SEM fractograph (8/16-bit TIFF, PNG, JPEG, BMP) as grey float32.

    Parameters
    ----------
    path : path-like
        The image file.
    banner : str
        ``"auto"`` (detect), ``"none"``, ``"bottom:N"`` or ``"top:N"``.
    pixel_size : PixelSize or str, optional
        Explicit calibration; else TIFF description/resolution tags, else a
        sidecar JSON, else unknown.

    Returns
    -------
    SemImage

    Raises
    ------
    FractoInputError
        For missing, empty, unreadable, blank or too small images.

    References
    ----------
    ITU-R BT.601-7 (2011), luma weights for the grey conversion.
    """
    from fracto.io.sidecar import read_sidecar

    name = os.fspath(path)
    data = read_file_bytes(path)
    explicit = coerce_pixel_size(pixel_size)
    tag_ps = None
    if data[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        arr, tag_ps, order = _decode_tiff(data, name)
    else:
        arr, order = _decode_cv2(data, name), "bgr"
    grey, raw_dtype, depth = to_grey(arr, name, order)
    if min(grey.shape) < MIN_SEM_SIDE:
        raise FractoInputError(
            f"'{name}' is {grey.shape[1]} x {grey.shape[0]} pixels; at least "
            f"{MIN_SEM_SIDE} x {MIN_SEM_SIDE} are needed."
        )
    if float(grey.max()) == float(grey.min()):
        raise FractoInputError(f"'{name}' is blank: every pixel has the same grey level.")
    info = _banner_from_spec(banner, grey, name)
    strip = None
    if info["rows"]:
        k = info["rows"]
        if info["side"] == "bottom":
            strip, grey = grey[-k:].copy(), grey[:-k].copy()
        else:
            strip, grey = grey[:k].copy(), grey[k:].copy()
    if explicit is not None:
        ps = explicit
    elif tag_ps is not None:
        ps = tag_ps
    else:
        side = read_sidecar(path)
        ps = side["pixel_size"] if side["pixel_size"] is not None else PixelSize.unknown()
    return SemImage(
        image=grey,
        raw_dtype=raw_dtype,
        bit_depth=depth,
        banner=info,
        banner_image=strip,
        pixel_size=ps,
        source=name,
    )
