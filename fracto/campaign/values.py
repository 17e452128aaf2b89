"""Reading numbers out of result rows (CSV cells, JSON values) the same way everywhere."""

from __future__ import annotations

import math
from typing import Any

import numpy as np


def cell_float(x: Any) -> float:
    """Float value of a cell; NaN for None, booleans, empty or unparseable text."""
    if x is None or isinstance(x, bool):
        return math.nan
    if isinstance(x, int | float | np.floating | np.integer):
        return float(x)
    s = str(x).strip()
    if not s:
        return math.nan
    try:
        return float(s)
    except ValueError:
        return math.nan


def cell_float_or_none(x: Any) -> float | None:
    """Like :func:`cell_float`, but None for anything missing or not finite (JSON/CSV-ready)."""
    f = cell_float(x)
    return f if math.isfinite(f) else None
