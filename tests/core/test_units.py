"""Risk-adjusted comparison of units: exact Poisson intervals, funnel limits, overdispersion."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.stats import chi2, norm, poisson

from twofold.core.assessing.units import (
    VERDICTS,
    compare_units,
    funnel_limit,
    overdispersion,
    poisson_interval,
)
from twofold.core.errors import TwofoldError


@pytest.mark.parametrize("observed", [0, 1, 4, 17, 250])
def test_poisson_interval_is_the_exact_one(observed):
    # Garwood (1936): the exact 95% limits are the means at which the observed count sits in a 2.5% tail;
    # checked with scipy's Poisson distribution.
    low, high = poisson_interval(observed)
    if observed:
        assert poisson.sf(observed - 1, low) == pytest.approx(0.025, rel=1e-8)  # P(X >= O | low)
    else:
        assert low == 0.0
    assert poisson.cdf(observed, high) == pytest.approx(0.025, rel=1e-8)  # P(X <= O | high)


@pytest.mark.parametrize("expected", [0.7, 3.2, 10.0, 57.5, 400.0])
@pytest.mark.parametrize("p", [0.001, 0.025, 0.975, 0.999])
def test_funnel_limit_interpolates_the_poisson_quantile(expected, p):
    # Spiegelhalter (2005, Stat Med 24:1185, appendix): r_p the p-quantile of Poisson(E), alpha the share of
    # P(O = r_p) beyond p, limit (r_p - alpha) / E.  Worked here with scipy, count by count.
    r = 0
    while poisson.cdf(r, expected) < p:
        r += 1
    alpha = (poisson.cdf(r, expected) - p) / poisson.pmf(r, expected)
    # At small E the interpolation can reach below 0 counts; a ratio of counts stops at 0.
    assert funnel_limit(np.array([expected]), p)[0] == pytest.approx(max(r - alpha, 0) / expected, rel=1e-10)


def test_funnel_limits_approach_the_normal_ones_for_large_counts():
    # For large E, O/E under Poisson(E) is close to Normal(1, 1/E): limits 1 -/+ z sqrt(1/E) (algebra).
    e = np.array([20_000.0])
    for p in (0.001, 0.025, 0.975, 0.999):
        assert funnel_limit(e, p)[0] == pytest.approx(1 + norm.ppf(p) / np.sqrt(e[0]), abs=2e-4)


def test_overdispersion_by_hand():
    # Eleven units of 100 expected events, observed 50 to 150 in steps of 10: z = -5..5.  Winsorised at the
    # 10th and 90th centiles (-4 and 4): phi = (4 * 16 + 2 * (9 + 4 + 1)) / 11 = 92 / 11; I phi = 92 on
    # I - 1 = 10 degrees of freedom (Spiegelhalter 2005, section 6).
    e = np.full(11, 100.0)
    o = 100 + 10 * np.arange(-5, 6)
    d = overdispersion(o, e)
    assert d.statistic == pytest.approx(92.0)
    assert d.df == 10 and d.p_value == pytest.approx(chi2.sf(92.0, 10))
    assert d.present and d.factor == pytest.approx(92 / 11)


def simulate(rng, units=50, rows=400, spread=0.0):
    """Seeded records in units; each unit's event odds shifted by Normal(0, spread) on the logit scale."""
    from scipy.special import expit

    unit = np.repeat(np.arange(units), rows)
    lp = rng.normal(-1.8, 0.9, size=unit.size)
    shift = rng.normal(0, spread, size=units)[unit]
    y = (rng.uniform(size=unit.size) < expit(lp + shift)).astype(int)
    return unit, y, expit(lp)


def test_counts_match_pandas_and_a_unit_with_excess_events_is_flagged():
    rng = np.random.default_rng(44)
    unit, y, p = simulate(rng, units=20)
    y = y.copy()
    worse = (unit == 7) & (y == 0) & (rng.uniform(size=y.size) < 0.25)
    y[worse] = 1
    labels = np.array([f"ward {u:02d}" for u in unit], dtype=object)
    labels[3] = None  # a record without a unit is left out
    result = compare_units(labels, y, p, "ward")
    keep = pd.notna(labels)
    frame = pd.DataFrame({"u": labels[keep], "y": y[keep], "p": p[keep]}).groupby("u").sum()
    got = {u["unit"]: u for u in result.units}
    assert list(got) == list(frame.index)
    for name, row in frame.iterrows():
        assert got[name]["observed"] == row.y and got[name]["expected"] == pytest.approx(row.p, rel=1e-12)
        assert got[name]["ratio"] == pytest.approx(row.y / row.p, rel=1e-12)
    assert got["ward 07"]["verdict"] == VERDICTS["above_99.8"]
    assert result.rows_without_unit == 1
    within = sum(u["verdict"] == VERDICTS["within"] for u in result.units)
    assert within >= 16  # 19 ordinary wards: at 95% limits about one may fall outside by chance
    rec = result.as_record()
    assert set(rec["limits"]) == {"95", "99.8"} and len(rec["limits"]["95"]) == 100
    e, lo, hi = rec["limits"]["95"][50]
    assert lo == pytest.approx(funnel_limit(np.array([e]), 0.025)[0]) and hi > 1 > lo


def test_overdispersed_units_get_wider_limits():
    rng = np.random.default_rng(8)
    unit, y, p = simulate(rng, units=50, spread=0.35)
    result = compare_units(unit, y, p, "hospital")
    d = result.overdispersion
    assert d.present and d.factor > 1.5
    rec = result.as_record()
    e, lo, hi = rec["limits_adjusted"]["99.8"][60]
    # Spiegelhalter (2005): multiplicative overdispersion widens the limits to 1 -/+ z sqrt(phi / E).
    assert hi == pytest.approx(1 + norm.ppf(0.999) * np.sqrt(d.factor / e), rel=1e-9)
    assert hi > rec["limits"]["99.8"][60][2]
    # Without the extra spread: no overdispersion in this seeded extract.
    unit, y, p = simulate(np.random.default_rng(9), units=50)
    plain = compare_units(unit, y, p, "hospital")
    assert not plain.overdispersion.present and plain.overdispersion.factor == 1.0
    assert plain.as_record()["limits_adjusted"] is None


def test_unusable_unit_columns_are_refused():
    y = np.array([0, 1, 0, 1])
    p = np.full(4, 0.5)
    with pytest.raises(TwofoldError, match="single unit"):
        compare_units(["a", "a", "a", "a"], y, p, "ward")
    with pytest.raises(TwofoldError, match="empty"):
        compare_units([None] * 4, y, p, "ward")
    with pytest.raises(TwofoldError, match="no finite risk"):
        compare_units(["a", "b", "a", "b"], y, np.array([0.5, np.nan, 0.5, 0.5]), "ward")
    many = np.arange(3000)
    with pytest.raises(TwofoldError, match="different values"):
        compare_units(many, np.tile([0, 1], 1500), np.full(3000, 0.5), "admission_id")


def test_numbers_and_text_mixed_in_a_unit_column_are_counted_apart():
    y = np.array([0, 1, 0, 1, 1, 0])
    result = compare_units([3, "3B", 3, "3B", 12, 12], y, np.full(6, 0.5), "ward")
    assert {str(u["unit"]): u["observed"] for u in result.units} == {"3": 0, "12": 1, "3B": 2}
