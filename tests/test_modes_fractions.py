"""Area fractions and the spatial block bootstrap."""

import numpy as np
import pytest

from fracto.modes.fractions import (
    area_fractions,
    block_bootstrap_fractions,
    memberships_from_labels,
)
from fracto.modes.regions import tile_labels_from_mask, tiles_to_blocks

NAMES = ("a", "b", "unclassified")


def test_area_fractions_weight_partial_regions():
    # Analytic: two regions of weight 1 (class a) and one of weight 0.5 (class b)
    lab = np.array([[0, 0, 1]])
    w = np.array([[1.0, 1.0, 0.5]])
    f = area_fractions(memberships_from_labels(lab, 2), w)
    np.testing.assert_allclose(f, [2 / 2.5, 0.5 / 2.5, 0.0])


def test_iid_bootstrap_matches_binomial_standard_error():
    # With 1 x 1 blocks the moving block bootstrap is Efron's iid bootstrap, whose
    # standard error of a share p over n regions is sqrt(p (1 - p) / n) (binomial);
    # the 95 % percentile interval is then about 2 * 1.96 standard errors wide.
    rng = np.random.default_rng(3)
    lab = (rng.uniform(size=(40, 40)) < 0.3).astype(int)
    est = block_bootstrap_fractions(
        memberships_from_labels(lab, 2),
        np.ones((40, 40)),
        NAMES,
        block_regions=1,
        n_boot=2000,
        seed=1,
    )
    p = est.value[1]
    width = est.ci_high[1] - est.ci_low[1]
    assert width == pytest.approx(2 * 1.96 * np.sqrt(p * (1 - p) / 1600), rel=0.15)


def test_interval_contains_estimate_and_shrinks_with_more_regions():
    rng = np.random.default_rng(4)
    widths = []
    for n in (12, 48):
        lab = rng.integers(0, 2, size=(n, n))
        est = block_bootstrap_fractions(
            memberships_from_labels(lab, 2), np.ones((n, n)), NAMES, n_boot=800, seed=2
        )
        assert np.all(est.ci_low <= est.value + 1e-12)
        assert np.all(est.value <= est.ci_high + 1e-12)
        widths.append(est.ci_high[0] - est.ci_low[0])
    # independent labels: width ~ 1/sqrt(n_regions), so 16x the regions -> about 1/4
    assert widths[1] < 0.5 * widths[0]


def test_spatially_correlated_labels_get_wider_intervals_with_blocks():
    # Large patches: regions are not independent; blocks of neighbours must widen the
    # interval compared with resampling single regions.
    lab = np.zeros((40, 40), int)
    lab[:, 20:] = 1
    lab[:12, :12] = 1
    m = memberships_from_labels(lab, 2)
    w = np.ones((40, 40))
    iid = block_bootstrap_fractions(m, w, NAMES, block_regions=1, n_boot=800, seed=0)
    blk = block_bootstrap_fractions(m, w, NAMES, block_regions=8, n_boot=800, seed=0)
    assert (blk.ci_high[0] - blk.ci_low[0]) > 2 * (iid.ci_high[0] - iid.ci_low[0])


def test_bootstrap_is_seeded():
    lab = np.random.default_rng(5).integers(0, 2, size=(16, 16))
    m = memberships_from_labels(lab, 2)
    a = block_bootstrap_fractions(m, np.ones((16, 16)), NAMES, seed=7)
    b = block_bootstrap_fractions(m, np.ones((16, 16)), NAMES, seed=7)
    np.testing.assert_array_equal(a.ci_low, b.ci_low)
    d = a.to_dict()
    assert set(d) == set(NAMES) and set(d["a"]) == {"value", "ci95"}


def test_tiles_to_blocks_averages_the_covering_tiles():
    # 2 x 2 tiles over a 3 x 3 block grid: the centre block is covered by all four tiles,
    # a corner block by one.
    p = np.array([[1.0, 0.0], [0.0, 1.0], [0.0, 1.0], [0.0, 1.0]])
    pb = tiles_to_blocks(p, (2, 2))
    assert pb[1, 1, 0] == pytest.approx(0.25)
    assert pb[0, 0, 0] == pytest.approx(1.0)
    assert pb[2, 2, 0] == pytest.approx(0.0)


def test_tile_labels_take_the_clear_majority():
    mask = np.zeros((30, 30), int)
    mask[:, :15] = 1
    mask[:, 15:] = 2
    lab = tile_labels_from_mask(mask, (2, 2), 10.0, 3)
    # tiles cover columns 0-19 (3/4 class 1) and 10-29 (3/4 class 2), purity 0.75
    np.testing.assert_array_equal(lab.reshape(2, 2), [[1, 2], [1, 2]])
    mask[:] = 0
    assert (tile_labels_from_mask(mask, (2, 2), 10.0, 3) == 0).all()
