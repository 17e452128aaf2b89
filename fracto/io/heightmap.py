"""Height maps: the container every surface command works on, and its readers/writers.

`read_height_map` and `write_height_map` dispatch on the file's magic bytes
and extension to the format modules:

========================  =========================================  ==================
format                    reader                                     writer
========================  =========================================  ==================
NumPy ``.npy``            this module (``allow_pickle=False``)       this module
float TIFF                `fracto.io.tiff`                           `fracto.io.tiff`
text grid / x,y,z text    `fracto.io.text`                           `fracto.io.text`
ISO 25178-71 SDF          `fracto.io.sdf`                            `fracto.io.sdf`
STL mesh                  `fracto.io.stl` (rasterised)               --
========================  =========================================  ==================

Conventions shared by all readers
---------------------------------
* Heights are returned in micrometres as float64; non-measured points are NaN.
* ``+inf`` and ``-inf`` are treated as *not measured* (NaN) and counted in
  ``metadata["n_infinite_as_nan"]``: no instrument measures an infinite height,
  and several write inf as their "no data" code.
* A map must be 2-D (leading axes of length 1 are squeezed), at least 3 x 3,
  hold at least one measured point and not be a single constant height.
* Calibration precedence: explicit ``pixel_size`` argument > the file's own
  header (SDF Xscale/Yscale, TIFF description or resolution tags, the lattice of
  x,y,z text, the STL mesh) > sidecar JSON beside the file > unknown.
* z-unit precedence: the file's own header (SDF Zscale, a fracto TIFF
  description, a text header naming the unit) > sidecar ``"z_unit"`` > the
  ``z_unit`` argument. ``metadata["z_unit_source"]`` says which was used.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize

#: Smallest map side accepted (a 3 x 3 map is the least that has a slope and a curvature).
MIN_SIDE = 3


@dataclass(frozen=True)
class HeightMap:
    """A measured surface.

    Parameters
    ----------
    z_um : ndarray of float64, shape (ny, nx)
        Heights in micrometres; rows run along y, columns along x.
        Non-measured points are NaN.
    pixel_size : PixelSize
        Lateral sampling and where it came from.
    source : str
        File the map was read from (or a description).
    metadata : dict
        Format-specific facts worth reporting (header fields, z unit read, ...).
    """

    z_um: np.ndarray
    pixel_size: PixelSize
    source: str = ""
    metadata: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, int]:
        return self.z_um.shape  # type: ignore[return-value]

    @property
    def valid_fraction(self) -> float:
        """Fraction of points that were measured (not NaN)."""
        return float(np.isfinite(self.z_um).mean()) if self.z_um.size else 0.0


# ----------------------------------------------------------------------------- helpers


def _name(path: str | os.PathLike) -> str:
    return os.fspath(path)


def check_heights(z: np.ndarray, path: str | os.PathLike, *, what: str = "height map") -> tuple:
    """Validate raw heights and return ``(float64 array, number of inf set to NaN)``.

    Parameters
    ----------
    z : ndarray
        Heights as read from the file (any numeric dtype).
    path : path-like
        File name, quoted in error messages.
    what : str
        Noun used in error messages.

    Raises
    ------
    FractoInputError
        For non-numeric, empty, non-2-D, too small, all-NaN or constant data.
    """
    name = _name(path)
    z = np.asarray(z)
    if z.dtype.kind not in "iuf":
        raise FractoInputError(
            f"'{name}' does not hold a numeric {what} (its data type is {z.dtype})."
        )
    if z.size == 0:
        raise FractoInputError(f"'{name}' holds an empty {what}.")
    while z.ndim > 2 and z.shape[0] == 1:
        z = z[0]
    if z.ndim != 2:
        raise FractoInputError(
            f"'{name}' holds a {z.ndim}-D array of shape {z.shape}; a {what} must be 2-D."
        )
    if min(z.shape) < MIN_SIDE:
        raise FractoInputError(
            f"'{name}' holds a {z.shape[0]} x {z.shape[1]} {what}; at least "
            f"{MIN_SIDE} x {MIN_SIDE} points are needed."
        )
    z = z.astype(np.float64, copy=True)
    inf = np.isinf(z)
    n_inf = int(inf.sum())
    if n_inf:
        z[inf] = np.nan
    finite = np.isfinite(z)
    if not finite.any():
        raise FractoInputError(f"'{name}' holds no measured point (all values are NaN or inf).")
    zf = z[finite]
    if float(zf.max()) == float(zf.min()):
        raise FractoInputError(
            f"'{name}' holds one constant height ({zf[0]:g}); there is no surface to measure."
        )
    return z, n_inf


def coerce_pixel_size(pixel_size: PixelSize | str | None) -> PixelSize | None:
    """Turn the ``pixel_size`` argument into a PixelSize (or None when not given)."""
    if pixel_size is None:
        return None
    if isinstance(pixel_size, PixelSize):
        return pixel_size
    if isinstance(pixel_size, str):
        return PixelSize.parse(pixel_size, source="command line")
    raise FractoInputError(
        f"Give the pixel size as text like '0.5um', not as {type(pixel_size).__name__}."
    )


def finish(
    z: np.ndarray,
    path: str | os.PathLike,
    *,
    z_factor: float,
    pixel_size: PixelSize,
    metadata: dict,
) -> HeightMap:
    """Validate `z`, scale it to µm by `z_factor` and wrap it in a HeightMap."""
    zz, n_inf = check_heights(z, path)
    if z_factor != 1.0:
        zz *= z_factor
    metadata = dict(metadata)
    metadata["n_infinite_as_nan"] = n_inf
    metadata["n_not_measured"] = int(np.isnan(zz).sum())
    return HeightMap(z_um=zz, pixel_size=pixel_size, source=_name(path), metadata=metadata)


def read_file_bytes(path: str | os.PathLike) -> bytes:
    """Read a whole input file, turning OS errors into one-sentence input errors."""
    p = Path(path)
    if not p.exists():
        raise FractoInputError(f"The file '{_name(path)}' does not exist.")
    if p.is_dir():
        raise FractoInputError(f"'{_name(path)}' is a folder, not a file.")
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise FractoInputError(f"Cannot read '{_name(path)}': {exc.strerror or exc}.") from exc
    if not data:
        raise FractoInputError(f"The file '{_name(path)}' is empty.")
    return data


def sniff_format(data: bytes, path: str | os.PathLike) -> str:
    """Name the height-map format of `data`: npy, tiff, sdf, stl or text.

    Strong magic bytes win over the extension (a ``.tif`` that is really a
    NumPy file is read as NumPy); otherwise the extension decides.
    """
    head = data[:16]
    if head.startswith(b"\x93NUMPY"):
        return "npy"
    if head[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        return "tiff"
    if head[:4] == b"PK\x03\x04":
        return "npz"
    first = head.lstrip()[:8].lower()
    if first.startswith((b"abcr", b"bbcr")):
        return "sdf"
    ext = Path(path).suffix.lower()
    if ext == ".npy":
        return "npy"
    if ext in (".tif", ".tiff"):
        return "tiff"
    if ext == ".sdf":
        return "sdf"
    if ext == ".stl":
        return "stl"
    if ext == ".npz":
        return "npz"
    if ext in (".txt", ".csv", ".asc", ".dat", ".xyz", ".tsv"):
        return "text"
    if head.lstrip()[:5].lower() == b"solid":
        return "stl"
    if len(data) >= 84:
        n = int.from_bytes(data[80:84], "little")
        if 84 + 50 * n == len(data) and n > 0:
            return "stl"
    return "text"


# ----------------------------------------------------------------------------- NumPy


def read_npy(
    path: str | os.PathLike,
    *,
    pixel_size: PixelSize | str | None = None,
    z_unit: str = "um",
    data: bytes | None = None,
) -> HeightMap:
    """Read a NumPy ``.npy`` height map (pickles and object arrays are refused).

    Parameters
    ----------
    path : path-like
        The ``.npy`` file.
    pixel_size : PixelSize or str, optional
        Explicit calibration; else a sidecar JSON, else unknown.
    z_unit : str
        Unit of the stored heights when no sidecar names one.

    Returns
    -------
    HeightMap
    """
    import io

    from fracto.io.sidecar import resolve_calibration

    if data is None:
        data = read_file_bytes(path)
    try:
        arr = np.load(io.BytesIO(data), allow_pickle=False)
    except ValueError as exc:
        msg = str(exc).lower()
        if "pickle" in msg or "object" in msg:
            raise FractoInputError(
                f"'{_name(path)}' holds Python objects, not a numeric array; "
                "fracto does not load pickled data."
            ) from exc
        raise FractoInputError(
            f"'{_name(path)}' is not a readable NumPy file (it may be truncated)."
        ) from exc
    except Exception as exc:
        raise FractoInputError(
            f"'{_name(path)}' is not a readable NumPy file (it may be truncated)."
        ) from exc
    if not isinstance(arr, np.ndarray):
        raise FractoInputError(
            f"'{_name(path)}' is a NumPy archive of several arrays; save the single "
            "height array with numpy.save."
        )
    if arr.dtype.names is not None:
        raise FractoInputError(
            f"'{_name(path)}' holds a structured array, not a numeric height map."
        )
    ps, factor, meta = resolve_calibration(
        path,
        explicit=coerce_pixel_size(pixel_size),
        header_pixel_size=None,
        header_z_unit=None,
        z_unit=z_unit,
    )
    meta["format"] = "npy"
    meta["dtype"] = str(arr.dtype)
    return finish(arr, path, z_factor=factor, pixel_size=ps, metadata=meta)


def write_npy(path: str | os.PathLike, z_um: np.ndarray, pixel_size: PixelSize) -> None:
    """Write heights in µm as ``.npy`` plus a sidecar ``<file>.json``.

    The sidecar always holds ``"z_unit": "um"`` and ``"pixel_size_um"``
    ([x, y], or null when the calibration is unknown, so that a stale sidecar
    from an earlier write can never lend a wrong calibration).
    """
    import io

    from fracto.io.safe import write_bytes_atomic
    from fracto.io.sidecar import write_sidecar

    buf = io.BytesIO()
    np.save(buf, np.asarray(z_um), allow_pickle=False)
    write_bytes_atomic(path, buf.getvalue())
    write_sidecar(path, pixel_size)


# ----------------------------------------------------------------------------- dispatch


def read_height_map(
    path: str | os.PathLike,
    *,
    pixel_size: PixelSize | str | None = None,
    z_unit: str = "um",
    stl_pixel_size_um: float | None = None,
) -> HeightMap:
    """Read a height map from any supported file.

    Parameters
    ----------
    path : path-like
        ``.npy``, ``.tif``/``.tiff`` (32/64-bit float), ``.txt``/``.csv``/
        ``.asc``/``.dat`` (grid or x,y,z columns), ``.sdf`` (ISO 25178-71,
        ASCII or binary) or ``.stl`` (ASCII or binary, rasterised).
    pixel_size : PixelSize or str, optional
        Explicit calibration such as ``"0.5um"``; overrides anything in the file.
    z_unit : str
        Unit of the stored heights (and of STL / x,y,z coordinates) when the file
        does not say; converted with `fracto.units.length_unit_factor`.
    stl_pixel_size_um : float, optional
        Raster step for STL meshes; default the median projected edge length.

    Returns
    -------
    HeightMap
        Heights in µm (float64, NaN where not measured), calibration and metadata.

    Raises
    ------
    FractoInputError
        With one sentence naming the file, for any unreadable or unusable input.

    References
    ----------
    ISO 25178-71:2017, Geometrical product specifications -- Surface texture:
    Areal -- Part 71: Software measurement standards (the SDF file).
    """
    from fracto.units import length_unit_factor

    length_unit_factor(z_unit)  # refuse unknown units before touching the file
    data = read_file_bytes(path)
    kind = sniff_format(data, path)
    if kind == "npy":
        return read_npy(path, pixel_size=pixel_size, z_unit=z_unit, data=data)
    if kind == "npz":
        raise FractoInputError(
            f"'{_name(path)}' is a NumPy .npz archive; save the single height array "
            "with numpy.save as .npy."
        )
    if kind == "tiff":
        from fracto.io.tiff import read_tiff_height_map

        return read_tiff_height_map(path, pixel_size=pixel_size, z_unit=z_unit, data=data)
    if kind == "sdf":
        from fracto.io.sdf import read_sdf

        return read_sdf(path, pixel_size=pixel_size, data=data)
    if kind == "stl":
        from fracto.io.stl import read_stl

        return read_stl(
            path,
            pixel_size=pixel_size,
            z_unit=z_unit,
            stl_pixel_size_um=stl_pixel_size_um,
            data=data,
        )
    from fracto.io.text import read_text_height_map

    return read_text_height_map(path, pixel_size=pixel_size, z_unit=z_unit, data=data)


def write_height_map(
    path: str | os.PathLike,
    z_um: np.ndarray,
    pixel_size: PixelSize,
    *,
    binary_sdf: bool = True,
) -> None:
    """Write a height map in µm; the format follows the extension.

    Parameters
    ----------
    path : path-like
        ``.npy`` (+ sidecar ``<file>.json``), ``.tif``/``.tiff`` (float32,
        calibration in resolution tags and JSON description), ``.sdf``
        (ISO 25178-71, binary unless ``binary_sdf=False``), or ``.txt``/``.csv``/
        ``.asc``/``.dat`` (text grid + sidecar JSON).
    z_um : ndarray, 2-D
        Heights in micrometres, NaN where not measured.
    pixel_size : PixelSize
        Calibration to store (``PixelSize.unknown()`` is stored as unknown).
    binary_sdf : bool
        Binary or ASCII SDF.

    References
    ----------
    ISO 25178-71:2017 (SDF file).
    """
    if not isinstance(pixel_size, PixelSize):
        raise FractoInputError("write_height_map needs a PixelSize (PixelSize.unknown() if none).")
    z = np.asarray(z_um)
    if z.ndim != 2 or z.size == 0 or z.dtype.kind not in "iuf":
        raise FractoInputError(
            f"Cannot write '{_name(path)}': the heights must be a non-empty 2-D numeric array."
        )
    ext = Path(path).suffix.lower()
    if ext == ".npy":
        write_npy(path, z, pixel_size)
    elif ext in (".tif", ".tiff"):
        from fracto.io.tiff import write_tiff_height_map

        write_tiff_height_map(path, z, pixel_size)
    elif ext == ".sdf":
        from fracto.io.sdf import write_sdf

        write_sdf(path, z, pixel_size, binary=binary_sdf)
    elif ext in (".txt", ".csv", ".asc", ".dat"):
        from fracto.io.text import write_text_grid

        write_text_grid(path, z, pixel_size)
    else:
        raise FractoInputError(
            f"Cannot write '{_name(path)}': use the extension .npy, .tif, .sdf, .txt or .csv."
        )
