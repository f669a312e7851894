"""Adapting a saved model to a new extract, chosen by a closed sequence of likelihood-ratio tests.

Three ways to adapt, from the least to the most change, beside keeping the
saved model as it is:

* ``"intercept"``: recalibration in the large, logit p = a + lp (lp the saved
  model's linear predictor as an offset): a new intercept;
* ``"intercept_and_slope"``: logistic recalibration, logit p = a + s lp: a new
  intercept and every coefficient times s;
* ``"refit"``: every coefficient re-estimated on the new rows (same terms,
  same encoding and knots).

The closed testing procedure (Vergouwe et al. 2017) tests the refit against
each smaller choice in turn, each at the 5% level: against the saved model
unchanged (df = all coefficients); if that is significant, against the new
intercept (df one fewer); if that is too, against the new intercept and slope
(df two fewer).  The first test that is not significant names the choice; if
all are, the refit is chosen.

References
----------
Vergouwe Y, Nieboer D, Oostenbrink R, Debray TPA, Murray GD, Kattan MW,
Koffijberg H, Moons KGM, Steyerberg EW (2017). A closed testing procedure to
select an appropriate method for updating prediction models. Statistics in
Medicine 36:4529-4539.

Steyerberg EW (2019). Clinical Prediction Models, 2nd ed., chapter on
updating for a new setting. Springer.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from twofold.core.errors import ModelError

CHOICES = ("none", "intercept", "intercept_and_slope", "refit")
#: Level of each test of the sequence (Vergouwe et al. 2017).
ALPHA = 0.05

_METHOD_WORDS = {
    "none": "unchanged",
    "intercept": "adapted with a new intercept",
    "intercept_and_slope": "adapted with a new intercept and slope",
    "refit": "re-estimated",
}

_STEP_WORDS = {
    "none": ("the saved model unchanged", "keep the saved model as it is"),
    "intercept": ("a new intercept alone", "a new intercept is enough"),
    "intercept_and_slope": ("a new intercept and slope", "a new intercept and slope are enough"),
}


@dataclass(frozen=True)
class UpdateStep:
    """One likelihood-ratio test of the sequence: the refit against ``against``."""

    step: str
    against: str
    g: float
    df: int
    p_value: float
    reading: str

    def as_dict(self) -> dict:
        from twofold.core.outputs.summary import clean_number

        return {"step": self.step, "g": clean_number(self.g), "df": self.df, "p_value": clean_number(self.p_value),
                "reading": self.reading}


#: Each step of the closed sequence in plain words (the refit tested against ...).
STEP_WORDS = {"refit_vs_none": "every coefficient re-estimated, against the model kept as it is",
              "refit_vs_intercept": "every coefficient re-estimated, against a new intercept",
              "refit_vs_intercept_and_slope": "every coefficient re-estimated, against a new intercept and slope"}


@dataclass(frozen=True, eq=False)
class Adaptation:
    """What the closed test chose, its tests, and the adapted model."""

    chosen: str
    tests: tuple
    log_likelihoods: dict
    #: The new intercept alone (recalibration in the large), and the new intercept and slope together.
    intercept_alone: float
    intercept: float
    slope: float
    model: object

    @property
    def reading(self) -> str:
        return {
            "none": "The saved model needs no adapting to these records: re-estimating it does not fit them clearly "
                    "better.",
            "intercept": "A new intercept adapts the saved model to these records (its risks were too high or too "
                         "low on the whole, but ranked the records well).",
            "intercept_and_slope": "A new intercept and slope adapt the saved model to these records (its risks were "
                                   "off on the whole and too extreme or too timid; the predictors keep their "
                                   "relative weights).",
            "refit": "Only re-estimating every coefficient adapts the saved model to these records: some predictors "
                     "weigh differently here, so check the refitted odds ratios before use.",
        }[self.chosen]

    def as_dict(self) -> dict:
        from twofold.core.outputs.summary import clean_number

        return {
            "chosen": self.chosen,
            "tests": [t.as_dict() for t in self.tests],
            "reading": self.reading,
            "recalibration": {"intercept_alone": clean_number(self.intercept_alone),
                              "intercept": clean_number(self.intercept), "slope": clean_number(self.slope)},
            "log_likelihoods": {k: clean_number(v) for k, v in self.log_likelihoods.items()},
            "coefficients": [{"name": n, "estimate": clean_number(b)}
                             for n, b in zip(self.model.names, self.model.coefficients)],
        }


def _logit(y, X, offset=None, source="these records"):
    """Maximum-likelihood logistic fit (statsmodels), with a one-sentence error when it has no finite answer."""
    from statsmodels.discrete.discrete_model import Logit
    from statsmodels.tools.sm_exceptions import PerfectSeparationError

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            res = Logit(y, X, offset=offset).fit(method="newton", maxiter=100, disp=0)
        except (np.linalg.LinAlgError, PerfectSeparationError):
            res = None
    if res is None or not np.all(np.isfinite(res.params)) or not res.mle_retvals.get("converged", False):
        raise ModelError(f"The model could not be re-estimated on {source} (the outcome is separated or the fit did "
                         "not settle), so the ways of adapting it cannot be compared; use a larger extract.")
    return res


def adapt_model(model, X: np.ndarray, y: np.ndarray, alpha: float = ALPHA, source: str = "these records") -> Adaptation:
    """Choose and make the adaptation of a saved model to new rows by the closed testing procedure.

    Parameters
    ----------
    model : FrozenModel
        The saved model (its coefficients give the linear predictor).
    X : ndarray
        Its design on the new rows (kept columns, intercept first), as
        :func:`~twofold.core.outputs.predict.design_matrix` builds it.
    y : ndarray
        The outcome on those rows, 1 = event.
    source : str
        The data file's name, for messages.

    Notes
    -----
    Covariance of the adapted coefficients (the saved ones held fixed while
    the recalibration is estimated on the new rows): new intercept a,
    V + var(a) e0 e0'; new intercept and slope, s^2 V + J W J' with
    J = [e0, b] and W the covariance of (a, s); refit: the refit's own.
    """
    from scipy.stats import chi2

    from twofold.core.models.fit import log_likelihood

    b = np.asarray(model.coefficients, dtype=float)
    if not np.all(np.isfinite(b)):
        raise ModelError("The saved model has a coefficient without a finite estimate, so it cannot be adapted; "
                         "refit it (a Firth fit keeps estimates finite).")
    lp = np.dot(X, b)
    k = X.shape[1]
    absent = [name for name, col in zip(model.names[1:], X[:, 1:].T) if not np.any(col)]
    if absent:
        raise ModelError(f"The model's column {absent[0]} is 0 in every row of {source} (a group that does not occur "
                         "there), so its coefficient cannot be re-estimated and the ways of adapting the model cannot "
                         "be compared; use an extract in which every group of the model occurs.")
    ll = {"none": log_likelihood(y, lp)}
    where = f"the rows of {source}" if source != "these records" else source
    large = _logit(y, np.ones((len(y), 1)), offset=lp, source=where)
    ll["intercept"] = float(large.llf)
    recal = _logit(y, np.column_stack([np.ones(len(y)), lp]), source=where)
    ll["intercept_and_slope"] = float(recal.llf)
    refit = _logit(y, X, source=where)
    ll["refit"] = float(refit.llf)
    tests = []
    chosen = "refit"
    for against, fewer in (("none", 0), ("intercept", 1), ("intercept_and_slope", 2)):
        df = k - fewer
        if df <= 0:
            # The refit has no more coefficients than this choice: they are the same model.
            chosen = against
            break
        g = max(2.0 * (ll["refit"] - ll[against]), 0.0)
        p = float(chi2.sf(g, df))
        name, keep = _STEP_WORDS[against]
        better = p < alpha
        reading = (f"Re-estimating every coefficient fits these records clearly better than {name}, so the "
                   "next step is tested." if better else
                   f"Re-estimating every coefficient does not fit these records clearly better than {name}: "
                   f"{keep}.")
        tests.append(UpdateStep(f"refit_vs_{against}", against, g, df, p, reading))
        if not better:
            chosen = against
            break
    cov = np.asarray(model.covariance, dtype=float)
    a_large = float(large.params[0])
    a, s = (float(v) for v in recal.params)
    e0 = np.zeros(k)
    e0[0] = 1.0
    if chosen == "none":
        coef, new_cov = b.copy(), cov.copy()
    elif chosen == "intercept":
        coef = b + a_large * e0
        new_cov = cov + float(large.cov_params()[0, 0]) * np.outer(e0, e0)
    elif chosen == "intercept_and_slope":
        coef = s * b + a * e0
        J = np.column_stack([e0, b])
        new_cov = s * s * cov + J @ np.asarray(recal.cov_params()) @ J.T
    else:
        coef, new_cov = np.asarray(refit.params, dtype=float), np.asarray(refit.cov_params(), dtype=float)
    method = f"{model.method}, {_METHOD_WORDS[chosen]} on a new extract"[:100]
    adapted = replace(model, method=method, coefficients=coef, covariance=new_cov)
    return Adaptation(chosen, tuple(tests), ll, a_large, a, s, adapted)


# ---------------------------------------------------------------------------
# uniform shrinkage after a bootstrap validation
# ---------------------------------------------------------------------------

#: Written beside every shrunk model.
SHRINKAGE_NOTE = (
    "Uniform shrinkage (Van Houwelingen & Le Cessie 1990; Steyerberg 2019): every coefficient is multiplied by the "
    "calibration slope the bootstrap expects on new patients, and the intercept is re-estimated so that the "
    "predicted events still add up to the observed ones. Odds ratios move toward 1; tests and intervals of the "
    "coefficients stay those of the ordinary fit."
)


@dataclass(frozen=True, eq=False)
class Shrinkage:
    """A model whose coefficients are shrunk by a bootstrap's corrected calibration slope.

    ``factor`` is the slope, ``intercept`` the re-estimated intercept and
    ``model`` the shrunk :class:`~twofold.core.outputs.predict.FrozenModel`
    (what predictions and saved sessions use).
    """

    factor: float
    intercept: float
    model: object

    @property
    def reading(self) -> str:
        f = self.factor
        return (f"The bootstrap expects a calibration slope of {f:.3g} on new patients: the model's risks would be "
                f"too extreme there (too high for those at high risk, too low for those at low risk). The shrunk "
                f"model multiplies every coefficient by {f:.3g} and re-estimates the intercept, so its risks are "
                "less extreme and should hold better on new patients.")

    def as_dict(self) -> dict:
        """``shrinkage`` of the JSON: {factor, intercept, coefficients [{name, estimate}], reading, note}."""
        from twofold.core.outputs.summary import clean_number

        return {"factor": clean_number(self.factor), "intercept": clean_number(self.intercept),
                "coefficients": [{"name": n, "estimate": clean_number(b)}
                                 for n, b in zip(self.model.names, self.model.coefficients)],
                "reading": self.reading, "note": SHRINKAGE_NOTE}


def shrinkage_refusal(factor) -> str | None:
    """Why a model cannot be shrunk by ``factor`` (a bootstrap's corrected calibration slope), or None."""
    import math

    if factor is None or not math.isfinite(float(factor)):
        return ("The bootstrap gave no corrected calibration slope, so there is nothing to shrink by; run the "
                "bootstrap validation again.")
    if float(factor) >= 1.0:
        return (f"The bootstrap's corrected calibration slope is {float(factor):.3g}, not below 1: the model's risks "
                "are not expected to be too extreme on new patients, so shrinking it would not help.")
    if float(factor) <= 0.0:
        return (f"The bootstrap's corrected calibration slope is {float(factor):.3g}: the model is expected to rank "
                "new patients no better than chance, so no shrinking can rescue it; simplify the model instead.")
    return None


def shrink_model(model, X: np.ndarray, y: np.ndarray, factor: float, source: str = "these records") -> Shrinkage:
    """The model with every coefficient times ``factor`` and the intercept re-estimated (statsmodels).

    Parameters
    ----------
    model : FrozenModel
        The model as fitted.
    X : ndarray
        Its design on the rows it was fitted to (kept columns, intercept first).
    y : ndarray
        The outcome on those rows, 1 = event.
    factor : float
        The shrinkage factor, above 0 and below 1: the corrected calibration
        slope of a bootstrap validation.

    Notes
    -----
    The intercept is a' + factor b0, a' the maximum-likelihood intercept of a
    logistic regression with factor times the linear predictor as an offset
    (so the shrunk risks add up to the observed events).  Covariance:
    factor^2 V + var(a') e0 e0' (the coefficients held fixed while a' is
    estimated), as for a new intercept in :func:`adapt_model`.

    Raises
    ------
    ModelError
        A factor outside (0, 1), or a coefficient without a finite estimate.
    """
    why = shrinkage_refusal(factor)
    if why is not None:
        raise ModelError(why)
    s = float(factor)
    b = np.asarray(model.coefficients, dtype=float)
    if not np.all(np.isfinite(b)):
        raise ModelError("The model has a coefficient without a finite estimate, so it cannot be shrunk; "
                         "refit it (a Firth fit keeps estimates finite).")
    offset = s * np.dot(X, b)
    res = _logit(y, np.ones((len(y), 1)), offset=offset, source=source)
    a = float(res.params[0])
    coef = s * b
    coef[0] += a
    e0 = np.zeros(len(b))
    e0[0] = 1.0
    cov = s * s * np.asarray(model.covariance, dtype=float) + float(res.cov_params()[0, 0]) * np.outer(e0, e0)
    method = f"{model.method}, shrunk by {s:.3g}"[:100]
    return Shrinkage(s, float(coef[0]), replace(model, method=method, coefficients=coef, covariance=cov))
