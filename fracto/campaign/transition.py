"""Fracture mode (and toughness) against test temperature: transition-curve fits.

Each quantity is first averaged per specimen (the specimens, not the fields, are
the independent units), then three models are fitted to the specimen means by
least squares:

* ``constant``  — y = A (no trend);
* ``sigmoid``   — y = A + B·tanh((T − T0)/C), the hyperbolic-tangent form of
  Charpy transition curves [1]_; y(−∞) = A − B, y(+∞) = A + B, and by the odd
  symmetry of tanh the curve passes through A, the 50 % point of its span, at
  T = T0 (the "midpoint temperature", the analogue of the 50 % shear-fracture
  appearance temperature);
* ``gaussian``  — y = A + B·exp(−((T − T0)/W)²/2), B ≥ 0, for a mode that rises
  only near a transition; W is the standard deviation σ of the Gaussian
  (FWHM = 2·√(2 ln 2)·W ≈ 2.355·W).

The model is chosen by AICc [2]_; when the constant model has the lowest AICc
the quantity is reported as showing no trend. Intervals come from a
nonparametric bootstrap that resamples specimens with replacement (percentile
intervals, seeded) and refits the chosen model. For a mode fraction each
replicate also draws every field's fraction within that field's own 95 %
interval (``<mode>_ci95_low`` / ``_high`` of images.csv): a normal with the
interval as its central 95 % (σ = width / 3.92), clipped to [0, 1], and the
specimen mean is taken over the drawn fields; the fields' measurement
uncertainty then widens the interval of the transition temperature as the
spread between specimens does.

References
----------
.. [1] Oldfield, W. (1975). Curve fitting impact test data: a statistical procedure.
   ASTM Standardization News 3(11), 24-29.
.. [2] Burnham, K. P., Anderson, D. R. (2002). Model Selection and Multimodel Inference,
   2nd ed. Springer. (AICc, eq. 2.14; K counts the regression parameters and σ².)
.. [3] Fisher, R. A. (1921). On the "probable error" of a coefficient of correlation
   deduced from a small sample. Metron 1, 3-32. (z-transform interval of r.)
"""

from __future__ import annotations

import json
import math
import zlib
from collections.abc import Iterable
from typing import Any

import numpy as np

from fracto.campaign.values import cell_float as _num
from fracto.classes import MODES
from fracto.errors import FractoInputError

#: Candidate models, in order of increasing complexity.
MODELS: tuple[str, ...] = ("constant", "sigmoid", "gaussian")

#: Number of regression parameters of each model (σ² is added for AICc).
N_PARAMS: dict[str, int] = {"constant": 1, "sigmoid": 4, "gaussian": 4}

#: Fewest distinct test temperatures the analysis accepts.
MIN_TEMPERATURES = 4

FORMULAS = {
    "constant": "y = A",
    "sigmoid": "y = A + B*tanh((T - T0)/C)",
    "gaussian": "y = A + B*exp(-((T - T0)/W)**2/2)",
}

WIDTH_DEFINITION = (
    "width_C is the standard deviation W (sigma) of the Gaussian; "
    "fwhm_C = 2*sqrt(2*ln 2)*W is its full width at half maximum."
)

_GRID_POINTS = 81


# --------------------------------------------------------------------------- models


def sigmoid(t: np.ndarray, a: float, b: float, t0: float, c: float) -> np.ndarray:
    """Hyperbolic-tangent transition curve y = A + B·tanh((T − T0)/C) (Oldfield 1975)."""
    return a + b * np.tanh((np.asarray(t, dtype=np.float64) - t0) / c)


def gaussian(t: np.ndarray, a: float, b: float, t0: float, w: float) -> np.ndarray:
    """Peaked curve y = A + B·exp(−((T − T0)/W)²/2); W is the standard deviation σ."""
    z = (np.asarray(t, dtype=np.float64) - t0) / w
    return a + b * np.exp(-0.5 * z * z)


def _evaluate(model: str, t: np.ndarray, p: np.ndarray) -> np.ndarray:
    if model == "constant":
        return np.full(np.shape(t), float(p[0]))
    if model == "sigmoid":
        return sigmoid(t, *p)
    return gaussian(t, *p)


def aicc(rss: float, n: int, k: int) -> float:
    """Second-order Akaike criterion of a least-squares fit.

    AICc = n·ln(RSS/n) + 2k + 2k(k + 1)/(n − k − 1)  (Burnham & Anderson 2002, eq. 2.14,
    with AIC = n·ln(σ̂²) + 2K for least squares, σ̂² = RSS/n).

    Parameters
    ----------
    rss : float
        Residual sum of squares (> 0).
    n : int
        Number of data points.
    k : int
        Number of estimated parameters *including* the residual variance σ².

    Returns
    -------
    float
        NaN when n − k − 1 ≤ 0 (the criterion is undefined) or RSS ≤ 0.

    References
    ----------
    Burnham, K. P., Anderson, D. R. (2002). Model Selection and Multimodel Inference.
    """
    if n - k - 1 <= 0 or not (rss > 0):
        return math.nan
    return n * math.log(rss / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1)


# ------------------------------------------------------------------- least squares


class _Scale:
    """Affine scaling of T and y to about [−1, 1] and [−0.5, 0.5] for the solver."""

    def __init__(self, t: np.ndarray, y: np.ndarray) -> None:
        tlo, thi = float(np.min(t)), float(np.max(t))
        self.tc = 0.5 * (tlo + thi)
        self.ts = max(0.5 * (thi - tlo), 1e-9)
        ylo, yhi = float(np.min(y)), float(np.max(y))
        self.yc = 0.5 * (ylo + yhi)
        self.ys = max(yhi - ylo, 1e-12 * max(1.0, abs(self.yc)))
        ut = np.unique(t)
        gaps = np.diff(ut) / self.ts
        self.min_gap = float(np.min(gaps)) if gaps.size else 1.0

    def u(self, t: np.ndarray) -> np.ndarray:
        return (np.asarray(t, dtype=np.float64) - self.tc) / self.ts

    def v(self, y: np.ndarray) -> np.ndarray:
        return (np.asarray(y, dtype=np.float64) - self.yc) / self.ys

    def to_physical(self, model: str, q: np.ndarray) -> np.ndarray:
        if model == "constant":
            return np.array([self.yc + self.ys * q[0]])
        a, b, u0, c = q
        return np.array([self.yc + self.ys * a, self.ys * b, self.tc + self.ts * u0, self.ts * c])

    def bounds(self, model: str) -> tuple[np.ndarray, np.ndarray]:
        if model == "sigmoid":
            # T0 up to a quarter of the tested span beyond either end; C from a near-step
            # to twice the span (beyond that the curve is a straight line over the data).
            return np.array([-1.5, -2.0, -1.5, 0.005]), np.array([1.5, 2.0, 1.5, 4.0])
        # peak inside the tested range (10 % margin); B >= 0 (a peak, not a dip); the
        # width at least half the closest temperature spacing, so that a peak is carried
        # by more than one test temperature, at most the whole span.
        wmin = max(0.5 * self.min_gap, 0.02)
        return np.array([-1.5, 0.0, -1.1, wmin]), np.array([1.5, 3.0, 1.1, max(2.0, wmin * 2)])


def _residual_fn(model: str, u: np.ndarray, v: np.ndarray):
    """Residuals and their analytic Jacobian in scaled units."""
    if model == "sigmoid":

        def res(q: np.ndarray) -> np.ndarray:
            return q[0] + q[1] * np.tanh((u - q[2]) / q[3]) - v

        def jac(q: np.ndarray) -> np.ndarray:
            z = (u - q[2]) / q[3]
            th = np.tanh(z)
            d = q[1] * (1.0 - th * th) / q[3]
            return np.column_stack([np.ones_like(u), th, -d, -d * z])

    else:

        def res(q: np.ndarray) -> np.ndarray:
            z = (u - q[2]) / q[3]
            return q[0] + q[1] * np.exp(-0.5 * z * z) - v

        def jac(q: np.ndarray) -> np.ndarray:
            z = (u - q[2]) / q[3]
            g = np.exp(-0.5 * z * z)
            d = q[1] * g * z / q[3]
            return np.column_stack([np.ones_like(u), g, d, d * z])

    return res, jac


def _starts(model: str, u: np.ndarray, v: np.ndarray, lo: np.ndarray, hi: np.ndarray):
    out = []
    if model == "sigmoid":
        # the sign of the slope of a straight line through the data first, the other
        # sign from the middle only (a sigmoid whose direction opposes the trend is rare)
        slope = float(np.polyfit(u, v, 1)[0]) if np.ptp(u) > 0 else 1.0
        sign = 1.0 if slope >= 0 else -1.0
        for u0 in (-0.8, -0.4, 0.0, 0.4, 0.8):
            for c in (0.15, 0.5):
                out.append([float(np.mean(v)), 0.5 * sign, u0, c])
        for c in (0.15, 0.5):
            out.append([float(np.mean(v)), -0.5 * sign, 0.0, c])
    else:
        order = np.argsort(v)[::-1]
        peaks = {float(u[i]) for i in order[:3]} | {0.0}
        for u0 in sorted(peaks):
            for w in (0.2, 0.5):
                out.append([float(np.min(v)), float(np.max(v) - np.min(v)), u0, w])
    eps = 1e-9
    return [np.clip(np.asarray(s, dtype=np.float64), lo + eps, hi - eps) for s in out]


def _fit_scaled(
    model: str, u: np.ndarray, v: np.ndarray, scale: _Scale, starts: Iterable[np.ndarray] | None
) -> tuple[np.ndarray, float, bool]:
    """Best least-squares fit in scaled units: (parameters, RSS in scaled units, converged)."""
    if model == "constant":
        m = float(np.mean(v))
        return np.array([m]), float(np.sum((v - m) ** 2)), True
    from scipy.optimize import least_squares

    lo, hi = scale.bounds(model)
    fun, jac = _residual_fn(model, u, v)
    best: tuple[np.ndarray, float, bool] | None = None
    for q0 in starts if starts is not None else _starts(model, u, v, lo, hi):
        q0 = np.clip(q0, lo + 1e-9, hi - 1e-9)
        try:
            r = least_squares(fun, q0, jac=jac, bounds=(lo, hi), method="trf", max_nfev=400)
        except (ValueError, FloatingPointError):
            continue
        rss = float(np.sum(r.fun**2))
        if not np.isfinite(rss):
            continue
        ok = bool(r.status > 0) and bool(np.all(np.isfinite(r.x)))
        if best is None or rss < best[1] - 1e-15 or (ok and not best[2] and rss <= best[1]):
            best = (r.x, rss, ok)
    if best is None:
        return np.full(4, np.nan), math.nan, False
    return best


def _pinned(model: str, q: np.ndarray, scale: _Scale) -> bool:
    """True when the characteristic temperature sits on its bound (not determined)."""
    if model == "constant":
        return False
    lo, hi = scale.bounds(model)
    tol = 1e-6
    return bool(q[2] <= lo[2] + tol or q[2] >= hi[2] - tol)


# ------------------------------------------------------------------ aggregation


def _is_ok(row: dict) -> bool:
    st = row.get("status", "ok")
    return st is None or str(st).strip().lower() in ("ok", "")


def toughness_columns(rows: list[dict]) -> list[str]:
    """Keys starting with ``toughness`` that hold at least one number."""
    keys: list[str] = []
    for r in rows:
        for k in r:
            if str(k).startswith("toughness") and k not in keys:
                keys.append(k)
    return [k for k in keys if any(math.isfinite(_num(r.get(k))) for r in rows)]


def specimen_groups(rows: list[dict]) -> dict[str, list[dict]]:
    """Rows by specimen name (a row without one is a specimen of its own)."""
    groups: dict[str, list[dict]] = {}
    for r in rows:
        name = r.get("specimen")
        name = str(name).strip() if name is not None else ""
        if not name:
            name = f"field:{r.get('path', len(groups))}"
        groups.setdefault(name, []).append(r)
    return groups


def aggregate_by_specimen(rows: list[dict], quantities: list[str]) -> tuple[list[dict], list[str]]:
    """Mean, standard deviation and count per specimen of each quantity.

    Rows whose status is not ``ok`` or whose temperature is missing are left out
    (the caller filters them). A specimen's temperature is the median of its
    fields' temperatures. Returns the specimen records (sorted by temperature)
    and warnings.
    """
    warnings: list[str] = []
    groups = specimen_groups(rows)
    out = []
    for name, rs in groups.items():
        temps = np.array([_num(r.get("temperature_C")) for r in rs])
        t = float(np.median(temps))
        if np.ptp(temps) > 1e-9:
            warnings.append(
                f"Specimen {name} has fields at different temperatures "
                f"({np.min(temps):g} to {np.max(temps):g} °C); their median {t:g} °C is used."
            )
        rec: dict[str, Any] = {"specimen": name, "temperature_C": t, "n_fields": len(rs)}
        for q in quantities:
            vals = np.array([_num(r.get(q)) for r in rs])
            vals = vals[np.isfinite(vals)]
            rec[q] = float(np.mean(vals)) if vals.size else None
            rec[f"{q}_sd"] = float(np.std(vals, ddof=1)) if vals.size > 1 else None
            rec[f"{q}_n"] = int(vals.size)
        out.append(rec)
    out.sort(key=lambda d: (d["temperature_C"], d["specimen"]))
    return out, warnings


# ------------------------------------------------------------------------ fitting


def _percentile_ci(x: np.ndarray) -> list[float] | None:
    x = x[np.isfinite(x)]
    if x.size < 20:
        return None
    lo, hi = np.percentile(x, [2.5, 97.5])
    return [float(lo), float(hi)]


def _selection(t: np.ndarray, y: np.ndarray, scale: _Scale) -> dict[str, dict]:
    """Fit every candidate model; their parameters, RSS and AICc."""
    u, v = scale.u(t), scale.v(y)
    n = int(t.size)
    n_temps = int(np.unique(t).size)
    # RSS floor: exact fits (flat data) would give ln 0; at the floor the model with
    # fewest parameters wins, as it should.
    floor = n * (1e-9 * scale.ys) ** 2
    cands: dict[str, dict] = {}
    for model in MODELS:
        k = N_PARAMS[model] + 1
        if model != "constant" and n_temps < MIN_TEMPERATURES:
            cands[model] = {"q": None, "rss": math.nan, "k": k, "aicc": math.nan, "ok": False}
            continue
        q, rss_s, ok = _fit_scaled(model, u, v, scale, None)
        rss = rss_s * scale.ys**2
        cands[model] = {
            "q": q,
            "rss": rss,
            "k": k,
            "aicc": aicc(max(rss, floor), n, k),
            "ok": ok,
        }
    return cands


def _grid(t: np.ndarray) -> np.ndarray:
    return np.linspace(float(np.min(t)), float(np.max(t)), _GRID_POINTS)


def fit_quantity(
    t: np.ndarray,
    y: np.ndarray,
    *,
    rng: np.random.Generator,
    n_boot: int,
    transition_temperature_C: float | None = None,
    fields: list[tuple[np.ndarray, np.ndarray]] | None = None,
) -> dict:
    """Fit the candidate models to specimen means, choose by AICc, bootstrap by specimen.

    Parameters
    ----------
    t : ndarray
        Test temperature of each specimen, °C.
    y : ndarray
        Specimen mean of the quantity (NaN entries are dropped).
    rng : numpy.random.Generator
        Source of the bootstrap resamples.
    n_boot : int
        Number of bootstrap replicates (specimens resampled with replacement).
    transition_temperature_C : float, optional
        When given, characteristic temperatures are also reported as offsets from it.
    fields : list of (values, sigmas), optional
        Per specimen (aligned with `t`), its fields' values and the standard
        deviation of each value's uncertainty; each bootstrap replicate then
        draws every field's value from a normal around it (clipped to [0, 1], for
        fractions) and uses the mean of the drawn values as the specimen's.

    Returns
    -------
    dict
        JSON-ready fit record (see :func:`analyse_campaign`).

    References
    ----------
    Oldfield (1975) for the tanh form; Burnham & Anderson (2002) for AICc;
    Efron & Tibshirani (1993), An Introduction to the Bootstrap, for percentile intervals.
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    keep = np.isfinite(t) & np.isfinite(y)
    t, y = t[keep], y[keep]
    if fields is not None:
        fields = [f for f, k in zip(fields, keep, strict=True) if k]
        if not any(np.any(np.asarray(sd) > 0) for _, sd in fields):
            fields = None  # no field intervals: nothing to draw
    n = int(t.size)
    n_temps = int(np.unique(t).size)
    rec: dict[str, Any] = {
        "n_specimens": n,
        "n_temperatures": n_temps,
        "model": None,
        "trend": None,
    }
    if n_temps < MIN_TEMPERATURES:
        rec["note"] = (
            f"Only {n_temps} distinct test temperatures carry this quantity; "
            f"at least {MIN_TEMPERATURES} are needed for a fit."
        )
        return rec
    scale = _Scale(t, y)
    cands = _selection(t, y, scale)
    aiccs = {m: cands[m]["aicc"] for m in MODELS}
    valid = {m: a for m, a in aiccs.items() if math.isfinite(a) and cands[m]["q"] is not None}
    rec["aicc"] = {m: (a if math.isfinite(a) else None) for m, a in aiccs.items()}
    rec["rss"] = {m: (c["rss"] if math.isfinite(c["rss"]) else None) for m, c in cands.items()}
    rec["k"] = {m: c["k"] for m, c in cands.items()}
    rec["k_definition"] = "regression parameters + 1 for the residual variance"
    notes = []
    too_few = set(valid) == {"constant"}
    if too_few:
        notes.append(
            f"AICc of the 4-parameter models needs at least 7 specimens (n - k - 1 > 0 with "
            f"k = 5); with {n} only the constant model could be assessed."
        )
    best = min(valid, key=valid.get)
    amin = valid[best]
    w = {m: math.exp(-0.5 * (a - amin)) for m, a in valid.items()}
    tot = sum(w.values())
    rec["akaike_weights"] = {m: (w[m] / tot if m in w else None) for m in MODELS}
    others = sorted(a for m, a in valid.items() if m != best)
    rec["delta_aicc_to_next"] = (others[0] - amin) if others else None
    rec["model"] = best
    rec["trend"] = best != "constant"
    if best == "constant" and len(valid) > 1:
        notes.append("no trend: neither the sigmoid nor the peaked model beats a constant (AICc).")
    rec["formula"] = FORMULAS[best]
    q = cands[best]["q"]
    p = scale.to_physical(best, q)
    grid = _grid(t)
    curve = _evaluate(best, grid, p)
    rec["temperature_range_C"] = [float(np.min(t)), float(np.max(t))]

    # ---- bootstrap by specimen: resample specimen indices, refit the chosen model
    u_all, v_all = scale.u(t), scale.v(y)
    boot_p = np.full((n_boot, p.size), np.nan)
    boot_curves = np.full((n_boot, grid.size), np.nan)
    n_conv = 0
    for b in range(n_boot):
        idx = rng.integers(0, n, size=n)
        if best != "constant" and np.unique(t[idx]).size < MIN_TEMPERATURES:
            continue
        vb = v_all[idx] if fields is None else scale.v(_draw_specimen_means(fields, idx, rng))
        qb, _, ok = _fit_scaled(best, u_all[idx], vb, scale, [q] if best != "constant" else None)
        if not ok or _pinned(best, qb, scale):
            continue
        n_conv += 1
        pb = scale.to_physical(best, qb)
        boot_p[b] = pb
        boot_curves[b] = _evaluate(best, grid, pb)
    rec["bootstrap"] = {
        "n_boot": int(n_boot),
        "n_converged": int(n_conv),
        "method": "percentile 95 % interval; specimens resampled with replacement"
        + (
            ", each field's value drawn within its own interval (normal, sigma = 95 % "
            "width / 3.92, clipped to [0, 1])"
            if fields is not None
            else ""
        )
        + "; chosen model refitted from the full-data estimate; replicates whose fit failed, "
        f"whose characteristic temperature sat on its bound or with < {MIN_TEMPERATURES} "
        "distinct temperatures count as not converged",
    }
    if n_conv < 20:
        notes.append(f"only {n_conv} of {n_boot} bootstrap replicates converged; no intervals.")
    band = (
        np.nanpercentile(boot_curves, [2.5, 97.5], axis=0)
        if n_conv >= 20
        else np.full((2, grid.size), np.nan)
    )
    rec["curve"] = {
        "T_grid_C": grid.tolist(),
        "value": curve.tolist(),
        "band95_low": band[0].tolist(),
        "band95_high": band[1].tolist(),
    }
    names = (
        ["A"]
        if best == "constant"
        else (["A", "B", "T0_C", "C_C"] if best == "sigmoid" else ["A", "B", "T0_C", "W_C"])
    )
    rec["parameters"] = {k: float(v) for k, v in zip(names, p, strict=True)}
    rec["parameters_ci95"] = {k: _percentile_ci(boot_p[:, i]) for i, k in enumerate(names)}
    tlo, thi = rec["temperature_range_C"]
    if best == "sigmoid":
        a, b_, t0, c = p
        rec["midpoint_temperature_C"] = float(t0)
        rec["midpoint_temperature_ci95_C"] = _percentile_ci(boot_p[:, 2])
        rec["midpoint_value"] = float(a)
        rec["low_temperature_shelf"] = float(a - b_)
        rec["high_temperature_shelf"] = float(a + b_)
        rec["half_width_C"] = float(c)
        rec["half_width_ci95_C"] = _percentile_ci(boot_p[:, 3])
        rec["half_width_definition"] = (
            "C of the tanh: the curve runs from 12 % to 88 % of its span between T0 - C and T0 + C"
        )
        rec["direction"] = "rising" if b_ > 0 else "falling"
        rec["extrapolated"] = bool(t0 < tlo or t0 > thi)
        char, char_ci = float(t0), rec["midpoint_temperature_ci95_C"]
        prefix = "midpoint"
    elif best == "gaussian":
        a, b_, t0, wdt = p
        rec["peak_temperature_C"] = float(t0)
        rec["peak_temperature_ci95_C"] = _percentile_ci(boot_p[:, 2])
        rec["baseline"] = float(a)
        rec["peak_value"] = float(a + b_)
        rec["width_C"] = float(wdt)
        rec["width_ci95_C"] = _percentile_ci(boot_p[:, 3])
        rec["fwhm_C"] = float(2.0 * math.sqrt(2.0 * math.log(2.0)) * wdt)
        rec["width_definition"] = WIDTH_DEFINITION
        rec["extrapolated"] = bool(t0 < tlo or t0 > thi)
        char, char_ci = float(t0), rec["peak_temperature_ci95_C"]
        prefix = "peak"
    else:
        rec["mean_value"] = float(p[0])
        rec["mean_value_ci95"] = _percentile_ci(boot_p[:, 0])
        char, char_ci, prefix = None, None, None
    rec["variation"] = float(np.max(curve) - np.min(curve))
    rec["range_of_means"] = float(np.max(y) - np.min(y))
    if transition_temperature_C is not None and char is not None:
        rec[f"{prefix}_offset_C"] = char - transition_temperature_C
        rec[f"{prefix}_offset_ci95_C"] = (
            [char_ci[0] - transition_temperature_C, char_ci[1] - transition_temperature_C]
            if char_ci
            else None
        )
    if too_few:
        rec["trend"] = None  # not assessed, rather than "no trend"
    if notes:
        rec["note"] = " ".join(notes)
    return rec


#: z of the central 95 % of a normal distribution.
Z95 = 1.959963984540054


def _draw_specimen_means(
    fields: list[tuple[np.ndarray, np.ndarray]], idx: np.ndarray, rng: np.random.Generator
) -> np.ndarray:
    """Specimen means of field values drawn within their intervals, for specimens `idx`."""
    out = np.empty(idx.size)
    for j, i in enumerate(idx):
        v, sd = fields[i]
        out[j] = float(np.mean(np.clip(v + sd * rng.standard_normal(v.size), 0.0, 1.0)))
    return out


def field_uncertainty(rows: list[dict], quantity: str) -> tuple[np.ndarray, np.ndarray]:
    """Values of `quantity` in `rows` and the σ of each from its 95 % interval columns.

    ``<mode>_fraction`` has ``<mode>_ci95_low`` and ``<mode>_ci95_high``; σ =
    (high − low) / (2 · 1.96), the normal whose central 95 % is the interval.
    Fields without finite bounds get σ = 0 (drawn as they are).
    """
    stem = quantity[: -len("_fraction")] if quantity.endswith("_fraction") else quantity
    vals, sds = [], []
    for r in rows:
        v = _num(r.get(quantity))
        if not math.isfinite(v):
            continue
        lo, hi = _num(r.get(f"{stem}_ci95_low")), _num(r.get(f"{stem}_ci95_high"))
        sd = (hi - lo) / (2 * Z95) if math.isfinite(lo) and math.isfinite(hi) and hi > lo else 0.0
        vals.append(v)
        sds.append(sd)
    return np.array(vals), np.array(sds)


def characteristic_temperature(fit: dict) -> tuple[float | None, list[float] | None]:
    """The characteristic temperature of a fit record and its 95 % interval.

    The 50 % temperature of a sigmoid, the peak temperature of a Gaussian, ``None``
    for a constant or missing fit.
    """
    if fit.get("model") == "sigmoid":
        return fit["midpoint_temperature_C"], fit.get("midpoint_temperature_ci95_C")
    if fit.get("model") == "gaussian":
        return fit["peak_temperature_C"], fit.get("peak_temperature_ci95_C")
    return None, None


def correlation(x: np.ndarray, y: np.ndarray, *, rng: np.random.Generator, n_boot: int) -> dict:
    """Pearson r between two specimen-level quantities, with two 95 % intervals.

    ``ci95`` uses Fisher's z-transform (tanh(atanh r ± 1.96/√(n − 3)), Fisher 1921, as
    scipy.stats.pearsonr's confidence_interval); ``bootstrap_ci95`` resamples specimens
    (percentile).

    References
    ----------
    Fisher (1921), Metron 1, 3-32.
    """
    from scipy import stats

    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    keep = np.isfinite(x) & np.isfinite(y)
    x, y = x[keep], y[keep]
    n = int(x.size)
    rec: dict[str, Any] = {"n_specimens": n, "method": "Pearson r of specimen means"}
    if n < 4 or np.ptp(x) == 0 or np.ptp(y) == 0:
        rec.update(r=None, p_value=None, ci95=None, bootstrap_ci95=None)
        rec["note"] = "fewer than 4 specimens with both values, or one of them constant."
        return rec
    res = stats.pearsonr(x, y)
    ci = res.confidence_interval(confidence_level=0.95)
    boots = np.full(n_boot, np.nan)
    for b in range(n_boot):
        idx = rng.integers(0, n, size=n)
        xb, yb = x[idx], y[idx]
        if np.ptp(xb) > 0 and np.ptp(yb) > 0:
            boots[b] = np.corrcoef(xb, yb)[0, 1]
    rec.update(
        r=float(res.statistic),
        p_value=float(res.pvalue),
        ci95=[float(ci.low), float(ci.high)],
        ci95_method="Fisher z-transform",
        bootstrap_ci95=_percentile_ci(boots),
        bootstrap_method="percentile; specimens resampled with replacement",
    )
    return rec


# ------------------------------------------------------------------------ campaign


def analyse_campaign(
    rows: list[dict],
    *,
    transition_temperature_C: float | None,
    seed: int = 0,
    n_boot: int = 1000,
    field_intervals: bool = True,
) -> dict:
    """Transition analysis of a campaign: per-mode (and toughness) curves against temperature.

    Parameters
    ----------
    rows : list of dict
        images.csv rows: ``path``, ``specimen``, ``temperature_C``, ``status``,
        ``<mode>_fraction`` for each mode of :data:`fracto.classes.MODES`, and
        optionally columns whose name starts with ``toughness``. Other keys are ignored.
        Only rows with status ``ok`` (or no status) and a finite temperature are used.
    transition_temperature_C : float or None
        The known transition temperature, °C; ``None`` estimates it from the data.
    seed : int
        Seed of the bootstrap generator.
    n_boot : int
        Bootstrap replicates per fit.
    field_intervals : bool
        Draw each field's mode fraction within its own 95 % interval in the
        bootstrap (where the rows carry ``<mode>_ci95_low`` / ``_high``).

    Returns
    -------
    dict
        JSON-ready: ``transition_temperature_C``, ``transition_estimated``,
        ``transition_basis``, ``fits`` (per mode and toughness column),
        ``correlations``, ``specimens`` (the aggregated points), counts, ``caution``,
        ``version``, ``seed`` and ``settings``.

    Raises
    ------
    FractoInputError
        When fewer than 4 distinct test temperatures remain among the usable rows.

    References
    ----------
    Oldfield (1975); Burnham & Anderson (2002); Fisher (1921).
    """
    from fracto import CAUTION, __version__

    if n_boot < 0:
        raise FractoInputError("The number of bootstrap replicates must not be negative.")
    if int(seed) < 0:
        raise FractoInputError("The seed must be a non-negative integer.")
    if transition_temperature_C is not None and not math.isfinite(float(transition_temperature_C)):
        raise FractoInputError("The transition temperature must be a finite number.")
    rows = list(rows)
    n_rows = len(rows)
    not_ok = [r for r in rows if not _is_ok(r)]
    ok_rows = [r for r in rows if _is_ok(r)]
    used = [r for r in ok_rows if math.isfinite(_num(r.get("temperature_C")))]
    no_temp = len(ok_rows) - len(used)
    tough = toughness_columns(used)
    quantities = [f"{m}_fraction" for m in MODES] + tough
    specimens, warnings = aggregate_by_specimen(used, quantities)
    groups = specimen_groups(used)
    temps = np.array([s["temperature_C"] for s in specimens], dtype=np.float64)
    n_t = int(np.unique(temps).size)
    if n_t < MIN_TEMPERATURES:
        raise FractoInputError(
            f"The campaign has {n_t} distinct test temperature{'s' if n_t != 1 else ''} among "
            f"its {len(specimens)} usable specimen{'s' if len(specimens) != 1 else ''}; "
            f"a transition analysis needs specimens at {MIN_TEMPERATURES} or more temperatures."
        )
    given = None if transition_temperature_C is None else float(transition_temperature_C)
    fits: dict[str, dict] = {}
    for q in quantities:
        # one stream per quantity, so a quantity's intervals do not depend on which
        # other columns the campaign has
        rng = _rng_for(seed, q)
        y = np.array([_num(s.get(q)) for s in specimens])
        name = q[: -len("_fraction")] if q.endswith("_fraction") and q[:-9] in MODES else q
        rec = {"quantity": q, "unit": "1 (area fraction)" if name in MODES else _unit_of(q)}
        fields = (
            [field_uncertainty(groups[sp["specimen"]], q) for sp in specimens]
            if name in MODES and field_intervals
            else None
        )
        rec.update(
            fit_quantity(
                temps,
                y,
                rng=rng,
                n_boot=n_boot,
                transition_temperature_C=given,
                fields=fields,
            )
        )
        fits[name] = rec

    # ---- transition temperature: given, or from the mode that varies most
    basis = None
    estimated_ci = None
    note = None
    if given is not None:
        t_tr = given
    else:
        cand = [
            (m, fits[m])
            for m in MODES
            if m in fits
            and fits[m].get("trend")
            and characteristic_temperature(fits[m])[0] is not None
        ]
        if cand:
            m, f = max(cand, key=lambda mf: mf[1]["variation"])
            t_tr, estimated_ci = characteristic_temperature(f)
            basis = {
                "mode": m,
                "model": f["model"],
                "quantity": f["quantity"],
                "characteristic": "midpoint_temperature_C"
                if f["model"] == "sigmoid"
                else "peak_temperature_C",
                "variation": f["variation"],
                "rule": "the mode whose fitted fraction varies most over the tested range "
                "(among modes with a trend); its 50 % temperature (sigmoid) or peak "
                "temperature (peaked fit)",
            }
            for fm in fits.values():
                ch, ci = characteristic_temperature(fm)
                if ch is not None:
                    prefix = "midpoint" if fm["model"] == "sigmoid" else "peak"
                    fm[f"{prefix}_offset_C"] = ch - t_tr
                    fm[f"{prefix}_offset_ci95_C"] = [ci[0] - t_tr, ci[1] - t_tr] if ci else None
            if f.get("extrapolated"):
                basis["note"] = "the characteristic temperature lies outside the tested range"
        else:
            t_tr = None
            note = (
                "No mode fraction shows an assessed trend with temperature (AICc), so no "
                "transition temperature could be estimated."
            )

    corrs = []
    x_ig = np.array([_num(s.get("intergranular_fraction")) for s in specimens])
    for tc in tough:
        yt = np.array([_num(s.get(tc)) for s in specimens])
        c = correlation(x_ig, yt, rng=_rng_for(seed, f"r:{tc}"), n_boot=n_boot)
        corrs.append({"x": "intergranular_fraction", "y": tc, **c})

    out: dict[str, Any] = {
        "transition_temperature_C": t_tr,
        "transition_estimated": given is None,
        "transition_temperature_ci95_C": estimated_ci,
        "transition_basis": basis,
        "fits": fits,
        "correlations": corrs,
        "specimens": specimens,
        "n_rows": n_rows,
        "n_rows_used": len(used),
        "n_rows_not_ok": len(not_ok),
        "n_rows_without_temperature": no_temp,
        "n_specimens": len(specimens),
        "n_temperatures": n_t,
        "warnings": warnings,
        "caution": CAUTION,
        "version": __version__,
        "seed": int(seed),
        "settings": {
            "random_streams": "numpy default_rng([seed, crc32(quantity name)]) per quantity",
            "n_boot": int(n_boot),
            "confidence": 0.95,
            "models": list(MODELS),
            "formulas": FORMULAS,
            "selection": "AICc (Burnham & Anderson 2002), k = regression parameters + 1",
            "aggregation": "mean per specimen; each specimen weighs equally in the fits",
            "field_intervals": "each field's mode fraction drawn within its own 95 % interval "
            "in every bootstrap replicate (normal, sigma = width / 3.92, clipped to [0, 1])"
            if field_intervals
            else "not used",
            "temperature_axis": "fits in T (°C); offsets from the transition temperature "
            "are reported as *_offset_C",
            "width_definition": WIDTH_DEFINITION,
            "rows_used": "status ok (or no status column) and a finite temperature_C",
        },
    }
    if note:
        out["transition_note"] = note
    if given is None and t_tr is not None:
        out["transition_note"] = (
            f"Estimated from the data: the {basis['model']} fit of the {basis['mode']} fraction."
        )
    from fracto.io.safe import dumps_json

    return json.loads(dumps_json(out, indent=None))  # NaN -> None, NumPy -> Python


def _rng_for(seed: int, name: str) -> np.random.Generator:
    """Generator of one quantity: seeded by the campaign seed and the quantity's name."""
    return np.random.default_rng([int(seed), zlib.crc32(name.encode("utf-8"))])


def _unit_of(column: str) -> str:
    """Unit suffix of a column name such as ``toughness_MPa_sqrt_m`` (``MPa_sqrt_m``)."""
    parts = column.split("_", 1)
    return parts[1] if len(parts) > 1 else ""


def format_summary(doc: dict) -> str:
    """Readable summary of :func:`analyse_campaign`'s result."""

    def f(v: Any, spec: str = ".1f") -> str:
        return "n/a" if v is None else format(v, spec)

    def ci(v: Any) -> str:
        return f"[{v[0]:.1f}, {v[1]:.1f}]" if v else "[n/a]"

    lines = []
    t = doc["transition_temperature_C"]
    if doc["transition_estimated"]:
        if t is None:
            lines.append(
                f"transition temperature: not estimated ({doc.get('transition_note', '')})"
            )
        else:
            b = doc["transition_basis"]
            lines.append(
                f"transition temperature: {t:.1f} °C {ci(doc['transition_temperature_ci95_C'])} "
                f"(estimated from the {b['model']} fit of the {b['mode']} fraction)"
            )
    else:
        lines.append(f"transition temperature: {t:.1f} °C (given)")
    lines.append(
        f"{doc['n_specimens']} specimens at {doc['n_temperatures']} temperatures, "
        f"{doc['n_rows_used']} of {doc['n_rows']} fields used"
    )
    lines.append("")
    lines.append(
        f"{'quantity':<24} {'model':<9} {'characteristic temperature °C (95 % CI)':<44} offset °C"
    )
    for name, fit in doc["fits"].items():
        model = fit.get("model") or "-"
        if model == "sigmoid":
            mid, mid_ci = fit["midpoint_temperature_C"], fit["midpoint_temperature_ci95_C"]
            desc = f"50 %: {f(mid)} {ci(mid_ci)}"
            off = fit.get("midpoint_offset_C")
        elif model == "gaussian":
            desc = (
                f"peak: {f(fit['peak_temperature_C'])} {ci(fit['peak_temperature_ci95_C'])}"
                f" σ {f(fit['width_C'])}"
            )
            off = fit.get("peak_offset_C")
        elif model == "constant":
            desc, off = "no trend", None
        else:
            desc, off = fit.get("note", "not fitted"), None
        lines.append(
            f"{name:<24} {model:<9} {desc:<44} {f(off, '+.1f') if off is not None else ''}"
        )
    for c in doc.get("correlations", []):
        if c.get("r") is not None:
            lines.append(
                f"r({c['x']}, {c['y']}) = {c['r']:.2f} [{c['ci95'][0]:.2f}, {c['ci95'][1]:.2f}] "
                f"(Fisher z, n = {c['n_specimens']} specimens)"
            )
    for w in doc.get("warnings", []):
        lines.append(f"warning: {w}")
    lines.append("")
    lines.append(doc["caution"])
    return "\n".join(lines)
