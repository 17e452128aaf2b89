"""Summary helpers: unit suffixes and the Student-t interval of the mean.

The interval is checked against scipy.stats (ttest_1samp(...).confidence_interval)
and against the tabulated t(0.975, 1) = 12.706 (Student's t table, e.g. NIST/SEMATECH
e-Handbook of Statistical Methods, table 1.3.6.7.2, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from fracto.campaign.summary import csv_text, mean_interval, unit_suffix


@pytest.mark.parametrize(
    ("unit", "suffix"),
    [
        ("um", "_um"),
        ("%", "_percent"),
        ("", ""),
        ("um3/um2", "_um3_per_um2"),
        ("1/um2", "_per_um2"),
        ("deg", "_deg"),
        ("px", "_px"),
        ("1/um", "_per_um"),
        ("um/px", "_um_per_px"),
        (None, ""),
    ],
)
def test_unit_suffix(unit, suffix):
    assert unit_suffix(unit) == suffix


def test_mean_interval_against_scipy():
    x = np.random.default_rng(3).normal(5.0, 2.0, size=7)
    got = mean_interval(list(x))
    ci = stats.ttest_1samp(x, 0.0).confidence_interval(0.95)
    assert got["mean"] == pytest.approx(x.mean()) and got["n"] == 7
    assert got["sd"] == pytest.approx(np.std(x, ddof=1))
    assert (got["ci95_low"], got["ci95_high"]) == pytest.approx((ci.low, ci.high), rel=1e-12)


def test_mean_interval_two_values_table_t():
    got = mean_interval([1.0, 3.0])  # mean 2, s = sqrt(2), half width t·s/sqrt(2) = t
    assert got["ci95_high"] - 2.0 == pytest.approx(12.706, abs=5e-4)


def test_mean_interval_missing_and_single():
    assert mean_interval([])["mean"] is None
    one = mean_interval([4.0, float("nan")])
    assert one["mean"] == 4.0 and one["n"] == 1 and one["sd"] is None and one["ci95_low"] is None


def test_csv_cells():
    text = csv_text(
        [{"a": 0.1, "b": None, "c": True, "d": math.nan, "e": "x,y"}], ["a", "b", "c", "d", "e"]
    )
    assert text == 'a,b,c,d,e\n0.1,,true,,"x,y"\n'
