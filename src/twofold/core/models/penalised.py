"""Firth's penalised fit as an alternative model, and profile intervals for any fit.

:class:`FirthFit` has the same face as :class:`~twofold.core.models.fit.LogisticFit`
(coefficients, standard errors, Wald z, odds ratios, the overall test), so
every display and the JSON record read it the same way; its tests are
penalised likelihood-ratio tests (Heinze & Schemper 2002, Stat Med 21:2409)
and its predicted risks are intercept-corrected (FLIC; Puhr et al. 2017,
Stat Med 36:2302), since plain Firth pulls risks toward one half.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from twofold.core.models.design import Design, aliased_columns
from twofold.core.errors import Notice
from twofold.core.models.fit import LikelihoodRatioTest, LogisticFit


class FirthFit(LogisticFit):
    """A logistic model fitted by Firth's penalised likelihood (Firth 1993, Biometrika 80:27)."""

    method = "Firth penalised likelihood"

    def __init__(self, design: Design, result, flic_result, kept, dropped_names, notices):
        super().__init__(design, result.params, result.cov_params, result.llf, result.converged,
                         result.iterations, kept, dropped_names, notices)
        self.result = result
        self.penalized_llf = float(result.penalized_llf)
        self._flic = flic_result

    @property
    def X(self) -> np.ndarray:
        return self.used_X

    @cached_property
    def overall(self) -> LikelihoodRatioTest:
        """Penalised likelihood-ratio test that every slope is zero: 2 (pl_full - pl_restricted)."""
        from twofold.core.models.firth import firth_lr_test

        k = self.n_params
        if k == 1:
            return LikelihoodRatioTest(0.0, 0, float("nan"), n_rows=self.n_used)
        t = firth_lr_test(self.X, self.design.y, list(range(1, k)), full=self.result)
        return LikelihoodRatioTest(float(t.statistic), int(t.df), float(t.p_value), n_rows=self.n_used)

    #: Why a penalised fit has no AIC or BIC (said wherever they would be printed).
    AIC_NOTE = ("AIC and BIC are not given for a penalised fit: they assume the ordinary maximum of the "
                "likelihood, which Firth's estimates are not; compare penalised models by their penalised "
                "likelihood-ratio tests.")

    @cached_property
    def fitted(self) -> np.ndarray:
        """Predicted risks with the intercept corrected (FLIC), so they average to the event rate."""
        return np.asarray(self._flic.predicted, dtype=float)

    @cached_property
    def linear_predictor(self) -> np.ndarray:
        """The FLIC linear predictor (Firth slopes, corrected intercept)."""
        return np.dot(self.X, np.asarray(self._flic.params, dtype=float))

    def lr_test_of(self, columns) -> LikelihoodRatioTest:
        """Penalised likelihood-ratio test that the coefficients of these predictor columns are zero."""
        idx = [int(i) for c in columns for i in self.term_index[c]]
        return self.lr_test_of_parameters(idx, added=tuple(columns))

    def lr_test_of_parameters(self, idx, added=()) -> LikelihoodRatioTest:
        """Penalised likelihood-ratio test that the kept parameters at positions ``idx`` are zero.

        The restricted fit holds them at zero under the full model's penalty
        (Heinze & Schemper 2002).  No parameters: G = 0 on 0 df, p undefined.
        """
        from twofold.core.models.firth import firth_lr_test

        idx = sorted({int(i) for i in idx})
        if not idx:
            return LikelihoodRatioTest(0.0, 0, float("nan"), added=tuple(added), n_rows=self.n_used)
        t = firth_lr_test(self.X, self.design.y, idx, full=self.result)
        return LikelihoodRatioTest(float(t.statistic), int(t.df), float(t.p_value),
                                   added=tuple(added), n_rows=self.n_used)

    def lr_test_against(self, smaller: LogisticFit, added=()) -> LikelihoodRatioTest:
        """Penalised likelihood-ratio test of a smaller model nested in this one, on the same rows.

        The parameters tested are this model's that the smaller one lacks, by
        name: an added predictor's columns, or a spline's non-linear columns
        when the smaller model has the same predictor as a straight line
        (whose single column carries the same name as the spline's first).
        """
        have = set(smaller.names)
        idx = [i for i, name in enumerate(self.names) if name not in have]
        return self.lr_test_of_parameters(idx, added=added)


def fit_firth(design: Design, dropped: list[int] | None = None) -> FirthFit:
    """Fit ``design`` by Firth's penalised likelihood (aliased columns left out and named)."""
    from twofold.core.models.fit import fit_logistic
    from twofold.core.models.firth import firth_fit, flic

    if dropped is None:
        dropped = aliased_columns(design.X)
    # The ML fit supplies the checks (empty cells, separation, few events) and the
    # messages, so both methods warn alike.
    ml = fit_logistic(design, dropped=dropped)
    kept = ml.kept
    X = design.X[:, kept]
    result = firth_fit(X, design.y)
    flic_result = flic(X, design.y)
    notices = []
    for n in ml.notices:
        if n.code == "separation":
            # Only the finding, not the ordinary fit's verdict: here the remedy is already applied.
            finding = n.message.split(", so ")[0]
            notices.append(Notice("separation", finding + "; an ordinary fit would run off towards 0 or "
                                  "infinity, so Firth's penalised fit is used here, which keeps the estimates "
                                  "finite.", n.subjects))
        elif n.code != "not_converged":
            notices.append(n)
    if not result.converged:
        notices.append(Notice("not_converged", f"The penalised fit did not settle after {result.iterations} "
                              "iterations, so the estimates may be off."))
    return FirthFit(design, result, flic_result, kept, ml.dropped, notices)


def profile_intervals(fit: LogisticFit) -> dict[str, tuple[float, float]]:
    """95% profile-likelihood intervals of the odds ratios, by parameter name.

    Maximum-likelihood fits use the profile likelihood (Venzon & Moolgavkar
    1988); Firth fits the profile penalised likelihood.  An end that is never
    reached (separation) is infinite; an interval whose ends could not be
    found is (NaN, NaN).
    """
    from twofold.core.errors import TwofoldError

    X = fit.used_X
    y = fit.design.y
    out = {}
    # In tiny or separated data the root search can fail for one coefficient
    # (the profile is flat or its inner fits disagree); that interval is then
    # NaN (not available) instead of stopping the whole analysis.
    failures = (TwofoldError, ValueError, ArithmeticError, np.linalg.LinAlgError)
    nan = (float("nan"), float("nan"))
    if isinstance(fit, FirthFit):
        from twofold.core.models.firth import firth_profile_ci

        for j in range(1, fit.n_params):
            try:
                iv = firth_profile_ci(X, y, j, full=fit.result)
            except failures:
                out[fit.names[j]] = nan
                continue
            with np.errstate(over="ignore"):
                out[fit.names[j]] = (float(np.exp(iv.lower)), float(np.exp(iv.upper)))
    else:
        from twofold.core.models.profile import profile_all

        params = np.where(np.isfinite(fit.params), fit.params, np.sign(fit.params) * 50.0)
        columns = list(range(1, fit.n_params))
        try:
            intervals = list(profile_all(X, y, params, fit.llf, columns=columns).intervals)
        except failures:
            intervals = []
            for j in columns:  # one at a time, so one failure costs only its own interval
                try:
                    intervals.extend(profile_all(X, y, params, fit.llf, columns=[j]).intervals)
                except failures:
                    intervals.append(None)
        for j, iv in zip(columns, intervals):
            with np.errstate(over="ignore"):
                out[fit.names[j]] = nan if iv is None else (float(np.exp(iv.lower)), float(np.exp(iv.upper)))
    return out
