"""Number formats of the plain-text account: what a reader without statistics training sees.

No outside reference exists for wording; the checks pin the rules the
formats promise (plain digits, no powers of ten, no negative zero), each
with a value on both sides of its boundary.
"""

from __future__ import annotations

import math

import pytest

from twofold.core.outputs.text import fmt_num, fmt_or, fmt_p


@pytest.mark.parametrize("x, shown", [
    (-1e-17, "0.000"), (-0.0004, "0.000"), (-0.0006, "-0.001"), (0.1234, "0.123"),
    (999_999.4, "999,999.400"), (1_234_567.8, "1,234,568"), (2e9, "over 1 billion"),
    (-3e9, "below -1 billion"), (math.inf, "infinite"), (None, "n/a"),
])
def test_numbers_read_plainly(x, shown):
    assert fmt_num(x) == shown


@pytest.mark.parametrize("x, shown", [
    (0.0, "0"), (0.0009, "below 0.001"), (0.0123, "0.0123"), (1.2345, "1.234"),
    (12.34, "12.3"), (1234.5, "1,230"), (2.5e6, "over 1 million"), (math.inf, "infinite"),
])
def test_odds_ratios_read_plainly(x, shown):
    assert fmt_or(x) == shown
    assert "e+" not in shown and "e-" not in shown  # never a power of ten


def test_p_values():
    assert fmt_p(0.0004) == "below 0.001"
    assert fmt_p(0.0123) == "0.012"
    assert fmt_p(float("nan")) == "not available"


def test_a_pooled_tests_denominator_degrees_of_freedom_in_words():
    from twofold.core.outputs.text import pooled_test_text

    # F(3, 35.2): the figure is printed; F(3, 2 million) is the chi-square reference to the digits shown.
    small = pooled_test_text({"kind": "D3", "statistic": 2.5, "df": 3, "df_denominator": 35.2, "p_value": 0.07})
    assert "on 3 and 35.2 degrees of freedom" in small and "chi-square scale 7.50" in small
    big = pooled_test_text({"kind": "D1", "statistic": 2.5, "df": 3, "df_denominator": 2e6, "p_value": 0.06})
    assert "on 3 and more than 10,000 degrees of freedom" in big
    assert "infinitely many" in pooled_test_text({"kind": "D3", "statistic": 1.0, "df": 2, "df_denominator": None,
                                                  "p_value": 0.37})
