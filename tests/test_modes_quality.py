"""Quality metrics against reference libraries and known inputs."""

import cv2
import numpy as np
import pytest
from scipy import ndimage

from fracto.modes.quality import assess_quality, clipped_fraction, laplacian_variance, noise_sigma


def test_laplacian_variance_matches_opencv():
    # Reference: cv2.Laplacian with ksize=1 applies [[0,1,0],[1,-4,1],[0,1,0]] with
    # BORDER_REFLECT_101 (OpenCV documentation); Pech-Pacheco et al. (2000) take its variance.
    rng = np.random.default_rng(0)
    img = ndimage.gaussian_filter(rng.uniform(size=(200, 150)), 1.5)
    ref = cv2.Laplacian(img, cv2.CV_64F).var()
    assert laplacian_variance(img) == pytest.approx(ref, rel=1e-9)


def test_noise_sigma_recovers_added_gaussian_noise():
    # Known input: a smooth ramp plus Gaussian noise of sigma 0.03.
    rng = np.random.default_rng(1)
    yy, xx = np.mgrid[0:256, 0:256] / 256.0
    clean = 0.3 + 0.4 * np.sin(2 * np.pi * xx) * yy
    noisy = clean + rng.normal(0, 0.03, clean.shape)
    assert noise_sigma(noisy) == pytest.approx(0.03, rel=0.1)


def test_clipped_fraction_counts_extreme_pixels():
    img = np.full((100, 100), 0.5)
    img[:10] = 0.0
    img[10:15] = 1.0
    assert clipped_fraction(img) == pytest.approx(0.15)


def test_saturated_blurred_and_noisy_fields_are_flagged():
    rng = np.random.default_rng(2)
    good = np.clip(
        ndimage.gaussian_filter(rng.uniform(size=(256, 256)), 1.0) * 2 - 0.5, 0.01, 0.99
    )
    q = assess_quality(good)
    assert q.fit_to_score, q.reasons
    sat = good.copy()
    sat[:100] = 1.0
    assert not assess_quality(sat).fit_to_score
    blurred = ndimage.gaussian_filter(good, 12.0)
    qb = assess_quality(blurred)
    assert qb.focus_laplacian_variance < q.focus_laplacian_variance
    assert not qb.fit_to_score
    noisy = np.clip(good + rng.normal(0, 0.3, good.shape), 0.001, 0.999)
    assert not assess_quality(noisy).fit_to_score
