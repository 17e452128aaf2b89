"""Sidecar JSON files beside a map or image, and the calibration precedence.

A sidecar is ``<file>.json`` (``map.npy.json``) or ``<stem>.json``
(``map.json``); the first that exists is used. Keys read (all optional):

* ``"pixel_size_um"``: a number (square pixels) or ``[x, y]``; ``null`` = unknown;
* ``"pixel_size_x_um"`` and ``"pixel_size_y_um"``;
* ``"pixel_size"``: text such as ``"0.5um"`` or ``"0.5um,0.6um"``;
* ``"z_unit"``: unit of the stored heights, e.g. ``"nm"``.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.units import length_unit_factor


def sidecar_candidates(path: str | os.PathLike) -> list[Path]:
    """The sidecar names looked for beside `path`, in order."""
    p = Path(path)
    out = [p.with_name(p.name + ".json")]
    stem = p.with_suffix(".json")
    if stem != p and stem not in out:
        out.append(stem)
    return out


def find_sidecar(path: str | os.PathLike) -> Path | None:
    """The first existing sidecar of `path`, or None."""
    for cand in sidecar_candidates(path):
        if cand.is_file():
            return cand
    return None


def _positive(value: object, side: Path, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise FractoInputError(f"The sidecar '{side}' gives '{key}' as {value!r}, not a number.")
    v = float(value)
    if not (math.isfinite(v) and v > 0):
        raise FractoInputError(
            f"The sidecar '{side}' gives '{key}' = {value!r}; a pixel size must be positive."
        )
    return v


def read_sidecar(path: str | os.PathLike) -> dict:
    """Read the sidecar of `path`.

    Returns
    -------
    dict
        ``{"file": str or None, "pixel_size": PixelSize or None, "z_unit": str or None}``;
        ``pixel_size`` is None when the sidecar gives none, ``PixelSize.unknown()``
        when it says ``"pixel_size_um": null``.
    """
    side = find_sidecar(path)
    out: dict = {"file": None, "pixel_size": None, "z_unit": None}
    if side is None:
        return out
    out["file"] = str(side)
    try:
        obj = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FractoInputError(f"The sidecar '{side}' is not readable JSON.") from exc
    if not isinstance(obj, dict):
        raise FractoInputError(f"The sidecar '{side}' must hold a JSON object.")
    src = "sidecar JSON"
    if "pixel_size_um" in obj:
        v = obj["pixel_size_um"]
        if v is None:
            out["pixel_size"] = PixelSize.unknown()
        elif isinstance(v, list | tuple):
            if len(v) != 2:
                raise FractoInputError(
                    f"The sidecar '{side}' gives 'pixel_size_um' as a list of {len(v)}; "
                    "give one number or [x, y]."
                )
            out["pixel_size"] = PixelSize(
                _positive(v[0], side, "pixel_size_um"),
                _positive(v[1], side, "pixel_size_um"),
                src,
            )
        else:
            out["pixel_size"] = PixelSize.square(_positive(v, side, "pixel_size_um"), src)
    elif "pixel_size_x_um" in obj or "pixel_size_y_um" in obj:
        if "pixel_size_x_um" not in obj or "pixel_size_y_um" not in obj:
            raise FractoInputError(
                f"The sidecar '{side}' must give both 'pixel_size_x_um' and 'pixel_size_y_um'."
            )
        out["pixel_size"] = PixelSize(
            _positive(obj["pixel_size_x_um"], side, "pixel_size_x_um"),
            _positive(obj["pixel_size_y_um"], side, "pixel_size_y_um"),
            src,
        )
    elif "pixel_size" in obj and obj["pixel_size"] is not None:
        v = obj["pixel_size"]
        if not isinstance(v, str):
            raise FractoInputError(
                f"The sidecar '{side}' gives 'pixel_size' as {v!r}; write it like \"0.5um\"."
            )
        try:
            out["pixel_size"] = PixelSize.parse(v, source=src)
        except FractoInputError as exc:
            raise FractoInputError(f"The sidecar '{side}': {exc}") from exc
    zu = obj.get("z_unit")
    if zu is not None:
        if not isinstance(zu, str):
            raise FractoInputError(f"The sidecar '{side}' gives 'z_unit' as {zu!r}, not text.")
        try:
            length_unit_factor(zu)
        except FractoInputError as exc:
            raise FractoInputError(
                f"The sidecar '{side}' names an unknown z unit '{zu}'."
            ) from exc
        out["z_unit"] = zu
    return out


def resolve_calibration(
    path: str | os.PathLike,
    *,
    explicit: PixelSize | None,
    header_pixel_size: PixelSize | None,
    header_z_unit: str | None,
    z_unit: str,
    header_z_factor: float | None = None,
    header_z_source: str = "file header",
) -> tuple[PixelSize, float, dict]:
    """Apply fracto's calibration precedence.

    Pixel size: `explicit` > `header_pixel_size` > sidecar > unknown.
    z unit: header (`header_z_factor` in µm per stored unit, or `header_z_unit`)
    > sidecar ``"z_unit"`` > `z_unit`.

    Returns
    -------
    (PixelSize, float, dict)
        Calibration, factor that turns stored heights into µm, metadata entries.
    """
    meta: dict = {}
    need_side = explicit is None and header_pixel_size is None
    need_side = need_side or (header_z_factor is None and header_z_unit is None)
    side = read_sidecar(path) if need_side else {"file": None, "pixel_size": None, "z_unit": None}
    if side["file"]:
        meta["sidecar"] = side["file"]
    if explicit is not None:
        ps = explicit
    elif header_pixel_size is not None:
        ps = header_pixel_size
    elif side["pixel_size"] is not None:
        ps = side["pixel_size"]
    else:
        ps = PixelSize.unknown()
    if header_z_factor is not None:
        factor = float(header_z_factor)
        meta["z_unit_source"] = header_z_source
    elif header_z_unit is not None:
        factor = length_unit_factor(header_z_unit)
        meta["z_unit"] = header_z_unit
        meta["z_unit_source"] = header_z_source
    elif side["z_unit"] is not None:
        factor = length_unit_factor(side["z_unit"])
        meta["z_unit"] = side["z_unit"]
        meta["z_unit_source"] = "sidecar JSON"
    else:
        factor = length_unit_factor(z_unit)
        meta["z_unit"] = z_unit
        meta["z_unit_source"] = "argument"
    return ps, factor, meta


def write_sidecar(path: str | os.PathLike, pixel_size: PixelSize) -> None:
    """Write ``<file>.json`` with ``z_unit: um`` and ``pixel_size_um`` ([x, y] or null)."""
    from fracto.io.safe import write_json_atomic

    p = Path(path)
    obj = {
        "z_unit": "um",
        "pixel_size_um": [pixel_size.x_um, pixel_size.y_um] if pixel_size.calibrated else None,
        "pixel_size_source": pixel_size.source,
    }
    write_json_atomic(p.with_name(p.name + ".json"), obj)
