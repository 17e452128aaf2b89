"""The whole measurement of a height map: condition it, then compute every parameter.

This module only orchestrates; each family of parameters is defined in its own
module (:mod:`fracto.surface.areal`, :mod:`fracto.surface.features`,
:mod:`fracto.surface.profile`, :mod:`fracto.surface.ratios`,
:mod:`fracto.surface.fractal`) and the conditioning in
:mod:`fracto.surface.filters`.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from fracto import __version__
from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize

#: Parameter families in the order they are reported.
GROUPS: tuple[str, ...] = (
    "height",
    "hybrid",
    "spatial",
    "functional",
    "feature",
    "profile",
    "fractography",
    "fractal",
)

# Unit of each parameter, by kind. "z" = height unit (µm), "lat" = lateral unit
# (µm, or px when uncalibrated), "" = dimensionless.
_KIND: dict[str, str] = {
    **dict.fromkeys(["Sa", "Sq", "Sp", "Sv", "Sz", "S10z", "S5p", "S5v"], "z"),
    **dict.fromkeys(["Smc", "Sxp", "Sk", "Spk", "Svk"], "z"),
    **dict.fromkeys(["Ssk", "Sku", "Str"], ""),
    **dict.fromkeys(["Smr", "Smr1", "Smr2"], "%"),
    **dict.fromkeys(["Vm", "Vv", "Vmp", "Vmc", "Vvc", "Vvv"], "volume"),
    "Sdq": "slope",
    "Sdr": "%cal",
    "Sal": "lat",
    "Std": "deg",
    "Spd": "density",
    "Spc": "curvature",
    **dict.fromkeys(["Ra", "Rq", "Rz"], "z"),
    **dict.fromkeys(["Rsk", "Rku"], ""),
    "RSm": "lat",
    "Rdq": "slope",
    **dict.fromkeys(
        ["RL_x", "RL_y", "RL", "RS", "RS_pickens_gurland", "RS_measured_to_predicted"], "cal"
    ),
    "D_psd": "",
    "D_variogram": "",
    "D_cube": "cal",
}

_NEEDS_CALIBRATION = (
    "needs a lateral calibration (pixel size): heights and lateral sizes differ in unit"
)


def parameter_unit(symbol: str, calibrated: bool) -> str:
    """Unit string of a reported parameter (``"um"``, ``"%"``, ``"1/um2"``, ``""`` ...)."""
    kind = _KIND.get(symbol, "")
    lat = "um" if calibrated else "px"
    return {
        "z": "um",
        "": "",
        "%": "%",
        "%cal": "%",
        "cal": "",
        "volume": "um3/um2",
        "slope": "" if calibrated else "um/px",
        "lat": lat,
        "deg": "deg",
        "density": f"1/{lat}2",
        "curvature": "1/um" if calibrated else "um/px2",
    }[kind]


@dataclass(frozen=True)
class Parameter:
    """One reported quantity: its value, unit and any fit details."""

    value: float
    unit: str
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        value = float(self.value) if self.value is not None else math.nan
        return {"value": value if math.isfinite(value) else None, "unit": self.unit, **self.extra}


@dataclass(frozen=True)
class SurfaceMeasurement:
    """Every parameter of one height map, with what was done to get them."""

    parameters: dict[str, Parameter]
    valid_fraction: float
    pixel_size: PixelSize
    processing: dict
    shape: tuple[int, int]

    def value(self, symbol: str) -> float:
        """Value of a parameter (NaN when it could not be computed)."""
        v = self.parameters[symbol].value
        return math.nan if v is None else float(v)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (the ``fracto measure --json`` object)."""
        return {
            "parameters": {k: p.to_dict() for k, p in self.parameters.items()},
            "valid_fraction": self.valid_fraction,
            "shape": list(self.shape),
            "pixel_size": self.pixel_size.to_dict(),
            "processing": self.processing,
            "version": __version__,
        }


def _check_map(z: np.ndarray) -> np.ndarray:
    z = np.asarray(z)
    if z.ndim != 2:
        raise FractoInputError(f"A height map must be 2-D; this one has {z.ndim} dimension(s).")
    if min(z.shape) < 3:
        raise FractoInputError(f"The height map is too small ({z.shape[0]}×{z.shape[1]}).")
    if not np.issubdtype(z.dtype, np.floating):
        z = z.astype(np.float64)
    finite = np.isfinite(z)
    n_valid = int(finite.sum())
    if n_valid == 0:
        raise FractoInputError("The height map holds no measured points (all NaN).")
    if n_valid < 9:
        raise FractoInputError(f"The height map holds only {n_valid} measured points.")
    zv = z[finite]
    if float(zv.max()) == float(zv.min()):
        raise FractoInputError("The height map is constant; there is no roughness to measure.")
    return z


#: Report order of the parameters, family by family as in :data:`GROUPS`.
ORDER: tuple[str, ...] = (
    *("Sa", "Sq", "Ssk", "Sku", "Sp", "Sv", "Sz"),
    *("Sdq", "Sdr"),
    *("Sal", "Str", "Std"),
    *("Smr", "Smc", "Sxp", "Vm", "Vv", "Vmp", "Vmc", "Vvc", "Vvv"),
    *("Sk", "Spk", "Svk", "Smr1", "Smr2"),
    *("Spd", "Spc", "S10z", "S5p", "S5v"),
    *("Ra", "Rq", "Rz", "Rsk", "Rku", "RSm", "Rdq"),
    *("RL_x", "RL_y", "RL", "RS", "RS_pickens_gurland", "RS_measured_to_predicted"),
    *("D_psd", "D_variogram", "D_cube"),
)


def _ordered(values: dict[str, float]) -> list[str]:
    """Parameter symbols in report order (:data:`ORDER`), then any others."""
    known = [k for k in ORDER if k in values]
    return known + [k for k in values if k not in ORDER]


def _fractal_estimates(z: np.ndarray, dx: float, dy: float) -> dict[str, tuple[float, dict]]:
    """Each fractal estimator on its own: one that cannot fit gives NaN and a note.

    A fitted dimension outside [2, 3] means the surface is not self-affine over the
    fit range (a Hurst exponent outside [0, 1]); it is withheld rather than reported
    as a dimension, and the fitted number is kept under ``"fitted_value"``.
    """
    from fracto.surface import fractal

    estimators = {
        "D_psd": fractal.fractal_dimension_psd,
        "D_variogram": fractal.fractal_dimension_variogram,
        "D_cube": fractal.fractal_dimension_cube,
    }
    out: dict[str, tuple[float, dict]] = {}
    for key, fn in estimators.items():
        try:
            est = fn(z, dx, dy)
        except FractoInputError as exc:
            out[key] = (math.nan, {"fit_range": None, "r2": None, "note": str(exc)})
            continue
        extra = {"fit_range": list(est.fit_range), "r2": est.r2}
        value = float(est.value)
        if not 2.0 <= value <= 3.0:
            extra["fitted_value"] = value
            extra["note"] = "not self-affine over the fit range (fitted D outside 2..3)"
            value = math.nan
        elif key == "D_cube":
            extra["note"] = (
                "biased low where box height ranges are small against box sides; "
                "D_psd and D_variogram are the primary estimates"
            )
        out[key] = (value, extra)
    return out


def measure_surface(
    z_um: np.ndarray,
    pixel_size: PixelSize,
    *,
    form: str = "plane",
    s_filter_um: float | None = None,
    l_filter_um: float | None = None,
    despike: bool = False,
    acf_threshold: float = 0.2,
    p: float = 0.1,
    q: float = 0.8,
    pruning: float = 0.05,
    profile_direction: str | float = "x",
    profile_cutoff_um: float | None = None,
    groups: tuple[str, ...] = GROUPS,
    threads: int = 2,
) -> SurfaceMeasurement:
    """Condition a height map and compute the ISO 25178-2 and fractography parameters.

    Parameters
    ----------
    z_um : ndarray, shape (ny, nx)
        Heights in micrometres; NaN marks non-measured points.
    pixel_size : PixelSize
        Lateral sampling. Uncalibrated maps are measured in pixels; the
        parameters that mix heights with lateral lengths (Sdr, RL, RS, D_cube)
        are then reported as missing.
    form : str
        Form removal: ``"plane"`` (default, least squares), ``"poly:N"``,
        ``"robust"`` or ``"none"``.
    s_filter_um, l_filter_um : float, optional
        Nesting indices of the ISO 16610-61 Gaussian S- and L-filters; none by default.
    despike : bool
        Remove spikes before form removal.
    acf_threshold : float
        Autocorrelation threshold s for Sal and Str (ISO 25178-3 default 0.2).
    p, q : float
        Material ratios for the volume parameters (defaults 10 % and 80 %).
    pruning : float
        Wolf pruning threshold as a fraction of Sz for the feature parameters.
    profile_direction : "x", "y" or float
        Direction of the profiles for the ISO 21920-2 parameters (degrees from x).
    profile_cutoff_um : float, optional
        ISO 16610-21 profile filter cutoff for the profile parameters.
    groups : tuple of str
        Parameter families to compute (see :data:`GROUPS`).
    threads : int
        1 computes everything in this thread; 2 (default) computes the feature
        and profile parameters in a second thread. The numbers are the same.

    Returns
    -------
    SurfaceMeasurement

    References
    ----------
    .. [1] ISO 25178-2:2012, Geometrical product specifications (GPS) — Surface
       texture: Areal — Part 2: Terms, definitions and surface texture parameters.
    .. [2] ISO 16610-61:2015, Linear areal filters — Gaussian filters.
    .. [3] ISO 21920-2:2021, Surface texture: Profile — Terms, definitions and
       surface texture parameters.
    .. [4] E. E. Underwood, Quantitative Stereology, Addison-Wesley, 1970.
    """
    from fracto.surface import areal, features, profile, ratios
    from fracto.surface.filters import condition_surface

    unknown = set(groups) - set(GROUPS)
    if unknown:
        raise FractoInputError(f"Unknown parameter group(s): {', '.join(sorted(unknown))}.")
    z = _check_map(z_um)
    dx, dy = pixel_size.spacing()
    cal = pixel_size.calibrated
    if not cal and (s_filter_um is not None or l_filter_um is not None):
        raise FractoInputError("S- and L-filters need a pixel size; give --pixel-size.")
    method, _, order = form.partition(":")
    conditioned = condition_surface(
        z,
        dx,
        dy,
        form=method,
        order=int(order) if order else 2,
        s_filter_um=s_filter_um,
        l_filter_um=l_filter_um,
        despike=despike,
    )
    zc = conditioned.z
    valid_fraction = float(np.isfinite(zc).mean())
    if not np.isfinite(zc).any():
        raise FractoInputError("No measured points are left after conditioning.")

    def feature_and_profile() -> dict[str, float]:
        out: dict[str, float] = {}
        if "feature" in groups:
            out.update(features.feature_parameters(zc, dx, dy, pruning=pruning))
        if "profile" in groups:
            out.update(
                profile.areal_profile_parameters(
                    zc, dx, dy, direction=profile_direction, cutoff_um=profile_cutoff_um
                )
            )
        return out

    def the_rest() -> tuple[dict[str, float], dict[str, dict]]:
        out: dict[str, float] = {}
        extra: dict[str, dict] = {}
        if "height" in groups:
            out.update(areal.height_parameters(zc))
        if "hybrid" in groups:
            out.update(areal.gradient_parameters(zc, dx, dy))
        if "spatial" in groups:
            out.update(areal.spatial_parameters(zc, dx, dy, s=acf_threshold))
        if "functional" in groups:
            curve = areal.material_ratio_curve(zc)
            out.update(areal.material_ratio_parameters(curve, p=p, q=q))
            out.update(areal.sk_parameters(curve))
            del curve
        if "fractography" in groups:
            sdr = out.get("Sdr")
            rs = None if sdr is None or not math.isfinite(sdr) else 1.0 + sdr / 100.0
            out.update(ratios.fractography_ratios(zc, dx, dy, rs=rs))
        if "fractal" in groups:
            for key, est in _fractal_estimates(zc, dx, dy).items():
                out[key], extra[key] = est
                extra[key]["fit_range_unit"] = pixel_size.lateral_unit
        return out, extra

    # The two halves are independent and of similar cost; NumPy, SciPy and the
    # FFTs release the GIL, so two threads use both cores. Results do not
    # depend on the number of threads.
    if threads > 1:
        with ThreadPoolExecutor(max_workers=2) as pool:
            first = pool.submit(feature_and_profile)
            rest, extras = the_rest()
            fp = first.result()
    else:
        fp = feature_and_profile()
        rest, extras = the_rest()
    merged = {**rest, **fp}
    values = {k: merged[k] for k in _ordered(merged)}

    params: dict[str, Parameter] = {}
    for key, val in values.items():
        kind = _KIND.get(key, "")
        extra = dict(extras.get(key, {}))
        if not cal and kind in ("cal", "%cal"):
            val = math.nan
            extra["note"] = _NEEDS_CALIBRATION
        params[key] = Parameter(float(val), parameter_unit(key, cal), extra)

    processing = {
        **conditioned.processing,
        "acf_threshold_s": acf_threshold,
        "volume_material_ratios": {"p": p, "q": q},
        "wolf_pruning_fraction_of_Sz": pruning,
        "profile_direction": profile_direction,
        "profile_cutoff_um": profile_cutoff_um,
        "groups": list(groups),
        "threads": threads,
    }
    return SurfaceMeasurement(params, valid_fraction, pixel_size, processing, tuple(z.shape))
