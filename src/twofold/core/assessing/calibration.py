"""How well predicted risks agree with observed outcomes.

Everything here works on plain numpy arrays: ``y`` is a 0/1 outcome (1 =
event), ``p`` the predicted probabilities and ``lp`` the linear predictor
(logit of ``p``).

References
----------
Van Calster B, Nieboer D, Vergouwe Y, De Cock B, Pencina MJ, Steyerberg EW
(2016). A calibration hierarchy for risk models was defined: from utopia to
empirical data. Journal of Clinical Epidemiology 74:167-176.

Hosmer DW, Lemeshow S (1980). Goodness of fit tests for the multiple logistic
regression model. Communications in Statistics - Theory and Methods
9:1043-1069.

Tjur T (2009). Coefficients of determination in logistic regression models -
a new proposal: the coefficient of discrimination. The American Statistician
63:366-372.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from twofold.core.assessing.discrimination import (
    require_both_classes,
    check_level,
    outcome_array,
    probability_array,
    read_only,
    float_values,
)
from twofold.core.errors import ModelError, Notice, TwofoldError

__all__ = [
    "CalibrationFit",
    "HosmerLemeshowResult",
    "CalibrationGroups",
    "SmoothedCalibration",
    "PseudoR2",
    "brier",
    "scaled_brier",
    "calibration_slope_intercept",
    "hosmer_lemeshow",
    "calibration_groups",
    "smoothed_calibration",
    "pseudo_r2",
]

# Van Calster et al. (2016) suggest at least this many events and non-events
# before a flexible calibration curve is trusted.
_SMOOTH_MIN_EACH = 200
# Above this many rows the smoothed curve is drawn from an evenly spaced
# subsample of the rows sorted by predicted risk.
_SMOOTH_MAX_POINTS = 5000


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class CalibrationFit:
    """Calibration slope and calibration-in-the-large, with SEs and CIs.

    Attributes
    ----------
    slope, slope_se, slope_ci_low, slope_ci_high : float
        Coefficient of ``lp`` in a logistic regression of ``y`` on an
        intercept and ``lp``; 1 is ideal, below 1 means predictions are too
        extreme (typical of over-fitting).
    intercept, intercept_se, intercept_ci_low, intercept_ci_high : float
        Calibration-in-the-large: intercept of a logistic regression of ``y``
        with ``lp`` as an offset; 0 is ideal, above 0 means risks are
        predicted too low on average.
    level : float
    notices : tuple of Notice
        Separation or convergence problems met while fitting.
    """

    slope: float
    slope_se: float
    slope_ci_low: float
    slope_ci_high: float
    intercept: float
    intercept_se: float
    intercept_ci_low: float
    intercept_ci_high: float
    level: float
    notices: tuple[Notice, ...] = field(default=())

    def as_dict(self) -> dict:
        out = {
            k: float(v) for k, v in self.__dict__.items() if k != "notices"
        }
        out["notices"] = [n.as_dict() for n in self.notices]
        return out


#: Written beside the Hosmer-Lemeshow test.
HOSMER_LEMESHOW_NOTE = (
    "The Hosmer-Lemeshow test depends on how records are grouped, has little power in small samples and "
    "flags trivial misfit in large ones; read it beside the calibration plot, not alone."
)


@dataclass(frozen=True, eq=False)
class HosmerLemeshowResult:
    """Hosmer-Lemeshow statistic with its per-group table (arrays read-only)."""

    statistic: float
    df: int
    p_value: float
    groups_requested: int
    groups_used: int
    n: np.ndarray
    observed_events: np.ndarray
    expected_events: np.ndarray
    mean_predicted: np.ndarray

    @property
    def small_expected_groups(self) -> int:
        """Groups in which fewer than 5 events or fewer than 5 non-events are expected.

        The chi-square approximation needs expected counts of about 5 or
        more in every cell (a rule of common practice; Hosmer, Lemeshow &
        Sturdivant, Applied Logistic Regression, 3rd ed. 2013, sec. 5.2.2).
        """
        expected_non = self.n - self.expected_events
        return int(np.sum((self.expected_events < 5) | (expected_non < 5)))

    @property
    def note(self) -> str:
        """How far to trust the test here, in one or two sentences."""
        k = self.small_expected_groups
        if not k:
            return HOSMER_LEMESHOW_NOTE
        return (f"In {k} of its {self.groups_used} risk groups fewer than 5 events or non-events are expected, "
                "so its chi-square p-value is unreliable for these data (expected counts of 5 or more is "
                "common practice); judge calibration from the calibration plot and slope instead. "
                + HOSMER_LEMESHOW_NOTE)

    def as_dict(self) -> dict:
        return {
            "statistic": float(self.statistic),
            "df": int(self.df),
            "p_value": float(self.p_value),
            "groups_requested": int(self.groups_requested),
            "groups_used": int(self.groups_used),
            "n": self.n.tolist(),
            "observed_events": self.observed_events.tolist(),
            "expected_events": self.expected_events.tolist(),
            "mean_predicted": self.mean_predicted.tolist(),
        }


@dataclass(frozen=True, eq=False)
class CalibrationGroups:
    """Observed against predicted risk in groups of predicted risk.

    One entry per non-empty group, from lowest to highest predicted risk;
    ``ci_low``/``ci_high`` are Wilson intervals of the observed proportion.
    Arrays are read-only.
    """

    n: np.ndarray
    mean_predicted: np.ndarray
    observed: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    level: float
    groups_requested: int
    groups_used: int

    def as_dict(self) -> dict:
        return {
            "n": self.n.tolist(),
            "mean_predicted": self.mean_predicted.tolist(),
            "observed": self.observed.tolist(),
            "ci_low": self.ci_low.tolist(),
            "ci_high": self.ci_high.tolist(),
            "level": float(self.level),
            "groups_requested": int(self.groups_requested),
            "groups_used": int(self.groups_used),
        }


@dataclass(frozen=True, eq=False)
class SmoothedCalibration:
    """Lowess-smoothed observed risk against sorted predicted risk.

    Attributes
    ----------
    predicted : ndarray
        Predicted risks, sorted ascending (read-only).
    observed : ndarray
        Smoothed observed risk at each predicted risk (read-only); not
        clipped, so it may stray slightly outside 0-1 at the ends.  All NaN
        when the smoother could not fit (see ``notices``).
    frac : float
        Share of the points used for each local fit.
    n_used, n_total : int
        Points smoothed, and rows supplied (they differ when subsampled).
    n_events, n_nonevents : int
    unreliable : bool
        True when there are fewer than 200 events or fewer than 200
        non-events (Van Calster et al. 2016), or the smoother could not fit.
    notices : tuple of Notice
        Why no curve was drawn, when so.
    """

    predicted: np.ndarray
    observed: np.ndarray
    frac: float
    n_used: int
    n_total: int
    n_events: int
    n_nonevents: int
    unreliable: bool
    notices: tuple[Notice, ...] = field(default=())

    def as_dict(self) -> dict:
        return {
            "predicted": self.predicted.tolist(),
            "observed": self.observed.tolist(),
            "frac": float(self.frac),
            "n_used": int(self.n_used),
            "n_total": int(self.n_total),
            "n_events": int(self.n_events),
            "n_nonevents": int(self.n_nonevents),
            "unreliable": bool(self.unreliable),
            "notices": [n.as_dict() for n in self.notices],
        }


@dataclass(frozen=True)
class PseudoR2:
    """Four pseudo-R-squared measures for a logistic model."""

    mcfadden: float
    cox_snell: float
    nagelkerke: float
    tjur: float

    def as_dict(self) -> dict:
        return {k: float(v) for k, v in self.__dict__.items()}


# ---------------------------------------------------------------------------
# overall accuracy
# ---------------------------------------------------------------------------


def brier(y, p) -> float:
    """Brier score, the mean squared difference between risk and outcome.

    Brier = (1/n) * sum (p_i - y_i)^2.

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities.

    Returns
    -------
    float
        0 is perfect; predicting the overall event rate for everyone gives
        mean(y) (1 - mean(y)).
    """
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    return float(np.mean((pp - yy) ** 2))


def scaled_brier(y, p) -> float:
    """Brier score scaled by that of a model without predictors.

    Scaled Brier = 1 - Brier / Brier_max, Brier_max = mean(y) (1 - mean(y))
    (Van Calster et al. 2016).

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities.

    Returns
    -------
    float
        1 is perfect, 0 is no better than giving everyone the event rate,
        negative is worse than that.
    """
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    require_both_classes(yy)
    ybar = yy.mean()
    return float(1.0 - np.mean((pp - yy) ** 2) / (ybar * (1.0 - ybar)))


# ---------------------------------------------------------------------------
# logistic recalibration
# ---------------------------------------------------------------------------


def _fit_logistic(y, exog, start, offset=None):
    """Fit a logistic regression by Newton's method, with notices.

    statsmodels ``Logit`` is used rather than the binomial GLM because its
    Newton steps are several times faster on large data; both maximise the
    same likelihood.  Newton starts from perfect calibration (``start``),
    usually close to the answer.  Warnings are turned into notices.
    """
    from statsmodels.discrete.discrete_model import Logit
    from statsmodels.tools.sm_exceptions import (
        ConvergenceWarning,
        PerfectSeparationError,
        PerfectSeparationWarning,
    )

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            res = Logit(y, exog, offset=offset).fit(start_params=start, disp=0)
        except (np.linalg.LinAlgError, PerfectSeparationError) as exc:
            raise ModelError(
                "The recalibration model could not be fitted because the linear "
                "predictor separates events from non-events; check the "
                "predictions for extreme values."
            ) from exc
    categories = {w.category for w in caught}
    notices = []
    if any(issubclass(c, PerfectSeparationWarning) for c in categories):
        notices.append(
            Notice(
                "separation",
                "The linear predictor separates events from non-events "
                "completely, so the calibration estimates are unreliable.",
            )
        )
    if not res.mle_retvals.get("converged", True) or any(
        issubclass(c, ConvergenceWarning) for c in categories
    ):
        notices.append(
            Notice(
                "not_converged",
                "The recalibration model did not converge, so the "
                "calibration estimates are unreliable.",
            )
        )
    return res, notices


def calibration_slope_intercept(y, lp, level: float = 0.95) -> CalibrationFit:
    """Calibration slope and calibration-in-the-large of a linear predictor.

    Slope: b in logit P(y = 1) = a + b * lp;
    calibration-in-the-large: a in logit P(y = 1) = a + lp (lp as offset).

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    lp : array_like
        Linear predictor (logit of the predicted risk).
    level : float, optional
        Confidence level of the Wald intervals, default 0.95.

    Returns
    -------
    CalibrationFit

    Notes
    -----
    On the very data a logistic model with an intercept was fitted to, the
    slope is exactly 1 and the calibration-in-the-large exactly 0 (they are
    the score equations of that fit); the measures are informative on new
    data or after internal validation.
    """
    check_level(level)
    yy = outcome_array(y)
    x = float_values(lp, yy.size, "linear predictor")
    require_both_classes(yy)
    alpha = 1.0 - level
    ones = np.ones((yy.size, 1))

    res_int, notes_int = _fit_logistic(yy, ones, [0.0], offset=x)
    ci_int = np.asarray(res_int.conf_int(alpha=alpha))
    spread = float(np.ptp(x))
    if not spread > 1e-12 * max(1.0, float(np.max(np.abs(x)))):
        # Every record has the same linear predictor: a slope on it is not defined
        # (the recalibration design would be singular).
        nan = float("nan")
        slope = (nan, nan, nan, nan)
        notes_slope = [Notice("calibration", "Every record has the same predicted risk, so the calibration "
                              "slope is not defined; calibration-in-the-large is still shown.")]
    else:
        res_slope, notes_slope = _fit_logistic(yy, np.column_stack([ones, x]), [0.0, 1.0])
        ci_slope = np.asarray(res_slope.conf_int(alpha=alpha))
        slope = (float(res_slope.params[1]), float(res_slope.bse[1]), float(ci_slope[1, 0]),
                 float(ci_slope[1, 1]))

    # Same problem reported once even if both fits met it.
    seen: dict[str, Notice] = {}
    for n in notes_slope + notes_int:
        seen.setdefault(n.code, n)

    return CalibrationFit(
        slope=slope[0],
        slope_se=slope[1],
        slope_ci_low=slope[2],
        slope_ci_high=slope[3],
        intercept=float(res_int.params[0]),
        intercept_se=float(res_int.bse[0]),
        intercept_ci_low=float(ci_int[0, 0]),
        intercept_ci_high=float(ci_int[0, 1]),
        level=float(level),
        notices=tuple(seen.values()),
    )


# ---------------------------------------------------------------------------
# grouped calibration
# ---------------------------------------------------------------------------


def _risk_groups(p: np.ndarray, groups: int):
    """Group rows by quantiles of predicted risk.

    Cut points are the ``groups``-quantiles of ``p`` (linear interpolation);
    repeated cut points, caused by tied risks, are merged, and intervals are
    closed on the right with the lowest value in the first group (the same
    rule as ``pandas.qcut(..., duplicates="drop")``).  Groups left empty are
    dropped.

    Returns
    -------
    codes : (n,) int array
        Group of each row, 0 .. k-1 for the k non-empty groups.
    k : int
    """
    groups = int(groups)
    edges = np.unique(np.quantile(p, np.linspace(0.0, 1.0, groups + 1)))
    if edges.size < 2:
        # Every row has the same risk: a single group.
        return np.zeros(p.size, dtype=np.intp), 1
    raw = np.searchsorted(edges[1:-1], p, side="left")
    counts = np.bincount(raw, minlength=edges.size - 1)
    # Renumber so that empty groups disappear.
    keep = counts > 0
    new_index = np.cumsum(keep) - 1
    return new_index[raw], int(keep.sum())


def _check_groups(groups, minimum: int) -> int:
    g = int(groups)
    if g != groups or g < minimum:
        raise TwofoldError(
            f"The number of risk groups {groups!r} is not a whole number of at "
            f"least {minimum}; use for example 10."
        )
    return g


def hosmer_lemeshow(y, p, groups: int = 10) -> HosmerLemeshowResult:
    """Hosmer-Lemeshow goodness-of-fit test over groups of predicted risk.

    C = sum_g (O_g - E_g)^2 / (E_g (1 - E_g / n_g)), E_g = sum of p in
    group g; compared with a chi-square on (groups used - 2) degrees of
    freedom.

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities.
    groups : int, optional
        Number of groups of predicted risk (deciles by default).

    Returns
    -------
    HosmerLemeshowResult
        Includes the number of groups actually used: tied risks can merge
        groups, and the degrees of freedom follow the groups used.

    Raises
    ------
    TwofoldError
        When fewer than three groups remain (no degrees of freedom).

    Notes
    -----
    Known limits: the result depends on how the rows are grouped (a different
    number of groups, or a different rule for ties, can change the verdict);
    in small samples the test has little power to find poor calibration; in
    large samples it flags departures too small to matter clinically.  Read
    it beside the calibration plot, not instead of it.

    A group whose predicted risks are all exactly 0 or all exactly 1 adds 0
    when its observed count matches, and makes the statistic infinite when
    it does not.
    """
    from scipy.stats import chi2

    g = _check_groups(groups, 3)
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    codes, k = _risk_groups(pp, g)
    if k < 3:
        raise TwofoldError(
            f"Only {k} distinct group(s) of predicted risk could be formed, too "
            "few for the Hosmer-Lemeshow test; it needs more distinct "
            "predicted risks."
        )
    n = np.bincount(codes, minlength=k).astype(float)
    obs = np.bincount(codes, weights=yy, minlength=k)
    exp = np.bincount(codes, weights=pp, minlength=k)
    mean_p = exp / n
    denom = exp * (1.0 - mean_p)
    diff2 = (obs - exp) ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(denom > 0.0, diff2 / np.where(denom > 0.0, denom, 1.0),
                         np.where(diff2 > 0.0, np.inf, 0.0))
    stat = float(terms.sum())
    df = k - 2
    return HosmerLemeshowResult(
        statistic=stat,
        df=df,
        p_value=float(chi2.sf(stat, df)),
        groups_requested=g,
        groups_used=k,
        n=read_only(n.astype(np.int64)),
        observed_events=read_only(obs),
        expected_events=read_only(exp),
        mean_predicted=read_only(mean_p),
    )


def calibration_groups(y, p, groups: int = 10, level: float = 0.95) -> CalibrationGroups:
    """Observed event proportion in groups of predicted risk, with Wilson CIs.

    Per group g: mean predicted = mean(p_g), observed = O_g / n_g, with a
    Wilson score interval for O_g / n_g.

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities.
    groups : int, optional
        Number of groups by quantiles of predicted risk (deciles by default);
        tied risks may merge groups, see ``groups_used``.
    level : float, optional
        Confidence level of the Wilson intervals.

    Returns
    -------
    CalibrationGroups
    """
    from statsmodels.stats.proportion import proportion_confint

    check_level(level)
    g = _check_groups(groups, 1)
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    codes, k = _risk_groups(pp, g)
    n = np.bincount(codes, minlength=k).astype(float)
    obs = np.bincount(codes, weights=yy, minlength=k)
    mean_p = np.bincount(codes, weights=pp, minlength=k) / n
    lo, hi = proportion_confint(obs, n, alpha=1.0 - level, method="wilson")
    return CalibrationGroups(
        n=read_only(n.astype(np.int64)),
        mean_predicted=read_only(mean_p),
        observed=read_only(obs / n),
        ci_low=read_only(np.asarray(lo, dtype=float)),
        ci_high=read_only(np.asarray(hi, dtype=float)),
        level=float(level),
        groups_requested=g,
        groups_used=k,
    )


def _lowess_degenerate(xs: np.ndarray, frac: float) -> bool:
    """Whether some local fit of lowess on sorted ``xs`` has fewer than two weighted points.

    statsmodels' lowess uses the k = int(frac n) nearest points, weighted by
    the tricube of distance over the window's radius.  With heavy ties it
    then fails silently: a risk shared by k or more records gives radius 0,
    and a lone risk whose k - 1 nearest neighbours all sit at one distance
    gives weight to itself only; either way that point's "smoothed" value is
    its own 0/1 outcome.  Both patterns are found from the tie counts.
    """
    n = xs.size
    k = min(max(int(frac * n + 1e-10), 2), n)
    values, counts = np.unique(xs, return_counts=True)
    if counts.max() >= k:
        return True
    if values.size < 2:
        return False
    lone = np.flatnonzero(counts == 1)
    if not lone.size:
        return False
    gaps = np.diff(values)
    left = np.r_[np.inf, gaps][lone]
    right = np.r_[gaps, np.inf][lone]
    left_n = np.r_[0, counts[:-1]][lone]
    right_n = np.r_[counts[1:], 0][lone]
    # Distances that agree to round-off count as one distance.
    same = np.isclose(left, right, rtol=1e-9, atol=0.0)
    nearest = np.where(same, left_n + right_n, np.where(left < right, left_n, right_n))
    return bool(np.any(nearest >= k - 1))


def smoothed_calibration(y, p, frac: float = 2.0 / 3.0) -> SmoothedCalibration:
    """Flexible calibration curve: lowess of the outcome on predicted risk.

    observed(p) = lowess fit of y on p (local linear, tricube weights, no
    robustness iterations since y is 0/1).

    Parameters
    ----------
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities.
    frac : float, optional
        Share of the points used in each local fit, between 0 and 1 (2/3 by
        default, the usual lowess default).

    Returns
    -------
    SmoothedCalibration

    Notes
    -----
    With more than 5,000 rows the curve is computed on 5,000 rows taken at
    evenly spaced positions in the order of predicted risk, so the result is
    the same on every run and the spread of risks is kept.  Points closer
    than 1% of the risk range are interpolated rather than fitted
    (``delta``), which changes the curve by far less than its uncertainty.
    The curve is flagged ``unreliable`` below 200 events or 200 non-events
    (Van Calster et al. 2016).
    """
    from statsmodels.nonparametric.smoothers_lowess import lowess

    f = float(frac)
    if not (0.0 < f <= 1.0):
        raise TwofoldError(
            f"The smoothing fraction {frac!r} is not between 0 and 1; use for "
            "example 2/3."
        )
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    n1, n0 = require_both_classes(yy)
    order = np.argsort(pp, kind="stable")
    if pp.size > _SMOOTH_MAX_POINTS:
        pick = np.round(np.linspace(0, pp.size - 1, _SMOOTH_MAX_POINTS)).astype(np.intp)
        order = order[pick]
    xs = pp[order]
    ys = yy[order]
    delta = 0.01 * float(xs[-1] - xs[0])
    # statsmodels warns (on stderr, for a user) when a local window holds a single
    # tied risk value: its weights are then 0/0 and the fitted values there are
    # meaningless.  The warning is caught and said as our own notice instead.
    with warnings.catch_warnings(record=True) as caught, np.errstate(all="ignore"):
        warnings.simplefilter("always")
        fitted = np.asarray(lowess(ys, xs, frac=f, it=0, delta=delta, is_sorted=True,
                                   return_sorted=False), dtype=float)
    notices = ()
    degenerate = bool(caught) or not np.all(np.isfinite(fitted)) or _lowess_degenerate(xs, f)
    if degenerate:
        fitted = np.full(xs.size, np.nan)
        notices = (Notice(
            "calibration",
            "Too many records share the same predicted risk for a smoothed calibration curve, so none is "
            "drawn; read the risk groups instead.",
        ),)
    return SmoothedCalibration(
        predicted=read_only(xs),
        observed=read_only(fitted),
        frac=f,
        n_used=int(xs.size),
        n_total=int(pp.size),
        n_events=n1,
        n_nonevents=n0,
        unreliable=bool(degenerate or n1 < _SMOOTH_MIN_EACH or n0 < _SMOOTH_MIN_EACH),
        notices=notices,
    )


# ---------------------------------------------------------------------------
# pseudo R-squared
# ---------------------------------------------------------------------------


def pseudo_r2(llf: float, llnull: float, n: int, y, p) -> PseudoR2:
    """McFadden, Cox-Snell, Nagelkerke and Tjur pseudo-R-squared.

    McFadden = 1 - llf / llnull; Cox-Snell = 1 - exp(2 (llnull - llf) / n);
    Nagelkerke = Cox-Snell / (1 - exp(2 llnull / n));
    Tjur = mean(p | y = 1) - mean(p | y = 0).

    Parameters
    ----------
    llf : float
        Log-likelihood of the fitted model.
    llnull : float
        Log-likelihood of the intercept-only model on the same rows.
    n : int
        Number of rows the model was fitted to.
    y : array_like
        Outcome, 1 = event, 0 = non-event.
    p : array_like
        Predicted probabilities of the fitted model.

    Returns
    -------
    PseudoR2

    Notes
    -----
    None of these is a share of explained variance; Tjur's coefficient of
    discrimination is the easiest to explain (how much higher the average
    predicted risk is among events than among non-events).
    """
    llf = float(llf)
    llnull = float(llnull)
    nn = int(n)
    if not (np.isfinite(llf) and np.isfinite(llnull)) or llnull >= 0.0 or llf > 0.0:
        raise TwofoldError(
            "The log-likelihoods must be finite and negative (the null one "
            "strictly); pass the values from the fitted model."
        )
    if nn < 1:
        raise TwofoldError(
            f"The number of rows {n!r} is not positive; pass the number of rows "
            "the model was fitted to."
        )
    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    require_both_classes(yy)
    cox_snell = 1.0 - np.exp(2.0 * (llnull - llf) / nn)
    max_cs = 1.0 - np.exp(2.0 * llnull / nn)
    events = yy == 1.0
    return PseudoR2(
        mcfadden=float(1.0 - llf / llnull),
        cox_snell=float(cox_snell),
        nagelkerke=float(cox_snell / max_cs),
        tjur=float(pp[events].mean() - pp[~events].mean()),
    )
