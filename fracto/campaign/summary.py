"""Batch outputs: ``images.csv``, ``specimens.csv`` and ``provenance.json``.

Column names carry units (``Sa_um``, ``Sdr_percent``, ``Vm_um3_per_um2``,
``intergranular_fraction``, ``temperature_C``); :func:`unit_suffix` maps the
measurement units to name suffixes.

Per-specimen statistics
-----------------------
For each numeric metric of a specimen's rows: the mean, the sample standard
deviation (ddof = 1), the number of values n, and the 95 % confidence interval
of the mean, mean ± t(0.975, n − 1)·s/√n with Student's t distribution
(Student 1908). With n = 1 the standard deviation and interval are missing.

Striation spacing (µm) of the fatigue regions is a metric like the others; its
per-image interval bounds are not; the crack-growth direction is averaged as an
axial angle (:func:`axial_mean_deg`, Fisher 1993) into
``striation_direction_axial_mean_deg``, and the windows measured are summed
(``striation_windows_total``).

Numeric metrics are the mode fractions (not their interval bounds), the
quality measures, the areal parameters and fractography ratios, and every
carried-through manifest column whose values are all numbers and whose name
carries a unit after an underscore (``toughness_MPa_sqrt_m``); a column like
``field`` is an identifier, not a metric.

References
----------
.. [1] Student (W. S. Gosset) (1908). The probable error of a mean. Biometrika 6(1), 1-25.
"""

from __future__ import annotations

import csv
import io
import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from fracto.campaign.values import cell_float_or_none as _num
from fracto.io.safe import write_text_atomic

if TYPE_CHECKING:
    from fracto.campaign.runner import ModelFacts

#: First columns of images.csv, in order.
BASE_COLUMNS = ("path", "specimen", "temperature_C", "kind", "status", "error")
#: Quality columns of images.csv.
QUALITY_COLUMNS = (
    "focus_laplacian_variance",
    "clipped_fraction",
    "noise_sigma",
    "contrast",
    "fit_to_score",
)
TEXT_METRIC_COLUMNS = ("quality_notes",)
#: Striation columns of images.csv (fracto.modes.striation in the fatigue regions).
STRIATION_COLUMNS = (
    "striation_spacing_um",
    "striation_spacing_ci95_low_um",
    "striation_spacing_ci95_high_um",
    "striation_direction_deg",
    "striation_windows",
)

_UNIT_SUFFIX = {
    "": "",
    "um": "_um",
    "px": "_px",
    "%": "_percent",
    "deg": "_deg",
    "um3/um2": "_um3_per_um2",
    "1/um2": "_per_um2",
    "1/px2": "_per_px2",
    "1/um": "_per_um",
    "um/px": "_um_per_px",
    "um/px2": "_um_per_px2",
}


def unit_suffix(unit: str | None) -> str:
    """Column-name suffix of a unit: ``"um"`` -> ``"_um"``, ``"1/um2"`` -> ``"_per_um2"``."""
    u = (unit or "").strip()
    if u in _UNIT_SUFFIX:
        return _UNIT_SUFFIX[u]
    s = u.replace("/", "_per_").replace(" ", "_").replace("%", "percent")
    if s.startswith("1_per_"):
        s = s[1:]
    return "_" + s.strip("_") if s else ""


def _parse_number(text: str) -> float | None:
    try:
        f = float(text)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def numeric_extra_columns(rows, extra_columns: Sequence[str]) -> list[str]:
    """Carried-through columns whose every non-empty value is a number."""
    out = []
    for c in extra_columns:
        vals = [r.extra.get(c, "") for r in rows]
        vals = [v for v in vals if v.strip() and v.strip().lower() not in ("na", "nan")]
        if vals and all(_parse_number(v) is not None for v in vals):
            out.append(c)
    return out


def metric_extra_columns(rows, extra_columns: Sequence[str]) -> list[str]:
    """Numeric carried columns that are metrics (name with a unit after an underscore)."""
    return [c for c in numeric_extra_columns(rows, extra_columns) if "_" in c.strip("_")]


def image_rows(
    manifest,
    stored: dict[int, dict],
    *,
    fraction_names: Sequence[str],
    overlays: dict[int, str] | None = None,
) -> tuple[list[dict], list[str]]:
    """The images.csv rows (typed) and their column order.

    Parameters
    ----------
    manifest : fracto.campaign.manifest.Manifest
    stored : dict
        Row index -> ``{"status", "error", "result", "content_sha256"}``.
    fraction_names : sequence of str
        Fraction names (modes, extra classes, ``unclassified``).
    overlays : dict, optional
        Row index -> overlay path relative to the output folder.

    Returns
    -------
    (rows, columns)
        Each row maps column -> float / None (numbers), bool (``fit_to_score``)
        or str; carried-through numeric columns are floats.
    """
    overlays = overlays or {}
    mode_cols = []
    for n in fraction_names:
        mode_cols += [f"{n}_fraction", f"{n}_ci95_low", f"{n}_ci95_high"]
    surface_cols: list[str] = []
    for r in manifest.rows:
        res = (stored.get(r.index) or {}).get("result") or {}
        for sym, p in (res.get("parameters") or {}).items():
            col = sym + unit_suffix(p.get("unit"))
            if col not in surface_cols:
                surface_cols.append(col)
    numeric_extra = set(numeric_extra_columns(manifest.rows, manifest.extra_columns))
    own = [
        *BASE_COLUMNS,
        "pixel_size_um",
        *mode_cols,
        *QUALITY_COLUMNS,
        *TEXT_METRIC_COLUMNS,
        *STRIATION_COLUMNS,
        *surface_cols,
        "valid_fraction",
        "overlay",
        "content_sha256",
    ]
    extra_names = {}
    for c in manifest.extra_columns:
        name = c if c not in own else f"manifest_{c}"
        extra_names[c] = name
    columns = [*own, *extra_names.values()]
    rows = []
    for r in manifest.rows:
        st = stored.get(r.index) or {}
        res = st.get("result") or {}
        row: dict = dict.fromkeys(columns)
        row.update(
            path=r.path,
            specimen=r.specimen,
            temperature_C=r.temperature_C,
            kind=r.kind,
            status=st.get("status", "error"),
            error=st.get("error") or "",
            overlay=overlays.get(r.index, ""),
            content_sha256=st.get("content_sha256", ""),
            quality_notes="",
        )
        ps = res.get("pixel_size") or {}
        row["pixel_size_um"] = _num(ps.get("x")) if ps.get("calibrated") else None
        for n, v in (res.get("fractions") or {}).items():
            if f"{n}_fraction" in row:
                row[f"{n}_fraction"] = _num(v.get("value"))
                lo, hi = (v.get("ci95") or [None, None])[:2]
                row[f"{n}_ci95_low"], row[f"{n}_ci95_high"] = _num(lo), _num(hi)
        q = res.get("quality") or {}
        for c in QUALITY_COLUMNS[:-1]:
            row[c] = _num(q.get(c))
        row["fit_to_score"] = q.get("fit_to_score") if q else None
        row["quality_notes"] = " ".join(q.get("reasons") or []) if q else ""
        for sym, p in (res.get("parameters") or {}).items():
            row[sym + unit_suffix(p.get("unit"))] = _num(p.get("value"))
        row["valid_fraction"] = _num(res.get("valid_fraction"))
        row.update(striation_cells(res.get("striation")))
        for c, name in extra_names.items():
            text = r.extra.get(c, "")
            row[name] = _parse_number(text) if c in numeric_extra else text
        rows.append(row)
    return rows, columns


def striation_cells(st: dict | None) -> dict:
    """images.csv striation cells of a stored striation result (µm only; else empty).

    A spacing measured without a pixel size (in px) is not put in the µm columns;
    it stays in the result store.
    """
    out: dict = dict.fromkeys(STRIATION_COLUMNS)
    if not st:
        return out
    out["striation_windows"] = _num(st.get("n_windows"))
    out["striation_direction_deg"] = _num(st.get("direction_deg"))
    if st.get("unit") == "um":
        out["striation_spacing_um"] = _num(st.get("spacing_um"))
        lo, hi = (st.get("ci95_um") or [None, None])[:2]
        out["striation_spacing_ci95_low_um"] = _num(lo)
        out["striation_spacing_ci95_high_um"] = _num(hi)
    return out


def axial_mean_deg(angles_deg: Sequence[float]) -> float | None:
    """Mean of axial angles (θ and θ + 180° alike) in [0, 180): half the angle of mean exp(2iθ).

    References
    ----------
    Fisher, N. I. (1993). Statistical Analysis of Circular Data, Cambridge UP (axial data).
    """
    a = np.radians([x for x in angles_deg if x is not None and math.isfinite(x)])
    if a.size == 0:
        return None
    z = np.exp(2j * a).mean()
    if abs(z) < 1e-12:
        return None  # no preferred axis
    return float(math.degrees(0.5 * math.atan2(z.imag, z.real)) % 180.0)


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        return repr(v)
    return str(v)


def csv_text(rows: Sequence[dict], columns: Sequence[str]) -> str:
    """CSV text of typed rows (missing values empty, booleans true/false)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([_cell(r.get(c)) for c in columns])
    return buf.getvalue()


def write_csv(path: str | os.PathLike, rows: Sequence[dict], columns: Sequence[str]) -> None:
    """Write typed rows as CSV atomically."""
    write_text_atomic(path, csv_text(rows, columns))


def mean_interval(values: Sequence[float], level: float = 0.95) -> dict:
    """Mean, sample SD, n and Student-t interval of the mean of the finite values.

    Returns
    -------
    dict
        ``mean``, ``sd``, ``n``, ``ci95_low``, ``ci95_high`` (None where undefined).

    References
    ----------
    Student (1908).
    """
    from scipy import stats

    v = np.asarray([x for x in values if x is not None and math.isfinite(x)], dtype=np.float64)
    n = int(v.size)
    if n == 0:
        return {"mean": None, "sd": None, "n": 0, "ci95_low": None, "ci95_high": None}
    mean = float(v.mean())
    if n == 1:
        return {"mean": mean, "sd": None, "n": 1, "ci95_low": None, "ci95_high": None}
    sd = float(v.std(ddof=1))
    half = float(stats.t.ppf(0.5 + level / 2, n - 1)) * sd / math.sqrt(n)
    return {"mean": mean, "sd": sd, "n": n, "ci95_low": mean - half, "ci95_high": mean + half}


def specimen_rows(
    rows: Sequence[dict], columns: Sequence[str], manifest
) -> tuple[list[dict], list[str]]:
    """One row per specimen (in order of first appearance) with the statistics of each metric."""
    numeric_extra = set(metric_extra_columns(manifest.rows, manifest.extra_columns))
    text_extra = [c for c in manifest.extra_columns if c not in numeric_extra]
    skip = {
        "temperature_C",
        "pixel_size_um",
        "overlay",
        "content_sha256",
        "striation_spacing_ci95_low_um",
        "striation_spacing_ci95_high_um",
        "striation_direction_deg",  # axial: its own mean below
        "striation_windows",  # a count: summed below
    }
    metrics = []
    for c in columns:
        if c in skip or c in BASE_COLUMNS or c.endswith(("_ci95_low", "_ci95_high")):
            continue
        if c in manifest.extra_columns or c.startswith("manifest_"):
            orig = c.removeprefix("manifest_") if c not in manifest.extra_columns else c
            if orig in numeric_extra:
                metrics.append(c)
            continue
        if c in ("fit_to_score", *TEXT_METRIC_COLUMNS):
            continue
        metrics.append(c)
    by_spec: dict[str, list[dict]] = {}
    for r in rows:
        by_spec.setdefault(r["specimen"], []).append(r)
    out_cols = ["specimen", "temperature_C", "n", "n_failed"]
    out_cols += [c for c in text_extra if c in columns]
    for m in metrics:
        out_cols += [f"{m}_mean", f"{m}_sd", f"{m}_n", f"{m}_ci95_low", f"{m}_ci95_high"]
    has_striation = "striation_windows" in columns
    if has_striation:
        out_cols += ["striation_direction_axial_mean_deg", "striation_windows_total"]
    out = []
    for spec, rs in by_spec.items():
        ok = [r for r in rs if r["status"] == "ok"]
        temps = {r["temperature_C"] for r in rs if r["temperature_C"] is not None}
        row: dict = {
            "specimen": spec,
            "temperature_C": temps.pop() if len(temps) == 1 else None,
            "n": len(ok),
            "n_failed": sum(r["status"] == "error" for r in rs),
        }
        for c in text_extra:
            if c in columns:
                vals = {str(r.get(c) or "") for r in rs}
                row[c] = vals.pop() if len(vals) == 1 else ""
        for m in metrics:
            vals = [_num(r.get(m)) for r in ok]
            s = mean_interval([v for v in vals if v is not None])
            for k, v in s.items():
                row[f"{m}_{k}"] = v
        if has_striation:
            row["striation_direction_axial_mean_deg"] = axial_mean_deg(
                [_num(r.get("striation_direction_deg")) for r in ok]
            )
            wins = [_num(r.get("striation_windows")) for r in ok]
            row["striation_windows_total"] = sum(w for w in wins if w is not None)
        out.append(row)
    return out, out_cols


def provenance(
    *,
    manifest,
    model_path: str | Path,
    model_sha256: str,
    model: ModelFacts,
    settings: dict,
    settings_hash: str,
    seed: int,
    run: dict,
    counts: dict,
) -> dict:
    """The provenance record of a batch (tool, model, settings, versions, caution).

    `model` gives the classes and feature-set version of the model
    (:class:`fracto.campaign.runner.ModelFacts`).
    """
    import datetime as _dt
    import platform

    from fracto import CAUTION, __version__
    from fracto.modes.model import library_versions

    libs = library_versions()
    for mod in ("dask", "distributed", "tifffile", "PIL", "cv2"):
        try:
            m = __import__(mod)
            libs[mod] = getattr(m, "__version__", "?")
        except ImportError:
            pass
    return {
        "tool": "fracto",
        "version": __version__,
        "created_utc": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "manifest": manifest.to_dict(),
        "model": {
            "path": str(model_path),
            "sha256": model_sha256,
            "classes": list(model.classes),
            "feature_set_version": model.feature_set_version,
        },
        "settings": settings,
        "settings_hash": settings_hash,
        "seed": seed,
        "run": run,
        "counts": counts,
        "platform": {"python": platform.python_version(), "system": platform.platform()},
        "library_versions": libs,
        "caution": CAUTION,
    }
