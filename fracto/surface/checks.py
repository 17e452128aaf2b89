"""Argument checks shared by the surface modules (one sentence per refusal)."""

from __future__ import annotations

import math

from fracto.errors import FractoInputError


def check_spacing(dx: float, dy: float) -> tuple[float, float]:
    """Return (dx, dy) as floats, refusing anything but finite positive numbers.

    Raises
    ------
    FractoInputError
        If either spacing is not a number, not finite, or not positive.
    """
    out = []
    for name, v in (("dx", dx), ("dy", dy)):
        try:
            f = float(v)
        except (TypeError, ValueError):
            raise FractoInputError(f"The spacing {name} must be a number, not {v!r}.") from None
        if not (math.isfinite(f) and f > 0):
            raise FractoInputError(f"The spacing {name} must be a positive length, not {v!r}.")
        out.append(f)
    return out[0], out[1]
