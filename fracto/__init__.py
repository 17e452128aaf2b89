"""fracto: quantitative fractography.

Areal roughness (ISO 25178-2) and fractography ratios of fracture-surface
height maps, fracture-mode fractions of SEM fractographs, and their relation
to test temperature.

The estimates fracto reports support, and do not replace, examination by a
qualified fractographer; safety-related conclusions follow the applicable
standards, local codes and licensed practice.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("fracto")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"

CAUTION = (
    "Automated fracture-surface estimates support, and do not replace, examination by a "
    "qualified fractographer; safety-related conclusions follow the applicable standards, "
    "local codes and licensed practice."
)

__all__ = ["CAUTION", "__version__"]
