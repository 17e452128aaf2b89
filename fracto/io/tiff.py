"""Floating-point TIFF height maps (read and write) and TIFF calibration tags.

Reading: the first page must be a single-channel 32- or 64-bit float image
(16-bit float too). Integer TIFFs are refused as height maps: their pixel
values are almost always image grey levels, and even when they are heights
their unit and offset are not recorded; convert such data to float in a known
unit, or read the file as an SEM image with `fracto.io.read_sem_image`.

Calibration, in order: a JSON ImageDescription written by fracto
(``{"fracto": {"pixel_size_um": [x, y], "z_unit": "um"}}``; a top-level
``"pixel_size_um"`` is read as well), then the XResolution/YResolution tags
when ResolutionUnit is centimetre, or inch with a value that is not a common
screen/print density (an integer number of dots per inch up to 1200, such as
72, 96 or 300, is taken as display metadata and ignored), or when
ResolutionUnit is none and an ImageJ description names the unit
(``unit=micron``), then a sidecar JSON.

Writing: float32 heights in µm, resolution tags in pixels per centimetre and
the exact pixel size in the JSON ImageDescription.
"""

from __future__ import annotations

import contextlib
import io
import json
import logging
import os
import re

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.io.heightmap import HeightMap, coerce_pixel_size, finish, read_file_bytes
from fracto.units import length_unit_factor

_RES_UNIT_UM = {2: 25400.0, 3: 10000.0}  # micrometres per inch, per centimetre


def _rational(value: object) -> float | None:
    try:
        if isinstance(value, tuple | list) and len(value) == 2:
            num, den = value
            return float(num) / float(den) if float(den) else None
        return float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None


def tiff_calibration(page: object) -> tuple[PixelSize | None, dict]:
    """Pixel size from a tifffile page (JSON description, then resolution tags).

    Returns
    -------
    (PixelSize or None, dict)
        The calibration (None when the file gives none) and facts for metadata,
        including ``"z_unit"`` when a fracto description names it.
    """
    facts: dict = {}
    desc = getattr(page, "description", "") or ""
    obj = None
    if desc.strip().startswith("{"):
        try:
            obj = json.loads(desc)
        except json.JSONDecodeError:
            obj = None
    if isinstance(obj, dict):
        inner = obj.get("fracto") if isinstance(obj.get("fracto"), dict) else obj
        v = inner.get("pixel_size_um")
        if isinstance(inner.get("z_unit"), str):
            facts["z_unit"] = inner["z_unit"]
        if v is not None:
            try:
                if isinstance(v, list | tuple) and len(v) == 2:
                    ps = PixelSize(float(v[0]), float(v[1]), "TIFF description")
                else:
                    ps = PixelSize.square(float(v), "TIFF description")
                return ps, facts
            except (TypeError, ValueError, FractoInputError):
                facts["description_pixel_size_unusable"] = v
    tags = getattr(page, "tags", None)
    if tags is None:
        return None, facts
    try:
        unit_tag = tags.get("ResolutionUnit")
        unit = int(unit_tag.value) if unit_tag is not None else 2
        xr = tags.get("XResolution")
        yr = tags.get("YResolution")
        xres = _rational(xr.value) if xr is not None else None
        yres = _rational(yr.value) if yr is not None else None
    except (TypeError, ValueError, AttributeError):
        return None, facts
    if xres is None or yres is None or xres <= 0 or yres <= 0:
        return None, facts
    if unit == 1 and desc.startswith("ImageJ="):
        # ImageJ files keep ResolutionUnit = none and name the unit in the description
        # ("unit=micron"); the resolution is then pixels per that unit.
        m = re.search(r"^unit=(.+)$", desc, flags=re.MULTILINE)
        if m:
            label = m.group(1).strip().replace("\\u00B5", "µ")
            try:
                per = length_unit_factor(label)
                return PixelSize(per / xres, per / yres, "TIFF tags (ImageJ unit)"), facts
            except FractoInputError:
                facts["imagej_unit_unknown"] = label
        return None, facts
    if unit not in _RES_UNIT_UM:
        return None, facts
    if unit == 2 and all(float(r).is_integer() and r <= 1200 for r in (xres, yres)):
        facts["resolution_ignored"] = f"{xres:g} x {yres:g} dpi (display density)"
        return None, facts
    per = _RES_UNIT_UM[unit]
    try:
        return PixelSize(per / xres, per / yres, "TIFF tags"), facts
    except FractoInputError:
        return None, facts


@contextlib.contextmanager
def _quiet_tifffile():
    """Silence tifffile's log warnings about damaged files while we read one (the
    damage is reported to the user as one FractoInputError sentence instead)."""
    log = logging.getLogger("tifffile")
    old = log.level
    log.setLevel(logging.CRITICAL)
    try:
        yield
    finally:
        log.setLevel(old)


def _open_tiff(data: bytes, name: str):
    import tifffile

    try:
        return tifffile.TiffFile(io.BytesIO(data))
    except Exception as exc:
        raise FractoInputError(f"'{name}' is not a readable TIFF file.") from exc


def _cv2_decode(data: bytes) -> np.ndarray | None:
    import cv2

    try:
        return cv2.imdecode(np.frombuffer(data, dtype=np.uint8), cv2.IMREAD_UNCHANGED)
    except cv2.error:
        return None


def read_tiff_page(data: bytes, name: str) -> tuple[np.ndarray, object, int, str]:
    """Decode the first page of a TIFF: (array, page, number of pages, channel order).

    tifffile decodes uncompressed and some compressed TIFFs; when it lacks the
    codec (e.g. LZW without the optional imagecodecs package), OpenCV decodes the
    pixels (channel order ``"bgr"``) while tifffile still supplies the tags.
    """
    with _quiet_tifffile():
        return _read_first_page(data, name)


def _read_first_page(data: bytes, name: str) -> tuple[np.ndarray, object, int, str]:
    tf = _open_tiff(data, name)
    try:
        if not tf.pages:
            raise FractoInputError(f"'{name}' holds no image.")
        page = tf.pages[0]
        npages = len(tf.pages)
        try:
            return page.asarray(), page, npages, "rgb"
        except Exception as exc:
            arr = _cv2_decode(data)
            if arr is None:
                raise FractoInputError(
                    f"'{name}' is a TIFF whose image data cannot be decoded (it may be "
                    "truncated or use an unsupported compression)."
                ) from exc
            return arr, page, npages, "bgr"
    except FractoInputError:
        raise
    except Exception as exc:
        raise FractoInputError(
            f"'{name}' is a TIFF whose image data cannot be decoded (it may be truncated)."
        ) from exc
    finally:
        tf.close()


def read_tiff_height_map(
    path: str | os.PathLike,
    *,
    pixel_size: PixelSize | str | None = None,
    z_unit: str = "um",
    data: bytes | None = None,
) -> HeightMap:
    """Read a single-channel floating-point TIFF as a height map.

    Parameters
    ----------
    path : path-like
        ``.tif`` / ``.tiff`` file.
    pixel_size : PixelSize or str, optional
        Explicit calibration (wins over tags and sidecars).
    z_unit : str
        Unit of the stored heights unless a fracto description or a sidecar names one.

    Returns
    -------
    HeightMap
    """
    from fracto.io.sidecar import resolve_calibration

    name = os.fspath(path)
    if data is None:
        data = read_file_bytes(path)
    arr, page, npages, _order = read_tiff_page(data, name)
    if arr.dtype.kind != "f":
        raise FractoInputError(
            f"'{name}' holds integer pixel values ({arr.dtype}), which are image grey "
            "levels rather than heights; save the heights as a float TIFF or .npy."
        )
    if arr.ndim == 3 and arr.shape[-1] in (3, 4) and arr.shape[0] > 4:
        raise FractoInputError(f"'{name}' is a colour image, not a single-channel height map.")
    tag_ps, facts = tiff_calibration(page)
    ps, factor, meta = resolve_calibration(
        path,
        explicit=coerce_pixel_size(pixel_size),
        header_pixel_size=tag_ps,
        header_z_unit=facts.get("z_unit"),
        z_unit=z_unit,
        header_z_source="TIFF description",
    )
    meta.update({k: v for k, v in facts.items() if k != "z_unit"})
    meta["format"] = "tiff"
    meta["dtype"] = str(arr.dtype)
    meta["pages"] = npages
    return finish(arr, path, z_factor=factor, pixel_size=ps, metadata=meta)


def tiff_bytes(z_um: np.ndarray, pixel_size: PixelSize) -> bytes:
    """Bytes of a float32 TIFF of heights in µm with calibration tags and description."""
    import tifffile

    from fracto import __version__

    z = np.ascontiguousarray(np.asarray(z_um, dtype=np.float32))
    desc: dict = {
        "fracto": {
            "version": __version__,
            "z_unit": "um",
            "pixel_size_um": [pixel_size.x_um, pixel_size.y_um] if pixel_size.calibrated else None,
            "pixel_size_source": pixel_size.source,
        }
    }
    kwargs: dict = {}
    if pixel_size.calibrated:
        kwargs["resolution"] = (1e4 / pixel_size.x_um, 1e4 / pixel_size.y_um)  # type: ignore[operator]
        kwargs["resolutionunit"] = "CENTIMETER"
    buf = io.BytesIO()
    tifffile.imwrite(
        buf, z, photometric="minisblack", description=json.dumps(desc), metadata=None, **kwargs
    )
    return buf.getvalue()


def write_tiff_height_map(
    path: str | os.PathLike, z_um: np.ndarray, pixel_size: PixelSize
) -> None:
    """Write heights in µm as a float32 TIFF (atomically).

    The pixel size goes into XResolution/YResolution (pixels per centimetre,
    ResolutionUnit = centimetre) and, exactly, into a JSON ImageDescription.
    """
    from fracto.io.safe import write_bytes_atomic

    write_bytes_atomic(path, tiff_bytes(z_um, pixel_size))
