"""Safe writes: every output goes to a temporary name in the same folder and is
renamed into place, so a reader never sees a half-written file."""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

from fracto.errors import FractoInputError


@contextlib.contextmanager
def atomic_write(path: str | os.PathLike, mode: str = "wb", **kwargs: Any) -> Iterator[IO]:
    """Open a temporary file beside `path`; rename it to `path` when the block succeeds.

    On an exception the temporary file is removed and `path` is left as it was.

    Parameters
    ----------
    path : path-like
        Final name of the file.
    mode : str
        ``"wb"`` or ``"w"`` (text; ``encoding`` defaults to UTF-8).
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise FractoInputError(f"The output folder '{folder}' does not exist.")
    if "b" not in mode:
        kwargs.setdefault("encoding", "utf-8")
        kwargs.setdefault("newline", "")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=folder)
    except PermissionError as exc:
        raise FractoInputError(
            f"Cannot write into the folder '{folder}': permission denied."
        ) from exc
    try:
        # mkstemp makes the file private (0600); give it the usual mode under the umask
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        with os.fdopen(fd, mode, **kwargs) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if exc.errno == 28:  # ENOSPC
            raise FractoInputError(f"The disk is full; '{path}' was not written.") from exc
        raise
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> None:
    """Write `data` to `path` through a temporary file and a rename."""
    with atomic_write(path, "wb") as fh:
        fh.write(data)


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write UTF-8 `text` to `path` through a temporary file and a rename."""
    with atomic_write(path, "w") as fh:
        fh.write(text)


def write_json_atomic(path: str | os.PathLike, obj: Any) -> None:
    """Write `obj` as indented JSON (NaN written as ``null``) through a rename."""
    write_text_atomic(path, dumps_json(obj) + "\n")


def _clean(obj: Any) -> Any:
    import math

    import numpy as np

    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, Path):
        return str(obj)
    return obj


def dumps_json(obj: Any, indent: int | None = 2) -> str:
    """JSON text with NumPy scalars and arrays converted and NaN/inf as ``null``."""
    return json.dumps(_clean(obj), indent=indent, ensure_ascii=False, allow_nan=False)
