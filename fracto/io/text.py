"""Height maps as text: a grid of heights, or x, y, z columns.

Layout rules (fracto's own; common practice for instrument exports)
-------------------------------------------------------------------
* Lines starting with ``#``, ``%`` or ``//`` are comments; blank lines are skipped.
* The first non-comment line may be a header (any line that is not all
  numbers). A header naming three columns ``x``, ``y``, ``z`` (in any order,
  optionally with units such as ``x [mm]``, ``y(mm)``, ``z_nm``) forces x,y,z
  reading; units written there override the ``z_unit`` argument.
* An ESRI-style grid header (``ncols``, ``nrows``, ``cellsize``,
  ``nodata_value`` lines) is read too; ``cellsize`` is taken in the z unit.
* Delimiters: comma, tab, semicolon or whitespace, detected from the data
  lines. With tab or semicolon delimiters a decimal comma is accepted.
* Not measured: an empty field, ``nan``, ``na``, ``n/a``, ``null``, ``none``,
  ``***``, ``bad`` and ``inf`` (case-insensitive), and the ESRI nodata value.
* Grid: row ``i`` of the file is row ``i`` of the map (rows run along y).
* x,y,z is chosen when there are exactly three columns and either the header
  names x, y and z, or there is no header, at least 9 rows, and the x and y
  columns take repeated values
  (each has at most half as many distinct values as there are rows), or the x or
  y column is sorted. The points must then lie on a regular, axis-aligned
  lattice: every coordinate within 1e-6 of the spacing (plus half a unit of the
  last printed decimal) of ``origin + k * spacing``, at least half of the
  lattice columns and rows holding a point, and no point twice;
  lattice nodes without a point are NaN. Map row ``i`` holds
  ``y = y_min + i * dy`` and column ``j`` holds ``x = x_min + j * dx``. The pixel
  size is the lattice spacing in the lateral unit (the z unit unless the header
  names one), source ``"text x,y columns"``.
"""

from __future__ import annotations

import itertools
import os
import re

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.io.heightmap import HeightMap, coerce_pixel_size, finish, read_file_bytes
from fracto.units import length_unit_factor

MISSING_TOKENS = frozenset(
    {
        "",
        "nan",
        "-nan",
        "+nan",
        "na",
        "n/a",
        "null",
        "none",
        "***",
        "bad",
        "inf",
        "+inf",
        "-inf",
        "infinity",
        "-infinity",
    }
)
_COMMENT = ("#", "%", "//")
_UNIT_IN_NAME = re.compile(
    r"^\s*([xyz])\s*(?:[\[\(]\s*([^\]\)]+?)\s*[\]\)]|[_/ ]\s*([A-Za-zµμ]+))?\s*$", re.IGNORECASE
)
#: Largest lattice accepted from x,y,z points (nodes).
MAX_NODES = 100_000_000


def _decode(data: bytes, name: str) -> str:
    if b"\x00" in data[:4096]:
        raise FractoInputError(f"'{name}' is a binary file, not a text height map.")
    for enc in ("utf-8-sig", "latin-1"):
        try:
            return data.decode(enc)
        except UnicodeDecodeError:
            continue
    raise FractoInputError(f"'{name}' is not a text file.")  # pragma: no cover - latin-1


def _detect_delimiter(lines: list[str]) -> str | None:
    sample = lines[: min(len(lines), 50)]
    for d in ("\t", ";", ","):
        counts = [ln.count(d) for ln in sample]
        if all(c > 0 for c in counts):
            return d
    return None


def _split(line: str, delim: str | None) -> list[str]:
    if delim is None:
        return line.split()
    parts = [p.strip() for p in line.split(delim)]
    if delim in "\t;":
        parts = [p.replace(",", ".") for p in parts]
    return parts


def _to_float(tokens: list[str], name: str, nodata: float | None = None) -> np.ndarray:
    try:  # fast path: NumPy parses numbers, 'nan' and 'inf' itself
        out = np.array(tokens, dtype=np.float64)
    except ValueError:
        out = None
    if out is None:
        out = _to_float_slow(tokens, name)
    out[np.isinf(out)] = np.nan
    if nodata is not None:
        out[out == nodata] = np.nan
    return out


def _to_float_slow(tokens: list[str], name: str) -> np.ndarray:
    clean = ["nan" if t.strip().lower() in MISSING_TOKENS else t for t in tokens]
    try:
        return np.array(clean, dtype=np.float64)
    except ValueError as exc:
        for t in clean:
            try:
                float(t)
            except ValueError:
                raise FractoInputError(
                    f"'{name}' holds '{t[:20]}', which is neither a number nor a "
                    "not-measured mark."
                ) from exc
        raise FractoInputError(f"'{name}' holds values that are not numbers.") from exc


def _is_numeric_line(tokens: list[str]) -> bool:
    for t in tokens:
        if t.lower() in MISSING_TOKENS:
            continue
        try:
            float(t)
        except ValueError:
            return False
    return True


def _header_columns(tokens: list[str]) -> dict | None:
    """Map 'x', 'y', 'z' to (column index, unit or None) when the header names them."""
    found: dict = {}
    for i, t in enumerate(tokens):
        m = _UNIT_IN_NAME.match(t.strip().strip('"').strip("'"))
        if not m:
            return None
        axis = m.group(1).lower()
        unit = m.group(2) or m.group(3)
        if axis in found:
            return None
        found[axis] = (i, unit)
    if set(found) != {"x", "y", "z"}:
        return None
    return found


def _decimals(tokens: list[str]) -> int | None:
    """Largest number of printed decimals in `tokens` (None if any uses an exponent)."""
    best = 0
    for t in set(tokens):
        t = t.strip()
        if "e" in t or "E" in t:
            return None
        if "." in t:
            best = max(best, len(t) - t.index(".") - 1)
    return best


def _lattice(values: np.ndarray, slack: float, name: str, axis: str) -> tuple:
    """Index of each value on a regular lattice, the spacing and the origin."""
    u = np.unique(values)
    if u.size < 2:
        raise FractoInputError(
            f"'{name}' has a single {axis} value; the x,y,z points span no map."
        )
    span = float(u[-1] - u[0])
    d = np.diff(u)
    d = d[d > 1e-9 * span]
    step0 = float(d.min())
    k = np.rint((u - u[0]) / step0)
    # Least-squares spacing over the whole range, then the residual check.
    step = float(np.sum((u - u[0]) * k) / np.sum(k * k))
    tol = 1e-6 * step + slack
    resid = np.abs(u - (u[0] + k * step))
    if not np.all(resid <= tol) or step <= 0:
        raise FractoInputError(
            f"'{name}' has x,y,z points whose {axis} values do not lie on a regular grid; "
            "resample them onto a grid first."
        )
    n_pos = int(k.max()) + 1
    if u.size < 0.5 * n_pos:
        # Distinct values on a much finer lattice than they fill: scattered, not gridded
        # (or a point off the grid that makes the lattice step tiny).
        raise FractoInputError(
            f"'{name}' has x,y,z points whose {axis} values do not lie on a regular grid "
            f"({u.size} distinct values over {n_pos} grid steps); resample them onto a grid."
        )
    idx = np.rint((values - u[0]) / step).astype(np.int64)
    if np.any(np.abs(values - (u[0] + idx * step)) > tol):
        raise FractoInputError(
            f"'{name}' has x,y,z points whose {axis} values do not lie on a regular grid; "
            "resample them onto a grid first."
        )
    return idx, step, float(u[0]), n_pos


def _xyz_to_grid(cols: np.ndarray, tok_cols: list, name: str) -> tuple:
    x, y, z = cols
    if np.isnan(x).any() or np.isnan(y).any():
        raise FractoInputError(f"'{name}' has x,y,z points with a missing x or y coordinate.")
    slack = []
    for tc in tok_cols:
        dec = _decimals(tc)
        slack.append(0.0 if dec is None else 0.5 * 10.0 ** (-dec) * 1.000001)
    ix, dx, x0, nx = _lattice(x, slack[0], name, "x")
    iy, dy, y0, ny = _lattice(y, slack[1], name, "y")
    if nx * ny > MAX_NODES:
        raise FractoInputError(
            f"'{name}' spans a lattice of {nx} x {ny} nodes, too large to read."
        )
    flat = iy * nx + ix
    if flat.size and np.bincount(flat, minlength=1).max() > 1:
        raise FractoInputError(
            f"'{name}' lists the same x,y point more than once (if it is a three-column grid "
            "of heights, give it a header line that does not name x, y and z)."
        )
    grid = np.full(ny * nx, np.nan)
    grid[flat] = z
    return grid.reshape(ny, nx), dx, dy, x0, y0


def _esri_header(lines: list[str]) -> tuple[dict, int]:
    keys = {
        "ncols",
        "nrows",
        "xllcorner",
        "yllcorner",
        "xllcenter",
        "yllcenter",
        "cellsize",
        "dx",
        "dy",
        "nodata_value",
    }
    out: dict = {}
    i = 0
    while i < len(lines):
        parts = lines[i].split()
        if len(parts) == 2 and parts[0].lower() in keys:
            try:
                out[parts[0].lower()] = float(parts[1])
            except ValueError:
                break
            i += 1
        else:
            break
    return out, i


def parse_text(text: str, name: str) -> dict:
    """Parse the text of a height-map file into a grid or x,y,z points.

    Returns
    -------
    dict
        ``{"z": 2-D array, "kind": "grid" | "xyz", "dx", "dy", "lateral_unit",
        "z_unit", "delimiter", "header"}`` (entries None when not given).
    """
    lines = []
    for raw in text.splitlines():
        s = raw.strip()
        if not s or s.startswith(_COMMENT):
            continue
        lines.append(s)
    if not lines:
        raise FractoInputError(f"'{name}' holds no data lines.")
    esri, skip = _esri_header(lines)
    nodata = esri.get("nodata_value")
    lines = lines[skip:]
    if not lines:
        raise FractoInputError(f"'{name}' holds a grid header but no data lines.")
    delim = _detect_delimiter(lines[1:] if len(lines) > 1 else lines)
    first = _split(lines[0], delim)
    header = None
    if not _is_numeric_line(first):
        header = first
        lines = lines[1:]
        if not lines:
            raise FractoInputError(f"'{name}' holds a header line but no data lines.")
    if delim is not None and all(ln.endswith(delim) for ln in lines):
        lines = [ln[: -len(delim)] for ln in lines]
    if delim is not None and delim in "\t;":
        lines = [ln.replace(",", ".") for ln in lines]  # decimal commas
    rows = [ln.split(delim) for ln in lines] if delim is not None else [ln.split() for ln in lines]
    ncol = len(rows[0])
    lens = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    bad_rows = np.nonzero(lens != ncol)[0]
    if bad_rows.size:
        i = int(bad_rows[0])
        raise FractoInputError(
            f"'{name}' has rows of different lengths ({ncol} and {lens[i]} values, "
            f"data line {i + 1})."
        )
    flat_tokens = list(itertools.chain.from_iterable(rows))
    values = _to_float(flat_tokens, name, nodata).reshape(len(rows), ncol)
    out = {
        "kind": "grid",
        "dx": None,
        "dy": None,
        "lateral_unit": None,
        "z_unit": None,
        "delimiter": delim,
        "header": header,
    }
    if esri:
        out["esri"] = esri
        cs = esri.get("cellsize")
        dx, dy = esri.get("dx", cs), esri.get("dy", cs)
        if dx is not None and dy is not None:
            out["dx"], out["dy"] = dx, dy
    hdr = _header_columns(header) if header is not None else None
    nrow = values.shape[0]
    is_xyz = False
    if ncol == 3 and not esri:
        if hdr is not None:
            is_xyz = True
        elif header is None and nrow >= 9:  # a header not naming x, y, z means a grid
            c0, c1 = values[:, 0], values[:, 1]
            fin = np.isfinite(c0).all() and np.isfinite(c1).all()
            if fin:
                rep = np.unique(c0).size <= nrow / 2 and np.unique(c1).size <= nrow / 2
                srt = bool(np.all(np.diff(c0) >= 0) or np.all(np.diff(c1) >= 0))
                is_xyz = rep or srt
    if not is_xyz:
        out["z"] = values
        return out
    order = (0, 1, 2)
    units: dict = {}
    if hdr is not None:
        order = (hdr["x"][0], hdr["y"][0], hdr["z"][0])
        units = {a: hdr[a][1] for a in "xyz"}
    cols = values[:, list(order)].T
    tok_cols = [flat_tokens[order[0] :: ncol], flat_tokens[order[1] :: ncol]]
    grid, dx, dy, _, _ = _xyz_to_grid(cols, tok_cols, name)
    out.update(kind="xyz", z=grid, dx=dx, dy=dy)
    ux, uy = units.get("x"), units.get("y")
    if ux or uy:
        if ux and uy and ux.lower() != uy.lower():
            raise FractoInputError(f"'{name}' names different units for x ({ux}) and y ({uy}).")
        out["lateral_unit"] = ux or uy
    if units.get("z"):
        out["z_unit"] = units["z"]
    return out


def read_text_height_map(
    path: str | os.PathLike,
    *,
    pixel_size: PixelSize | str | None = None,
    z_unit: str = "um",
    data: bytes | None = None,
) -> HeightMap:
    """Read a text height map: a grid of heights or x, y, z columns.

    Parameters
    ----------
    path : path-like
        ``.txt``, ``.csv``, ``.asc``, ``.dat`` (see the module docstring for the layout).
    pixel_size : PixelSize or str, optional
        Explicit calibration; overrides the x,y lattice and any sidecar.
    z_unit : str
        Unit of the heights (and of x, y) unless the header names one.

    Returns
    -------
    HeightMap
    """
    from fracto.io.sidecar import resolve_calibration

    name = os.fspath(path)
    if data is None:
        data = read_file_bytes(path)
    parsed = parse_text(_decode(data, name), name)
    header_z_unit = parsed["z_unit"]
    if header_z_unit is not None:
        try:
            length_unit_factor(header_z_unit)
        except FractoInputError as exc:
            raise FractoInputError(f"'{name}' names an unknown z unit '{header_z_unit}'.") from exc
    meta: dict = {"format": f"text-{parsed['kind']}", "delimiter": parsed["delimiter"]}
    if parsed["dx"] is not None:
        lat = parsed["lateral_unit"]
        if lat is not None:
            try:
                lf = length_unit_factor(lat)
            except FractoInputError as exc:
                raise FractoInputError(f"'{name}' names an unknown lateral unit '{lat}'.") from exc
            meta["lateral_unit"] = lat
            meta["lateral_unit_source"] = "text header"
        else:
            lf = None
        source = "text x,y columns" if parsed["kind"] == "xyz" else "text header"
        meta["_lattice"] = (parsed["dx"], parsed["dy"], lf, source)
    explicit = coerce_pixel_size(pixel_size)
    ps, factor, cal_meta = resolve_calibration(
        path,
        explicit=explicit,
        header_pixel_size=None,
        header_z_unit=header_z_unit,
        z_unit=z_unit,
        header_z_source="text header",
    )
    meta.update(cal_meta)
    lattice = meta.pop("_lattice", None)
    if lattice is not None and explicit is None:
        dx, dy, lf, source = lattice
        if lf is None:  # lateral unit = the z unit actually used
            lf = factor
            meta["lateral_unit_source"] = "same as z unit"
        try:
            ps = PixelSize(dx * lf, dy * lf, source)
        except FractoInputError as exc:
            raise FractoInputError(f"'{name}' gives an unusable grid spacing: {exc}") from exc
    return finish(parsed["z"], path, z_factor=factor, pixel_size=ps, metadata=meta)


def write_text_grid(path: str | os.PathLike, z_um: np.ndarray, pixel_size: PixelSize) -> None:
    """Write heights in µm as a text grid (comma-separated for ``.csv``, else tab),
    ``nan`` for not measured, plus a sidecar ``<file>.json`` with the calibration.

    Values are written with ``repr`` precision, so float64 reads back exactly.
    """
    from fracto.io.safe import write_text_atomic
    from fracto.io.sidecar import write_sidecar

    z = np.asarray(z_um, dtype=np.float64)
    delim = "," if str(path).lower().endswith(".csv") else "\t"
    lines = [
        delim.join("nan" if not np.isfinite(v) else repr(v) for v in row.tolist()) for row in z
    ]
    write_text_atomic(path, "# heights in um; rows run along y\n" + "\n".join(lines) + "\n")
    write_sidecar(path, pixel_size)


def write_xyz(
    path: str | os.PathLike, z_um: np.ndarray, pixel_size: PixelSize, *, delimiter: str = ","
) -> None:
    """Write heights as ``x,y,z`` columns in µm (header ``x_um,y_um,z_um``), NaN points
    omitted. Needs a calibrated pixel size."""
    from fracto.io.safe import write_text_atomic

    if not pixel_size.calibrated:
        raise FractoInputError("Writing x,y,z columns needs a known pixel size.")
    z = np.asarray(z_um, dtype=np.float64)
    dx, dy = pixel_size.spacing()
    ii, jj = np.nonzero(np.isfinite(z))
    d = delimiter
    out = [f"x_um{d}y_um{d}z_um"]
    out += [
        f"{j * dx!r}{d}{i * dy!r}{d}{float(z[i, j])!r}"
        for i, j in zip(ii.tolist(), jj.tolist(), strict=True)
    ]
    write_text_atomic(path, "\n".join(out) + "\n")
