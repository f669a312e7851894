"""How well a score separates events from non-events.

Everything here works on plain numpy arrays: ``y`` is a 0/1 outcome (1 =
event) and ``score`` any number that is higher for rows more likely to have
the event (a predicted probability or a linear predictor give the same
results, since only the order of the scores matters).

References
----------
DeLong ER, DeLong DM, Clarke-Pearson DL (1988). Comparing the areas under two
or more correlated receiver operating characteristic curves: a nonparametric
approach. Biometrics 44:837-845.

Sun X, Xu W (2014). Fast implementation of DeLong's algorithm for comparing
the areas under correlated receiver operating characteristic curves. IEEE
Signal Processing Letters 21:1389-1393.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from twofold.core.errors import Notice, TwofoldError

__all__ = [
    "AucResult",
    "PairedAucResult",
    "RocCurve",
    "ClassificationTable",
    "auc_delong",
    "delong_paired",
    "roc_points",
    "classification_table",
]


# ---------------------------------------------------------------------------
# input checks shared with the calibration module
# ---------------------------------------------------------------------------


def outcome_array(y, name: str = "outcome") -> np.ndarray:
    """Return ``y`` as a 1-D float array of 0/1, or raise a plain error."""
    arr = np.asarray(y, dtype=float)
    if arr.ndim != 1:
        raise TwofoldError(
            f"The {name} must be a single column of values; pass a 1-D array."
        )
    if arr.size == 0:
        raise TwofoldError(f"The {name} has no rows; pass at least one row.")
    if not np.all((arr == 0.0) | (arr == 1.0)):
        raise TwofoldError(
            f"The {name} holds values other than 0 and 1; code events as 1 and "
            "non-events as 0 and remove missing values."
        )
    return arr


def float_values(x, n: int, name: str) -> np.ndarray:
    """Return ``x`` as a finite 1-D float array of length ``n``."""
    arr = np.asarray(x, dtype=float)
    if arr.ndim != 1 or arr.size != n:
        raise TwofoldError(
            f"The {name} has {arr.size} values but the outcome has {n} rows; "
            "pass one value per row."
        )
    if not np.all(np.isfinite(arr)):
        raise TwofoldError(
            f"The {name} contains missing or infinite values; remove those rows "
            "before assessing the model."
        )
    return arr


def probability_array(p, n: int, name: str = "predicted probabilities") -> np.ndarray:
    """Return ``p`` as a 1-D float array in [0, 1] of length ``n``."""
    arr = float_values(p, n, name)
    if np.any((arr < 0.0) | (arr > 1.0)):
        raise TwofoldError(
            f"The {name} contain values outside 0 to 1; pass probabilities, "
            "not the linear predictor."
        )
    return arr


def require_both_classes(y: np.ndarray) -> tuple[int, int]:
    """Count events and non-events, refusing when either is absent."""
    n1 = int(y.sum())
    n0 = y.size - n1
    if n1 == 0 or n0 == 0:
        missing = "events" if n1 == 0 else "non-events"
        raise TwofoldError(
            f"The outcome has no {missing}, so discrimination cannot be "
            "measured; use data that contain both events and non-events."
        )
    return n1, n0


def _plain(value):
    """Turn numpy scalars and arrays into plain Python floats and lists."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    return value


def read_only(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a)
    a.setflags(write=False)
    return a


# ---------------------------------------------------------------------------
# DeLong structural components
# ---------------------------------------------------------------------------


def _tie_safe(scores: np.ndarray) -> np.ndarray:
    """Scores rounded to 40 significant bits (about 12 decimal digits) before ranking.

    Records with identical predictor values must tie, but the floating-point
    sums that give their risks can leave them a unit or two in the last place
    apart, which would break the tie one way or the other at random.
    """
    mant, expo = np.frexp(scores)
    return np.ldexp(np.round(mant * 2.0**40) / 2.0**40, expo)


def _placements(y: np.ndarray, scores: np.ndarray):
    """AUCs and DeLong placement values for ``k`` scores at once.

    ``scores`` has shape (k, n).  Uses three midrank computations per score
    (Sun & Xu 2014), so the cost is O(n log n) instead of O(n1 * n0).

    Returns
    -------
    auc : (k,) array
    v10 : (k, n1) array
        For each event, the share of non-events with a lower score (ties
        count one half).
    v01 : (k, n0) array
        For each non-event, the share of events with a higher score (ties
        count one half).
    """
    from scipy.stats import rankdata

    is_event = y == 1.0
    scores = _tie_safe(scores)
    pos = scores[:, is_event]
    neg = scores[:, ~is_event]
    m = pos.shape[1]
    n = neg.shape[1]
    tx = rankdata(pos, axis=1)
    ty = rankdata(neg, axis=1)
    tz = rankdata(np.concatenate([pos, neg], axis=1), axis=1)
    auc = (tz[:, :m].sum(axis=1) - m * (m + 1) / 2.0) / (m * n)
    # Rank among all minus rank among own group = number of the other group
    # below (ties one half).
    v10 = (tz[:, :m] - tx) / n
    v01 = 1.0 - (tz[:, m:] - ty) / m
    return auc, v10, v01


def _delong_cov(v10: np.ndarray, v01: np.ndarray) -> np.ndarray:
    """DeLong covariance matrix S10/n1 + S01/n0 of k AUCs (needs n1, n0 >= 2)."""
    m = v10.shape[1]
    n = v01.shape[1]
    s10 = np.atleast_2d(np.cov(v10))
    s01 = np.atleast_2d(np.cov(v01))
    return s10 / m + s01 / n


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class AucResult:
    """Area under the ROC curve (c statistic) with its DeLong standard error.

    Attributes
    ----------
    auc : float
        Probability that a random event scores higher than a random non-event
        (ties count one half).
    se : float
        DeLong standard error (``nan`` with fewer than 2 events or 2
        non-events).
    ci_low, ci_high : float
        Confidence interval at ``level``, computed on the logit scale; ``nan``
        when it cannot be computed (see ``ci_method``).
    level : float
    n_events, n_nonevents : int
    ci_method : str
        ``"logit"`` when the interval was computed, ``"unavailable"`` when the
        AUC is exactly 0 or 1 (the logit is infinite and the DeLong standard
        error is zero, so no sensible interval exists) or the standard error
        is missing.
    notices : tuple of Notice
    """

    auc: float
    se: float
    ci_low: float
    ci_high: float
    level: float
    n_events: int
    n_nonevents: int
    ci_method: str
    notices: tuple[Notice, ...] = field(default=())

    def as_dict(self) -> dict:
        return {
            "auc": float(self.auc),
            "se": float(self.se),
            "ci_low": float(self.ci_low),
            "ci_high": float(self.ci_high),
            "level": float(self.level),
            "n_events": int(self.n_events),
            "n_nonevents": int(self.n_nonevents),
            "ci_method": self.ci_method,
            "notices": [n.as_dict() for n in self.notices],
        }


@dataclass(frozen=True)
class PairedAucResult:
    """Difference between two AUCs measured on the same rows.

    Attributes
    ----------
    auc_a, auc_b : float
    difference : float
        ``auc_a - auc_b``.
    se : float
        DeLong standard error of the difference (uses the covariance of the
        two AUCs, which share rows).
    z : float
        Wald z, ``difference / se``.
    p_value : float
        Two-sided p-value from the standard normal distribution.
    ci_low, ci_high : float
        Wald confidence interval of the difference at ``level``.
    level : float
    notices : tuple of Notice
    """

    auc_a: float
    auc_b: float
    difference: float
    se: float
    z: float
    p_value: float
    ci_low: float
    ci_high: float
    level: float
    notices: tuple[Notice, ...] = field(default=())

    def as_dict(self) -> dict:
        out = {
            k: float(getattr(self, k))
            for k in (
                "auc_a",
                "auc_b",
                "difference",
                "se",
                "z",
                "p_value",
                "ci_low",
                "ci_high",
                "level",
            )
        }
        out["notices"] = [n.as_dict() for n in self.notices]
        return out


@dataclass(frozen=True, eq=False)
class RocCurve:
    """Points of the empirical ROC curve, one per distinct threshold.

    ``fpr[i]`` and ``tpr[i]`` are the shares of non-events and events with a
    score ``>= thresholds[i]``.  The first point is (0, 0) with threshold
    ``+inf``; the last is (1, 1) at the lowest score.  Arrays are read-only.
    """

    fpr: np.ndarray
    tpr: np.ndarray
    thresholds: np.ndarray

    def as_dict(self) -> dict:
        return {
            "fpr": self.fpr.tolist(),
            "tpr": self.tpr.tolist(),
            "thresholds": self.thresholds.tolist(),
        }


@dataclass(frozen=True)
class ClassificationTable:
    """Two-by-two table of predicted against observed outcome at one threshold.

    Ratios whose denominator is zero are ``nan``.
    """

    threshold: float
    true_positives: int
    false_positives: int
    false_negatives: int
    true_negatives: int
    sensitivity: float
    specificity: float
    positive_predictive_value: float
    negative_predictive_value: float

    def as_dict(self) -> dict:
        return {k: _plain(v) for k, v in self.__dict__.items()}


# ---------------------------------------------------------------------------
# public functions
# ---------------------------------------------------------------------------


def auc_delong(y, score, level: float = 0.95) -> AucResult:
    """Area under the ROC curve with DeLong standard error and logit-scale CI.

    AUC = (1 / (n1 n0)) * sum_i sum_j [ s_i > s_j ] + 0.5 [ s_i = s_j ],
    i over events, j over non-events;
    Var = var(V10) / n1 + var(V01) / n0 (DeLong et al. 1988);
    CI = expit( logit(AUC) +/- z * se / (AUC (1 - AUC)) ).

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    score : array_like
        Predicted probability, linear predictor or any score (only its order
        matters).
    level : float, optional
        Confidence level of the interval, default 0.95.

    Returns
    -------
    AucResult

    Raises
    ------
    TwofoldError
        When the outcome has no events or no non-events, or the inputs are
        malformed.

    Notes
    -----
    The interval is built on the logit scale so that it stays inside (0, 1).
    When the AUC is exactly 0 or 1 the logit is infinite and the DeLong
    standard error is zero; the interval is then returned as ``nan`` with
    ``ci_method="unavailable"`` and a notice, rather than a misleading
    zero-width interval.  With a single event or a single non-event the
    standard error cannot be estimated and is ``nan``.
    """
    from scipy.stats import norm

    check_level(level)
    yy = outcome_array(y)
    s = float_values(score, yy.size, "score")
    n1, n0 = require_both_classes(yy)
    auc_arr, v10, v01 = _placements(yy, s[None, :])
    auc = float(auc_arr[0])
    notices: list[Notice] = []

    if n1 < 2 or n0 < 2:
        se = float("nan")
        notices.append(
            Notice(
                "auc_se_unavailable",
                "The standard error of the area under the ROC curve needs at "
                "least two events and two non-events.",
            )
        )
    else:
        var = float(_delong_cov(v10, v01)[0, 0])
        se = float(np.sqrt(max(var, 0.0)))

    if auc <= 0.0 or auc >= 1.0 or not np.isfinite(se):
        lo = hi = float("nan")
        method = "unavailable"
        if auc <= 0.0 or auc >= 1.0:
            notices.append(
                Notice(
                    "auc_ci_unavailable",
                    f"The area under the ROC curve is exactly {auc:g} (the score "
                    "separates events from non-events completely), so no "
                    "confidence interval can be given.",
                )
            )
    else:
        z = norm.ppf(0.5 + level / 2.0)
        centre = np.log(auc / (1.0 - auc))
        half = z * se / (auc * (1.0 - auc))
        lo = float(1.0 / (1.0 + np.exp(-(centre - half))))
        hi = float(1.0 / (1.0 + np.exp(-(centre + half))))
        method = "logit"

    return AucResult(
        auc=auc,
        se=se,
        ci_low=lo,
        ci_high=hi,
        level=float(level),
        n_events=n1,
        n_nonevents=n0,
        ci_method=method,
        notices=tuple(notices),
    )


def delong_paired(y, score_a, score_b, level: float = 0.95) -> PairedAucResult:
    """Compare the AUCs of two scores measured on the same rows (DeLong test).

    z = (AUC_a - AUC_b) / sqrt(V_a + V_b - 2 C_ab), with V and C from the
    DeLong covariance S10 / n1 + S01 / n0; p = 2 (1 - Phi(|z|)).

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    score_a, score_b : array_like
        Two scores for the same rows, in the same order.
    level : float, optional
        Confidence level of the Wald interval of the difference.

    Returns
    -------
    PairedAucResult

    Raises
    ------
    TwofoldError
        When there are no events or non-events, fewer than two of either, or
        the inputs are malformed.

    Notes
    -----
    When the two scores rank every pair of rows identically the difference
    and its standard error are both zero; z is then reported as 0 and the
    p-value as 1.  A non-zero difference with zero standard error (both AUCs
    at 0 or 1) gives ``nan`` for z, p and the interval, with a notice.
    """
    from scipy.stats import norm

    check_level(level)
    yy = outcome_array(y)
    a = float_values(score_a, yy.size, "first score")
    b = float_values(score_b, yy.size, "second score")
    n1, n0 = require_both_classes(yy)
    if n1 < 2 or n0 < 2:
        raise TwofoldError(
            "Comparing two areas under the ROC curve needs at least two events "
            "and two non-events; use a larger data set."
        )
    auc, v10, v01 = _placements(yy, np.vstack([a, b]))
    cov = _delong_cov(v10, v01)
    diff = float(auc[0] - auc[1])
    var = float(cov[0, 0] + cov[1, 1] - 2.0 * cov[0, 1])
    # Rounding can leave a tiny negative variance for identical scores.
    se = float(np.sqrt(max(var, 0.0)))
    zq = norm.ppf(0.5 + level / 2.0)
    notices: list[Notice] = []
    if se > 0.0:
        z = diff / se
        p = float(2.0 * norm.sf(abs(z)))
        lo, hi = diff - zq * se, diff + zq * se
    elif abs(diff) < 1e-12:
        z, p, lo, hi = 0.0, 1.0, diff, diff
    else:
        z = p = lo = hi = float("nan")
        notices.append(
            Notice(
                "auc_difference_se_zero",
                "The difference between the two areas under the ROC curve has "
                "no estimable standard error, so no test can be given.",
            )
        )
    return PairedAucResult(
        auc_a=float(auc[0]),
        auc_b=float(auc[1]),
        difference=diff,
        se=se,
        z=float(z),
        p_value=float(p),
        ci_low=float(lo),
        ci_high=float(hi),
        level=float(level),
        notices=tuple(notices),
    )


def roc_points(y, score) -> RocCurve:
    """Empirical ROC curve at every distinct score.

    TPR(t) = #{events with s >= t} / n1,  FPR(t) = #{non-events with s >= t} / n0.

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    score : array_like
        Predicted probability or any score.

    Returns
    -------
    RocCurve
        Starts at (0, 0) with threshold ``+inf`` and ends at (1, 1) at the
        lowest score; one point per distinct score in between.
    """
    yy = outcome_array(y)
    s = float_values(score, yy.size, "score")
    n1, n0 = require_both_classes(yy)
    key = _tie_safe(s)
    order = np.lexsort((-s, -key))  # by rounded score, then the exact one, so each run ends on its lowest
    s_sorted = s[order]
    y_sorted = yy[order]
    # Last position of each run of equal (rounded) scores.
    last = np.r_[np.flatnonzero(np.diff(key[order])), s_sorted.size - 1]
    tps = np.cumsum(y_sorted)[last]
    fps = (last + 1) - tps
    tpr = np.r_[0.0, tps / n1]
    fpr = np.r_[0.0, fps / n0]
    thr = np.r_[np.inf, s_sorted[last]]
    return RocCurve(fpr=read_only(fpr), tpr=read_only(tpr), thresholds=read_only(thr))


def classification_table(y, p, threshold: float) -> ClassificationTable:
    """Cross-tabulate predicted against observed outcome at one threshold.

    Predicted event when p >= threshold; sensitivity = TP / (TP + FN),
    specificity = TN / (TN + FP), PPV = TP / (TP + FP), NPV = TN / (TN + FN).

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities.
    threshold : float
        Risk from which a row counts as a predicted event, between 0 and 1.

    Returns
    -------
    ClassificationTable
        Ratios with a zero denominator are ``nan``.

    Notes
    -----
    The threshold is a clinical choice, not a statistical one: it should
    reflect the relative harm of missing an event against that of a false
    alarm in the intended use, not be tuned to the data to maximise some
    accuracy figure.  The predictive values also depend on how common the
    event is in these data.
    """
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    t = float(threshold)
    if not (0.0 <= t <= 1.0):
        raise TwofoldError(
            f"The threshold {threshold!r} is not a risk between 0 and 1; choose a "
            "threshold in that range."
        )
    pred = pp >= t
    obs = yy == 1.0
    tp = int(np.count_nonzero(pred & obs))
    fp = int(np.count_nonzero(pred & ~obs))
    fn = int(np.count_nonzero(~pred & obs))
    tn = int(np.count_nonzero(~pred & ~obs))

    def ratio(a: int, b: int) -> float:
        return a / b if b > 0 else float("nan")

    return ClassificationTable(
        threshold=t,
        true_positives=tp,
        false_positives=fp,
        false_negatives=fn,
        true_negatives=tn,
        sensitivity=ratio(tp, tp + fn),
        specificity=ratio(tn, tn + fp),
        positive_predictive_value=ratio(tp, tp + fp),
        negative_predictive_value=ratio(tn, tn + fn),
    )


def check_level(level: float) -> None:
    if not (0.0 < float(level) < 1.0):
        raise TwofoldError(
            f"The confidence level {level!r} is not between 0 and 1; use for "
            "example 0.95."
        )
