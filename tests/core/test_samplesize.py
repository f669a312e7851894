"""Checks of the minimum sample size calculation.

Reference: Riley RD et al. (2020), Calculating the sample size required for
developing a clinical prediction model, BMJ 368:m441 (worked example with 24
candidate parameters, outcome prevalence 0.174 and anticipated Cox-Snell
R-squared 0.288); statsmodels samplesize_confint_proportion for criterion
(iii).
"""

from __future__ import annotations

import json
import math

import pytest
from statsmodels.stats.proportion import samplesize_confint_proportion

from twofold.core.errors import TwofoldError
from twofold.core.assessing.samplesize import events_per_parameter, riley_minimum_sample_size


def test_riley_2020_check_vector():
    # Riley et al. (2020) published formulas applied to their example:
    # criterion (i) 623, criterion (ii) 662, criterion (iii) 221.
    res = riley_minimum_sample_size(24, 0.174, 0.288)
    assert res.n_shrinkage == 623
    assert res.n_optimism == 662
    assert res.n_overall_risk == 221
    assert res.n_minimum == 662
    # 662 rows at prevalence 0.174 give about 115 events, 4.8 per parameter.
    # An EPP of at least 4.8 for a diagnostic model of Chagas disease is stated
    # in the abstract of Riley et al. (2019, Stat Med 38:1276, Part II), which
    # this example appears to follow; the 115 events is a value from memory.
    assert res.expected_events == pytest.approx(115.2, abs=0.05)
    assert res.events_per_parameter == pytest.approx(4.8, abs=0.01)
    # Maximum Cox-Snell R-squared at prevalence 0.174 is about 0.60 and the
    # shrinkage implied by criterion (ii) about 0.905 (same source).
    assert res.max_r2_cs == pytest.approx(0.603, abs=5e-4)
    assert res.shrinkage_optimism == pytest.approx(0.905, abs=5e-4)
    d = json.loads(json.dumps(res.as_dict()))
    assert d["n_minimum"] == 662 and isinstance(d["n_minimum"], int)


def test_criterion_one_is_the_smallest_n_reaching_the_shrinkage():
    # Van Houwelingen's heuristic shrinkage, as used by Riley et al. (2020):
    # S_VH = 1 + P / (n ln(1 - R2cs_app)), with R2cs_app = R2cs / S the
    # apparent R-squared. The n of criterion (i) must reach S = 0.9 and n - 1
    # must not.
    res = riley_minimum_sample_size(24, 0.174, 0.288)
    r2_app = 0.288 / 0.9

    def s_vh(n):
        return 1 + 24 / (n * math.log(1 - r2_app))

    assert s_vh(res.n_shrinkage) >= 0.9 > s_vh(res.n_shrinkage - 1)


def test_criterion_three_matches_statsmodels_normal_sample_size():
    # statsmodels: n for a normal-approximation interval of half-width 0.05
    # around a proportion of 0.174 (it uses z = 1.95996..., Riley 1.96; both
    # round up to the same n here).
    n_sm = samplesize_confint_proportion(0.174, 0.05, alpha=0.05, method="normal")
    res = riley_minimum_sample_size(24, 0.174, 0.288)
    assert res.n_overall_risk == math.ceil(n_sm)
    # A tighter margin raises only criterion (iii).
    tight = riley_minimum_sample_size(24, 0.174, 0.288, margin=0.01)
    assert tight.n_overall_risk == math.ceil((1.96 / 0.01) ** 2 * 0.174 * 0.826)
    assert tight.n_shrinkage == res.n_shrinkage
    assert tight.n_minimum == tight.n_overall_risk


def test_riley_refuses_impossible_inputs():
    with pytest.raises(TwofoldError):
        riley_minimum_sample_size(0, 0.174, 0.288)
    with pytest.raises(TwofoldError):
        riley_minimum_sample_size(24, 1.0, 0.288)
    with pytest.raises(TwofoldError):
        # Above the maximum Cox-Snell R-squared (about 0.60) at this prevalence.
        riley_minimum_sample_size(24, 0.174, 0.65)
    with pytest.raises(TwofoldError):
        riley_minimum_sample_size(24, 0.174, 0.288, shrinkage=1.0)


def test_events_per_parameter_counts_the_rarer_outcome():
    # Definition (Peduzzi et al. 1996; Riley et al. 2020): the smaller of the
    # event and non-event counts per candidate parameter.
    assert events_per_parameter(115, 547, 24) == pytest.approx(115 / 24)
    assert events_per_parameter(900, 100, 10) == pytest.approx(10.0)
    with pytest.raises(TwofoldError):
        events_per_parameter(10, 20, 0)
