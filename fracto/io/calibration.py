"""Lateral calibration: the pixel size of a map or image, and where it came from.

An unknown calibration is a state fracto carries (``PixelSize.unknown()``),
never a silent 1.0: lateral quantities are then reported in pixels.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from fracto.errors import FractoInputError
from fracto.units import parse_length_um


@dataclass(frozen=True)
class PixelSize:
    """Sampling interval of a map or image.

    Parameters
    ----------
    x_um, y_um : float or None
        Spacing between columns (x) and between rows (y) in micrometres;
        ``None`` when the calibration is unknown.
    source : str
        Where the value came from: ``"command line"``, ``"SDF header"``,
        ``"TIFF tags"``, ``"sidecar JSON"``, ``"STL mesh"``, ``"scale bar"``
        or ``"none"``.
    """

    x_um: float | None
    y_um: float | None
    source: str

    def __post_init__(self) -> None:
        if (self.x_um is None) != (self.y_um is None):
            raise FractoInputError("Give the pixel size for both x and y, or for neither.")
        for v in (self.x_um, self.y_um):
            if v is not None and not (math.isfinite(v) and v > 0):
                raise FractoInputError(f"The pixel size must be a positive length, not {v!r} µm.")

    @classmethod
    def unknown(cls) -> PixelSize:
        """No calibration: lateral quantities are in pixels."""
        return cls(None, None, "none")

    @classmethod
    def square(cls, um: float, source: str) -> PixelSize:
        """Square pixels of side `um` micrometres."""
        return cls(float(um), float(um), source)

    @classmethod
    def parse(cls, text: str, source: str = "command line") -> PixelSize:
        """Read ``"0.5um"`` (square) or ``"0.5um,0.6um"`` (x, y)."""
        parts = [p for p in str(text).replace("x", ",").split(",") if p.strip()]
        if len(parts) == 1:
            return cls.square(parse_length_um(parts[0], what="pixel size"), source)
        if len(parts) == 2:
            x, y = (parse_length_um(p, what="pixel size") for p in parts)
            return cls(x, y, source)
        raise FractoInputError(f"Cannot read the pixel size '{text}'; write it like '0.5um'.")

    @property
    def calibrated(self) -> bool:
        """True when the pixel size is known."""
        return self.x_um is not None

    @property
    def lateral_unit(self) -> str:
        """Unit of lateral lengths: ``"um"`` when calibrated, else ``"px"``."""
        return "um" if self.calibrated else "px"

    def spacing(self) -> tuple[float, float]:
        """(dx, dy) in µm, or (1, 1) *pixels* when uncalibrated (see `lateral_unit`)."""
        if self.x_um is None or self.y_um is None:
            return 1.0, 1.0
        return self.x_um, self.y_um

    def to_dict(self) -> dict:
        """JSON-ready form: ``{"x": .., "y": .., "unit": "um", "source": ..}``."""
        return {
            "x": self.x_um,
            "y": self.y_um,
            "unit": "um" if self.calibrated else None,
            "calibrated": self.calibrated,
            "source": self.source,
        }
