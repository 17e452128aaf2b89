"""Fracture-mode classification of SEM fractographs (and height maps).

Data flow: image → :func:`~fracto.modes.features.region_features` (overlapping
tiles on a working grid scaled to the image's texture scale) →
:class:`~fracto.modes.model.ModeClassifier` (calibrated probabilities) →
:mod:`~fracto.modes.regions` (tile probabilities averaged onto blocks, labels,
``unclassified`` under the threshold) → :mod:`~fracto.modes.fractions` (area
fractions with a spatial block-bootstrap interval) → :mod:`~fracto.modes.overlay`.
:func:`~fracto.modes.pipeline.classify_image` runs it in one call; training
data come from :mod:`~fracto.modes.training`; the default model is built by
:mod:`~fracto.modes.default_model`.

Extension points kept open: ``ModeResult.block_probabilities`` and
``ModeResult.features`` (per-region probabilities and feature vectors, for
probability-weighted or confusion-corrected fractions and per-region
explanations); :func:`~fracto.modes.fractions.block_bootstrap_fractions` takes
soft memberships as well as hard labels; ``region_features(height_um=...)``
and ``ModeClassifier(uses_height=True)`` are the height-feature branch.
"""

from fracto.modes.features import FEATURE_DESCRIPTIONS, FEATURE_SET_VERSION, region_features
from fracto.modes.fractions import FractionEstimate, block_bootstrap_fractions
from fracto.modes.model import ModeClassifier, default_model_path, load_model, save_model
from fracto.modes.pipeline import ModeResult, classify_image
from fracto.modes.quality import ImageQuality, assess_quality

__all__ = [
    "FEATURE_DESCRIPTIONS",
    "FEATURE_SET_VERSION",
    "FractionEstimate",
    "ImageQuality",
    "ModeClassifier",
    "ModeResult",
    "assess_quality",
    "block_bootstrap_fractions",
    "classify_image",
    "default_model_path",
    "load_model",
    "region_features",
    "save_model",
]
