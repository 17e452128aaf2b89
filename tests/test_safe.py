"""Atomic writes: a failed write leaves the previous file intact and no temporary behind."""

import json
import math

import numpy as np
import pytest

from fracto.errors import FractoInputError
from fracto.io.safe import atomic_write, dumps_json, write_json_atomic


def test_failed_write_keeps_old_file(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_write(target, "w") as fh:
        fh.write("half")
        raise RuntimeError("killed mid-write")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.txt"]


def test_json_nan_is_null_and_numpy_is_plain(tmp_path):
    target = tmp_path / "r.json"
    write_json_atomic(target, {"a": np.float32(1.5), "b": math.nan, "c": np.arange(3)})
    assert json.loads(target.read_text()) == {"a": 1.5, "b": None, "c": [0, 1, 2]}
    assert "NaN" not in dumps_json({"x": float("inf")})


def test_missing_folder_is_input_error(tmp_path):
    with pytest.raises(FractoInputError), atomic_write(tmp_path / "nope" / "f.txt", "w") as fh:
        fh.write("x")


def test_written_files_follow_the_umask_not_private(tmp_path):
    # POSIX: a new file's mode is 0666 & ~umask (what open() would give); mkstemp alone gives 0600
    import os

    umask = os.umask(0o022)
    try:
        write_json_atomic(tmp_path / "m.json", {"a": 1})
    finally:
        os.umask(umask)
    assert (tmp_path / "m.json").stat().st_mode & 0o777 == 0o644
