"""Synthetic fracture surfaces with known truth.

A 3-D polycrystal (:mod:`~fracto.synth.polycrystal`), a fracture mode per grain
(:mod:`~fracto.synth.mode_model`, :mod:`~fracto.synth.modes`), the height map
and true mode map (:mod:`~fracto.synth.surface`), a secondary-electron view
(:mod:`~fracto.synth.render`) and campaigns of many specimens
(:mod:`~fracto.synth.campaign`). Random height fields are in
:mod:`~fracto.synth.fields`.
"""

from fracto.synth.mode_model import ModeModel
from fracto.synth.modes import FractureSettings
from fracto.synth.polycrystal import GrainSize, Polycrystal, make_polycrystal
from fracto.synth.render import RenderSettings, render_sem
from fracto.synth.surface import SyntheticSurface, make_surface, write_height_tif


def make_campaign(*args, **kwargs):
    from fracto.synth.campaign import make_campaign as _make_campaign

    return _make_campaign(*args, **kwargs)


__all__ = [
    "FractureSettings",
    "GrainSize",
    "ModeModel",
    "Polycrystal",
    "RenderSettings",
    "SyntheticSurface",
    "make_campaign",
    "make_polycrystal",
    "make_surface",
    "render_sem",
    "write_height_tif",
]
