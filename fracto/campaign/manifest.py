"""Campaign manifests: which files to score, of which specimen, at which temperature.

A manifest is a CSV file (comma, semicolon or tab separated, UTF-8, first line the
column names). Required: ``path`` (relative to the manifest's folder, or
absolute) and ``specimen``. Test temperature: a ``temperature_C``,
``temperature_K`` or ``temperature_F`` column of numbers, or a ``temperature``
column whose values carry their unit (``-40C``, ``233K``); a campaign without
any temperature column is accepted (every temperature is then missing).
Pixel size (optional, else the file's own calibration): ``pixel_size_um``,
``pixel_size_nm`` or ``pixel_size`` with a unit (``0.12um``). ``kind``
(optional): ``sem``, ``height`` or ``labels`` (ground-truth label images are
listed but never scored); without it the kind follows the file
(:func:`kind_of_file`). Every other column is carried through to the outputs.

Decisions
---------
- A row whose temperature or pixel size cannot be read, whose kind is unknown
  or whose file is missing keeps its place with a ``problem`` sentence; the
  batch reports it as an error row and goes on. Only a manifest that cannot be
  read at all, or lacks a required column, stops the batch.
- The same file named twice: both rows are kept (each appears in
  ``images.csv``); the file is scored once, since results are stored by
  content hash. :func:`duplicate_paths` lists such files so the CLI can say so.

A folder instead of a manifest: every image or height-map file in it (and in
its sub-folders, hidden ones and fracto's own output folders excepted) in
sorted order; specimen = file stem; no temperature.
"""

from __future__ import annotations

import csv
import io
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

from fracto.errors import FractoInputError
from fracto.units import length_unit_factor, parse_length_um, parse_temperature_c

#: Extensions of SEM images.
SEM_EXTENSIONS = (".png", ".jpg", ".jpeg", ".bmp")
#: Extensions of height maps (TIFF is decided by its sample type).
HEIGHT_EXTENSIONS = (".npy", ".sdf", ".stl", ".txt", ".csv", ".asc", ".dat", ".xyz")
TIFF_EXTENSIONS = (".tif", ".tiff")
KINDS = ("sem", "height", "labels")

#: Columns fracto reads itself (everything else is carried through).
TEMPERATURE_COLUMNS = {"temperature_c": "C", "temperature_k": "K", "temperature_f": "F"}
PIXEL_COLUMNS = {"pixel_size_um": "um", "pixel_size_nm": "nm"}
KNOWN_COLUMNS = (
    "path",
    "specimen",
    "kind",
    "temperature",
    *TEMPERATURE_COLUMNS,
    "pixel_size",
    *PIXEL_COLUMNS,
)


@dataclass(frozen=True)
class ManifestRow:
    """One row of a campaign manifest.

    Parameters
    ----------
    index : int
        Position in the manifest (0-based, data rows only).
    line : int
        Line number in the manifest file (1-based; 0 for folder entries).
    path : str
        The path as written in the manifest.
    file : Path
        The resolved file.
    kind : str
        ``"sem"``, ``"height"``, ``"labels"`` or ``""`` when it could not be decided.
    specimen : str
    temperature_C : float or None
    pixel_size_um : float or None
        From the manifest; None = the file's calibration.
    extra : dict
        The carried-through columns (name -> text as written).
    problem : str or None
        One sentence when the row cannot be scored (bad value, missing file).
    """

    index: int
    line: int
    path: str
    file: Path
    kind: str
    specimen: str
    temperature_C: float | None
    pixel_size_um: float | None
    extra: dict = field(default_factory=dict)
    problem: str | None = None


@dataclass(frozen=True)
class Manifest:
    """A read manifest: its rows and where it came from."""

    source: Path
    base: Path
    rows: tuple[ManifestRow, ...]
    extra_columns: tuple[str, ...]
    from_folder: bool = False

    def to_dict(self) -> dict:
        return {
            "source": str(self.source),
            "from_folder": self.from_folder,
            "n_rows": len(self.rows),
            "extra_columns": list(self.extra_columns),
        }


def kind_of_file(path: str | os.PathLike) -> str:
    """``"sem"`` or ``"height"`` from the extension; TIFF by its sample type.

    8/16-bit integer TIFFs are SEM images, floating-point TIFFs height maps.

    Raises
    ------
    FractoInputError
        For an extension fracto does not read, or a TIFF it cannot open.
    """
    p = Path(path)
    ext = p.suffix.lower()
    if ext in SEM_EXTENSIONS:
        return "sem"
    if ext in HEIGHT_EXTENSIONS:
        return "height"
    if ext in TIFF_EXTENSIONS:
        import tifffile

        try:
            with tifffile.TiffFile(p) as tf:
                dtype = tf.pages[0].dtype
        except Exception as exc:
            raise FractoInputError(f"'{p.name}' cannot be opened as a TIFF file.") from exc
        if dtype is not None and dtype.kind == "f":
            return "height"
        return "sem"
    raise FractoInputError(
        f"'{p.name}' has an extension fracto does not read as an image or height map."
    )


def _norm(name: str) -> str:
    return name.strip().lstrip("\ufeff").lower()


def _read_table(path: Path) -> tuple[list[str], list[tuple[int, list[str]]]]:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise FractoInputError(f"The manifest '{path}' is not UTF-8 text.") from exc
    except OSError as exc:
        raise FractoInputError(f"The manifest '{path}' cannot be read ({exc.strerror}).") from exc
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise FractoInputError(f"The manifest '{path}' is empty.")
    try:
        dialect = csv.Sniffer().sniff(lines[0], delimiters=",;\t")
        delim = dialect.delimiter
    except csv.Error:
        delim = ","
    reader = csv.reader(io.StringIO(text), delimiter=delim)
    header: list[str] | None = None
    body: list[tuple[int, list[str]]] = []
    for row in reader:
        line = reader.line_num
        if not any(c.strip() for c in row) or row[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = [c.strip().lstrip("\ufeff") for c in row]
            continue
        body.append((line, row))
    assert header is not None
    return header, body


def _temperature(text: str, column: str) -> float | None:
    t = text.strip()
    if not t or t.lower() in ("na", "nan", "none", "-"):
        return None
    unit = TEMPERATURE_COLUMNS.get(column)
    if unit is not None:
        try:
            v = float(t)
        except ValueError:
            raise FractoInputError(
                f"The temperature '{t}' in column '{column}' is not a number."
            ) from None
        t = f"{v}{unit}"
    else:
        stripped = t.replace("°", "").strip()
        try:
            float(stripped)
        except ValueError:
            pass
        else:
            raise FractoInputError(
                f"The temperature '{t}' has no unit; write it like '{stripped}C' or "
                f"'{stripped}K', or name the column temperature_C."
            )
    v = parse_temperature_c(t, what="temperature")
    if not math.isfinite(v) or v < -273.15:
        raise FractoInputError(f"The temperature '{text.strip()}' is not a valid temperature.")
    return v


def _pixel_size(text: str, column: str) -> float | None:
    t = text.strip()
    if not t or t.lower() in ("na", "nan", "none", "-"):
        return None
    unit = PIXEL_COLUMNS.get(column)
    if unit is not None:
        try:
            v = float(t) * length_unit_factor(unit)
        except ValueError:
            raise FractoInputError(
                f"The pixel size '{t}' in column '{column}' is not a number."
            ) from None
        if not (math.isfinite(v) and v > 0):
            raise FractoInputError(f"The pixel size '{t}' must be a positive length.")
        return v
    return parse_length_um(t, what="pixel size")


def _pick(cols: dict[str, str], options, what: str) -> str | None:
    found = [c for c in options if c in cols]
    if len(found) > 1:
        raise FractoInputError(
            f"The manifest has more than one {what} column ({', '.join(cols[c] for c in found)}); "
            "keep one."
        )
    return found[0] if found else None


def read_manifest(path: str | os.PathLike) -> Manifest:
    """Read and check a campaign manifest (see the module notes).

    Parameters
    ----------
    path : path-like
        The CSV file.

    Returns
    -------
    Manifest

    Raises
    ------
    FractoInputError
        If the file cannot be read, lacks ``path`` or ``specimen``, names a
        column twice, has several temperature or pixel-size columns, or holds
        no data rows.
    """
    src = Path(path)
    if not src.is_file():
        raise FractoInputError(f"The manifest '{src}' does not exist.")
    header, body = _read_table(src)
    cols: dict[str, str] = {}
    for name in header:
        key = _norm(name)
        if not key:
            raise FractoInputError(f"The manifest '{src.name}' has a column without a name.")
        if key in cols:
            raise FractoInputError(f"The manifest '{src.name}' names the column '{name}' twice.")
        cols[key] = name
    for req in ("path", "specimen"):
        if req not in cols:
            raise FractoInputError(
                f"The manifest '{src.name}' has no '{req}' column (it has: {', '.join(header)})."
            )
    tcol = _pick(cols, ("temperature", *TEMPERATURE_COLUMNS), "temperature")
    pcol = _pick(cols, ("pixel_size", *PIXEL_COLUMNS), "pixel-size")
    extra = tuple(cols[k] for k in cols if k not in KNOWN_COLUMNS)
    base = src.resolve().parent
    rows: list[ManifestRow] = []
    pos = {k: header.index(cols[k]) for k in cols}
    for i, (line, raw) in enumerate(body):
        if len(raw) > len(header) and any(c.strip() for c in raw[len(header) :]):
            cells = raw
            problem = (
                f"Line {line} has {len(raw)} fields but the header names {len(header)} columns."
            )
        else:
            cells, problem = raw + [""] * (len(header) - len(raw)), None
        cell = {k: cells[j].strip() if j < len(cells) else "" for k, j in pos.items()}
        rel = cell["path"]
        file = Path(rel) if Path(rel).is_absolute() else base / rel
        specimen = cell["specimen"]
        temp = ps = None
        kind = cell.get("kind", "").lower()

        def fail(msg: str, problem=problem) -> str:
            return problem or msg

        if not rel:
            problem = fail(f"Line {line} has an empty path.")
        if not specimen:
            problem = fail(f"Line {line} names no specimen.")
        if tcol is not None:
            try:
                temp = _temperature(cell[tcol], tcol)
            except FractoInputError as exc:
                problem = fail(f"Line {line}: {exc}")
        if pcol is not None:
            try:
                ps = _pixel_size(cell[pcol], pcol)
            except FractoInputError as exc:
                problem = fail(f"Line {line}: {exc}")
        if kind and kind not in KINDS:
            problem = fail(f"Line {line}: the kind '{kind}' is not one of {', '.join(KINDS)}.")
            kind = ""
        if rel and not file.is_file():
            problem = fail(f"The file '{rel}' (line {line}) does not exist.")
        elif rel and not kind:
            try:
                kind = kind_of_file(file)
            except FractoInputError as exc:
                problem = fail(f"Line {line}: {exc}")
        rows.append(
            ManifestRow(
                index=i,
                line=line,
                path=rel,
                file=file,
                kind=kind,
                specimen=specimen,
                temperature_C=temp,
                pixel_size_um=ps,
                extra={c: cells[header.index(c)].strip() for c in extra},
                problem=problem,
            )
        )
    if not rows:
        raise FractoInputError(f"The manifest '{src.name}' holds no data rows.")
    return Manifest(source=src, base=base, rows=tuple(rows), extra_columns=extra)


#: Folder names never searched for input files (fracto's own outputs).
SKIP_DIRS = ("overlays",)


def scan_folder(
    folder: str | os.PathLike, *, exclude: str | os.PathLike | None = None
) -> Manifest:
    """A manifest of every image and height-map file in `folder` (recursively).

    Parameters
    ----------
    folder : path-like
    exclude : path-like, optional
        A folder to leave out (the batch's own output folder).

    Raises
    ------
    FractoInputError
        If the folder does not exist or holds no readable file.
    """
    root = Path(folder)
    if not root.is_dir():
        raise FractoInputError(f"The folder '{root}' does not exist.")
    ex = Path(exclude).resolve() if exclude is not None else None
    exts = (*SEM_EXTENSIONS, *HEIGHT_EXTENSIONS, *TIFF_EXTENSIONS)
    files = []
    for p in sorted(root.rglob("*")):
        rel = p.relative_to(root)
        if any(part.startswith(".") for part in rel.parts) or any(
            part in SKIP_DIRS for part in rel.parts[:-1]
        ):
            continue
        if ex is not None and (p.resolve() == ex or ex in p.resolve().parents):
            continue
        if not p.is_file() or p.suffix.lower() not in exts:
            continue
        if p.name.endswith(".json") or p.name.endswith((".csv.json", ".npy.json")):
            continue
        files.append(p)
    if not files:
        raise FractoInputError(f"The folder '{root}' holds no image or height-map file.")
    rows = []
    for i, p in enumerate(files):
        problem = None
        try:
            kind = kind_of_file(p)
        except FractoInputError as exc:
            kind, problem = "", str(exc)
        rows.append(
            ManifestRow(
                index=i,
                line=0,
                path=p.relative_to(root).as_posix(),
                file=p,
                kind=kind,
                specimen=p.stem,
                temperature_C=None,
                pixel_size_um=None,
                problem=problem,
            )
        )
    return Manifest(
        source=root, base=root.resolve(), rows=tuple(rows), extra_columns=(), from_folder=True
    )


def load_campaign(
    source: str | os.PathLike, *, exclude: str | os.PathLike | None = None
) -> Manifest:
    """A manifest file or a folder of files (see :func:`read_manifest`, :func:`scan_folder`)."""
    p = Path(source)
    if p.is_dir():
        return scan_folder(p, exclude=exclude)
    return read_manifest(p)


def duplicate_paths(manifest: Manifest) -> dict[str, list[int]]:
    """Files named by more than one row: resolved path -> manifest lines (or indices)."""
    seen: dict[str, list[int]] = {}
    for r in manifest.rows:
        if not r.path:
            continue
        key = os.path.normcase(os.path.abspath(r.file))
        seen.setdefault(key, []).append(r.line or r.index + 1)
    return {k: v for k, v in seen.items() if len(v) > 1}
