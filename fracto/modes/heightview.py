"""The SEM view of a height map alone, for classifying height maps without an image.

A profilometer, confocal or stereo height map has no SEM image to classify.
:func:`render_view` makes one with fracto's own secondary-electron renderer
(:func:`fracto.synth.render_sem`) under one fixed set of settings
(:data:`VIEW_SETTINGS`): the same function renders the training height maps
of the default height model and every height map classified later, so the
views the model learned from and the views it is shown cannot differ.

What the view does, in order:

1. the least-squares plane is removed (specimen tilt is mounting, not
   fracture; ISO 25178-2 F-operation);
2. the map is scaled isotropically to :data:`VIEW_PIXEL_UM` per pixel:
   lateral lengths and heights are both multiplied by
   ``VIEW_PIXEL_UM / pixel_size_um``, so slopes are unchanged and the view
   depends on the surface's shape in pixels and its slopes, not on the
   magnification (a 1 µm-pixel profilometer map of a coarse fracture and a
   0.1 µm-pixel map of a fine one render alike when they are alike in
   pixels) — matching the scale-free classifier, which takes its filter
   scales from each view's own texture;
3. it is rendered with :data:`VIEW_SETTINGS`: the renderer's defaults for the
   physics (secant-law tilt contrast, edge effect and glow, side detector at
   azimuth 120° and elevation 30° with its shadowing, valley darkening) and
   every random or acquisition effect off (no shot noise, scan-line jitter or
   noise, field shading, banner or JPEG), 16-bit, automatic levels on.
   The result is deterministic.

References
----------
.. [1] L. Reimer, *Scanning Electron Microscopy: Physics of Image Formation and
   Microanalysis*, 2nd ed., Springer, 1998 (secant law, edge effect, detector).
.. [2] ISO 25178-2:2012, clause 3.1.5 (F-operation: removal of the form).
"""

from __future__ import annotations

import functools
import math
import os
from pathlib import Path

import numpy as np

from fracto.errors import FractoInputError
from fracto.synth.render import RenderSettings, render_sem

__all__ = [
    "FINGERPRINT_TOLERANCE",
    "HEIGHT_VIEW_VERSION",
    "VIEW_PIXEL_UM",
    "VIEW_SETTINGS",
    "default_height_model_path",
    "height_region_features",
    "levelled",
    "render_view",
    "view_fingerprint",
    "view_settings",
]

#: Name of this view recipe; stored in every height model and checked at prediction.
HEIGHT_VIEW_VERSION = "fracto-heightview-1"

#: Pixel size (µm) the map is scaled to before rendering (the generator's default).
VIEW_PIXEL_UM = 0.1

#: The fixed render settings of the view: defaults for the physics, nothing random.
VIEW_SETTINGS = RenderSettings(
    shading_variation=0.0,
    dose=None,
    line_jitter=0.0,
    scan_noise=0.0,
    banner=False,
    bit_depth=16,
    jpeg_quality=None,
)


def view_settings() -> dict:
    """The view recipe as a JSON-ready dict (version, reference pixel, render settings)."""
    return {
        "version": HEIGHT_VIEW_VERSION,
        "form_removed": "least-squares plane",
        "reference_pixel_um": VIEW_PIXEL_UM,
        "render": VIEW_SETTINGS.to_dict(),
    }


def render_view(height_um: np.ndarray, pixel_size_um: float) -> np.ndarray:
    """Render the SEM view of a height map with the fixed view settings.

    Parameters
    ----------
    height_um : ndarray, shape (ny, nx)
        Heights in µm; NaN marks points that were not measured (the renderer
        fills them with the nearest measured height).
    pixel_size_um : float
        Lateral sampling of the map in µm per pixel.

    Returns
    -------
    ndarray of float32, shape (ny, nx), values in [0, 1]
        The rendered view (no banner rows).

    Raises
    ------
    FractoInputError
        For a map that is not 2-D, too small, flat or without measured
        points, or a pixel size that is not a positive length.

    References
    ----------
    .. [1] L. Reimer, *Scanning Electron Microscopy*, 2nd ed., Springer, 1998.
    """
    z, px = levelled(height_um, pixel_size_um)
    k = VIEW_PIXEL_UM / px
    return render_sem(z * k, VIEW_PIXEL_UM, VIEW_SETTINGS, seed=0)


def levelled(height_um: np.ndarray, pixel_size_um: float) -> tuple[np.ndarray, float]:
    """Check a height map and remove its least-squares plane (NaN kept).

    Returns
    -------
    (levelled heights in µm, pixel size in µm)

    References
    ----------
    ISO 25178-2:2012, clause 3.1.5 (F-operation); fracto.surface.form.remove_form.
    """
    from fracto.surface.form import remove_form

    h = np.asarray(height_um, dtype=np.float64)
    if h.ndim != 2 or min(h.shape) < 3:
        raise FractoInputError("The height map must be a 2-D array of at least 3 x 3 points.")
    px = float(pixel_size_um) if pixel_size_um is not None else float("nan")
    if not (math.isfinite(px) and px > 0):
        raise FractoInputError("The height map needs a positive pixel size in µm to be rendered.")
    if np.isfinite(h).sum() < 3:
        raise FractoInputError("The height map has too few measured points to render.")
    z = remove_form(h, "plane", dx=px, dy=px).residual
    if not np.nanmax(z) > np.nanmin(z):
        raise FractoInputError("The height map is flat: it has no relief to classify.")
    return z, px


def height_region_features(
    height_um: np.ndarray, pixel_size_um: float, *, scale_um: float | None = None
):
    """The rendered view and the region features of a height map (view + height features).

    The one place where a height map becomes the height model's input: the
    default height model is trained on it and
    :func:`fracto.modes.pipeline.classify_height_map` predicts with it.

    Parameters
    ----------
    height_um : ndarray, shape (ny, nx)
        Heights in µm (NaN = not measured).
    pixel_size_um : float
        Lateral pixel size in µm.
    scale_um : float or None
        The model's physical texture scale (None: scale-free, from the view).

    Returns
    -------
    (view float32 (ny, nx), fracto.modes.features.RegionFeatures)
    """
    from fracto.modes.features import region_features

    z, px = levelled(height_um, pixel_size_um)
    view = render_view(z, px)
    feats = region_features(view, pixel_size_um=px, scale_um=scale_um, height_um=z)
    return view, feats


#: Largest difference of a fingerprint statistic still taken as the same renderer
#: (grey levels in [0, 1]; common practice, no source).
FINGERPRINT_TOLERANCE = 0.005


def view_fingerprint() -> list[float]:
    """Summary of the view of a fixed analytic surface, to detect a changed renderer.

    The surface is a sum of three sines and a cone on 96 x 96 points at
    0.1 µm; the fingerprint is the view's mean, standard deviation and 10th,
    50th and 90th percentiles, rounded to 4 decimals. A height model stores
    the fingerprint of the renderer it was trained with.
    """
    n = 96
    yy, xx = np.mgrid[0:n, 0:n] * VIEW_PIXEL_UM
    r = np.hypot(xx - 4.0, yy - 5.0)
    h = (
        0.3 * np.sin(2 * np.pi * xx / 2.1)
        + 0.2 * np.sin(2 * np.pi * (0.6 * xx + 0.8 * yy) / 1.3)
        + 0.1 * np.sin(2 * np.pi * yy / 0.7)
        + 0.5 * np.maximum(0.0, 1.0 - r / 2.5)
    )
    return list(_fingerprint(h.tobytes(), n))


@functools.lru_cache(maxsize=1)
def _fingerprint(data: bytes, n: int) -> tuple[float, ...]:
    h = np.frombuffer(data, dtype=np.float64).reshape(n, n)
    v = render_view(h, VIEW_PIXEL_UM).astype(np.float64)
    stats = [v.mean(), v.std(), *np.percentile(v, [10, 50, 90])]
    return tuple(round(float(s), 4) for s in stats)


#: File name of the default height model (beside the image model).
HEIGHT_MODEL_NAME = "fracto-height.skops"


def default_height_model_path() -> Path:
    """Where the default height model is found.

    In order: the ``FRACTO_HEIGHT_MODEL`` environment variable;
    ``fracto/models_data/`` inside the installed package; ``models/`` at the
    top of a source tree (as :func:`fracto.modes.model.default_model_path`).

    Raises
    ------
    FractoInputError
        If none of them holds a height model.
    """
    env = os.environ.get("FRACTO_HEIGHT_MODEL")
    if env:
        return Path(env)
    here = Path(__file__).resolve()
    for c in (
        here.parents[1] / "models_data" / HEIGHT_MODEL_NAME,
        here.parents[2] / "models" / HEIGHT_MODEL_NAME,
    ):
        if c.is_file():
            return c
    raise FractoInputError(
        "No default height model was found; give --model PATH, set FRACTO_HEIGHT_MODEL, or "
        "build it with 'python -m fracto.modes.default_model --height --out models/'."
    )
