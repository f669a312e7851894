"""How a saved model performs on new records: the figures of an external (or temporal) validation.

* :func:`observed_expected`: observed events over expected events (the sum of
  the predicted risks), with a 95% interval on the log scale.
* :func:`calibration_index`: the integrated calibration index (ICI) with E50
  and E90, the mean, median and 90th centile of the distance between the
  predicted risks and the smoothed calibration curve.
* :func:`validation_sample_size`: the rows a validation needs for precise
  O/E, calibration slope and C-statistic, and whether the extract has them.

References
----------
Austin PC, Steyerberg EW (2019). The Integrated Calibration Index (ICI) and
related metrics for quantifying the calibration of logistic regression models.
Statistics in Medicine 38:4051-4065.

Riley RD, Snell KIE, Archer L, Ensor J, Debray TPA, van Calster B, van Smeden
M, Collins GS (2024). Evaluation of clinical prediction models (part 3):
calculating the sample size required for an external validation study.
BMJ 384:e074821.  (Also Riley et al. 2021, Statistics in Medicine 40:4230.)

Newcombe RG (2006). Confidence intervals for an effect size measure based on
the Mann-Whitney statistic. Part 2: asymptotic methods and evaluation.
Statistics in Medicine 25:559-573.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from twofold.core.errors import ModelError

#: z for a two-sided 95% interval, rounded as Riley et al. round it.
Z = 1.96
#: Target widths of the 95% intervals (Riley et al. 2024 suggest these as a starting point).
TARGET_WIDTHS = {"observed_expected": 0.2, "calibration_slope": 0.2, "c_statistic": 0.1}


def observed_expected(y, p) -> dict:
    """O/E = sum(y) / sum(p), with 95% interval exp(ln(O/E) -/+ 1.96 sqrt((1 - phi) / (n phi))).

    phi is the observed event proportion: the delta-method variance of
    ln(O) for a binomial count, the expected count treated as fixed (Riley et
    al. 2024; Debray et al. 2017, BMJ 356:i6460).
    """
    y = np.asarray(y, dtype=float)
    p = np.asarray(p, dtype=float)
    n = y.size
    observed = int(y.sum())
    expected = float(p.sum())
    if n == 0 or expected <= 0:
        raise ModelError("There are no predicted events to compare the observed ones with.")
    ratio = observed / expected
    if observed == 0 or observed == n:
        return {"ratio": ratio, "ci_low": None, "ci_high": None, "observed": observed, "expected": expected}
    phi = observed / n
    se = math.sqrt((1.0 - phi) / (n * phi))
    return {"ratio": ratio, "ci_low": ratio * math.exp(-Z * se), "ci_high": ratio * math.exp(Z * se),
            "observed": observed, "expected": expected}


def calibration_index(p, smooth) -> dict:
    """ICI, E50 and E90 (Austin & Steyerberg 2019) of risks ``p`` against a smoothed calibration curve.

    ``smooth`` is a :class:`~twofold.core.assessing.calibration.SmoothedCalibration`
    (lowess of the outcome on the predicted risk); the curve is read at every
    record's risk (by linear interpolation between its points, which are all
    the records up to 5,000 and evenly spaced ones beyond), and
    |p - curve(p)| is averaged (ICI), and its median (E50) and 90th centile
    (E90) taken.  All None when no curve could be drawn.
    """
    none = {"ici": None, "e50": None, "e90": None}
    if smooth is None or not np.all(np.isfinite(smooth.observed)) or smooth.predicted.size == 0:
        return none
    p = np.asarray(p, dtype=float)
    curve = np.interp(p, smooth.predicted, smooth.observed)
    gap = np.abs(p - curve)
    return {"ici": float(gap.mean()), "e50": float(np.median(gap)), "e90": float(np.quantile(gap, 0.9))}


@dataclass(frozen=True)
class ValidationSampleSize:
    """Rows needed for a validation of a given precision (Riley et al. 2024), and whether they are there.

    ``n_observed_expected``: rows for a 95% interval of O/E of width
    ``widths["observed_expected"]`` around 1, n = (1 - phi) / (phi se^2) with
    se = asinh(width / 2) / 1.96.
    ``n_calibration_slope``: rows for a slope interval of the given width,
    n = I00 / (se^2 (I00 I11 - I01^2)), se = width / 3.92, the I's the
    means of p(1-p), lp p(1-p), lp^2 p(1-p) over the linear predictor's
    distribution (the model taken as calibrated).
    ``n_c_statistic``: the smallest n whose C-statistic interval, by
    Newcombe's standard error, is no wider than the given width.
    None where a criterion cannot be worked out (e.g. every record with the
    same risk).
    """

    n_observed_expected: int | None
    n_calibration_slope: int | None
    n_c_statistic: int | None
    n_available: int
    prevalence: float
    c_statistic: float
    widths: dict

    @property
    def n_required(self) -> int | None:
        ns = [n for n in (self.n_observed_expected, self.n_calibration_slope, self.n_c_statistic) if n is not None]
        return max(ns) if ns else None

    @property
    def met(self) -> bool | None:
        return None if self.n_required is None else bool(self.n_available >= self.n_required)

    def as_dict(self) -> dict:
        return {
            "n_required": self.n_required, "n_available": int(self.n_available), "met": self.met,
            "criteria": {"observed_expected": self.n_observed_expected,
                         "calibration_slope": self.n_calibration_slope, "c_statistic": self.n_c_statistic},
            "target_widths": dict(self.widths),
            "prevalence": float(self.prevalence), "c_statistic": float(self.c_statistic),
            "basis": "Rows needed for 95% intervals of these widths (Riley et al. 2024), worked out from this "
                     "extract's event proportion, its C-statistic and the spread of the model's linear predictor "
                     "on it.",
        }


def _ceil(x: float) -> int | None:
    return int(math.ceil(x - 1e-9)) if math.isfinite(x) and x > 0 else None


def n_for_observed_expected(prevalence: float, width: float, oe: float = 1.0) -> int | None:
    """Rows for an O/E interval exp(ln oe -/+ 1.96 se) of total width ``width``."""
    se = math.asinh(width / (2.0 * oe)) / Z
    return _ceil((1.0 - prevalence) / (prevalence * se * se))


def n_for_calibration_slope(lp, width: float) -> int | None:
    """Rows for a calibration-slope interval of width ``width`` given the linear predictor's distribution."""
    lp = np.asarray(lp, dtype=float)
    w = np.exp(lp - 2.0 * np.logaddexp(0.0, lp))  # p (1 - p), written stably
    i00, i01, i11 = float(w.mean()), float((lp * w).mean()), float((lp * lp * w).mean())
    det = i00 * i11 - i01 * i01
    se = width / (2.0 * Z)
    if not det > 1e-12 * max(i00 * i11, 1e-300):
        return None
    return _ceil(i00 / (se * se * det))


def n_for_c_statistic(c: float, prevalence: float, width: float) -> int | None:
    """Smallest n with 2 * 1.96 * SE(C) <= width, SE by Newcombe (2006) as Riley et al. use it.

    SE^2 = C(1-C) [1 + (n/2 - 1)(A + B)] / (n^2 phi (1 - phi)), A = (1-C)/(2-C),
    B = C/(1+C); the bound is a quadratic in n, solved here.
    """
    if not (0.0 < c < 1.0 and 0.0 < prevalence < 1.0):
        return None
    a, b = (1.0 - c) / (2.0 - c), c / (1.0 + c)
    k = (width / (2.0 * Z)) ** 2 * prevalence * (1.0 - prevalence) / (c * (1.0 - c))
    half = (a + b) / 2.0
    n = (half + math.sqrt(half * half + 4.0 * k * (1.0 - a - b))) / (2.0 * k)
    return _ceil(n)


def validation_sample_size(prevalence: float, c_statistic: float, lp, n_available: int,
                           widths: dict | None = None) -> ValidationSampleSize:
    """The three criteria of Riley et al. (2024) for a validation with a binary outcome."""
    w = {**TARGET_WIDTHS, **(widths or {})}
    return ValidationSampleSize(
        n_for_observed_expected(prevalence, w["observed_expected"]) if 0 < prevalence < 1 else None,
        n_for_calibration_slope(lp, w["calibration_slope"]),
        n_for_c_statistic(c_statistic, prevalence, w["c_statistic"]),
        int(n_available), float(prevalence), float(c_statistic), w)


def external_record(y, p, lp, c_statistic: float, smooth) -> dict:
    """The fields a frozen validation adds to ``assessment``: O/E, ICI, E50, E90 and the sample size."""
    from twofold.core.outputs.summary import clean_number

    y = np.asarray(y, dtype=float)
    oe = observed_expected(y, p)
    size = validation_sample_size(float(y.mean()), float(c_statistic), lp, int(y.size))
    errors = calibration_index(p, smooth)
    return {
        "observed_expected": {k: clean_number(v) for k, v in oe.items()},
        **{k: clean_number(v) for k, v in errors.items()},
        "validation_sample_size": size.as_dict(),
        "calibration_curve": None if (band := calibration_band(y, p)) is None else band.as_dict(),
    }


#: Points along the predicted-risk axis at which the calibration curve and its band are given.
BAND_POINTS = 50
#: Knots of the spline of the logit of the predicted risk (Harrell's positions).
BAND_KNOTS = 4

CALIBRATION_CURVE_NOTE = (
    "Smoothed calibration curve: a logistic regression of the outcome on a restricted cubic spline (4 knots) of "
    "the logit of the predicted risk, with its pointwise 95% confidence band (Austin & Steyerberg 2014; Van Calster "
    "et al. 2016). Where the band leaves the diagonal, the risks there are off by more than chance explains."
)


@dataclass(frozen=True, eq=False)
class CalibrationBand:
    """A smoothed calibration curve with a pointwise 95% band, read at ``risk``.

    ``observed`` is expit(eta(x)), ``low``/``high`` expit(eta -/+ 1.96 se),
    eta the fitted logit and se = sqrt(x' V x) its standard error (the delta
    method on the logit scale, so the band stays within 0 and 1).
    """

    risk: np.ndarray
    observed: np.ndarray
    low: np.ndarray
    high: np.ndarray
    knots: int

    def as_dict(self) -> dict:
        from twofold.core.outputs.summary import clean_number

        return {"risk": [clean_number(v) for v in self.risk], "observed": [clean_number(v) for v in self.observed],
                "low": [clean_number(v) for v in self.low], "high": [clean_number(v) for v in self.high],
                "knots": self.knots, "method": "restricted cubic spline of the logit of the risk", "note":
                CALIBRATION_CURVE_NOTE}


def calibration_band(y, p, points: int = BAND_POINTS, knots: int = BAND_KNOTS) -> CalibrationBand | None:
    """The flexible calibration curve of risks ``p`` with its 95% band, or None when it cannot be fitted.

    The outcome is regressed (maximum likelihood, statsmodels) on a
    restricted cubic spline of logit(p) with knots at Harrell's quantiles;
    fewer knots are tried when the risks have too few distinct values.  The
    curve is read at ``points`` risks evenly spaced between the 1st and 99th
    centiles of ``p`` (beyond them the band rests on a handful of records).

    References
    ----------
    Austin PC, Steyerberg EW (2014). Graphical assessment of internal and
    external calibration of logistic regression models by using loess
    smoothers. Statistics in Medicine 33:517-535.
    Van Calster B et al. (2016). A calibration hierarchy for risk models was
    defined: from utopia to empirical data. J Clin Epidemiol 74:167-176.
    """
    import warnings

    from scipy.special import expit, logit
    from statsmodels.discrete.discrete_model import Logit

    from twofold.core.models.terms import knots_for, rcs_basis

    y = np.asarray(y, dtype=float)
    p = np.clip(np.asarray(p, dtype=float), 1e-12, 1 - 1e-12)
    if y.size < 20 or y.min() == y.max():
        return None
    x = logit(p)
    for k in range(knots, 2, -1):
        try:
            t = knots_for(x, k)
        except ModelError:
            continue
        basis = np.column_stack([np.ones_like(x), rcs_basis(x, t)])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                res = Logit(y, basis).fit(method="newton", maxiter=100, disp=0)
            except Exception:  # noqa: BLE001 - separation or a singular design: try fewer knots
                continue
        cov = np.asarray(res.cov_params(), dtype=float)
        if not (res.mle_retvals.get("converged", False) and np.all(np.isfinite(cov))):
            continue
        lo_r, hi_r = np.quantile(p, [0.01, 0.99])
        risk = np.linspace(lo_r, hi_r, points)
        at = np.column_stack([np.ones(points), rcs_basis(logit(risk), t)])
        eta = at @ np.asarray(res.params, dtype=float)
        se = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", at, cov, at), 0.0, None))
        return CalibrationBand(risk, expit(eta), expit(eta - Z * se), expit(eta + Z * se), k)
    return None
