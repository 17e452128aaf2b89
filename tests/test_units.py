"""Parsing of lengths, angles and temperatures.

Reference: SI prefixes and the kelvin/degree Celsius relation from the BIPM SI Brochure
(9th edition, 2019), Tables 7 and 4 note; the inch is exactly 25.4 mm (international yard
and pound agreement, 1959); °F = 9/5 °C + 32 by definition of the Fahrenheit scale.
"""

import math

import pytest

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.units import parse_angle_deg, parse_length_um, parse_temperature_c


@pytest.mark.parametrize(
    ("text", "um"),
    [
        ("0.25um", 0.25),
        ("250nm", 0.25),  # nano = 1e-9, micro = 1e-6 (SI Brochure Table 7)
        ("0.001mm", 1.0),  # milli = 1e-3
        ("1e-6m", 1.0),
        ("0.5 µm", 0.5),
        ("0.5 μm", 0.5),  # Greek mu typed instead of the micro sign
        ("1in", 25400.0),  # 1 in = 25.4 mm exactly (1959 agreement)
        ("2.5E-1 um", 0.25),
    ],
)
def test_lengths(text, um):
    assert math.isclose(parse_length_um(text), um, rel_tol=1e-12)


@pytest.mark.parametrize("text", ["0.5", "abc", "0um", "-1um", "1 furlong", "nanum", ""])
def test_bad_lengths_raise_one_sentence(text):
    with pytest.raises(FractoInputError) as err:
        parse_length_um(text, what="pixel size")
    msg = str(err.value)
    assert msg.endswith(".") and "\n" not in msg


def test_temperatures():
    assert parse_temperature_c("120C") == 120.0
    assert parse_temperature_c("-40 °C") == -40.0
    assert math.isclose(parse_temperature_c("273.15K"), 0.0, abs_tol=1e-12)  # T/K = t/°C + 273.15
    assert math.isclose(parse_temperature_c("-40F"), -40.0)  # the scales cross at -40
    assert math.isclose(parse_temperature_c("212F"), 100.0)
    assert parse_temperature_c("25") == 25.0  # bare numbers are °C
    with pytest.raises(FractoInputError):
        parse_temperature_c("-5K")
    with pytest.raises(FractoInputError):
        parse_temperature_c("hot")


def test_angles():
    assert parse_angle_deg("8deg") == 8.0
    assert math.isclose(parse_angle_deg(f"{math.pi}rad"), 180.0)
    with pytest.raises(FractoInputError):
        parse_angle_deg("8 grad")


def test_pixel_size_states():
    ps = PixelSize.parse("250nm")
    assert ps.calibrated and ps.x_um == ps.y_um == 0.25 and ps.lateral_unit == "um"
    xy = PixelSize.parse("0.5um,0.6um")
    assert (xy.x_um, xy.y_um) == (0.5, 0.6)
    unknown = PixelSize.unknown()
    assert not unknown.calibrated and unknown.lateral_unit == "px"
    assert unknown.to_dict()["unit"] is None
    with pytest.raises(FractoInputError):
        PixelSize(0.0, 0.0, "test")
    with pytest.raises(FractoInputError):
        PixelSize(1.0, None, "test")
