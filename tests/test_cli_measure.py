"""The ``fracto measure`` command: JSON contract, units, calibration states, bad input.

Checks of the numbers themselves live beside each parameter family; here the sinusoid
values (analytic: Sa = 2A/π, Sq = A/√2, Sku = 1.5) confirm that the command reports what
the library computes, in the units it claims.
"""

import json
import math

import numpy as np
import pytest

from fracto.cli import main


def run(capsys, *args):
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture
def sine_npy(tmp_path):
    n, lam_px, amp = 256, 64, 0.8
    x = np.arange(n)
    z = amp * np.sin(2 * np.pi * x / lam_px)[None, :].repeat(n, axis=0)
    path = tmp_path / "sine.npy"
    np.save(path, z)
    return path, amp


def test_json_contract_and_sinusoid(capsys, sine_npy):
    path, amp = sine_npy
    # --form none: a least-squares plane would take a small tilt out of the sine
    code, out, err = run(
        capsys, "measure", str(path), "--pixel-size", "0.5um", "--form", "none", "--json"
    )
    assert code == 0, err
    doc = json.loads(out)
    p = doc["parameters"]
    # analytic sinusoid values (REFERENCES.md)
    assert math.isclose(p["Sa"]["value"], 2 * amp / math.pi, rel_tol=1e-3)
    assert math.isclose(p["Sq"]["value"], amp / math.sqrt(2), rel_tol=1e-3)
    assert math.isclose(p["Sku"]["value"], 1.5, rel_tol=1e-2)
    assert p["Sa"]["unit"] == "um" and p["Sdr"]["unit"] == "%"
    for key in ("D_psd", "D_variogram", "D_cube"):
        assert {"value", "unit", "fit_range", "r2"} <= set(p[key])
    assert [k for k in p if k.startswith("D")] == ["D_psd", "D_variogram", "D_cube"]
    assert doc["pixel_size"]["calibrated"] and doc["pixel_size"]["x"] == 0.5
    assert 0.99 <= doc["valid_fraction"] <= 1.0
    assert doc["processing"]["form"]["method"] == "none"
    assert "version" in doc


def test_uncalibrated_is_marked_not_silent(capsys, sine_npy):
    path, _ = sine_npy
    code, out, _ = run(capsys, "measure", str(path), "--json")
    assert code == 0
    doc = json.loads(out)
    assert doc["pixel_size"]["calibrated"] is False
    assert doc["parameters"]["Sal"]["unit"] == "px"
    assert doc["parameters"]["Sdr"]["value"] is None  # mixes µm heights with pixel widths
    assert "calibration" in doc["parameters"]["Sdr"]["note"]


def test_table_output(capsys, sine_npy):
    path, _ = sine_npy
    code, out, _ = run(capsys, "measure", str(path), "--pixel-size", "500nm")
    assert code == 0
    assert "Sa" in out and "valid fraction" in out


@pytest.mark.parametrize(
    "make",
    [
        lambda p: p.write_bytes(b"\x93NUMPY garbage"),  # truncated npy
        lambda p: np.save(p, np.zeros((8, 8))),  # constant
        lambda p: np.save(p, np.full((8, 8), np.nan)),  # all NaN
        lambda p: np.save(p, np.zeros(8)),  # 1-D
        lambda p: np.save(p, np.zeros((0, 0))),  # empty
    ],
)
def test_bad_input_exit_2_one_sentence(capsys, tmp_path, make):
    path = tmp_path / "bad.npy"
    make(path)
    code, _out, err = run(capsys, "measure", str(path))
    assert code == 2
    assert "Traceback" not in err and err.count("\n") == 1


@pytest.mark.parametrize(
    "args",
    [
        ("--pixel-size", "0um"),
        ("--pixel-size", "3"),
        ("--z-unit", "parsec"),
        ("--form", "cubic"),
        ("--l-filter", "abc"),
    ],
)
def test_bad_options_exit_2(capsys, sine_npy, args):
    path, _ = sine_npy
    code, _, err = run(capsys, "measure", str(path), *args)
    assert code == 2 and "Traceback" not in err


def test_missing_file_exit_2(capsys, tmp_path):
    code, _, err = run(capsys, "measure", str(tmp_path / "none.npy"))
    assert code == 2 and err.startswith("fracto:")


def test_writes_json_file_atomically(capsys, sine_npy, tmp_path):
    path, _ = sine_npy
    out_file = tmp_path / "m.json"
    code, _, _ = run(capsys, "measure", str(path), "--pixel-size", "1um", "--out", str(out_file))
    assert code == 0
    assert json.loads(out_file.read_text())["parameters"]["Sq"]["unit"] == "um"
    assert not list(tmp_path.glob("*.part"))


def test_threads_do_not_change_numbers_and_rs_is_sdr():
    # RS (Underwood) and Sdr (ISO 25178-2) are one quantity: RS = 1 + Sdr/100.
    from fracto.io.calibration import PixelSize
    from fracto.surface.measure import measure_surface
    from fracto.synth.fields import gaussian_correlated_field

    z = gaussian_correlated_field((96, 128), 1.5, 0.25, 0.25, rms_um=0.4, seed=7)
    ps = PixelSize.square(0.25, "test")
    one = measure_surface(z, ps, threads=1).to_dict()["parameters"]
    two = measure_surface(z, ps, threads=2).to_dict()["parameters"]
    assert one == two
    assert math.isclose(one["RS"]["value"], 1 + one["Sdr"]["value"] / 100, rel_tol=1e-12)
