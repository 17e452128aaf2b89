"""Height-map readers and writers: npy, float TIFF, text grid and x,y,z, dispatch, calibration.

Outside references: unit factors from the SI prefixes (BIPM, The International
System of Units, 9th ed. 2019: nano = 1e-9, micro = 1e-6, milli = 1e-3) and
the inch = 25.4 mm (international yard and pound agreement, 1959); TIFF
resolution tags as read back by tifffile, a general-purpose library; the
ResolutionUnit codes 2 = inch, 3 = centimetre (TIFF 6.0 specification, 1992,
from memory).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from fracto.errors import FractoInputError
from fracto.io import HeightMap, PixelSize, read_height_map, write_height_map
from fracto.io.text import write_xyz

FIXTURE = [HealthCheck.function_scoped_fixture]


def _map(seed=0, shape=(7, 11)):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=shape)
    z[2, 3] = np.nan
    return z


# ----------------------------------------------------------------------------- round trips


@pytest.mark.parametrize("ext", ["npy", "tif", "tiff", "sdf", "txt", "csv"])
def test_round_trip_every_format(tmp_path, ext):
    z = _map().astype(np.float32)
    ps = PixelSize(0.25, 0.4, "test")
    p = tmp_path / f"m.{ext}"
    write_height_map(p, z, ps)
    hm = read_height_map(p)
    assert isinstance(hm, HeightMap)
    assert hm.z_um.dtype == np.float64
    np.testing.assert_array_equal(hm.z_um, z.astype(np.float64))
    assert (hm.pixel_size.x_um, hm.pixel_size.y_um) == (0.25, 0.4)
    assert hm.metadata["n_not_measured"] == 1


def test_npy_sidecar_content_and_unknown(tmp_path):
    p = tmp_path / "m.npy"
    write_height_map(p, _map(), PixelSize.square(0.5, "t"))
    side = json.loads((tmp_path / "m.npy.json").read_text())
    assert side["pixel_size_um"] == [0.5, 0.5] and side["z_unit"] == "um"
    # Rewriting without calibration must not leave the old calibration behind.
    write_height_map(p, _map(), PixelSize.unknown())
    hm = read_height_map(p)
    assert not hm.pixel_size.calibrated and hm.pixel_size.lateral_unit == "px"


def test_tiff_tags_in_cm_read_by_tifffile(tmp_path):
    p = tmp_path / "m.tif"
    write_height_map(p, _map(), PixelSize(0.5, 2.0, "t"))
    with tifffile.TiffFile(p) as tf:
        page = tf.pages[0]
        assert page.dtype == np.float32
        assert int(page.tags["ResolutionUnit"].value) == 3  # centimetre
        num, den = page.tags["XResolution"].value
        # 0.5 um per pixel = 20000 pixels per cm.
        assert num / den == pytest.approx(2e4, rel=1e-6)
        num, den = page.tags["YResolution"].value
        assert num / den == pytest.approx(5e3, rel=1e-6)
        assert json.loads(page.description)["fracto"]["pixel_size_um"] == [0.5, 2.0]


def test_tiff_from_tags_only_cm_and_inch(tmp_path):
    z = _map().astype(np.float32)
    p = tmp_path / "cm.tif"
    tifffile.imwrite(p, z, resolution=(1e4 / 0.8, 1e4 / 0.8), resolutionunit="CENTIMETER")
    hm = read_height_map(p)
    assert hm.pixel_size.source == "TIFF tags"
    assert hm.pixel_size.x_um == pytest.approx(0.8, rel=1e-6)
    # 25400 dpi -> 1 um per pixel (1 in = 25.4 mm).
    p = tmp_path / "in.tif"
    tifffile.imwrite(p, z, resolution=(25400.0, 25400.0), resolutionunit="INCH")
    assert read_height_map(p).pixel_size.x_um == pytest.approx(1.0, rel=1e-6)
    # 72 dpi is a display density, not a calibration.
    p = tmp_path / "dpi.tif"
    tifffile.imwrite(p, z, resolution=(72, 72), resolutionunit="INCH")
    hm = read_height_map(p)
    assert not hm.pixel_size.calibrated and "resolution_ignored" in hm.metadata


def test_integer_tiff_refused(tmp_path):
    p = tmp_path / "img.tif"
    tifffile.imwrite(p, (np.arange(100).reshape(10, 10) % 255).astype(np.uint8))
    with pytest.raises(FractoInputError, match="integer"):
        read_height_map(p)


# ----------------------------------------------------------------------------- units


@pytest.mark.parametrize(
    ("unit", "factor"),
    [("nm", 1e-3), ("um", 1.0), ("mm", 1e3), ("m", 1e6), ("in", 25400.0)],
)
def test_z_unit_conversion(tmp_path, unit, factor):
    # SI prefixes (BIPM SI Brochure 2019): 1 nm = 1e-3 um, 1 mm = 1e3 um; 1 in = 25.4 mm.
    z = _map()
    p = tmp_path / "m.npy"
    np.save(p, z)
    hm = read_height_map(p, z_unit=unit)
    np.testing.assert_allclose(hm.z_um, z * factor, rtol=1e-15)
    assert hm.metadata["z_unit_source"] == "argument"


def test_sidecar_variants_and_precedence(tmp_path):
    z = _map()
    p = tmp_path / "scan.npy"
    np.save(p, z)
    (tmp_path / "scan.json").write_text(json.dumps({"pixel_size": "250nm", "z_unit": "nm"}))
    hm = read_height_map(p)
    assert hm.pixel_size.x_um == pytest.approx(0.25) and hm.pixel_size.source == "sidecar JSON"
    np.testing.assert_allclose(hm.z_um, z * 1e-3)
    assert hm.metadata["z_unit_source"] == "sidecar JSON"
    # <file>.json wins over <stem>.json, and x/y keys are read.
    (tmp_path / "scan.npy.json").write_text(
        json.dumps({"pixel_size_x_um": 0.1, "pixel_size_y_um": 0.3})
    )
    hm = read_height_map(p)
    assert (hm.pixel_size.x_um, hm.pixel_size.y_um) == (0.1, 0.3)
    # Explicit argument wins over everything.
    hm = read_height_map(p, pixel_size="2um")
    assert hm.pixel_size.x_um == 2.0 and hm.pixel_size.source == "command line"
    hm = read_height_map(p, pixel_size=PixelSize(1.0, 2.0, "mine"))
    assert hm.pixel_size.source == "mine"


@pytest.mark.parametrize(
    "side",
    [
        {"pixel_size_um": 0},
        {"pixel_size_um": -1},
        {"pixel_size_um": "abc"},
        {"pixel_size_x_um": 1.0},
        {"pixel_size": "0.5"},
        {"z_unit": "furlong"},
        [1, 2],
    ],
)
def test_bad_sidecars(tmp_path, side):
    p = tmp_path / "m.npy"
    np.save(p, _map())
    (tmp_path / "m.npy.json").write_text(json.dumps(side))
    with pytest.raises(FractoInputError):
        read_height_map(p)


def test_bad_sidecar_json(tmp_path):
    p = tmp_path / "m.npy"
    np.save(p, _map())
    (tmp_path / "m.npy.json").write_text("{not json")
    with pytest.raises(FractoInputError, match="sidecar"):
        read_height_map(p)


# ----------------------------------------------------------------------------- text


def test_text_grid_delimiters_header_and_missing(tmp_path):
    expected = np.array([[1.0, 2.0, np.nan, 4.0], [5.0, np.nan, 7.0, 8.0], [9, 10, 11, np.nan]])
    variants = {
        "a.csv": "h1,h2,h3,h4\n1,2,,4\n5,nan,7,8\n9,10,11,***\n",
        "b.txt": "# comment\n1\t2\tNaN\t4\n5\t***\t7\t8\n9\t10\t11\tnan\n",
        "c.dat": "1; 2; nan; 4\n5; NA; 7; 8\n9; 10; 11; \n",
        "d.asc": "  1 2 nan 4\n5   nan 7 8\r\n9 10 11 nan\r\n\n",
        "e.txt": "1,5;2;nan;4\n5;nan;7;8\n9;10;11;nan\n",  # decimal comma, ';' delimiter
    }
    for name, text in variants.items():
        p = tmp_path / name
        p.write_text(text)
        hm = read_height_map(p)
        exp = expected.copy()
        if name == "e.txt":
            exp[0, 0] = 1.5
        np.testing.assert_array_equal(hm.z_um, exp, err_msg=name)
        assert hm.metadata["format"] == "text-grid"


def test_text_inf_is_not_measured(tmp_path):
    p = tmp_path / "i.txt"
    p.write_text("1 2 3\n4 inf 6\n7 8 -inf\n")
    hm = read_height_map(p)
    assert np.isnan(hm.z_um[1, 1]) and np.isnan(hm.z_um[2, 2])
    assert hm.metadata["n_infinite_as_nan"] == 0  # already NaN when parsed
    assert hm.metadata["n_not_measured"] == 2


def test_xyz_detection_pixel_size_and_orientation(tmp_path):
    # z = 2x + 3y on a lattice with dx = 0.5, dy = 0.25 (z unit um); one point missing.
    lines = ["x,y,z"]
    for j in range(5):  # column-major order on purpose
        for i in range(4):
            if (i, j) == (2, 1):
                continue
            x, y = 0.5 * j, 0.25 * i
            lines.append(f"{x},{y},{2 * x + 3 * y}")
    p = tmp_path / "pts.csv"
    p.write_text("\n".join(lines))
    hm = read_height_map(p)
    assert hm.metadata["format"] == "text-xyz"
    assert hm.shape == (4, 5)
    assert (hm.pixel_size.x_um, hm.pixel_size.y_um) == (pytest.approx(0.5), pytest.approx(0.25))
    assert hm.pixel_size.source == "text x,y columns"
    ii, jj = np.mgrid[0:4, 0:5]
    exp = 2 * 0.5 * jj + 3 * 0.25 * ii
    exp[2, 1] = np.nan
    np.testing.assert_allclose(hm.z_um, exp, rtol=1e-12)


def test_xyz_without_header_and_units_in_header(tmp_path):
    rows = [f"{j * 0.1:.1f} {i * 0.1:.1f} {i + j}" for i in range(4) for j in range(3)]
    p = tmp_path / "a.xyz.txt"
    p.write_text("\n".join(rows))
    hm = read_height_map(p, z_unit="mm")
    # 0.1 mm = 100 um (SI: milli = 1e-3); lateral unit = z unit without a header.
    assert hm.pixel_size.x_um == pytest.approx(100.0)
    assert hm.shape == (4, 3)
    np.testing.assert_allclose(hm.z_um[3, 2], 5e3)
    # Header units override: x,y in mm, z in nm.
    p = tmp_path / "b.txt"
    p.write_text("x [mm]\ty [mm]\tz [nm]\n" + "\n".join(r.replace(" ", "\t") for r in rows))
    hm = read_height_map(p)
    assert hm.pixel_size.x_um == pytest.approx(100.0)
    np.testing.assert_allclose(hm.z_um[3, 2], 5e-3)
    assert hm.metadata["z_unit_source"] == "text header"


def test_xyz_irregular_refused(tmp_path):
    rng = np.random.default_rng(3)
    pts = rng.random((40, 3))
    pts = pts[np.argsort(pts[:, 0])]
    p = tmp_path / "scatter.csv"
    p.write_text("x,y,z\n" + "\n".join(",".join(f"{v:.6f}" for v in r) for r in pts))
    with pytest.raises(FractoInputError, match="regular grid"):
        read_height_map(p)
    # A lattice with one point shifted by 1 % of the spacing.
    rows = [[j * 1.0, i * 1.0, i * j] for i in range(4) for j in range(4)]
    rows[5][0] += 0.01
    p.write_text("x,y,z\n" + "\n".join(",".join(repr(v) for v in r) for r in rows))
    with pytest.raises(FractoInputError, match="regular grid"):
        read_height_map(p)
    # Duplicate points.
    rows = [[j * 1.0, i * 1.0, i * j] for i in range(4) for j in range(4)]
    rows.append([1.0, 1.0, 7.0])
    p.write_text("x,y,z\n" + "\n".join(",".join(repr(v) for v in r) for r in rows))
    with pytest.raises(FractoInputError, match="more than once"):
        read_height_map(p)


def test_three_column_grid_is_a_grid(tmp_path):
    # Random heights in three columns: no repeated or sorted coordinates -> a 10 x 3 grid.
    z = np.random.default_rng(1).normal(size=(10, 3))
    p = tmp_path / "g.txt"
    p.write_text("\n".join(" ".join(repr(v) for v in r) for r in z.tolist()))
    hm = read_height_map(p)
    assert hm.metadata["format"] == "text-grid"
    np.testing.assert_array_equal(hm.z_um, z)


def test_esri_grid_header(tmp_path):
    p = tmp_path / "e.asc"
    p.write_text("ncols 3\nnrows 3\ncellsize 0.5\nNODATA_value -9999\n1 2 3\n4 -9999 6\n7 8 9\n")
    hm = read_height_map(p)
    assert np.isnan(hm.z_um[1, 1]) and hm.pixel_size.x_um == pytest.approx(0.5)


# ----------------------------------------------------------------------------- bad input


def _save_npy(p, arr):
    np.save(p, arr, allow_pickle=True)
    return p


@pytest.mark.parametrize(
    "make",
    [
        lambda d: d / "missing.npy",
        lambda d: ((d / "empty.npy").write_bytes(b"") and d / "empty.npy") or d / "empty.npy",
        lambda d: _save_npy(d / "obj.npy", np.array([{"a": 1}, None], dtype=object)),
        lambda d: _save_npy(d / "str.npy", np.array([["a", "b"], ["c", "d"]])),
        lambda d: _save_npy(d / "cplx.npy", np.ones((4, 4), complex)),
        lambda d: _save_npy(d / "e.npy", np.zeros((0, 5))),
        lambda d: _save_npy(d / "one.npy", np.arange(10.0)),
        lambda d: _save_npy(d / "three.npy", np.random.default_rng(0).random((2, 4, 4))),
        lambda d: _save_npy(d / "const.npy", np.full((5, 5), 3.0)),
        lambda d: _save_npy(d / "nan.npy", np.full((5, 5), np.nan)),
        lambda d: _save_npy(d / "inf.npy", np.full((5, 5), np.inf)),
        lambda d: _save_npy(d / "small.npy", np.arange(6.0).reshape(2, 3)),
        lambda d: _save_npy(d / "bool.npy", np.eye(4, dtype=bool)),
    ],
)
def test_bad_npy_inputs(tmp_path, make):
    p = make(tmp_path)
    with pytest.raises(FractoInputError) as info:
        read_height_map(p)
    assert str(p.name) in str(info.value) or "does not exist" in str(info.value)


def test_truncated_npy_and_tiff(tmp_path):
    p = tmp_path / "t.npy"
    np.save(p, _map(shape=(40, 40)))
    p.write_bytes(p.read_bytes()[:300])
    with pytest.raises(FractoInputError, match=r"t\.npy"):
        read_height_map(p)
    q = tmp_path / "t.tif"
    write_height_map(q, _map(shape=(64, 64)), PixelSize.unknown())
    q.write_bytes(q.read_bytes()[:200])
    with pytest.raises(FractoInputError, match=r"t\.tif"):
        read_height_map(q)


def test_other_bad_inputs(tmp_path):
    with pytest.raises(FractoInputError, match="folder"):
        read_height_map(tmp_path)
    p = tmp_path / "m.npy"
    np.save(p, _map())
    with pytest.raises(FractoInputError, match="unit"):
        read_height_map(p, z_unit="parsec")
    with pytest.raises(FractoInputError):
        read_height_map(p, pixel_size="0um")
    with pytest.raises(FractoInputError):
        read_height_map(p, pixel_size="fast")
    r = tmp_path / "ragged.txt"
    r.write_text("1 2 3\n4 5\n6 7 8\n")
    with pytest.raises(FractoInputError, match="different lengths"):
        read_height_map(r)
    w = tmp_path / "words.txt"
    w.write_text("1 2 3\n4 five 6\n7 8 9\n")
    with pytest.raises(FractoInputError, match="five"):
        read_height_map(w)
    with pytest.raises(FractoInputError):
        write_height_map(tmp_path / "x.bmp", _map(), PixelSize.unknown())
    with pytest.raises(FractoInputError):
        write_height_map(tmp_path / "nofolder" / "x.npy", _map(), PixelSize.unknown())


def test_magic_bytes_beat_the_extension(tmp_path):
    z = _map()
    p = tmp_path / "really_npy.tif"
    np.save(tmp_path / "tmp.npy", z)
    p.write_bytes((tmp_path / "tmp.npy").read_bytes())
    np.testing.assert_array_equal(read_height_map(p).z_um, z)
    q = tmp_path / "really_tiff.dat"
    write_height_map(tmp_path / "t.tif", z, PixelSize.unknown())
    q.write_bytes((tmp_path / "t.tif").read_bytes())
    np.testing.assert_allclose(read_height_map(q).z_um, z.astype(np.float32))


# ----------------------------------------------------------------------------- properties


def _masked(z, seed):
    rng = np.random.default_rng(seed)
    z = z.copy()
    z[rng.random(z.shape) < 0.25] = np.nan
    fin = z[np.isfinite(z)]
    return None if fin.size == 0 or fin.min() == fin.max() else z


arrays64 = hnp.arrays(
    np.float64,
    hnp.array_shapes(min_dims=2, max_dims=2, min_side=3, max_side=7),
    elements=st.floats(-1e9, 1e9, allow_nan=False),
)


@settings(max_examples=30, deadline=None, suppress_health_check=FIXTURE)
@given(z=arrays64, seed=st.integers(0, 999), ext=st.sampled_from(["npy", "tif", "txt", "csv"]))
def test_property_round_trip(tmp_path, z, seed, ext):
    z = _masked(z, seed)
    if z is None:
        return
    # TIFF stores float32 (exactly the float32 rounding); the others are exact.
    exp = z.astype(np.float32).astype(np.float64) if ext == "tif" else z
    f = exp[np.isfinite(exp)]
    if f.min() == f.max():
        return  # constant after float32 rounding: refused by design
    p = tmp_path / f"h.{ext}"
    write_height_map(p, z, PixelSize.square(0.5, "t"))
    hm = read_height_map(p)
    np.testing.assert_array_equal(hm.z_um, exp)


@settings(max_examples=30, deadline=None, suppress_health_check=FIXTURE)
@given(z=arrays64, seed=st.integers(0, 999), dx=st.sampled_from([0.1, 0.25, 1.0, 3.0]))
def test_property_xyz_round_trip(tmp_path, z, seed, dx):
    z = _masked(z, seed)
    if z is None:
        return
    # Keep the lattice spanning the whole map so the shape is known.
    z[0, 0] = 0.0 if not np.isfinite(z[0, 0]) else z[0, 0]
    z[-1, -1] = 1.0 if not np.isfinite(z[-1, -1]) else z[-1, -1]
    if np.nanmin(z) == np.nanmax(z):
        return
    p = tmp_path / "h.csv"
    write_xyz(p, z, PixelSize.square(dx, "t"))
    hm = read_height_map(p)
    np.testing.assert_array_equal(hm.z_um, z)
    assert hm.pixel_size.x_um == pytest.approx(dx, rel=1e-12)


@settings(max_examples=30, deadline=None, suppress_health_check=FIXTURE)
@given(
    blob=st.binary(max_size=400),
    ext=st.sampled_from(["npy", "tif", "txt", "csv", "stl", "dat", "bin"]),
    prefix=st.sampled_from([b"", b"\x93NUMPY", b"II*\x00", b"MM\x00*", b"solid x\n"]),
)
def test_property_garbage_only_input_errors(tmp_path, blob, ext, prefix):
    p = tmp_path / f"g.{ext}"
    p.write_bytes(prefix + blob)
    try:
        hm = read_height_map(p)
    except FractoInputError:
        return
    assert hm.z_um.ndim == 2  # garbage that happens to parse must still be a valid map


def test_imagej_tiff_unit(tmp_path):
    # ImageJ keeps ResolutionUnit = none and writes "unit=micron" in its description; the
    # resolution is pixels per micron (tifffile writes the ImageJ form, a reference library).
    z = np.random.default_rng(0).random((8, 9)).astype(np.float32)
    p = tmp_path / "ij.tif"
    tifffile.imwrite(p, z, imagej=True, resolution=(4.0, 4.0), metadata={"unit": "micron"})
    hm = read_height_map(p)
    assert hm.pixel_size.x_um == pytest.approx(0.25)
    assert hm.pixel_size.source == "TIFF tags (ImageJ unit)"
    tifffile.imwrite(p, z, imagej=True, resolution=(4.0, 4.0), metadata={"unit": "nm"})
    assert read_height_map(p).pixel_size.x_um == pytest.approx(0.25e-3)


def test_three_column_integer_grid_with_header(tmp_path):
    # Integer heights in three columns repeat values, so without a header they look like
    # x,y,z; a header that does not name x, y, z says they are a grid.
    z = np.random.default_rng(2).integers(0, 3, size=(12, 3)).astype(float)
    z[0] = [0, 1, 2]
    body = "\n".join(",".join(str(int(v)) for v in r) for r in z.tolist())
    p = tmp_path / "g.csv"
    p.write_text("a,b,c\n" + body)
    np.testing.assert_array_equal(read_height_map(p).z_um, z)
    p.write_text(body)
    with pytest.raises(FractoInputError):  # duplicates as x,y,z: refused with advice
        read_height_map(p)


def test_compressed_float_tiff_written_by_opencv(tmp_path):
    # OpenCV writes compressed TIFFs; tifffile may lack the codec, OpenCV then decodes.
    import cv2

    z = np.random.default_rng(4).normal(size=(9, 12)).astype(np.float32)
    p = tmp_path / "cv.tif"
    assert cv2.imwrite(str(p), z)
    np.testing.assert_array_equal(read_height_map(p).z_um, z.astype(np.float64))
