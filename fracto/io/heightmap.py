"""Height maps: the container every surface command works on."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from fracto.io.calibration import PixelSize


@dataclass(frozen=True)
class HeightMap:
    """A measured surface.

    Parameters
    ----------
    z_um : ndarray of float64, shape (ny, nx)
        Heights in micrometres; rows run along y, columns along x.
        Non-measured points are NaN.
    pixel_size : PixelSize
        Lateral sampling and where it came from.
    source : str
        File the map was read from (or a description).
    metadata : dict
        Format-specific facts worth reporting (header fields, z unit read, ...).
    """

    z_um: np.ndarray
    pixel_size: PixelSize
    source: str = ""
    metadata: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, int]:
        return self.z_um.shape  # type: ignore[return-value]

    @property
    def valid_fraction(self) -> float:
        """Fraction of points that were measured (not NaN)."""
        return float(np.isfinite(self.z_um).mean()) if self.z_um.size else 0.0
