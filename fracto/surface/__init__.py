"""Height-map metrology: conditioning, ISO 25178-2 areal and ISO 21920-2 profile
parameters, fractography ratios, fractal dimensions and facets.

The usual entry point is :func:`measure_surface`, which conditions a map and
computes every parameter; each family is also importable on its own.
"""

from fracto.surface.areal import (
    MaterialRatioCurve,
    developed_area,
    gradient_parameters,
    height_parameters,
    material_ratio_curve,
    material_ratio_parameters,
    sk_parameters,
    spatial_parameters,
)
from fracto.surface.facets import facet_analysis
from fracto.surface.features import feature_parameters
from fracto.surface.filters import (
    GAUSSIAN_ALPHA,
    ConditionResult,
    condition_surface,
    gaussian_mean_surface,
    gaussian_profile_filter,
    l_filter,
    remove_spikes,
    s_filter,
)
from fracto.surface.form import FormResult, parse_form, remove_form
from fracto.surface.fractal import (
    FractalEstimate,
    fractal_dimension_cube,
    fractal_dimension_psd,
    fractal_dimension_variogram,
    fractal_dimensions,
)
from fracto.surface.measure import Parameter, SurfaceMeasurement, measure_surface
from fracto.surface.profile import areal_profile_parameters, profile_parameters
from fracto.surface.ratios import (
    fractography_ratios,
    pickens_gurland_rs,
    profile_length_ratio,
    profile_length_ratio_mean,
    surface_area_ratio,
)

__all__ = [
    "GAUSSIAN_ALPHA",
    "ConditionResult",
    "FormResult",
    "FractalEstimate",
    "MaterialRatioCurve",
    "Parameter",
    "SurfaceMeasurement",
    "areal_profile_parameters",
    "condition_surface",
    "developed_area",
    "facet_analysis",
    "feature_parameters",
    "fractal_dimension_cube",
    "fractal_dimension_psd",
    "fractal_dimension_variogram",
    "fractal_dimensions",
    "fractography_ratios",
    "gaussian_mean_surface",
    "gaussian_profile_filter",
    "gradient_parameters",
    "height_parameters",
    "l_filter",
    "material_ratio_curve",
    "material_ratio_parameters",
    "measure_surface",
    "parse_form",
    "pickens_gurland_rs",
    "profile_length_ratio",
    "profile_length_ratio_mean",
    "profile_parameters",
    "remove_form",
    "remove_spikes",
    "s_filter",
    "sk_parameters",
    "spatial_parameters",
    "surface_area_ratio",
]
