"""Adjusted classify and count and its interval (fracto.modes.correction)."""

import numpy as np
import pytest

from fracto.modes.correction import ErrorRates, adjusted_classify_and_count, corrected_fractions
from fracto.modes.fractions import block_bootstrap_fractions, memberships_from_labels

NAMES = ("a", "b", "c", "unclassified")


def test_acc_inverts_a_known_confusion():
    # Forman (2008): counted q = P^T pi; with an interior solution the simplex-constrained
    # least squares must equal the plain linear solve (numpy.linalg.solve as reference).
    P = np.array([[0.8, 0.15, 0.05], [0.3, 0.6, 0.1], [0.05, 0.05, 0.9]])
    pi = np.array([0.5, 0.3, 0.2])
    q = P.T @ pi
    np.testing.assert_allclose(
        adjusted_classify_and_count(q, P), np.linalg.solve(P.T, q), atol=1e-6
    )
    np.testing.assert_allclose(adjusted_classify_and_count(q, P), pi, atol=1e-6)


def test_acc_stays_on_the_simplex_like_a_general_solver():
    # A counted share below what the error rates alone produce: the unconstrained
    # solution is negative; the result must match SLSQP on the same constrained problem.
    from scipy.optimize import minimize

    P = np.array([[0.7, 0.3, 0.0], [0.2, 0.8, 0.0], [0.0, 0.1, 0.9]])
    q = np.array([0.05, 0.45, 0.5])
    assert (np.linalg.solve(P.T, q) < 0).any()
    x = adjusted_classify_and_count(q, P)
    ref = minimize(
        lambda p: ((P.T @ p - q) ** 2).sum(),
        np.full(3, 1 / 3),
        method="SLSQP",
        bounds=[(0, 1)] * 3,
        constraints=[{"type": "eq", "fun": lambda p: p.sum() - 1}],
    ).x
    assert (x >= 0).all() and x.sum() == pytest.approx(1.0)
    np.testing.assert_allclose(x, ref, atol=1e-4)


def _patch_labels(rng, n, pi):
    """A region grid of square patches whose classes follow the shares pi."""
    side = 4
    cells = rng.choice(len(pi), size=(n // side, n // side), p=pi)
    return np.kron(cells, np.ones((side, side), int))


def test_perfect_classifier_reduces_to_the_block_bootstrap():
    # With error-free rates (identity confusion of huge counts) the corrected value and
    # interval are those of the counted labels' block bootstrap.
    rng = np.random.default_rng(1)
    lab = _patch_labels(rng, 32, [0.5, 0.3, 0.2])
    rates = ErrorRates(np.eye(3)[None] * 1e7, None, ("a", "b", "c"))
    w = np.ones(lab.shape)
    est, info = corrected_fractions(lab, w, NAMES, rates, scheme="pooled", n_boot=400, seed=3)
    ref = block_bootstrap_fractions(memberships_from_labels(lab, 3), w, NAMES, n_boot=400, seed=3)
    np.testing.assert_allclose(est.value[:3], ref.value[:3], atol=1e-6)
    np.testing.assert_allclose(est.ci_low[:3], ref.ci_low[:3], atol=0.02)
    np.testing.assert_allclose(est.ci_high[:3], ref.ci_high[:3], atol=0.02)
    assert est.value[3] == 0.0 and info["method"].startswith("adjusted classify")


def _simulate(rng, n_train=40, n_test=120, spread=0.12):
    """Training images and test cases whose error rates vary from image to image."""
    mean = np.array([[0.75, 0.2, 0.05], [0.25, 0.7, 0.05], [0.03, 0.02, 0.95]])

    def draw_rates():
        return np.array([rng.dirichlet(row * (1 / spread**2)) for row in mean])

    def classify(lab, P):
        u = rng.uniform(size=lab.shape)
        cum = P.cumsum(axis=1)[lab]
        return (u[..., None] > cum).sum(axis=2).clip(0, 2)

    per_image = []
    for _ in range(n_train):
        pi = rng.dirichlet(np.ones(3))
        lab = _patch_labels(rng, 40, pi)
        pred = classify(lab, draw_rates())
        cm = np.zeros((3, 3))
        np.add.at(cm, (lab.ravel(), pred.ravel()), 1.0)
        per_image.append(cm)
    rates = ErrorRates(np.stack(per_image), None, ("a", "b", "c"))
    tests = []
    for _ in range(n_test):
        pi = rng.dirichlet(np.ones(3))
        lab = _patch_labels(rng, 40, pi)
        truth = np.bincount(lab.ravel(), minlength=3) / lab.size
        tests.append((classify(lab, draw_rates()), truth))
    return rates, tests


def test_image_resampling_covers_where_pooled_rates_do_not():
    # Simulation with known truth: each image has its own error rates (Dirichlet around
    # a mean), so counting noise of the pooled matrix alone under-covers, while drawing
    # rows from single training images reaches the nominal 95 % (binomial tolerance).
    rng = np.random.default_rng(7)
    rates, tests = _simulate(rng)
    cover = {"pooled": [], "image": []}
    for pred, truth in tests:
        for scheme in cover:
            est, _ = corrected_fractions(
                pred, np.ones(pred.shape), NAMES, rates, scheme=scheme, n_boot=200, seed=1
            )
            cover[scheme].append((est.ci_low[:3] <= truth) & (truth <= est.ci_high[:3]))
    pooled = np.mean(cover["pooled"], axis=0)
    image = np.mean(cover["image"], axis=0)
    assert pooled[:2].max() < 0.85, pooled
    assert ((image >= 0.88) & (image <= 1.0)).all(), image


def test_bad_arguments_are_refused():
    from fracto.errors import FractoInputError

    rates = ErrorRates(np.eye(3)[None] * 10.0, None, ("a", "b", "c"))
    with pytest.raises(FractoInputError):
        corrected_fractions(np.zeros((4, 4), int), np.ones((4, 4)), NAMES[:3], rates)
    with pytest.raises(FractoInputError):
        corrected_fractions(np.zeros((4, 4), int), np.ones((4, 4)), NAMES, rates, scheme="x")
