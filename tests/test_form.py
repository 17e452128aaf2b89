"""Form removal: least-squares plane, polynomial surface, robust plane, parsing."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from fracto.errors import FractoInputError
from fracto.surface.form import FormResult, parse_form, remove_form


def _grid(ny: int, nx: int, dx: float, dy: float) -> tuple[np.ndarray, np.ndarray]:
    y, x = np.mgrid[0:ny, 0:nx].astype(np.float64)
    return x * dx, y * dy


def _with_holes(z: np.ndarray, seed: int, fraction: float = 0.1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    z = z.copy()
    z[rng.random(z.shape) < fraction] = np.nan
    z[5:15, 20:40] = np.nan  # one larger hole
    return z


@pytest.mark.parametrize("angle_deg, azimuth_deg", [(3.0, 20.0), (17.0, 200.0), (40.0, 95.0)])
def test_tilted_plane_removed_exactly(angle_deg: float, azimuth_deg: float) -> None:
    # Analytic: a plane z = z0 + tan(θ)·(x cos φ + y sin φ) is its own least-squares
    # plane, so the residual is zero up to rounding (ISO 25178-2 S-F surface of a plane).
    dx, dy = 0.37, 0.52
    x, y = _grid(120, 150, dx, dy)
    t = math.tan(math.radians(angle_deg))
    sx, sy = t * math.cos(math.radians(azimuth_deg)), t * math.sin(math.radians(azimuth_deg))
    z = _with_holes(12.5 + sx * x + sy * y, seed=1)
    res = remove_form(z, "plane", dx=dx, dy=dy)
    valid = np.isfinite(z)
    assert np.array_equal(np.isfinite(res.residual), valid)  # NaN kept where not measured
    scale = float(np.nanmax(np.abs(z)))
    assert np.nanmax(np.abs(res.residual)) < 1e-12 * scale
    # Slopes are reported in µm/µm; the offset is the height at the map centre.
    assert res.coefficients[1] == pytest.approx(sx, rel=1e-12, abs=1e-14)
    assert res.coefficients[2] == pytest.approx(sy, rel=1e-12, abs=1e-14)
    xc, yc = (150 - 1) * dx / 2, (120 - 1) * dy / 2
    assert res.coefficients[0] == pytest.approx(12.5 + sx * xc + sy * yc, rel=1e-12)


def test_plane_matches_numpy_lstsq_on_noisy_map() -> None:
    # Reference library: numpy.linalg.lstsq on the explicit design matrix [1, x, y]
    # over the valid points gives the least-squares plane.
    rng = np.random.default_rng(7)
    dx, dy = 0.8, 0.6
    x, y = _grid(60, 70, dx, dy)
    z = _with_holes(2.0 + 0.03 * x - 0.05 * y + rng.normal(0, 0.4, x.shape), seed=2)
    valid = np.isfinite(z)
    a = np.column_stack([np.ones(valid.sum()), x[valid], y[valid]])
    coef, *_ = np.linalg.lstsq(a, z[valid], rcond=None)
    expected = z - (coef[0] + coef[1] * x + coef[2] * y)
    res = remove_form(z, "plane", dx=dx, dy=dy)
    np.testing.assert_allclose(res.residual[valid], expected[valid], atol=1e-11)
    assert res.coefficients[1] == pytest.approx(coef[1], rel=1e-10)
    assert res.coefficients[2] == pytest.approx(coef[2], rel=1e-10)


@pytest.mark.parametrize("order", [2, 3, 5])
def test_polynomial_of_order_n_removed_exactly(order: int) -> None:
    # Analytic: any polynomial of total order n lies in the span of the fitted basis,
    # so poly:n leaves zero residual, while poly:(n-1) cannot (the top terms remain).
    rng = np.random.default_rng(order)
    x, y = _grid(90, 110, 1.0, 1.0)
    xs, ys = x / 50.0 - 1.0, y / 40.0 - 1.0  # plain monomials in arbitrary scaled units
    z = np.zeros_like(x)
    for d in range(order + 1):
        for b in range(d + 1):
            z += rng.uniform(-3, 3) * xs ** (d - b) * ys**b
    z += 5.0 * xs**order  # make sure the top order is present
    z = _with_holes(z, seed=order)
    method, n = parse_form(f"poly:{order}")
    res = remove_form(z, method, order=n)
    scale = float(np.nanmax(np.abs(z)))
    assert np.nanmax(np.abs(res.residual)) < 1e-10 * scale
    assert len(res.coefficients) == (order + 1) * (order + 2) // 2
    lower = remove_form(z, "poly", order=order - 1)
    assert np.nanmax(np.abs(lower.residual)) > 1e-3 * scale


def _facetted(seed: int) -> tuple[np.ndarray, tuple[float, float, float], float, float]:
    """A tilted plane with noise, tall facets and a step covering ~25 % of the map."""
    rng = np.random.default_rng(seed)
    dx, dy = 0.5, 0.5
    ny, nx = 160, 200
    x, y = _grid(ny, nx, dx, dy)
    sx, sy, z0 = 0.12, -0.08, 4.0
    z = z0 + sx * x + sy * y + rng.normal(0, 0.05, x.shape)
    z[10:50, 120:190] += 25.0  # tall facet
    z[100:150, 10:40] += 40.0  # another one
    z[130:160, 150:200] -= 30.0  # a step down in one corner
    z[rng.random(z.shape) < 0.03] = np.nan
    xc, yc = (nx - 1) * dx / 2, (ny - 1) * dy / 2
    return z, (z0 + sx * xc + sy * yc, sx, sy), dx, dy


def test_robust_plane_recovers_plane_under_facets_and_steps() -> None:
    # Analytic plane we built; plain least squares is pulled by the facets,
    # the Tukey-biweight IRLS (Holland & Welsch 1977) is not.
    z, truth, dx, dy = _facetted(11)
    robust = remove_form(z, "robust", dx=dx, dy=dy)
    ls = remove_form(z, "plane", dx=dx, dy=dy)
    err_robust = max(abs(robust.coefficients[i] - truth[i]) for i in (1, 2))
    err_ls = max(abs(ls.coefficients[i] - truth[i]) for i in (1, 2))
    assert err_robust < 1e-3  # noise 0.05 µm over a 100 µm map
    assert err_ls > 20 * err_robust
    assert robust.coefficients[0] == pytest.approx(truth[0], abs=0.02)


def test_robust_plane_agrees_with_sklearn_ransac() -> None:
    # Reference library: scikit-learn RANSACRegressor (Fischler & Bolles 1981) fitted
    # on the valid points finds the same inlier plane.
    from sklearn.linear_model import LinearRegression, RANSACRegressor

    z, _, dx, dy = _facetted(12)
    x, y = _grid(*z.shape, dx, dy)
    valid = np.isfinite(z)
    xy = np.column_stack([x[valid], y[valid]])
    ransac = RANSACRegressor(
        LinearRegression(), residual_threshold=0.25, random_state=0, max_trials=200
    )
    ransac.fit(xy, z[valid])
    ref = ransac.estimator_.coef_
    robust = remove_form(z, "robust", dx=dx, dy=dy)
    assert robust.coefficients[1] == pytest.approx(ref[0], abs=5e-4)
    assert robust.coefficients[2] == pytest.approx(ref[1], abs=5e-4)


def test_robust_plane_exact_on_clean_plane() -> None:
    # Analytic: with no outliers every weight is 1 and the robust plane is the plane.
    x, y = _grid(50, 60, 1.0, 1.0)
    z = 1.0 + 0.3 * x - 0.2 * y
    res = remove_form(z, "robust")
    assert np.max(np.abs(res.residual)) < 1e-9


def test_none_returns_copy_and_dict_is_json() -> None:
    z = np.arange(12.0).reshape(3, 4)
    res = remove_form(z, "none")
    assert isinstance(res, FormResult)
    np.testing.assert_array_equal(res.residual, z)
    assert res.residual is not z
    d = remove_form(_facetted(3)[0], "robust").to_dict()
    json.dumps(d)  # JSON-ready, no arrays
    assert d["method"] == "robust" and len(d["coefficients"]) == 3


@pytest.mark.parametrize(
    "text, expected",
    [
        ("plane", ("plane", 1)),
        (" Robust ", ("robust", 1)),
        ("none", ("none", 0)),
        ("poly:3", ("poly", 3)),
        ("poly : 4", ("poly", 4)),
        ("poly", ("poly", 2)),
    ],
)
def test_parse_form_accepts(text: str, expected: tuple[str, int]) -> None:
    assert parse_form(text) == expected


@pytest.mark.parametrize("text", ["plain", "poly:0", "poly:x", "poly:99", "", "plane:2"])
def test_parse_form_rejects(text: str) -> None:
    with pytest.raises(FractoInputError):
        parse_form(text)


def test_bad_inputs_raise() -> None:
    with pytest.raises(FractoInputError):
        remove_form(np.zeros((4, 4)), "wavy")
    with pytest.raises(FractoInputError):
        remove_form(np.zeros(10), "plane")
    z = np.full((5, 5), np.nan)
    z[0, 0] = 1.0
    with pytest.raises(FractoInputError):
        remove_form(z, "plane")
    with pytest.raises(FractoInputError):
        remove_form(np.zeros((4, 4)), "plane", dx=-1.0)
