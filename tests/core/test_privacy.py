"""Small-cell suppression: primary and secondary, checked by brute force.

The policy checked is the US Centers for Medicare & Medicaid Services cell-size
rule: no cell of 1 to 10 people may be published, zeros may (policy wording
from memory; common practice, no single standard).  Whether a hidden count can
be recovered is checked here independently of the code under test: every
table of whole, non-negative counts that agrees with all published entries is
enumerated, and each hidden entry must take at least two values across them.
"""

from __future__ import annotations


import numpy as np
import pytest

from twofold.core.errors import TwofoldError
from twofold.core.outputs.privacy import (MIN_RESIDUAL_DF, SUPPRESSED, check_model, coarse_roc, group_discloses,
                                          is_small, protect_table, show_count)


def brute_values(values, hidden, shape, row_totals=True, col_totals=True):
    """For each hidden entry of the extended table, the set of values it takes over all consistent tables.

    Consistent: whole counts >= 0, published inner cells as published, and every
    published total equal to the sum it heads.  Found by exhaustive depth-first
    enumeration of the hidden inner cells (a published row or column total
    bounds each cell and fixes the last hidden cell of its line); hidden
    totals follow from the inner cells.
    """
    m, n = shape
    V = np.asarray(values).astype(int)
    H = np.asarray(hidden).astype(bool)
    cells = [(i, j) for i in range(m) for j in range(n) if H[i, j]]
    row_rem = [int(V[i, n]) - int(sum(V[i, j] for j in range(n) if not H[i, j]))
               if row_totals and not H[i, n] else None for i in range(m)]
    col_rem = [int(V[m, j]) - int(sum(V[i, j] for i in range(m) if not H[i, j]))
               if col_totals and not H[m, j] else None for j in range(n)]
    last_row = {i: max(k for k, c in enumerate(cells) if c[0] == i) for i in {c[0] for c in cells}}
    last_col = {j: max(k for k, c in enumerate(cells) if c[1] == j) for j in {c[1] for c in cells}}
    cap = 2 * int(V[:m, :n].sum()) + 10  # only used when no total bounds a cell
    grand = [int(V[m, n]) - int(V[:m, :n][~H[:m, :n]].sum())] if row_totals and col_totals and not H[m, n] else [None]
    table = V[:m, :n].copy()
    found = {tuple(e): set() for e in np.argwhere(H)}

    def finish():
        ext = np.zeros_like(V)
        ext[:m, :n] = table
        if row_totals:
            ext[:m, n] = table.sum(axis=1)
        if col_totals:
            ext[m, :n] = table.sum(axis=0)
        if row_totals and col_totals:
            ext[m, n] = table.sum()
        if np.all(ext[~H] == V[~H]):
            for e in found:
                found[e].add(int(ext[e]))

    def rec(k):
        if k == len(cells):
            finish()
            return
        i, j = cells[k]
        hi = cap
        for rem in (row_rem[i], col_rem[j], grand[0]):
            if rem is not None:
                hi = min(hi, rem)
        if hi < 0:
            return
        forced = None
        if row_rem[i] is not None and last_row[i] == k:
            forced = row_rem[i]
        if col_rem[j] is not None and last_col[j] == k:
            if forced is not None and forced != col_rem[j]:
                return
            forced = col_rem[j]
        if grand[0] is not None and k == len(cells) - 1:
            if forced is not None and forced != grand[0]:
                return
            forced = grand[0]
        for v in ([forced] if forced is not None else range(hi + 1)):
            if v < 0 or v > hi:
                continue
            table[i, j] = v
            if row_rem[i] is not None:
                row_rem[i] -= v
            if col_rem[j] is not None:
                col_rem[j] -= v
            if grand[0] is not None:
                grand[0] -= v
            rec(k + 1)
            if grand[0] is not None:
                grand[0] += v
            if row_rem[i] is not None:
                row_rem[i] += v
            if col_rem[j] is not None:
                col_rem[j] += v
        table[i, j] = V[i, j]

    rec(0)
    return found


def assert_protected(prot):
    found = brute_values(prot.values, prot.hidden, prot.shape, prot.row_totals, prot.col_totals)
    assert found is not None
    for e, vals in found.items():
        assert int(prot.values[e]) in vals, e
        assert len(vals) >= 2, f"hidden entry {e} = {prot.values[e]} is recoverable from the published ones"


def test_threshold_rule_zero_shown_one_to_ten_hidden():
    # CMS cell-size rule (from memory): 1-10 hidden, 0 and 11 shown.
    assert [is_small(k) for k in (0, 1, 10, 11)] == [False, True, True, False]
    assert show_count(0) == "0" and show_count(11) == "11" and show_count(10) == SUPPRESSED
    # Configurable: some owners use 5 (common practice varies).
    assert is_small(5, 5) and not is_small(6, 5)
    prot = protect_table([[0, 40, 35], [25, 0, 30], [20, 22, 0]])
    assert not prot.any_hidden  # zeros alone never trigger suppression


def test_primary_alone_is_recoverable_and_secondary_fixes_it():
    counts = np.array([[12, 3, 15], [14, 13, 12], [11, 16, 14]])
    prot = protect_table(counts)
    # The brute check itself can fail: with only the small cell hidden, subtraction recovers it.
    primary_only = prot.primary
    found = brute_values(prot.values, primary_only, prot.shape)
    assert found[(0, 1)] == {3}
    # With secondary suppression no hidden entry can be pinned down.
    assert prot.hidden[0, 1] and prot.hidden.sum() >= 4
    assert_protected(prot)
    # The complement in row 0 is the next smallest count of that row (12).
    assert prot.hidden[0, 0]
    # Totals stay published here: they are large and inner cells could serve as complements.
    assert not prot.hidden[:3, 3].any() and not prot.hidden[3, :].any()


def test_two_by_two_with_margins_hides_all_inner_cells():
    # In a 2x2 table with margins one cell fixes the other three, so all four must go.
    prot = protect_table([[20, 30], [40, 5]])
    assert prot.hidden[:2, :2].all()
    assert prot.grand_total() == 95 and prot.row_total(0) == 50 and prot.col_total(1) == 35
    assert_protected(prot)


def test_bridge_between_two_hidden_blocks_is_caught():
    # Two 2x2 blocks of small counts joined by one small cell (1, 2): every row and column has at
    # least two hidden cells, so the row-and-column rule sees nothing, but the joining cell is
    # fixed (sum rows 0-1 minus columns 0-1).  The audit must add a complement.
    counts = np.array([
        [2, 3, 30, 40],
        [4, 5, 6, 35],
        [30, 35, 3, 2],
        [40, 45, 4, 5],
    ])
    found = brute_values(*_extended_primary(counts))
    assert found[(1, 2)] == {6}  # recoverable with primary suppression alone
    prot = protect_table(counts)
    assert prot.hidden.sum() > prot.primary.sum()
    assert_protected(prot)


def _extended_primary(counts):
    prot = protect_table(counts, threshold=0)
    v = prot.values
    hidden = (v >= 1) & (v <= 10)
    return v, hidden, prot.shape


def test_small_total_is_hidden_and_protected():
    counts = np.array([[2, 3, 40], [0, 4, 35], [30, 20, 25]])
    prot = protect_table(counts)
    assert prot.hidden[0, 0] and prot.hidden[1, 1]
    assert prot.text(1, 3) == "39"
    assert_protected(prot)
    prot2 = protect_table([[3, 4], [50, 60]])
    assert prot2.row_total(0) is None  # a row total of 7 people is itself small
    assert_protected(prot2)


def test_single_column_with_total():
    prot = protect_table([[700], [8], [150]], row_totals=False)
    assert prot.cell(1, 0) is None and prot.cell(2, 0) is None and prot.col_total(0) == 858
    assert_protected(prot)


@pytest.mark.parametrize("seed", range(6))
def test_random_small_tables_are_protected(seed):
    rng = np.random.default_rng(seed)
    counts = rng.choice([0, 1, 4, 9, 12, 15, 18], size=(3, 3), p=[0.1, 0.15, 0.15, 0.1, 0.2, 0.15, 0.15])
    prot = protect_table(counts)
    assert_protected(prot)
    assert np.all(prot.hidden[(prot.values >= 1) & (prot.values <= 10)])


def test_bad_input():
    with pytest.raises(TwofoldError):
        protect_table([[1.5, 2]])
    with pytest.raises(TwofoldError):
        protect_table([[-1, 2]])
    off = protect_table([[1, 2], [3, 4]], threshold=0)
    assert not off.any_hidden


def test_a_zero_beside_a_group_is_hidden_with_a_complement():
    # "contaminated: 14 events, 0 non-events": everyone in the group had the event. The zero goes, and since
    # the row total (14) is published, so does the 14 beside it; the columns get complements as usual.
    counts = np.array([[20, 46], [12, 28], [14, 0]])
    plain = protect_table(counts)
    assert not plain.hidden[2, 1]  # zeros alone are shown in an ordinary table
    prot = protect_table(counts, zeros_disclose=True)
    assert prot.primary[2, 1] and prot.hidden[2, 0] and prot.row_total(2) == 14
    assert_protected(prot)
    # A wholly empty row is no one's outcome: its zeros stay.
    assert not protect_table([[20, 46], [0, 0], [30, 30]], zeros_disclose=True).any_hidden


def test_groups_that_disclose():
    # Small counts as the table rule (1-10), a small group, or a group that all had one outcome.
    assert group_discloses(3, 40) and group_discloses(40, 10) and group_discloses(14, 0) and group_discloses(0, 30)
    assert not group_discloses(11, 11) and not group_discloses(0, 0)
    assert not group_discloses(3, 40, threshold=0)


def test_model_check_follows_output_checking_rules():
    # ESSnet guidelines for output checking (Eurostat 2015), rules as summarised in the module (common practice):
    # (a) a predictor with a disclosing group has its coefficients withheld;
    check = check_model({"ward": [(40, 60), (2, 5)], "sex": [(30, 40), (12, 25)]}, None, 107, 4)
    assert set(check.withheld) == {"ward"} and check.whole_model is None
    assert check.shows("sex") and not check.shows("ward")
    # (b) a model of groupings only is a table: one disclosing combination withholds all of it;
    check = check_model({"sex": [(30, 40), (12, 25)]}, [(30, 40), (12, 25)], 107, 2)
    assert check.whole_model is None and not check.withheld
    check = check_model({"sex": [(30, 40), (12, 25)], "ward": [(30, 50), (12, 15)]},
                        [(25, 30), (5, 10), (10, 20), (2, 5)], 107, 3)
    assert check.whole_model is not None and "combination" in check.whole_model
    # (c) fewer than 10 residual degrees of freedom: nothing of the model is shown.
    assert MIN_RESIDUAL_DF == 10
    assert check_model({}, None, 24, 15).whole_model is not None
    assert check_model({}, None, 25, 15).whole_model is None
    # Suppression switched off: nothing withheld.
    assert not check_model({"ward": [(1, 1)]}, [(1, 1)], 5, 2, threshold=0).anything_withheld


def test_coarse_roc_steps_hold_no_small_count():
    # Outside reference: scikit-learn's roc_curve on seeded scores; the steps between kept points, turned back
    # into counts of events and non-events, must each be 0 or more than the limit.
    from sklearn.metrics import roc_curve

    rng = np.random.default_rng(5)
    y = rng.random(150) < 0.3
    score = rng.random(150) + 0.4 * y
    fpr, tpr, _ = roc_curve(y, score, drop_intermediate=False)
    n1, n0 = int(y.sum()), int((~y).sum())
    f, t = coarse_roc(fpr, tpr, n0, n1, 10)
    assert (f[0], t[0]) == (fpr[0], tpr[0]) and (f[-1], t[-1]) == (1.0, 1.0)
    assert 2 < len(f) < len(fpr)
    steps = np.column_stack([np.diff(np.rint(f * n0)), np.diff(np.rint(t * n1))])
    assert np.all((steps == 0) | (steps > 10)), steps
    # Every kept point is a point of the full curve (thinned, not smoothed).
    full = set(zip(fpr.round(12), tpr.round(12)))
    assert all(p in full for p in zip(f.round(12), t.round(12)))
    same = coarse_roc(fpr, tpr, n0, n1, 0)
    assert len(same[0]) == len(fpr)
