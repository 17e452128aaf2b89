"""Transition-curve analysis: tanh and Gaussian fits, AICc choice, bootstrap by specimen.

Outside references, named beside each check:
- Oldfield (1975): the hyperbolic-tangent transition curve y = A + B·tanh((T − T0)/C);
- Burnham & Anderson (2002), eq. 2.14: AICc = n ln(RSS/n) + 2k + 2k(k + 1)/(n − k − 1);
- scipy.stats.pearsonr (r) and Fisher (1921) z-transform interval;
- analytic identities (derived in comments).
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest

from fracto.campaign.transition import (
    aicc,
    analyse_campaign,
    fit_quantity,
    gaussian,
    sigmoid,
)
from fracto.errors import FractoInputError

TEMPS = [-110.0, -90.0, -75.0, -60.0, -50.0, -40.0, -25.0, -10.0, 10.0]


def _campaign(
    *,
    t0=-50.0,
    c=20.0,
    temps=TEMPS,
    specimens_per_t=2,
    fields=2,
    specimen_sd=0.03,
    field_sd=0.02,
    ig=0.1,
    seed=0,
    toughness=False,
):
    """Invented campaign: ductile fraction rises as a tanh, transgranular takes the rest.

    Specimen effects and field scatter come from separate streams, so campaigns that
    differ only in `fields` share the same specimens.
    """
    rng = np.random.default_rng(seed)
    rng_field = np.random.default_rng([seed, 1])
    rows = []
    for t in temps:
        for s in range(specimens_per_t):
            name = f"Q{t:+.0f}-{s}"
            d_true = 0.45 + 0.45 * math.tanh((t - t0) / c)
            d_spec = d_true + rng.normal(0.0, specimen_sd)
            k = 40 + 120 * (d_true / 0.9) + rng.normal(0.0, 6.0)
            for f in range(fields):
                d = float(np.clip(d_spec + rng_field.normal(0.0, field_sd), 0, 1))
                g = float(np.clip(ig + rng_field.normal(0.0, 0.01), 0, 1))
                row = {
                    "path": f"{name}/f{f}.png",
                    "specimen": name,
                    "temperature_C": t,
                    "status": "ok",
                    "intergranular_fraction": g,
                    "transgranular_fraction": max(0.0, 1.0 - d - g),
                    "ductile_fraction": d,
                    "fatigue_fraction": 0.0,
                    "Sa_um": 1.0,
                }
                if toughness:
                    row["toughness_MPa_sqrt_m"] = k
                rows.append(row)
    return rows


# ------------------------------------------------------------------ model forms


def test_sigmoid_is_the_oldfield_form_and_t0_is_the_half_span_point():
    # Oldfield (1975): y = A + B*tanh((T - T0)/C). Written out with math.tanh:
    a, b, t0, c = 0.45, 0.4, -35.0, 18.0
    t = np.linspace(-120, 60, 19)
    expected = [a + b * math.tanh((ti - t0) / c) for ti in t]
    np.testing.assert_allclose(sigmoid(t, a, b, t0, c), expected, rtol=0, atol=1e-15)
    # Analytic: tanh(±inf) = ±1, so the shelves are A - B and A + B; tanh(0) = 0, so
    # y(T0) = A = the mean of the shelves, i.e. the 50 % point of the span is T0.
    low, high = a - b, a + b
    assert sigmoid(np.array([t0]), a, b, t0, c)[0] == pytest.approx((low + high) / 2, abs=1e-15)
    assert sigmoid(np.array([-1e6]), a, b, t0, c)[0] == pytest.approx(low, abs=1e-12)
    assert sigmoid(np.array([1e6]), a, b, t0, c)[0] == pytest.approx(high, abs=1e-12)
    # Analytic: at T0 + C the curve reaches A + B*tanh(1), tanh(1) = (e^2 - 1)/(e^2 + 1)
    # = 0.76159..., i.e. 88.08 % of the span.
    th1 = (math.e**2 - 1) / (math.e**2 + 1)
    frac = (sigmoid(np.array([t0 + c]), a, b, t0, c)[0] - low) / (high - low)
    assert frac == pytest.approx((1 + th1) / 2, abs=1e-12)


def test_gaussian_half_maximum_at_fwhm():
    # Analytic: exp(-z^2/2) = 1/2 at z = sqrt(2 ln 2), so FWHM = 2 sqrt(2 ln 2) W = 2.3548 W.
    a, b, t0, w = 0.1, 0.5, 20.0, 12.0
    half = 0.5 * 2 * math.sqrt(2 * math.log(2)) * w
    y = gaussian(np.array([t0 - half, t0, t0 + half]), a, b, t0, w)
    np.testing.assert_allclose(y, [a + b / 2, a + b, a + b / 2], atol=1e-12)


# ------------------------------------------------------------------------ AICc


def test_aicc_against_burnham_anderson_by_hand():
    # Burnham & Anderson (2002) eq. 2.14 with AIC = n ln(sigma^2) + 2K, sigma^2 = RSS/n:
    # n = 10, RSS = 2.5, K = 3: 10 ln(0.25) + 6 + 2*3*4/(10 - 3 - 1)
    #   = -13.862944 + 6 + 4 = -3.862944
    assert aicc(2.5, 10, 3) == pytest.approx(-3.8629436112, abs=1e-9)
    # n = 7, RSS = 0.07, K = 5: 7 ln(0.01) + 10 + 60/1 = -32.236191 + 70 = 37.763809
    assert aicc(0.07, 7, 5) == pytest.approx(7 * math.log(0.01) + 70, abs=1e-12)
    # undefined when n - K - 1 <= 0 (the correction term's denominator)
    assert math.isnan(aicc(1.0, 6, 5))
    # the correction vanishes for large n: AICc -> AIC = n ln(RSS/n) + 2K
    n = 10**7
    assert aicc(n * 0.5, n, 4) == pytest.approx(n * math.log(0.5) + 8, abs=1e-4)


def _specimen_arrays(f, temps, reps=2, sd=0.02, seed=1):
    rng = np.random.default_rng(seed)
    t = np.repeat(np.asarray(temps, dtype=float), reps)
    return t, f(t) + rng.normal(0, sd, t.size)


def test_tanh_parameters_recovered():
    # truth A = 0.5, B = 0.45, T0 = -30 °C, C = 15 °C (Oldfield form), noise sd 0.02
    t, y = _specimen_arrays(lambda t: sigmoid(t, 0.5, 0.45, -30.0, 15.0), np.arange(-100, 41, 10))
    rec = fit_quantity(t, y, rng=np.random.default_rng(0), n_boot=200)
    assert rec["model"] == "sigmoid"
    assert rec["midpoint_temperature_C"] == pytest.approx(-30.0, abs=2.0)
    assert rec["half_width_C"] == pytest.approx(15.0, rel=0.2)
    assert rec["parameters"]["A"] == pytest.approx(0.5, abs=0.02)
    assert rec["parameters"]["B"] == pytest.approx(0.45, abs=0.03)
    lo, hi = rec["midpoint_temperature_ci95_C"]
    assert lo < -30.0 < hi
    assert rec["bootstrap"]["n_converged"] >= 190


def test_gaussian_peak_recovered():
    # truth: baseline 0.1, peak height 0.5 at 20 °C, sigma 12 °C, noise sd 0.02
    t, y = _specimen_arrays(lambda t: gaussian(t, 0.1, 0.5, 20.0, 12.0), np.arange(-60, 101, 10))
    rec = fit_quantity(t, y, rng=np.random.default_rng(0), n_boot=200)
    assert rec["model"] == "gaussian"
    assert rec["peak_temperature_C"] == pytest.approx(20.0, abs=2.0)
    assert rec["width_C"] == pytest.approx(12.0, rel=0.15)
    assert rec["fwhm_C"] == pytest.approx(2 * math.sqrt(2 * math.log(2)) * rec["width_C"])
    assert "sigma" in rec["width_definition"]
    lo, hi = rec["peak_temperature_ci95_C"]
    assert lo < 20.0 < hi


def test_aicc_picks_the_right_model():
    temps = np.arange(-100, 61, 10)
    t, y = _specimen_arrays(lambda t: sigmoid(t, 0.5, -0.4, -20.0, 12.0), temps)
    rec = fit_quantity(t, y, rng=np.random.default_rng(0), n_boot=0)
    assert rec["model"] == "sigmoid" and rec["direction"] == "falling"
    assert rec["aicc"]["sigmoid"] < rec["aicc"]["gaussian"] - 2
    assert rec["aicc"]["sigmoid"] < rec["aicc"]["constant"] - 2
    t, y = _specimen_arrays(lambda t: gaussian(t, 0.05, 0.4, -10.0, 15.0), temps)
    rec = fit_quantity(t, y, rng=np.random.default_rng(0), n_boot=0)
    assert rec["model"] == "gaussian"
    assert rec["aicc"]["gaussian"] < rec["aicc"]["sigmoid"] - 2
    # pure noise around a constant: no trend
    t, y = _specimen_arrays(lambda t: np.full_like(t, 0.3), temps, sd=0.02, seed=5)
    rec = fit_quantity(t, y, rng=np.random.default_rng(0), n_boot=0)
    assert rec["model"] == "constant" and rec["trend"] is False
    assert "no trend" in rec["note"]
    # exactly flat data: the RSS floor makes the constant model win, no exception
    rec = fit_quantity(t, np.full_like(t, 0.25), rng=np.random.default_rng(0), n_boot=50)
    assert rec["model"] == "constant"
    assert rec["mean_value"] == pytest.approx(0.25)


# ------------------------------------------------------------ bootstrap units


def _width(doc, mode="ductile"):
    lo, hi = doc["fits"][mode]["midpoint_temperature_ci95_C"]
    return hi - lo


def test_bootstrap_resamples_specimens_not_fields():
    # Specimen-to-specimen scatter dominates (sd 0.06) over field scatter (0.02): more
    # fields per specimen barely sharpen the specimen means, so an interval resampled by
    # specimen must stay about as wide, while one that treated fields as independent
    # would shrink like 1/sqrt(fields) (sqrt(40/2) = 4.5x). Same specimens in both runs.
    kw = dict(specimens_per_t=2, specimen_sd=0.06, field_sd=0.02, seed=3)
    few = _campaign(fields=2, **kw)
    many = _campaign(fields=40, **kw)
    w_few = _width(analyse_campaign(few, transition_temperature_C=None, n_boot=150, seed=1))
    doc_many = analyse_campaign(many, transition_temperature_C=None, n_boot=150, seed=1)
    w_many = _width(doc_many)
    assert doc_many["fits"]["ductile"]["n_specimens"] == 18
    assert w_many > 0.6 * w_few
    # negative control: every field its own "specimen" -> the interval collapses
    naive = [dict(r, specimen=r["path"]) for r in many]
    w_naive = _width(analyse_campaign(naive, transition_temperature_C=None, n_boot=60, seed=1))
    assert w_naive < 0.5 * w_many


# --------------------------------------------------------------- correlation


def test_correlation_matches_scipy_pearsonr_on_specimen_means():
    from scipy import stats

    rows = _campaign(toughness=True, ig=0.0, seed=4)
    # make intergranular vary with temperature so the correlation is not degenerate
    jitter = np.random.default_rng(12).normal(0.0, 0.02, len(rows))
    for r, e in zip(rows, jitter, strict=True):
        r["intergranular_fraction"] = 0.3 - 0.002 * r["temperature_C"] + e
    doc = analyse_campaign(rows, transition_temperature_C=-50.0, n_boot=200, seed=2)
    (c,) = doc["correlations"]
    # specimen means computed independently here
    by = {}
    for r in rows:
        by.setdefault(r["specimen"], []).append(r)
    x = np.array([np.mean([r["intergranular_fraction"] for r in v]) for v in by.values()])
    y = np.array([np.mean([r["toughness_MPa_sqrt_m"] for r in v]) for v in by.values()])
    ref = stats.pearsonr(x, y)
    assert c["n_specimens"] == len(by)
    assert c["r"] == pytest.approx(float(ref.statistic), abs=1e-12)
    # Fisher (1921): z = atanh r, interval tanh(z -/+ 1.959964/sqrt(n - 3))
    z, se = math.atanh(c["r"]), 1 / math.sqrt(len(by) - 3)
    np.testing.assert_allclose(
        c["ci95"], [math.tanh(z - 1.959964 * se), math.tanh(z + 1.959964 * se)], atol=1e-5
    )
    assert c["ci95_method"] == "Fisher z-transform"
    lo, hi = c["bootstrap_ci95"]
    assert lo <= c["r"] <= hi


# ----------------------------------------------------------- whole campaign


def _walk(obj, path=""):
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield f"{path}/{k}", k, v
            yield from _walk(v, f"{path}/{k}")
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _walk(v, f"{path}[{i}]")


def test_estimated_transition_on_a_known_campaign():
    # truth: ductile fraction tanh with T0 = -50 °C (C = 20 °C)
    rows = _campaign(t0=-50.0, c=20.0, toughness=True, seed=7)
    doc = analyse_campaign(rows, transition_temperature_C=None, n_boot=200, seed=0)
    assert doc["transition_estimated"] is True
    assert doc["transition_temperature_C"] == pytest.approx(-50.0, abs=10.0)
    assert doc["transition_basis"]["mode"] in ("ductile", "transgranular")
    assert doc["transition_basis"]["model"] == "sigmoid"
    lo, hi = doc["transition_temperature_ci95_C"]
    assert lo <= doc["transition_temperature_C"] <= hi
    assert doc["fits"]["fatigue"]["model"] == "constant"
    assert doc["fits"]["toughness_MPa_sqrt_m"]["model"] == "sigmoid"
    # JSON-ready: no NaN anywhere, and every key ending in temperature_C is a number/None
    json.dumps(doc, allow_nan=False)
    for where, k, v in _walk(doc):
        if k.endswith("temperature_C"):
            assert v is None or isinstance(v, int | float), where
    from fracto import CAUTION, __version__

    assert doc["caution"] == CAUTION and doc["version"] == __version__ and doc["seed"] == 0


def test_given_transition_and_offsets():
    rows = _campaign(seed=8)
    doc = analyse_campaign(rows, transition_temperature_C=-40.0, n_boot=100, seed=0)
    assert doc["transition_estimated"] is False
    assert doc["transition_temperature_C"] == -40.0
    f = doc["fits"]["ductile"]
    assert f["midpoint_offset_C"] == pytest.approx(f["midpoint_temperature_C"] + 40.0)
    lo, hi = f["midpoint_offset_ci95_C"]
    assert lo == pytest.approx(f["midpoint_temperature_ci95_C"][0] + 40.0)
    assert hi == pytest.approx(f["midpoint_temperature_ci95_C"][1] + 40.0)
    # same seed, same answer
    again = analyse_campaign(rows, transition_temperature_C=-40.0, n_boot=100, seed=0)
    assert (
        again["fits"]["ductile"]["midpoint_temperature_ci95_C"] == f["midpoint_temperature_ci95_C"]
    )


def test_rows_used_and_too_few_temperatures():
    rows = _campaign(seed=9)
    rows.append({"path": "x.png", "specimen": "X", "temperature_C": 0.0, "status": "error"})
    rows.append(
        {
            "path": "y.png",
            "specimen": "Y",
            "temperature_C": None,
            "status": "ok",
            "ductile_fraction": 0.9,
        }
    )
    doc = analyse_campaign(rows, transition_temperature_C=None, n_boot=0)
    assert doc["n_rows"] == len(rows)
    assert doc["n_rows_used"] == len(rows) - 2
    assert doc["n_rows_not_ok"] == 1 and doc["n_rows_without_temperature"] == 1
    few = [r for r in rows if r["temperature_C"] in (-110.0, -90.0, -75.0)]
    with pytest.raises(FractoInputError, match="3 distinct test temperatures"):
        analyse_campaign(few, transition_temperature_C=None)


# ------------------------------------------------------------------------ CLI


def _write_csv(path, rows, columns=None):
    columns = columns or list(rows[0])
    with open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=columns, extrasaction="ignore")
        w.writeheader()
        for r in rows:
            w.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in columns})


def _run(args):
    """Run `fracto transition` through the group when registered, else the command itself."""
    from click.testing import CliRunner

    from fracto.cli import cli, main

    if "transition" in cli.commands:
        return main(["transition", *args]), None
    from fracto.cli.transition import command

    res = CliRunner().invoke(command, args, standalone_mode=False)
    if isinstance(res.exception, FractoInputError):
        return 2, res
    return (1 if res.exception else 0), res


def test_cli_json_and_summary(tmp_path, capsys):
    rows = _campaign(seed=10, toughness=True)
    f = tmp_path / "images.csv"
    _write_csv(f, rows)
    out = tmp_path / "transition.json"
    code, res = _run(
        [str(f), "--transition-temperature", "-50C", "--n-boot", "50", "--json", "--out", str(out)]
    )
    assert code == 0
    text = capsys.readouterr().out if res is None else res.output
    doc = json.loads(text)
    assert doc["transition_temperature_C"] == -50.0 and doc["transition_estimated"] is False
    assert json.loads(out.read_text())["fits"]["ductile"]["model"] == "sigmoid"
    code, res = _run([str(f), "--n-boot", "30"])
    assert code == 0
    text = capsys.readouterr().out if res is None else res.output
    assert "estimated" in text and "ductile" in text


def test_cli_bad_input(tmp_path, capsys):
    code, _ = _run([str(tmp_path / "missing.csv")])
    assert code == 2
    rows = _campaign(seed=11)
    f = tmp_path / "no_temp.csv"
    _write_csv(f, rows, [c for c in rows[0] if c != "temperature_C"])
    assert _run([str(f)])[0] == 2
    bad = [dict(r) for r in rows]
    bad[3]["temperature_C"] = "warm"
    f = tmp_path / "bad_temp.csv"
    _write_csv(f, bad)
    assert _run([str(f)])[0] == 2
    few = [r for r in rows if r["temperature_C"] in (-110.0, -90.0)]
    f = tmp_path / "few.csv"
    _write_csv(f, few)
    code, res = _run([str(f)])
    assert code == 2
    if res is not None:
        assert "4 or more temperatures" in str(res.exception)
    else:
        assert "4 or more temperatures" in capsys.readouterr().err


def test_too_few_specimens_for_aicc_of_curve_models():
    # Burnham & Anderson (2002): AICc needs n - K - 1 > 0; the 4-parameter curves have
    # K = 5, so 6 specimens cannot rank them -- not assessed (trend None), nothing estimated
    rows = _campaign(temps=[-100.0, -70.0, -50.0, -30.0, -10.0, 20.0], specimens_per_t=1)
    doc = analyse_campaign(rows, transition_temperature_C=None, n_boot=50)
    f = doc["fits"]["ductile"]
    assert f["aicc"]["sigmoid"] is None and f["aicc"]["constant"] is not None
    assert f["trend"] is None and "at least 7 specimens" in f["note"]
    assert doc["transition_temperature_C"] is None and doc["transition_note"]
    with pytest.raises(FractoInputError, match="seed"):
        analyse_campaign(rows, transition_temperature_C=None, seed=-1)


def test_intervals_of_a_mode_do_not_depend_on_other_columns():
    rows = _campaign(seed=13)
    a = analyse_campaign(rows, transition_temperature_C=None, n_boot=80, seed=4)
    extra = [dict(r, toughness_J=50.0 + r["temperature_C"]) for r in rows]
    b = analyse_campaign(extra, transition_temperature_C=None, n_boot=80, seed=4)
    assert (
        a["fits"]["ductile"]["midpoint_temperature_ci95_C"]
        == (b["fits"]["ductile"]["midpoint_temperature_ci95_C"])
    )
    assert "toughness_J" in b["fits"]


def test_field_intervals_widen_the_interval_and_vanish_without_bounds():
    # Each field's fraction carries its own 95 % interval (half-width 0.15, as a field
    # with few regions has): drawing within it must widen the transition interval over
    # the specimens-only bootstrap. Without interval columns nothing is drawn, so the
    # result is exactly the specimens-only one (same seed, same stream).
    rows = _campaign(specimen_sd=0.02, field_sd=0.01, seed=11)
    plain = analyse_campaign(rows, transition_temperature_C=None, n_boot=150, seed=5)
    off = analyse_campaign(
        rows, transition_temperature_C=None, n_boot=150, seed=5, field_intervals=False
    )
    assert plain["fits"]["ductile"] == off["fits"]["ductile"]
    wide = [
        dict(
            r,
            ductile_ci95_low=max(0.0, r["ductile_fraction"] - 0.15),
            ductile_ci95_high=min(1.0, r["ductile_fraction"] + 0.15),
        )
        for r in rows
    ]
    doc = analyse_campaign(wide, transition_temperature_C=None, n_boot=150, seed=5)
    fit = doc["fits"]["ductile"]
    assert "within its own interval" in fit["bootstrap"]["method"]
    assert fit["midpoint_temperature_C"] == off["fits"]["ductile"]["midpoint_temperature_C"]
    assert _width(doc) > 1.3 * _width(off)


def test_field_uncertainty_sigma_from_the_interval():
    from fracto.campaign.transition import Z95, field_uncertainty

    rows = [
        {"ductile_fraction": 0.5, "ductile_ci95_low": 0.4, "ductile_ci95_high": 0.6},
        {"ductile_fraction": 0.2, "ductile_ci95_low": None, "ductile_ci95_high": None},
        {"ductile_fraction": None},
    ]
    v, sd = field_uncertainty(rows, "ductile_fraction")
    # a normal's central 95 % spans ±1.959964 σ (any statistics table)
    np.testing.assert_allclose(v, [0.5, 0.2])
    np.testing.assert_allclose(sd, [0.2 / (2 * 1.959964), 0.0], rtol=1e-6)
    assert Z95 == pytest.approx(1.959964, abs=1e-6)
