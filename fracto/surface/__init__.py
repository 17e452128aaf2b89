"""Height-map metrology: form removal, ISO 16610 filters, profile and areal parameters."""

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
from fracto.surface.profile import areal_profile_parameters, profile_parameters

__all__ = [
    "GAUSSIAN_ALPHA",
    "ConditionResult",
    "FormResult",
    "areal_profile_parameters",
    "condition_surface",
    "gaussian_mean_surface",
    "gaussian_profile_filter",
    "l_filter",
    "parse_form",
    "profile_parameters",
    "remove_form",
    "remove_spikes",
    "s_filter",
]
