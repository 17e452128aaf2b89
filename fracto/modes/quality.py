"""Image quality of a fractograph: is the field fit to score?

Three measures, each on the image as read (grey, [0, 1]):

- focus: variance of the 4-neighbour Laplacian (Pech-Pacheco et al. 2000,
  common practice), computed on the image rescaled by its robust range so
  that brightness and contrast settings do not change it;
- clipping: the share of pixels at the darkest or brightest level;
- noise: the Gaussian noise standard deviation estimated from the finest
  wavelet detail band (Donoho & Johnstone 1994, via
  ``skimage.restoration.estimate_sigma``), relative to the robust range.

The thresholds of ``fit_to_score`` are common-practice heuristics of this
project, documented in :data:`QUALITY_LIMITS`; they flag a field, they never
change its result.

References
----------
.. [1] Pech-Pacheco, J. L., Cristóbal, G., Chamorro-Martínez, J., Fernández-Valdivia, J.
   (2000). Diatom autofocusing in brightfield microscopy: a comparative study.
   Proc. 15th ICPR, vol. 3, 314-317.
.. [2] Donoho, D. L., Johnstone, I. M. (1994). Ideal spatial adaptation by wavelet
   shrinkage. Biometrika 81(3), 425-455.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

#: Limits for ``fit_to_score`` (heuristics, common practice).
QUALITY_LIMITS: dict[str, float] = {
    "min_focus_laplacian_variance": 1e-3,  # on the range-normalised image
    "max_clipped_fraction": 0.05,
    "max_noise_sigma": 0.15,  # relative to the robust range
    "min_contrast": 0.02,  # robust range (1st-99th percentile) of the [0, 1] image
}


def laplacian_variance(image: np.ndarray) -> float:
    """Variance of the 4-neighbour Laplacian of an image (mirror borders).

    The kernel [[0, 1, 0], [1, -4, 1], [0, 1, 0]] with reflect-101 borders is
    the one ``cv2.Laplacian(img, cv2.CV_64F)`` applies (ksize = 1).

    References
    ----------
    Pech-Pacheco et al. (2000).
    """
    img = np.asarray(image, dtype=np.float64)
    return float(ndimage.laplace(img, mode="mirror").var())


def clipped_fraction(image: np.ndarray, *, low: float = 0.0, high: float = 1.0) -> float:
    """Share of finite pixels at or beyond the lowest or highest level."""
    img = np.asarray(image, dtype=np.float64)
    v = img[np.isfinite(img)]
    if v.size == 0:
        return 1.0
    return float(((v <= low) | (v >= high)).mean())


def noise_sigma(image: np.ndarray) -> float:
    """Standard deviation of Gaussian noise in an image (wavelet MAD estimate).

    References
    ----------
    Donoho & Johnstone (1994), as implemented by skimage.restoration.estimate_sigma.
    """
    from skimage.restoration import estimate_sigma

    img = np.asarray(image, dtype=np.float64)
    img = np.where(np.isfinite(img), img, np.nanmedian(img))
    return float(estimate_sigma(img))


@dataclass(frozen=True)
class ImageQuality:
    """Quality block of a classification.

    Parameters
    ----------
    focus_laplacian_variance : float
        Variance of the Laplacian of the range-normalised image.
    clipped_fraction : float
        Share of pixels at the extreme levels.
    noise_sigma : float
        Noise standard deviation relative to the robust range.
    contrast : float
        Robust range (1st-99th percentile) of the image in [0, 1].
    fit_to_score : bool
        All limits of :data:`QUALITY_LIMITS` are met.
    reasons : tuple of str
        One sentence per limit not met.
    """

    focus_laplacian_variance: float
    clipped_fraction: float
    noise_sigma: float
    contrast: float
    fit_to_score: bool
    reasons: tuple[str, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict:
        return {
            "focus_laplacian_variance": self.focus_laplacian_variance,
            "clipped_fraction": self.clipped_fraction,
            "noise_sigma": self.noise_sigma,
            "contrast": self.contrast,
            "fit_to_score": self.fit_to_score,
            "reasons": list(self.reasons),
            "limits": dict(QUALITY_LIMITS),
        }


def assess_quality(image: np.ndarray) -> ImageQuality:
    """Focus, clipping and noise of a grey image in [0, 1], with a verdict.

    References
    ----------
    Pech-Pacheco et al. (2000); Donoho & Johnstone (1994).
    """
    img = np.asarray(image, dtype=np.float64)
    finite = img[np.isfinite(img)]
    lo, hi = np.percentile(finite, [1, 99]) if finite.size else (0.0, 0.0)
    contrast = float(hi - lo)
    scale = contrast if contrast > 1e-9 else 1.0
    norm = (img - lo) / scale
    focus = laplacian_variance(np.where(np.isfinite(norm), norm, 0.0))
    clip = clipped_fraction(img)
    sigma = noise_sigma(img) / scale
    lim = QUALITY_LIMITS
    reasons = []
    if contrast < lim["min_contrast"]:
        reasons.append(f"The contrast ({contrast:.3f}) is below {lim['min_contrast']}.")
    if clip > lim["max_clipped_fraction"]:
        reasons.append(
            f"{clip:.1%} of the pixels are clipped (limit {lim['max_clipped_fraction']:.0%})."
        )
    if focus < lim["min_focus_laplacian_variance"]:
        reasons.append(f"The image looks out of focus (Laplacian variance {focus:.2e}).")
    if sigma > lim["max_noise_sigma"]:
        reasons.append(f"The image is noisy (noise sigma {sigma:.2f} of the range).")
    return ImageQuality(focus, clip, sigma, contrast, not reasons, tuple(reasons))
