"""ISO 25178-71 surface data files (SDF), ASCII and binary.

Conventions fracto assumes
--------------------------
The header field names follow ISO 25178-71 *(from memory, not checked against
the text of the standard)*; the items marked *assumption* are fracto's own
reading where memory is unsure, documented so that a file written elsewhere
can be checked against them.

* Line 1, the version: ``aBCR-1.0`` for ASCII, ``bBCR-1.0`` for binary
  (*assumption*: the reader only looks at the first letter, ``a`` or ``b``).
* Header lines ``Key = value`` (keys matched case-insensitively, extra
  whitespace and CRLF line ends tolerated; ``Key value`` and ``Key: value`` are
  read too): ManufacID, CreateDate and ModDate (``DDMMYYYYHHMM``), NumPoints
  (points per profile = number of columns, x), NumProfiles (number of
  profiles = rows, y), Xscale, Yscale, Zscale (metres per unit: x spacing,
  y spacing, metres per stored z value), Zresolution (metres; ``-1`` = not
  stated, *assumption*), Compression (only ``0`` = none is read), DataType,
  CheckType (``0`` = no checksum; others are read but not verified).
* DataType codes (*assumption*, from memory): 0 uint8, 1 uint16, 2 uint32,
  3 float32, 4 int8, 5 int16, 6 int32, 7 float64. fracto writes 3 for float32
  input and 7 otherwise, so a round trip is exact.
* A line holding ``*`` ends the header. ASCII data: whitespace-separated
  numbers, profile after profile (row-major, first profile = first row of the
  map), then a ``*`` line. Binary data: the header is the same ASCII lines;
  the little-endian data block starts right after the newline of the ``*``
  line (*assumption*); fracto writes CRLF after the block, then the trailer.
* Scales are written as the exact decimal of the µm value shifted by 1e-6
  (0.123456789 µm -> ``1.23456789E-7``) and read back through decimal
  arithmetic, so pixel sizes round-trip exactly.
* Reading only: a binary file whose header is not ASCII lines is tried as a
  fixed 81-byte little-endian header (*assumption*, from memory: version 8
  chars, ManufacID 10, CreateDate 12, ModDate 12, NumPoints and NumProfiles
  uint16, Xscale, Yscale, Zscale, Zresolution float64, Compression, DataType,
  CheckType uint8), the data following at byte 81.
* Trailer (optional, after the data): ``Key = value`` lines, ended by ``*``;
  fracto writes ``Generator = fracto <version>`` and ``ZUnit = um`` there and
  keeps what it reads in ``metadata["sdf_trailer"]``.
* Non-measured points (fracto convention): ASCII writes ``NaN``; the ASCII
  reader also accepts ``BAD``, ``nan``, ``***`` and ``inf``. Binary float
  types use IEEE NaN. Integer types have no "not measured" code.
* Uncalibrated maps (fracto convention): ``Xscale = 0`` and ``Yscale = 0``;
  the reader maps both zero to ``PixelSize.unknown()``. A negative scale, or
  only one of them zero, is refused.

Heights: ``z_um = value * Zscale * 1e6``. fracto writes ``Zscale = 1e-6`` and
the heights in µm unchanged, so the stored values are exactly the given ones.

References
----------
ISO 25178-71:2017, Geometrical product specifications (GPS) -- Surface texture:
Areal -- Part 71: Software measurement standards.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import re
from decimal import Decimal, InvalidOperation

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.io.heightmap import HeightMap, coerce_pixel_size, finish, read_file_bytes

#: DataType code -> little-endian NumPy dtype (assumption, see module docstring).
SDF_DATATYPES: dict[int, str] = {
    0: "<u1",
    1: "<u2",
    2: "<u4",
    3: "<f4",
    4: "<i1",
    5: "<i2",
    6: "<i4",
    7: "<f8",
}

ASCII_VERSION = "aBCR-1.0"
BINARY_VERSION = "bBCR-1.0"

_REQUIRED = ("numpoints", "numprofiles", "xscale", "yscale", "zscale")
_MISSING_TOKENS = {"nan", "bad", "***", "na", "inf", "+inf", "-inf", "infinity", "-infinity"}
_KEY_LINE = re.compile(r"^\s*([A-Za-z][A-Za-z0-9_]*)\s*(?:=|:|\s)\s*(.*?)\s*$")


def _date_now() -> str:
    return _dt.datetime.now(_dt.UTC).strftime("%d%m%Y%H%M")


def _m_from_um(v_um: float) -> str:
    """Text of `v_um` micrometres in metres, exact in decimal (repr shifted by 1e-6)."""
    return str(Decimal(repr(float(v_um))).scaleb(-6))


def _um_from_m(text: str) -> float:
    """Micrometres from a metre value written as text, through exact decimal arithmetic."""
    return float(Decimal(text.strip().replace(",", ".")).scaleb(6))


def _header_text(z: np.ndarray, pixel_size: PixelSize, version: str, code: int) -> str:
    if pixel_size.calibrated:
        xs = _m_from_um(pixel_size.x_um)  # type: ignore[arg-type]
        ys = _m_from_um(pixel_size.y_um)  # type: ignore[arg-type]
    else:
        xs = ys = "0"
    now = _date_now()
    lines = [
        version,
        "ManufacID   = fracto",
        f"CreateDate  = {now}",
        f"ModDate     = {now}",
        f"NumPoints   = {z.shape[1]}",
        f"NumProfiles = {z.shape[0]}",
        f"Xscale      = {xs}",
        f"Yscale      = {ys}",
        "Zscale      = 1e-06",
        "Zresolution = -1",
        "Compression = 0",
        f"DataType    = {code}",
        "CheckType   = 0",
        "*",
    ]
    return "\r\n".join(lines) + "\r\n"


def _trailer_text() -> str:
    from fracto import __version__

    return f"*\r\nGenerator = fracto {__version__}\r\nZUnit = um\r\n*\r\n"


def sdf_bytes(z_um: np.ndarray, pixel_size: PixelSize, *, binary: bool = False) -> bytes:
    """The bytes of an SDF file holding heights `z_um` (µm) with `pixel_size`.

    See the module docstring for the exact conventions.
    """
    z = np.asarray(z_um)
    if z.ndim != 2 or z.size == 0:
        raise FractoInputError("An SDF file needs a non-empty 2-D height map.")
    if z.shape[0] > 2**31 - 1 or z.shape[1] > 2**31 - 1:
        raise FractoInputError("The height map is too large for an SDF file.")
    if z.dtype == np.float32:
        code, arr = 3, z.astype("<f4")
    else:
        code, arr = 7, z.astype("<f8")
    arr = np.where(np.isinf(arr), np.nan, arr).astype(arr.dtype)
    if binary:
        head = _header_text(z, pixel_size, BINARY_VERSION, code).encode("ascii")
        # The binary block follows the '*' line; the trailer starts on a new line.
        return head + np.ascontiguousarray(arr).tobytes() + b"\r\n" + _trailer_text().encode()
    head = _header_text(z, pixel_size, ASCII_VERSION, code)
    rows = []
    # str() of a NumPy float32/float64 scalar is the shortest text that reads back to the
    # same value in that type (the reader parses DataType 3 as float32).
    for row in arr:
        rows.append(" ".join("NaN" if math.isnan(v) else str(v) for v in row))
    return (head + "\r\n".join(rows) + "\r\n" + _trailer_text()).encode("ascii")


def write_sdf(
    path: str | os.PathLike,
    z_um: np.ndarray,
    pixel_size: PixelSize,
    *,
    binary: bool = False,
) -> None:
    """Write an ISO 25178-71 SDF file (atomically, through fracto.io.safe).

    Parameters
    ----------
    path : path-like
        Output file.
    z_um : ndarray, 2-D
        Heights in µm (NaN = not measured); float32 is stored as DataType 3,
        anything else as float64 (DataType 7).
    pixel_size : PixelSize
        Stored as Xscale/Yscale in metres (0 = unknown, a fracto convention).
    binary : bool
        Binary data block instead of ASCII numbers.

    References
    ----------
    ISO 25178-71:2017 (SDF).
    """
    from fracto.io.safe import write_bytes_atomic

    if not isinstance(pixel_size, PixelSize):
        raise FractoInputError("write_sdf needs a PixelSize (PixelSize.unknown() if none).")
    write_bytes_atomic(path, sdf_bytes(z_um, pixel_size, binary=binary))


def _parse_header(data: bytes, name: str) -> tuple[str, dict, int]:
    """Return (version, {lowercase key: value text}, offset of the first data byte)."""
    pos = 0
    n = len(data)
    version = None
    fields: dict = {}
    while True:
        if pos >= n:
            raise FractoInputError(f"'{name}' ends inside the SDF header (no '*' line).")
        end = data.find(b"\n", pos)
        if end < 0:
            raise FractoInputError(f"'{name}' ends inside the SDF header (no '*' line).")
        raw = data[pos:end]
        pos = end + 1
        try:
            line = raw.decode("ascii").strip()
        except UnicodeDecodeError as exc:
            raise FractoInputError(f"'{name}' has a header that is not SDF text.") from exc
        if not line:
            continue
        if version is None:
            version = line
            if version[:1].lower() not in ("a", "b"):
                raise FractoInputError(
                    f"'{name}' does not start with an SDF version line such as 'aBCR-1.0'."
                )
            continue
        if line == "*":
            return version, fields, pos
        m = _KEY_LINE.match(line)
        if not m:
            raise FractoInputError(f"'{name}' has an unreadable SDF header line '{line[:40]}'.")
        fields[m.group(1).lower()] = m.group(2)
        if len(fields) > 200:
            raise FractoInputError(f"'{name}' has no end to its SDF header.")


#: Fixed binary header (assumption, from memory): version 8 chars, ManufacID 10,
#: CreateDate 12, ModDate 12, NumPoints and NumProfiles uint16, Xscale, Yscale,
#: Zscale, Zresolution float64, Compression, DataType, CheckType uint8; 81 bytes,
#: little-endian, no padding.
_FIXED_HEADER = "<8s10s12s12sHHddddBBB"


def _parse_fixed_binary_header(data: bytes) -> tuple[str, dict, int] | None:
    """Read the fixed 81-byte binary header some binary SDF files may use (see
    `_FIXED_HEADER`); None when `data` does not look like one."""
    import struct

    size = struct.calcsize(_FIXED_HEADER)
    if len(data) < size or data[:1] not in (b"b", b"B"):
        return None
    parts = struct.unpack(_FIXED_HEADER, data[:size])
    version = parts[0].split(b"\x00")[0].decode("ascii", errors="replace").strip()
    nx, ny, xs, ys, zs, zr, comp, dt, ck = parts[4:]
    scales = (xs, ys, zs)
    if nx == 0 or ny == 0 or dt not in SDF_DATATYPES:
        return None
    if not all(math.isfinite(v) and 0 <= abs(v) < 1.0 for v in scales) or zs == 0:
        return None
    fields = {
        "manufacid": parts[1].split(b"\x00")[0].decode("ascii", errors="replace").strip(),
        "createdate": parts[2].decode("ascii", errors="replace"),
        "moddate": parts[3].decode("ascii", errors="replace"),
        "numpoints": str(nx),
        "numprofiles": str(ny),
        "xscale": repr(xs),
        "yscale": repr(ys),
        "zscale": repr(zs),
        "zresolution": repr(zr),
        "compression": str(comp),
        "datatype": str(dt),
        "checktype": str(ck),
        "header": "fixed binary",
    }
    return version, fields, size


def _int_field(fields: dict, key: str, name: str) -> int:
    try:
        v = float(fields[key])
    except (KeyError, ValueError) as exc:
        raise FractoInputError(f"'{name}' has no readable SDF header field {key!r}.") from exc
    if not v.is_integer():
        raise FractoInputError(f"'{name}' gives the SDF field {key!r} as {fields[key]!r}.")
    return int(v)


def _float_field(fields: dict, key: str, name: str) -> float:
    """A header value in metres, returned in micrometres."""
    try:
        v = _um_from_m(fields[key])
    except (KeyError, ValueError, InvalidOperation) as exc:
        raise FractoInputError(f"'{name}' has no readable SDF header field {key!r}.") from exc
    if not math.isfinite(v):
        raise FractoInputError(f"'{name}' gives the SDF field {key!r} as {fields[key]!r}.")
    return v


def _parse_trailer(text: str) -> dict:
    out = {}
    for line in text.splitlines():
        m = _KEY_LINE.match(line)
        if m and line.strip() != "*":
            out[m.group(1)] = m.group(2)
    return out


def read_sdf(
    path: str | os.PathLike,
    *,
    pixel_size: PixelSize | str | None = None,
    data: bytes | None = None,
) -> HeightMap:
    """Read an ISO 25178-71 SDF file (ASCII or binary).

    Parameters
    ----------
    path : path-like
        The ``.sdf`` file.
    pixel_size : PixelSize or str, optional
        Explicit calibration; overrides Xscale/Yscale.

    Returns
    -------
    HeightMap
        Heights ``value * Zscale`` converted to µm; pixel size from Xscale/Yscale
        (source ``"SDF header"``), or unknown when both are 0.

    References
    ----------
    ISO 25178-71:2017 (SDF).
    """
    name = os.fspath(path)
    if data is None:
        data = read_file_bytes(path)
    try:
        version, fields, offset = _parse_header(data, name)
    except FractoInputError:
        fixed = _parse_fixed_binary_header(data)
        if fixed is None:
            raise
        version, fields, offset = fixed
    for key in _REQUIRED:
        if key not in fields:
            raise FractoInputError(f"'{name}' lacks the SDF header field {key!r}.")
    nx = _int_field(fields, "numpoints", name)
    ny = _int_field(fields, "numprofiles", name)
    if nx <= 0 or ny <= 0:
        raise FractoInputError(f"'{name}' declares {nx} points x {ny} profiles; both must be > 0.")
    if nx * ny > 2**31:
        raise FractoInputError(f"'{name}' declares an implausibly large map ({nx} x {ny}).")
    xs = _float_field(fields, "xscale", name)
    ys = _float_field(fields, "yscale", name)
    zs = _float_field(fields, "zscale", name)
    # xs, ys, zs are in micrometres (per pixel / per stored unit) from here on.
    if zs == 0:
        raise FractoInputError(f"'{name}' gives Zscale = 0; heights cannot be scaled.")
    comp = _int_field(fields, "compression", name) if "compression" in fields else 0
    if comp != 0:
        raise FractoInputError(f"'{name}' is compressed (Compression = {comp}); fracto reads 0.")
    code = _int_field(fields, "datatype", name) if "datatype" in fields else 7
    if code not in SDF_DATATYPES:
        raise FractoInputError(f"'{name}' uses the unknown SDF DataType {code}.")
    dtype = np.dtype(SDF_DATATYPES[code])
    binary = version[:1].lower() == "b"
    count = nx * ny
    trailer: dict = {}
    if binary:
        nbytes = count * dtype.itemsize
        block = data[offset : offset + nbytes]
        if len(block) < nbytes:
            raise FractoInputError(
                f"'{name}' is truncated: the header declares {count} values "
                f"({nbytes} bytes) but only {len(block)} bytes follow."
            )
        z = np.frombuffer(block, dtype=dtype).reshape(ny, nx)
        rest = data[offset + nbytes :]
        try:
            trailer = _parse_trailer(rest.decode("ascii", errors="ignore"))
        except Exception:
            trailer = {}
    else:
        try:
            text = data[offset:].decode("ascii")
        except UnicodeDecodeError as exc:
            raise FractoInputError(f"'{name}' has non-text bytes in its ASCII SDF data.") from exc
        star = re.search(r"^\s*\*\s*$", text, flags=re.MULTILINE)
        body = text[: star.start()] if star else text
        if star:
            trailer = _parse_trailer(text[star.end() :])
        tokens = body.split()
        if len(tokens) < count:
            raise FractoInputError(
                f"'{name}' is truncated: the header declares {count} values but "
                f"{len(tokens)} are present."
            )
        if len(tokens) > count:
            raise FractoInputError(
                f"'{name}' holds {len(tokens)} values where its header declares {count}."
            )
        ftype = np.float32 if code == 3 else np.float64
        try:  # fast path: NumPy reads numbers, NaN and inf itself
            z = np.array(tokens, dtype=ftype).reshape(ny, nx)
        except ValueError:
            z = None
        clean = tokens
        if z is None:
            clean = ["nan" if t.lower() in _MISSING_TOKENS else t for t in tokens]
        try:
            if z is None:
                z = np.array(clean, dtype=ftype).reshape(ny, nx)
        except ValueError as exc:
            bad = next((t for t in clean if not _is_number(t)), "?")
            raise FractoInputError(
                f"'{name}' holds the non-number '{bad[:20]}' in its data."
            ) from exc
    # Calibration.
    explicit = coerce_pixel_size(pixel_size)
    if xs == 0 and ys == 0:
        header_ps = PixelSize.unknown()
    elif xs <= 0 or ys <= 0:
        raise FractoInputError(
            f"'{name}' gives Xscale = {fields['xscale']} and Yscale = {fields['yscale']}; "
            "pixel sizes must be positive."
        )
    else:
        header_ps = PixelSize(xs, ys, "SDF header")
    ps = explicit if explicit is not None else header_ps
    meta = {
        "format": "sdf-binary" if binary else "sdf-ascii",
        "sdf_version": version,
        "sdf_header": {k: v for k, v in fields.items()},
        "sdf_datatype": code,
        "z_unit": "m",
        "z_scale_um": zs,
        "z_unit_source": "SDF header Zscale",
    }
    if trailer:
        meta["sdf_trailer"] = trailer
    return finish(z, path, z_factor=zs, pixel_size=ps, metadata=meta)


def _is_number(t: str) -> bool:
    try:
        float(t)
    except ValueError:
        return False
    return True
