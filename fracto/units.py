"""Parsing of physical quantities given as text (``0.25um``, ``250nm``, ``120C``).

Lengths are held in micrometres inside fracto, temperatures in degrees Celsius.
"""

from __future__ import annotations

import math
import re

from fracto.errors import FractoInputError

#: Factor that turns one of the unit into micrometres.
LENGTH_UNITS_UM: dict[str, float] = {
    "pm": 1e-6,
    "a": 1e-4,
    "å": 1e-4,
    "nm": 1e-3,
    "um": 1.0,
    "µm": 1.0,
    "μm": 1.0,  # Greek mu as well as the micro sign
    "micron": 1.0,
    "microns": 1.0,
    "mm": 1e3,
    "cm": 1e4,
    "m": 1e6,
    "in": 25400.0,
    "mil": 25.4,
}

_NUMBER_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([^\d\s].*?)?\s*$")


def length_unit_factor(unit: str) -> float:
    """Return the factor that converts a length in `unit` to micrometres.

    Parameters
    ----------
    unit : str
        A unit name such as ``"nm"``, ``"um"``, ``"µm"``, ``"mm"`` or ``"m"``.

    Returns
    -------
    float
        Micrometres per `unit`.

    Raises
    ------
    FractoInputError
        If the unit is not known.
    """
    key = unit.strip().lower() if unit.strip().lower() != "µm" else "µm"
    if key not in LENGTH_UNITS_UM:
        known = ", ".join(sorted({"nm", "um", "mm", "m", "pm", "cm", "in", "mil"}))
        raise FractoInputError(f"Unknown length unit '{unit}'; use one of {known}.")
    return LENGTH_UNITS_UM[key]


def parse_length_um(text: str | float, *, what: str = "length", positive: bool = True) -> float:
    """Parse a length with its unit (``"0.25um"``, ``"250 nm"``, ``"1e-3mm"``) into µm.

    Parameters
    ----------
    text : str
        Number followed by a unit. A bare number is refused, since a silent
        unit is the commonest calibration error.
    what : str
        Name of the quantity, used in the error message.
    positive : bool
        Require a finite value greater than zero.

    Returns
    -------
    float
        The length in micrometres.
    """
    if isinstance(text, int | float):
        raise FractoInputError(f"The {what} needs a unit, for example '0.5um' or '250nm'.")
    m = _NUMBER_UNIT.match(str(text))
    if not m:
        raise FractoInputError(
            f"Cannot read the {what} '{text}'; write it like '0.5um' or '250nm'."
        )
    number, unit = m.groups()
    if not unit:
        raise FractoInputError(
            f"The {what} '{text}' has no unit; write it like '{text}um' or '{text}nm'."
        )
    value = float(number) * length_unit_factor(unit)
    if positive and not (math.isfinite(value) and value > 0):
        raise FractoInputError(f"The {what} must be a positive length, not '{text}'.")
    return value


def parse_angle_deg(text: str | float, *, what: str = "angle") -> float:
    """Parse an angle such as ``"8deg"``, ``"8°"`` or ``"0.14rad"`` into degrees."""
    if isinstance(text, int | float):
        return float(text)
    m = _NUMBER_UNIT.match(str(text))
    if not m:
        raise FractoInputError(f"Cannot read the {what} '{text}'; write it like '8deg'.")
    number, unit = m.groups()
    unit = (unit or "deg").strip().lower()
    if unit in ("deg", "°", "degree", "degrees"):
        return float(number)
    if unit in ("rad", "radian", "radians"):
        return math.degrees(float(number))
    raise FractoInputError(f"Unknown angle unit '{unit}' in the {what}; use deg or rad.")


def parse_temperature_c(text: str | float, *, what: str = "temperature") -> float:
    """Parse a temperature (``"120C"``, ``"-40 °C"``, ``"293K"``, ``"-40F"``) into °C.

    A bare number is read as °C, the unit of nearly every test record.
    """
    if isinstance(text, int | float):
        return float(text)
    m = _NUMBER_UNIT.match(str(text).replace("°", ""))
    if not m:
        raise FractoInputError(f"Cannot read the {what} '{text}'; write it like '120C' or '-40C'.")
    number, unit = m.groups()
    value = float(number)
    unit = (unit or "c").strip().lower()
    if unit in ("c", "degc", "celsius"):
        return value
    if unit in ("k", "kelvin"):
        if value < 0:
            raise FractoInputError(f"The {what} '{text}' is below absolute zero.")
        return value - 273.15
    if unit in ("f", "degf", "fahrenheit"):
        return (value - 32.0) * 5.0 / 9.0
    raise FractoInputError(f"Unknown temperature unit '{unit}' in the {what}; use C, K or F.")
