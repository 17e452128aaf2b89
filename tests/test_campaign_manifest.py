"""Manifest and folder reading: columns, units, per-row problems, kinds by file.

Unit checks against the SI Brochure (9th ed., 2019): T/°C = T/K − 273.15, and the
Fahrenheit definition T/°F = 1.8·T/°C + 32 (so −40 °F = −40 °C); 1 nm = 1e-3 µm.
"""

from __future__ import annotations

import numpy as np
import pytest
from campaign_fixtures import png, write_manifest

from fracto.campaign.manifest import (
    duplicate_paths,
    kind_of_file,
    load_campaign,
    read_manifest,
    scan_folder,
)
from fracto.errors import FractoInputError


@pytest.fixture()
def files(tmp_path):
    rng = np.random.default_rng(0)
    png(tmp_path / "a.png", rng.random((32, 32)))
    np.save(tmp_path / "h.npy", rng.random((16, 16)))
    return tmp_path


def test_units_and_carried_columns(files):
    m = write_manifest(
        files / "m.csv",
        ["path", "specimen", "temperature", "pixel_size", "toughness_MPa_sqrt_m", "orient"],
        [
            ["a.png", "S1", "233.15K", "250nm", "40.5", "T-L"],
            ["h.npy", "S1", "-40F", "0.5um", "", "T-L"],
            ["a.png", "S2", "-40 °C", "", "50", "L-T"],
        ],
    )
    man = read_manifest(m)
    t = [r.temperature_C for r in man.rows]
    assert t == pytest.approx([-40.0, -40.0, -40.0], abs=1e-9)
    assert man.rows[0].pixel_size_um == pytest.approx(0.25)
    assert man.rows[2].pixel_size_um is None
    assert [r.kind for r in man.rows] == ["sem", "height", "sem"]
    assert man.extra_columns == ("toughness_MPa_sqrt_m", "orient")
    assert man.rows[1].extra == {"toughness_MPa_sqrt_m": "", "orient": "T-L"}
    assert all(r.problem is None for r in man.rows)
    assert duplicate_paths(man) == {str((files / "a.png").resolve()): [2, 4]}


def test_numeric_unit_columns(files):
    m = write_manifest(
        files / "m.csv",
        ["path", "specimen", "temperature_K", "pixel_size_nm"],
        [["a.png", "S1", "300", "120"]],
    )
    r = read_manifest(m).rows[0]
    assert r.temperature_C == pytest.approx(300 - 273.15)
    assert r.pixel_size_um == pytest.approx(0.12)


@pytest.mark.parametrize(
    ("temp", "phrase"),
    [
        ("-40", "has no unit"),
        ("warm", "Cannot read"),
        ("10X", "Unknown temperature unit"),
        ("-300C", "not a valid temperature"),
        ("-5K", "below absolute zero"),
    ],
)
def test_bad_temperature_is_a_row_problem(files, temp, phrase):
    m = write_manifest(
        files / "m.csv",
        ["path", "specimen", "temperature"],
        [["a.png", "S1", temp], ["a.png", "S2", "20C"]],
    )
    man = read_manifest(m)
    assert phrase in man.rows[0].problem and "Line 2" in man.rows[0].problem
    assert man.rows[1].problem is None


def test_row_problems(files):
    m = write_manifest(
        files / "m.csv",
        ["path", "specimen", "kind", "pixel_size"],
        [
            ["gone.png", "S1", "", ""],
            ["a.png", "", "", ""],
            ["a.png", "S3", "xray", ""],
            ["a.png", "S4", "", "12"],
            ["notes.docx", "S5", "", ""],
        ],
    )
    (files / "notes.docx").write_bytes(b"x")
    p = [r.problem for r in read_manifest(m).rows]
    assert "does not exist" in p[0]
    assert "names no specimen" in p[1]
    assert "xray" in p[2]
    assert "no unit" in p[3]
    assert "extension" in p[4]


def test_manifest_level_errors(tmp_path):
    with pytest.raises(FractoInputError, match="does not exist"):
        read_manifest(tmp_path / "none.csv")
    (tmp_path / "e.csv").write_text("\n\n")
    with pytest.raises(FractoInputError, match="empty"):
        read_manifest(tmp_path / "e.csv")
    (tmp_path / "h.csv").write_text("path,specimen\n")
    with pytest.raises(FractoInputError, match="no data rows"):
        read_manifest(tmp_path / "h.csv")
    (tmp_path / "p.csv").write_text("path,specimen,pixel_size_um,pixel_size\na,b,1,1um\n")
    with pytest.raises(FractoInputError, match="more than one pixel-size"):
        read_manifest(tmp_path / "p.csv")
    (tmp_path / "b.csv").write_bytes(b"path,specimen\n\xff\xfe,\x80\n")
    with pytest.raises(FractoInputError, match="UTF-8"):
        read_manifest(tmp_path / "b.csv")


def test_semicolon_manifest(files):
    (files / "s.csv").write_text("path;specimen;temperature_C\na.png;S1;-20\n", encoding="utf-8")
    r = read_manifest(files / "s.csv").rows[0]
    assert (r.path, r.specimen, r.temperature_C) == ("a.png", "S1", -20.0)


def test_tiff_kind_by_sample_type(tmp_path):
    import tifffile

    tifffile.imwrite(tmp_path / "g8.tif", np.zeros((8, 8), np.uint8))
    tifffile.imwrite(tmp_path / "g16.tif", np.zeros((8, 8), np.uint16))
    tifffile.imwrite(tmp_path / "z.tif", np.zeros((8, 8), np.float32))
    assert kind_of_file(tmp_path / "g8.tif") == "sem"
    assert kind_of_file(tmp_path / "g16.tif") == "sem"
    assert kind_of_file(tmp_path / "z.tif") == "height"
    (tmp_path / "bad.tif").write_bytes(b"nope")
    with pytest.raises(FractoInputError, match="TIFF"):
        kind_of_file(tmp_path / "bad.tif")


def test_folder_scan(files):
    (files / ".hidden.png").write_bytes((files / "a.png").read_bytes())
    (files / "sub").mkdir()
    png(files / "sub" / "b.png", np.random.default_rng(1).random((32, 32)))
    (files / "out").mkdir()
    png(files / "out" / "c.png", np.random.default_rng(2).random((32, 32)))
    (files / "readme.md").write_text("x")
    man = scan_folder(files, exclude=files / "out")
    assert [r.path for r in man.rows] == ["a.png", "h.npy", "sub/b.png"]
    assert [r.specimen for r in man.rows] == ["a", "h", "b"]
    assert all(r.temperature_C is None for r in man.rows) and man.from_folder
    assert load_campaign(files, exclude=files / "out").rows == man.rows
    empty = files / "empty"
    empty.mkdir()
    with pytest.raises(FractoInputError, match="no image"):
        scan_folder(empty)
