"""Form removal of height maps: least-squares plane, polynomial surface, robust plane.

The fits work on the valid (non-NaN) points only and never build the full
design matrix: for a basis that is a product of a function of x and a function
of y, every entry of the normal equations is a sum of the form
``Py.T @ W @ Px`` (W the weight map), which costs a few matrix products over
the map. The coordinates are scaled to [-1, 1] and the basis is the Legendre
polynomials P_a(u)·P_b(v), which keeps the normal equations well conditioned.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import legendre

from fracto.errors import FractoInputError
from fracto.surface.checks import check_spacing

FORM_METHODS: tuple[str, ...] = ("plane", "poly", "robust", "none")

#: Highest polynomial order accepted by ``poly:N``.
MAX_POLY_ORDER = 12

#: Tukey biweight tuning constant (95 % efficiency under Gaussian noise;
#: Holland & Welsch 1977, from memory).
TUKEY_C = 4.685
#: Huber tuning constant (95 % efficiency; Huber 1964 / Holland & Welsch 1977, from memory).
HUBER_K = 1.345
#: Factor that turns the median absolute deviation into a Gaussian σ (common practice).
MAD_TO_SIGMA = 1.4826

_SUBGRID_POINTS = 1 << 18


@dataclass(frozen=True, eq=False)
class FormResult:
    """Outcome of a form removal.

    Attributes
    ----------
    residual : ndarray
        Heights minus the fitted form (µm); NaN where the input was NaN.
    method : str
        ``"plane"``, ``"poly"``, ``"robust"`` or ``"none"``.
    coefficients : tuple of float
        ``plane`` and ``robust``: (height at the map centre in µm, slope along x,
        slope along y) with slopes in µm of height per µm (per pixel when
        uncalibrated). ``poly``: coefficients of the Legendre products
        P_a(u)·P_b(v) listed in `terms`, u and v the column and row coordinates
        scaled to [-1, 1]. ``none``: empty.
    order : int
        Total polynomial order of the form (1 for planes, 0 for none).
    terms : tuple of (int, int)
        The (a, b) Legendre degrees in x and y of each poly coefficient.
    valid_points : int
        Number of measured points used.
    """

    residual: np.ndarray
    method: str
    coefficients: tuple[float, ...]
    order: int = 1
    terms: tuple[tuple[int, int], ...] = ()
    valid_points: int = 0

    def to_dict(self) -> dict:
        """JSON-ready summary (no arrays), reported under ``"processing"``."""
        d: dict = {
            "method": self.method,
            "order": self.order,
            "coefficients": [float(c) for c in self.coefficients],
            "valid_points": int(self.valid_points),
        }
        if self.method in ("plane", "robust"):
            d["coefficient_names"] = ["z_centre_um", "slope_x", "slope_y"]
        elif self.method == "poly":
            d["basis"] = "Legendre P_a(u)*P_b(v), u and v scaled to [-1, 1] over the map"
            d["terms"] = [list(t) for t in self.terms]
        if self.method == "robust":
            d["estimator"] = (
                f"IRLS: Huber start then Tukey biweight, MAD scale (k={HUBER_K}, c={TUKEY_C})"
            )
        return d


def parse_form(text: str, *, default_order: int = 2) -> tuple[str, int]:
    """Read a form-removal setting: ``"plane"``, ``"poly:3"``, ``"robust"``, ``"none"``.

    Parameters
    ----------
    text : str
        The setting. ``"poly"`` without an order takes `default_order`.
    default_order : int
        Order used for a bare ``"poly"``.

    Returns
    -------
    (method, order) : (str, int)
        Order is 1 for ``plane`` and ``robust`` and 0 for ``none``.

    Raises
    ------
    FractoInputError
        If the text is not one of the accepted forms.
    """
    t = str(text).strip().lower()
    if t in ("plane", "robust"):
        return t, 1
    if t == "none":
        return "none", 0
    m = re.fullmatch(r"poly(?:\s*:\s*(\d+))?", t)
    if m:
        order = int(m.group(1)) if m.group(1) is not None else int(default_order)
        _check_order(order)
        return "poly", order
    raise FractoInputError(
        f"Unknown form removal '{text}'; use plane, poly:N (N = 1 to {MAX_POLY_ORDER}), "
        "robust or none."
    )


def _check_order(order: int) -> None:
    if not (isinstance(order, int | np.integer) and 1 <= int(order) <= MAX_POLY_ORDER):
        raise FractoInputError(
            f"The polynomial order must be a whole number from 1 to {MAX_POLY_ORDER}, "
            f"not {order!r}."
        )


def _scaled(n: int) -> np.ndarray:
    """Coordinates 0..n-1 mapped to [-1, 1] (0 for a single sample)."""
    if n == 1:
        return np.zeros(1)
    return np.linspace(-1.0, 1.0, n)


def _terms(order: int) -> list[tuple[int, int]]:
    """(a, b) with a + b <= order, by total degree, x before y."""
    return [(d - b, b) for d in range(order + 1) for b in range(d + 1)]


def _left(p: np.ndarray, a: np.ndarray) -> np.ndarray:
    """p.T @ a for a thin basis p: numpy.einsum for a few columns (one streaming
    pass, no BLAS thread start-up, measured faster on a loaded 2-core machine),
    BLAS for many."""
    if p.shape[1] <= 16:
        return np.einsum("ib,ij->bj", p, a)
    return p.T @ a


def _solve_weighted(
    zw: np.ndarray,
    w: np.ndarray,
    px: np.ndarray,
    py: np.ndarray,
    terms: list[tuple[int, int]],
) -> np.ndarray:
    """Weighted least squares of the Legendre-product basis by normal equations.

    `zw` is weight × height (0 where not measured), `w` the weights.
    Returns the coefficient matrix C with C[b, a] for term (a, b).
    """
    k = px.shape[1]
    # Right-hand side: r[b, a] = sum_ij Py_b(i) zw_ij Px_a(j).
    rhs = _left(py, zw) @ px
    # Gram: sum_ij w_ij Py_b Py_d (i) Px_a Px_c (j) = (Qy.T W Qx)[(b,d), (a,c)].
    qx = (px[:, :, None] * px[:, None, :]).reshape(px.shape[0], k * k)
    qy = (py[:, :, None] * py[:, None, :]).reshape(py.shape[0], k * k)
    gram_all = _left(qy, w) @ qx
    n = len(terms)
    gram = np.empty((n, n))
    r = np.empty(n)
    for i, (a, b) in enumerate(terms):
        r[i] = rhs[b, a]
        for j, (c, d) in enumerate(terms):
            gram[i, j] = gram_all[b * k + d, a * k + c]
    coef, *_ = np.linalg.lstsq(gram, r, rcond=None)
    cmat = np.zeros((k, k))
    for (a, b), c in zip(terms, coef, strict=True):
        cmat[b, a] = c
    return cmat


def _evaluate(cmat: np.ndarray, px: np.ndarray, py: np.ndarray) -> np.ndarray:
    """Form surface sum_ab C[b, a] P_b(v_i) P_a(u_j) as a new (ny, nx) array."""
    return (py @ cmat) @ px.T


def _least_squares(
    z: np.ndarray, valid: np.ndarray, px: np.ndarray, py: np.ndarray, terms: list
) -> tuple[np.ndarray, np.ndarray]:
    """Exact least-squares fit; returns (coefficient matrix, residual)."""
    w = valid.astype(np.float64)
    zw = np.where(valid, z, 0.0)
    cmat = _solve_weighted(zw, w, px, py, terms)
    residual = _evaluate(cmat, px, py)
    np.subtract(z, residual, out=residual)
    # One step of iterative refinement: fit the residual again and fold it in.
    # It removes the rounding left by the normal equations (common practice
    # in numerical linear algebra).
    np.copyto(zw, residual, where=valid)
    corr = _solve_weighted(zw, w, px, py, terms)
    del zw, w
    cmat = cmat + corr
    fit = _evaluate(corr, px, py)
    np.subtract(residual, fit, out=residual)
    return cmat, residual


def _mad_scale(r: np.ndarray) -> float:
    """Robust σ of residuals: 1.4826 × median absolute deviation (common practice).

    Above 2^20 residuals a regular 1-in-k subsample gives the scale.
    """
    if r.size > 4 * _SUBGRID_POINTS:
        r = r[:: r.size // (4 * _SUBGRID_POINTS)]
    med = np.median(r)
    return float(MAD_TO_SIGMA * np.median(np.abs(r - med)))


def _irls(
    z: np.ndarray,
    valid: np.ndarray,
    px: np.ndarray,
    py: np.ndarray,
    terms: list,
    cmat: np.ndarray,
    scale_floor: float,
    *,
    kind: str,
    max_iter: int,
    tol: float,
    scale: float | None = None,
) -> tuple[np.ndarray, float]:
    """Iteratively reweighted least squares from the coefficients `cmat`.

    Returns the coefficients and the last robust scale. With `scale` given the
    scale is held fixed (used for the final pass over every point, whose
    scale comes from the sub-grid). Weights are built in place to keep the
    memory at two map-sized arrays.
    """
    zv = np.where(valid, z, 0.0)
    s = scale if scale is not None else math.nan
    for _ in range(max_iter):
        w = _evaluate(cmat, px, py)
        np.subtract(zv, w, out=w)  # residual
        if scale is None:
            s = max(_mad_scale(w[valid]), scale_floor)
        np.abs(w, out=w)
        if kind == "huber":
            np.maximum(w, 1e-300, out=w)
            np.divide(HUBER_K * s, w, out=w)
            np.minimum(w, 1.0, out=w)
        else:
            w *= 1.0 / (TUKEY_C * s)
            np.square(w, out=w)
            np.subtract(1.0, w, out=w)
            np.maximum(w, 0.0, out=w)
            np.square(w, out=w)
        np.multiply(w, valid, out=w)
        if not np.any(w):
            break
        new = _solve_weighted(w * zv, w, px, py, terms)
        change = float(np.max(np.abs(new - cmat)))
        cmat = new
        if change <= tol:
            break
    return cmat, s


def _robust_plane(z: np.ndarray, valid: np.ndarray, px: np.ndarray, py: np.ndarray) -> np.ndarray:
    terms = _terms(1)
    step = max(1, math.ceil(math.sqrt(z.size / _SUBGRID_POINTS)))
    zs, vs = z[::step, ::step], valid[::step, ::step]
    pxs, pys = px[::step], py[::step]
    if vs.sum() < 3:  # sparse map: iterate on every point
        zs, vs, pxs, pys = z, valid, px, py
    spread = float(np.nanmax(zs) - np.nanmin(zs)) if vs.any() else 0.0
    floor = 1e-12 * max(spread, 1.0)
    tol = 1e-12 * max(spread, 1.0)
    w0 = vs.astype(np.float64)
    cmat = _solve_weighted(np.where(vs, zs, 0.0), w0, pxs, pys, terms)
    cmat, _ = _irls(zs, vs, pxs, pys, terms, cmat, floor, kind="huber", max_iter=50, tol=tol)
    cmat, s = _irls(zs, vs, pxs, pys, terms, cmat, floor, kind="tukey", max_iter=100, tol=tol)
    if step > 1:  # polish on every valid point, with the sub-grid's scale
        cmat, _ = _irls(
            z, valid, px, py, terms, cmat, floor, kind="tukey", max_iter=1, tol=tol, scale=s
        )
    return cmat


def remove_form(
    z: np.ndarray,
    method: str = "plane",
    *,
    order: int = 2,
    dx: float = 1.0,
    dy: float = 1.0,
) -> FormResult:
    """Fit and subtract the form (plane, polynomial or robust plane) of a height map.

    Parameters
    ----------
    z : ndarray, shape (ny, nx)
        Heights in µm; NaN marks points that were not measured. Rows run
        along y, columns along x.
    method : {"plane", "poly", "robust", "none"}
        ``plane``: least-squares plane over the valid points (exact).
        ``poly``: least-squares polynomial surface of total order `order`
        (Legendre products in coordinates scaled to [-1, 1]).
        ``robust``: a plane that tall facets, steps and spikes do not pull —
        iteratively reweighted least squares (Holland & Welsch 1977) started
        from the least-squares plane with Huber weights (Huber 1964; convex, so
        the start does not matter) and finished with Tukey's biweight, whose
        weight falls to zero for residuals beyond 4.685 robust σ, the scale
        being 1.4826 × the median absolute deviation of the residuals. On maps
        of more than 2^18 points the iterations run on a regular sub-grid and
        the last one uses every valid point.
        ``none``: nothing is removed.
    order : int
        Total order of the ``poly`` surface (1 to 12).
    dx, dy : float
        Column and row spacing (µm; 1.0 means pixels). They only scale the
        plane slopes reported in the coefficients.

    Returns
    -------
    FormResult

    Raises
    ------
    FractoInputError
        For an unknown method or order, a map that is not 2-D, or fewer
        measured points than the form has coefficients.

    References
    ----------
    Huber, P. J. (1964). Robust estimation of a location parameter. Ann. Math.
    Statist. 35, 73–101.
    Holland, P. W. & Welsch, R. E. (1977). Robust regression using iteratively
    reweighted least-squares. Commun. Statist. A6, 813–827.
    ISO 25178-2 (2012), clause 3.1: the S-F surface is obtained by removing
    the form (F operator) from the primary surface.
    """
    z = np.asarray(z, dtype=np.float64)
    if z.ndim != 2:
        raise FractoInputError("The height map must be a 2-D array.")
    if method not in FORM_METHODS:
        raise FractoInputError(
            f"Unknown form removal '{method}'; use plane, poly, robust or none."
        )
    dx, dy = check_spacing(dx, dy)
    valid = np.isfinite(z)
    n_valid = int(valid.sum())
    if method == "none":
        return FormResult(z.copy(), "none", (), 0, (), n_valid)
    if method == "poly":
        _check_order(order)
        order = int(order)
    else:
        order = 1
    terms = _terms(order)
    if n_valid < len(terms):
        raise FractoInputError(
            f"The map has {n_valid} measured points, too few to fit a {method} form."
        )
    ny, nx = z.shape
    px = legendre.legvander(_scaled(nx), order)
    py = legendre.legvander(_scaled(ny), order)
    if method == "robust":
        cmat = _robust_plane(z, valid, px, py)
        residual = _evaluate(cmat, px, py)
        np.subtract(z, residual, out=residual)
    else:
        cmat, residual = _least_squares(z, valid, px, py, terms)
    if method in ("plane", "robust"):
        hx = (nx - 1) * dx / 2.0 if nx > 1 else math.inf
        hy = (ny - 1) * dy / 2.0 if ny > 1 else math.inf
        coefficients = (float(cmat[0, 0]), float(cmat[0, 1] / hx), float(cmat[1, 0] / hy))
        return FormResult(residual, method, coefficients, 1, tuple(terms[:3]), n_valid)
    coefficients = tuple(float(cmat[b, a]) for a, b in terms)
    return FormResult(residual, "poly", coefficients, order, tuple(terms), n_valid)
