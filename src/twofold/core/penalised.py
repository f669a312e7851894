"""Firth's penalised fit as an alternative model, and profile intervals for any fit.

:class:`FirthFit` has the same face as :class:`~twofold.core.fit.LogisticFit`
(coefficients, standard errors, Wald z, odds ratios, the overall test), so
every display and the JSON record read it the same way; its tests are
penalised likelihood-ratio tests (Heinze & Schemper 2002, Stat Med 21:2409)
and its predicted risks are intercept-corrected (FLIC; Puhr et al. 2017,
Stat Med 36:2302), since plain Firth pulls risks toward one half.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from twofold.core.design import Design, aliased_columns
from twofold.core.errors import Notice
from twofold.core.fit import LikelihoodRatioTest, LogisticFit


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
        return self.design.X[:, self.kept]

    @cached_property
    def overall(self) -> LikelihoodRatioTest:
        """Penalised likelihood-ratio test that every slope is zero: 2 (pl_full - pl_restricted)."""
        from twofold.core.firth import firth_lr_test

        k = self.n_params
        if k == 1:
            return LikelihoodRatioTest(0.0, 0, float("nan"), n_rows=self.n_used)
        t = firth_lr_test(self.X, self.design.y, list(range(1, k)), full=self.result)
        return LikelihoodRatioTest(float(t.statistic), int(t.df), float(t.p_value), n_rows=self.n_used)

    @cached_property
    def fitted(self) -> np.ndarray:
        """Predicted risks with the intercept corrected (FLIC), so they average to the event rate."""
        return np.asarray(self._flic.predicted, dtype=float)

    @cached_property
    def linear_predictor(self) -> np.ndarray:
        """The FLIC linear predictor (Firth slopes, corrected intercept)."""
        return self.X @ np.asarray(self._flic.params, dtype=float)

    def lr_test_of(self, columns) -> LikelihoodRatioTest:
        """Penalised likelihood-ratio test that the coefficients of these predictor columns are zero."""
        from twofold.core.firth import firth_lr_test

        idx = [int(i) for c in columns for i in self.term_index[c]]
        t = firth_lr_test(self.X, self.design.y, idx, full=self.result)
        return LikelihoodRatioTest(float(t.statistic), int(t.df), float(t.p_value),
                                   added=tuple(columns), n_rows=self.n_used)


def fit_firth(design: Design, dropped: list[int] | None = None) -> FirthFit:
    """Fit ``design`` by Firth's penalised likelihood (aliased columns left out and named)."""
    from twofold.core.fit import fit_logistic
    from twofold.core.firth import firth_fit, flic

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
            notices.append(Notice("separation", n.message.split(";")[0] + "; Firth's penalised fit is used, "
                                  "which keeps the estimates finite.", n.subjects))
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
    reached (separation) is infinite.
    """
    X = fit.design.X[:, fit.kept]
    y = fit.design.y
    out = {}
    if isinstance(fit, FirthFit):
        from twofold.core.firth import firth_profile_ci

        for j in range(1, fit.n_params):
            iv = firth_profile_ci(X, y, j, full=fit.result)
            out[fit.names[j]] = (float(np.exp(iv.lower)), float(np.exp(iv.upper)))
    else:
        from twofold.core.profile import profile_all

        params = np.where(np.isfinite(fit.params), fit.params, np.sign(fit.params) * 50.0)
        table = profile_all(X, y, params, fit.llf, columns=list(range(1, fit.n_params)))
        for j, iv in zip(range(1, fit.n_params), table.intervals):
            with np.errstate(over="ignore"):
                out[fit.names[j]] = (float(np.exp(iv.lower)), float(np.exp(iv.upper)))
    return out
