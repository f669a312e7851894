"""Fits of m imputed copies pooled into one result, with pooled tests.

Sources, each beside its formula below:

* Rubin's rules (Rubin 1987, Multiple Imputation for Nonresponse in
  Surveys, section 3.1): the mean of the estimates, within-copy variance
  U, between-copy variance B, total T = U + (1 + 1/m) B; t reference with
  the Barnard & Rubin (1999, Biometrika 86:948) small-sample degrees of
  freedom; the fraction of missing information
  (r + 2/(nu + 3)) / (r + 1) with r = (1 + 1/m) B / U (van Buuren 2018,
  Flexible Imputation of Missing Data, section 2.3, with nu the
  Barnard-Rubin degrees of freedom).
* D1, the pooled Wald test of several coefficients (Li, Raghunathan &
  Rubin 1991, JASA 86:1065), with their denominator degrees of freedom.
* D3, the pooled likelihood-ratio test (Meng & Rubin 1992, Biometrika
  79:103): the G test against the constant model and every nested test.
* D2, the pooled chi-square statistics (Li, Meng, Raghunathan & Rubin 1991,
  Statistica Sinica 1:65), where D3 cannot be computed: Firth's penalised
  fits, whose penalised likelihood cannot be evaluated at pooled estimates
  on the ordinary likelihood scale the test assumes.

Each pooled test is F(k, df_denominator) with k its numerator degrees of
freedom; ``g`` is the statistic times k, which is G itself when no value is
missing (every copy the same).

Pooled predictions apply the pooled coefficients (Rubin's rules) to each
copy and average the linear predictors, then take the risk: a new patient's
record is complete, so the pooled model is one set of coefficients that the
risk calculator, the session and frozen validation use unchanged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from twofold.core.errors import ModelError, Notice, TwofoldError
from twofold.core.models.fit import LikelihoodRatioTest, LogisticFit, TermTest, log_likelihood
from twofold.core.models.modelling import TermLRTest

_INF = float("inf")


def barnard_rubin_df(m: int, lam, df_complete: float):
    """Barnard & Rubin (1999): nu = nu_old nu_obs / (nu_old + nu_obs).

    nu_old = (m - 1) / lambda^2 (Rubin 1987), nu_obs = (nu_com + 1) / (nu_com + 3) nu_com (1 - lambda);
    lambda = (1 + 1/m) B / T.  With lambda = 0 (no between-copy variance) nu = nu_obs.
    """
    lam = np.asarray(lam, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        old = np.where(lam > 0, (m - 1) / lam ** 2, _INF)
        obs = (df_complete + 1.0) / (df_complete + 3.0) * df_complete * (1.0 - lam)
        return np.where(np.isinf(old), obs, old * obs / (old + obs))


@dataclass(frozen=True)
class RubinPooled:
    """Rubin's rules over m copies, per coefficient (Rubin 1987, section 3.1)."""

    estimate: np.ndarray
    within: np.ndarray  # mean of the copies' covariance matrices, U
    between: np.ndarray  # covariance of the estimates between copies, B (ddof 1)
    m: int
    df_complete: float

    @property
    def total(self) -> np.ndarray:
        """T = U + (1 + 1/m) B."""
        return self.within + (1.0 + 1.0 / self.m) * self.between

    @property
    def std_errors(self) -> np.ndarray:
        return np.sqrt(np.clip(np.diag(self.total), 0, None))

    @property
    def riv(self) -> np.ndarray:
        """Relative increase in variance: r = (1 + 1/m) B / U."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return (1.0 + 1.0 / self.m) * np.diag(self.between) / np.diag(self.within)

    @property
    def lam(self) -> np.ndarray:
        """lambda = (1 + 1/m) B / T: the share of the variance due to the missing values."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return (1.0 + 1.0 / self.m) * np.diag(self.between) / np.diag(self.total)

    @property
    def df(self) -> np.ndarray:
        return barnard_rubin_df(self.m, self.lam, self.df_complete)

    @property
    def fmi(self) -> np.ndarray:
        """Fraction of missing information: (r + 2/(nu + 3)) / (r + 1)."""
        r, nu = self.riv, self.df
        return (r + 2.0 / (nu + 3.0)) / (r + 1.0)


def rubin(estimates, covariances, df_complete: float) -> RubinPooled:
    """Pool m estimates (m x k) and covariances (m x k x k) by Rubin's rules."""
    q = np.asarray(estimates, dtype=float)
    u = np.asarray(covariances, dtype=float)
    m = q.shape[0]
    if m < 2:
        raise ModelError("Pooling needs at least two imputed copies; make 2 or more.")
    between = np.atleast_2d(np.cov(q, rowvar=False, ddof=1))
    return RubinPooled(q.mean(axis=0), u.mean(axis=0), between, m, float(df_complete))


def lrr_df(k: int, m: int, r: float) -> float:
    """Denominator degrees of freedom of D1 and D3 (Li, Raghunathan & Rubin 1991, eq. 1.14 and 1.15).

    t = k (m - 1); t > 4: 4 + (t - 4) (1 + (1 - 2/t) / r)^2; else t (1 + 1/k) (1 + 1/r)^2 / 2.
    r = 0 (no between-copy variance) gives infinity: the chi-square reference.
    """
    if not r > 0:
        return _INF
    t = k * (m - 1)
    if t > 4:
        return 4.0 + (t - 4.0) * (1.0 + (1.0 - 2.0 / t) / r) ** 2
    return t * (1.0 + 1.0 / k) * (1.0 + 1.0 / r) ** 2 / 2.0


def f_sf(statistic: float, k: int, df_denominator: float) -> float:
    """P(F(k, df) >= statistic); the chi-square on k df over k when df is infinite."""
    from scipy.stats import chi2, f

    if not math.isfinite(statistic) or k <= 0:
        return float("nan")
    if math.isinf(df_denominator):
        return float(chi2.sf(statistic * k, k))
    return float(f.sf(statistic, k, df_denominator))


@dataclass(frozen=True)
class PooledTest(LikelihoodRatioTest):
    """A pooled test: ``statistic`` on F(df, df_denominator); ``g`` = statistic x df (G when nothing is missing)."""

    statistic: float = float("nan")
    df_denominator: float = _INF
    kind: str = "D3"
    r: float = 0.0

    def as_dict(self) -> dict:
        return {**super().as_dict(), "statistic": self.statistic, "df_denominator": self.df_denominator,
                "kind": self.kind}


def d1(estimate, within, between, m: int) -> tuple[float, float, float]:
    """D1 (Li, Raghunathan & Rubin 1991): (statistic, r1, df_denominator) for the coefficients given.

    r1 = (1 + 1/m) tr(B U^-1) / k; D1 = Q' U^-1 Q / (k (1 + r1)).
    """
    q = np.atleast_1d(np.asarray(estimate, dtype=float))
    u = np.atleast_2d(within)
    b = np.atleast_2d(between)
    k = len(q)
    try:
        u_inv_q = np.linalg.solve(u, q)
        r1 = (1.0 + 1.0 / m) * float(np.trace(np.linalg.solve(u, b))) / k
    except np.linalg.LinAlgError:
        return float("nan"), float("nan"), float("nan")
    r1 = max(r1, 0.0)
    return float(np.dot(q, u_inv_q)) / (k * (1.0 + r1)), r1, lrr_df(k, m, r1)


def d3(full_at_own, small_at_own, full_at_pooled, small_at_pooled, k: int) -> tuple[float, float, float]:
    """D3 (Meng & Rubin 1992): (statistic, r3, df_denominator).

    d_bar = mean of 2 (lnL_full - lnL_small) at each copy's own estimates; d_tilde = the same at the pooled
    estimates of each model, evaluated on every copy; r3 = (m + 1) / (k (m - 1)) (d_bar - d_tilde);
    D3 = d_tilde / (k (1 + r3)).  r3 below 0 (possible by chance) is taken as 0 (common practice).
    """
    m = len(full_at_own)
    d_bar = float(np.mean(2.0 * (np.asarray(full_at_own) - np.asarray(small_at_own))))
    d_tilde = float(np.mean(2.0 * (np.asarray(full_at_pooled) - np.asarray(small_at_pooled))))
    r3 = max((m + 1.0) / (k * (m - 1.0)) * (d_bar - d_tilde), 0.0)
    return d_tilde / (k * (1.0 + r3)), r3, lrr_df(k, m, r3)


def d2(chi_squares, k: int) -> tuple[float, float, float]:
    """D2 (Li, Meng, Raghunathan & Rubin 1991): (statistic, r2, df_denominator) from m chi-squares on k df.

    r2 = (1 + 1/m) var(sqrt(d_i)); D2 = (mean(d)/k - (m + 1)/(m - 1) r2) / (1 + r2), below 0 taken as 0
    (common practice); df = k^(-3/m) (m - 1) (1 + 1/r2)^2.
    """
    d = np.clip(np.asarray(chi_squares, dtype=float), 0.0, None)
    m = len(d)
    r2 = (1.0 + 1.0 / m) * float(np.var(np.sqrt(d), ddof=1))
    stat = (float(d.mean()) / k - (m + 1.0) / (m - 1.0) * r2) / (1.0 + r2)
    df = _INF if r2 <= 0 else k ** (-3.0 / m) * (m - 1.0) * (1.0 + 1.0 / r2) ** 2
    return max(stat, 0.0), r2, df


def make_test(kind: str, stat_r_df, k: int, added=(), n_rows: int = 0) -> PooledTest:
    stat, r, df_den = stat_r_df
    p = f_sf(stat, k, df_den) if k > 0 else float("nan")
    return PooledTest(stat * k, k, p, tuple(added), (), n_rows, statistic=stat, df_denominator=df_den, kind=kind,
                      r=r)


@dataclass(frozen=True)
class PooledTermTest(TermTest):
    """A predictor's coefficients tested together over the copies by D1 (``statistic`` on F(df, df_denominator))."""

    df_denominator: float = _INF
    kind: str = "D1"


def _penalised(fit) -> bool:
    return getattr(fit, "penalized_llf", None) is not None


class PooledFit(LogisticFit):
    """The fits of m imputed copies pooled by Rubin's rules, read through the interface of a single fit.

    ``params`` and ``cov`` are the pooled estimates and the total covariance T;
    p-values and intervals use t on the Barnard-Rubin degrees of freedom;
    ``term_tests`` are D1 tests and ``overall`` the D3 test (D2 for Firth's
    fits).  ``llf`` and what is built on it (deviance, AIC, BIC, McFadden's
    R-squared) are averages over the copies.
    """

    def __init__(self, fits: list, imputation, rows_read: int, missing_outcome: int, missing_by_column: dict):
        from twofold.core.models.study import RowAccount

        first = fits[0]
        names = first.names
        for f in fits[1:]:
            if f.names != names:
                raise ModelError("The imputed copies left out different coefficients (a group empty or a column "
                                 "constant in some copies), so their fits cannot be pooled; merge rare groups or "
                                 "leave incomplete rows out instead.")
        self.fits = list(fits)
        self.imputation = imputation
        self.m = len(fits)
        self.pooled = rubin([f.params for f in fits], [f.cov for f in fits], first.n_used - first.n_params)
        notices = []
        seen = set()
        for f in fits:
            for n in f.notices:
                if n.code != "rows_dropped" and (n.code, n.message) not in seen:
                    seen.add((n.code, n.message))
                    notices.append(n)
        if missing_outcome:
            notices.append(Notice("rows_dropped", f"{missing_outcome:,} of {rows_read:,} rows were left out for "
                                  "having no outcome (an outcome is never imputed).", ()))
        super().__init__(first.design, self.pooled.estimate, self.pooled.total, float(np.mean([f.llf for f in fits])),
                         all(f.converged for f in fits), max(f.iterations for f in fits), first.kept, first.dropped,
                         notices)
        #: Said wherever the method is (JSON, text, report, tables, the saved model): "maximum likelihood,
        #: pooled over 20 imputed copies".
        self.method = f"{first.method}, pooled over {self.m} imputed copies"
        self.account = RowAccount(rows_read, missing_outcome, dict(missing_by_column), first.n_used)
        if _penalised(first):
            self.penalized_llf = float(np.mean([f.penalized_llf for f in fits]))

    #: Why a pooled fit has no AIC or BIC (JSON ``aic_note``, the text account, the report, the ladder).
    AIC_NOTE = ("No AIC or BIC is given for a model pooled over imputed copies: the copies' likelihoods are those "
                "of filled-in values, not of the values observed, and averaging them counts every imputed value as "
                "if it had been seen, so their average is not the AIC of the data and its differences between "
                "models have no known scale; compare pooled models by the pooled tests instead.")

    # ---- coefficients -------------------------------------------------
    @cached_property
    def df(self) -> np.ndarray:
        """Barnard-Rubin degrees of freedom of each coefficient's t."""
        return self.pooled.df

    @cached_property
    def fmi(self) -> np.ndarray:
        return self.pooled.fmi

    @cached_property
    def p_values(self) -> np.ndarray:
        """Two-sided p of t = estimate / SE on the Barnard-Rubin degrees of freedom."""
        from scipy.stats import t

        return 2.0 * t.sf(np.abs(self.z), self.df)

    @cached_property
    def odds_ratio_ci(self):
        """exp(b -/+ t(0.975, nu) SE), nu the Barnard-Rubin degrees of freedom."""
        from scipy.stats import t

        q = t.ppf(0.975, self.df)
        with np.errstate(over="ignore"):
            return np.exp(self.params - q * self.std_errors), np.exp(self.params + q * self.std_errors)

    @cached_property
    def coefficient_rows(self) -> list[dict]:
        rows = [dict(r) for r in super().coefficient_rows]
        for r, fmi, df in zip(rows, self.fmi, self.df):
            r["fmi"], r["df"] = float(fmi), float(df)
        return rows

    # ---- predictions ----------------------------------------------------
    @cached_property
    def linear_predictor(self) -> np.ndarray:
        """The pooled coefficients applied to every copy, averaged (see the module's note)."""
        from twofold.core.models.fit import one_blas_thread

        with one_blas_thread():
            return np.mean([np.dot(f.used_X, self.params) for f in self.fits], axis=0)

    # ---- tests ------------------------------------------------------------
    @cached_property
    def term_tests(self) -> dict:
        """D1 for each predictor whose effect has two or more coefficients (its total effect, as a single fit's)."""
        from twofold.core.models.terms import total_effects

        within = total_effects(self.design.predictors)
        out = {}
        for column, idx in self.total_index.items():
            if len(idx) < 2:
                continue
            stat, _, df_den = d1(self.pooled.estimate[idx], self.pooled.within[np.ix_(idx, idx)],
                                 self.pooled.between[np.ix_(idx, idx)], self.m)
            out[column] = PooledTermTest(column, stat, len(idx), f_sf(stat, len(idx), df_den),
                                         within.get(column, ()), df_den)
        return out

    @cached_property
    def imputed_rows(self) -> tuple:
        """(rows the same in every copy, rows with an imputed cell in some copy), as positions among the rows used.

        The copies differ only in their imputed cells (the same levels, knots and outcome), so a row with no
        imputed cell has the same design row and outcome in every copy.
        """
        rows = self.design.rows
        imputed = [np.asarray(c, dtype=np.int64) for c in getattr(self.imputation, "cells", {}).values()]
        differ = np.isin(rows, np.concatenate(imputed)) if imputed else np.zeros(len(rows), dtype=bool)
        return np.flatnonzero(~differ), np.flatnonzero(differ)

    def log_likelihoods_at(self, params) -> np.ndarray:
        """Each copy's log-likelihood at the same coefficients.

        The rows without an imputed cell add the same to every copy's, so they are summed once (on the first
        copy) and only the rows with an imputed cell are evaluated on each copy: at 100,000 rows with a fifth of
        them imputed, a fifth of the work of evaluating every copy in full.
        """
        from twofold.core.models.fit import one_blas_thread

        same, differ = self.imputed_rows
        # One linear-algebra thread: these products are too small to share, and on a busy two-core machine
        # handing them to a second thread made each about five times slower (7.9 against 1.5 ms at 100,000 rows).
        with one_blas_thread():
            if not len(same):
                return np.array([log_likelihood(f.design.y, np.dot(f.used_X, params)) for f in self.fits])
            first = self.fits[0]
            y = first.design.y
            common = log_likelihood(y[same], np.dot(first.used_X, params)[same])
            y_differ = y[differ]
            return np.array([common + log_likelihood(y_differ, np.dot(f.used_X[differ], params)) for f in self.fits])

    @cached_property
    def llf_at_pooled(self) -> np.ndarray:
        """Each copy's log-likelihood at the pooled coefficients (read by every D3 test of this model)."""
        return self.log_likelihoods_at(self.params)

    @cached_property
    def overall(self) -> PooledTest:
        """Against the constant model: D3 (D2 for penalised fits)."""
        k = self.n_params - 1
        if k <= 0:
            return PooledTest(float("nan"), 0, float("nan"), n_rows=self.n_used, kind="D3")
        if _penalised(self.fits[0]):
            return make_test("D2", d2([f.overall.g for f in self.fits], k), k, n_rows=self.n_used)
        y = self.design.y
        rate = float(y.mean())
        intercept = math.log(rate / (1.0 - rate))
        null = [f.null_llf for f in self.fits]
        # The outcome is the same in every copy, so the constant model's estimate and likelihood are too.
        n1, n = float(y.sum()), len(y)
        null_pooled = [n1 * intercept - n * float(np.logaddexp(0.0, intercept))] * self.m
        own = [f.llf for f in self.fits]
        return make_test("D3", d3(own, null, self.llf_at_pooled, null_pooled, k), k,
                         n_rows=self.n_used)


def pooled_nested(smaller: PooledFit, larger: PooledFit) -> PooledTest:
    """The nested test of two pooled models on the same copies: D3, or D2 for penalised fits.

    Each copy's pair is checked as :func:`~twofold.core.models.fit.nested_test` checks a pair.
    """
    from twofold.core.models.fit import nested_test

    tests = [nested_test(s, f) for s, f in zip(smaller.fits, larger.fits)]
    k = larger.n_params - smaller.n_params
    added = tests[0].added
    if k <= 0:
        return PooledTest(float("nan"), k, float("nan"), added, (), larger.n_used, kind="D3")
    if _penalised(larger.fits[0]):
        return make_test("D2", d2([t.g for t in tests], k), k, added, larger.n_used)
    return make_test("D3", d3([f.llf for f in larger.fits], [f.llf for f in smaller.fits],
                              larger.llf_at_pooled, smaller.llf_at_pooled,
                              k), k, added, larger.n_used)


#: Rows from which :meth:`ImputedCopies.fit` fits the copies on two threads (below it, the threads' start and
#: the interpreter lock they share cost more than they save).
TWO_THREADS_FROM = 20_000


class ImputedCopies:
    """The m copies of a study that an imputation makes, each fitted in turn and pooled.

    Made once per analysis; every model of the ladder is fitted on the same
    copies (their encodings are kept), so nested tests compare like with like.
    """

    def __init__(self, study, imputation):
        self.study = study
        self.imputation = imputation
        self.studies = [study.with_frame(imputation.frame(study.frame, j)) for j in range(imputation.m)]

    @property
    def rows(self) -> np.ndarray:
        return self.imputation.rows

    def fit(self, predictors, firth: bool = False, start: PooledFit | None = None, linear=()) -> PooledFit:
        """Fit the model on every copy (on all rows with an outcome) and pool.

        From :data:`TWO_THREADS_FROM` rows on, the copies are fitted on two threads, each taking half of them in
        turn (statsmodels' Newton steps are numpy's linear algebra, which lets go of the interpreter lock); the
        warnings of both are watched around them, and should any come (statsmodels' word on separation, which
        must reach the fit of its own copy), the copies are fitted again one at a time.
        """
        import warnings
        from concurrent.futures import ThreadPoolExecutor

        from twofold.core.models.fit import one_blas_thread

        def chain(indices, watch=True):
            fits = []
            for j in indices:
                # The copies differ only in their imputed cells, so the same model's fit on the copy before
                # starts Newton nearer the maximum than the smaller model's fit on this copy does.
                begin = fits[-1] if fits and not firth else None if start is None else start.fits[j]
                fits.append(self.studies[j].fit(predictors, rows=self.rows, firth=firth, linear=linear, start=begin,
                                                watch_warnings=watch))
            return fits

        everything = list(range(len(self.studies)))
        fits = None
        with one_blas_thread():
            if not firth and len(self.rows) >= TWO_THREADS_FROM and len(everything) >= 2:
                half = (len(everything) + 1) // 2
                with warnings.catch_warnings(record=True) as caught:
                    warnings.simplefilter("always")
                    with ThreadPoolExecutor(max_workers=2) as pool:
                        parts = list(pool.map(lambda part: chain(part, watch=False),
                                              [everything[:half], everything[half:]]))
                if not caught:
                    fits = parts[0] + parts[1]
            if fits is None:
                fits = chain(everything)
        y = self.study.outcome_values()
        has_outcome = ~np.isnan(y)
        own = [p for p in fits[0].design.predictors if ":" not in p]
        missing = {n: int((self.study.frame[n].isna().to_numpy() & has_outcome).sum()) for n in own}
        return PooledFit(fits, self.imputation, self.study.n_rows, int((~has_outcome).sum()), missing)


def pooled_drop_one(copies: ImputedCopies, fit: PooledFit) -> list[dict]:
    """Each predictor (with every interaction containing it) left out: D3 (D2 for penalised fits) beside D1.

    The pooled counterpart of :func:`~twofold.core.models.study.drop_one_tests`; ``g`` and ``wald`` are the
    statistics times their df, on the chi-square scale, and ``prefer_lr`` follows the same rule.
    """
    from twofold.core.models.terms import total_effects, total_label
    from twofold.core.outputs.summary import clean_number as num

    within = total_effects(fit.design.predictors)
    firth = _penalised(fit.fits[0])
    out = []
    for column in fit.design.predictors:
        idx = fit.total_index[column]
        if not len(idx):
            continue
        gone = {column, *within.get(column, ())}
        try:
            lr = pooled_nested(copies.fit([p for p in fit.design.predictors if p not in gone], firth=firth), fit)
        except (ModelError, np.linalg.LinAlgError):
            lr = None
        stat, _, den = d1(fit.pooled.estimate[idx], fit.pooled.within[np.ix_(idx, idx)],
                          fit.pooled.between[np.ix_(idx, idx)], fit.m)
        wald_p = f_sf(stat, len(idx), den)
        p = float("nan") if lr is None else lr.p_value
        available = lr is not None and math.isfinite(lr.g)
        disagree = available and (p < 0.05) != (wald_p < 0.05)
        much_lower = available and lr.g > 3.841 and stat * len(idx) < 0.5 * lr.g
        out.append({"column": column, "label": total_label(column, within.get(column, ())),
                    "includes": list(within.get(column, ())), "g": num(lr.g if lr else None), "df": int(len(idx)),
                    "p_value": num(p), "kind": lr.kind if lr else None, "statistic": num(lr.statistic if lr else None),
                    "df_denominator": num(lr.df_denominator) if lr else None,
                    "wald": num(stat * len(idx)), "wald_p_value": num(wald_p), "wald_kind": "D1",
                    "wald_df_denominator": num(den), "prefer_lr": bool(disagree or much_lower),
                    "available": bool(available)})
    return out


def pooled_hosmer_lemeshow(risks) -> dict | None:
    """The Hosmer-Lemeshow test pooled over the copies by D2 (Li, Meng, Raghunathan & Rubin 1991), the pooling of
    m chi-square statistics: each copy's statistic on its risks under the pooled coefficients (``risks``: a list of
    (y, p)), on F(k, df_denominator), ``statistic`` on the chi-square scale (D2 times k).  None when a copy has too
    few risk groups or the copies' groups give different degrees of freedom (no common reference)."""
    from twofold.core.assessing.calibration import hosmer_lemeshow

    try:
        tests = [hosmer_lemeshow(y, p) for y, p in risks]
    except TwofoldError:
        return None
    k = tests[0].df
    if any(t.df != k for t in tests) or k <= 0:
        return None
    stat, _, df_den = d2([t.statistic for t in tests], k)
    small = max(t.small_expected_groups for t in tests)
    first = tests[0]
    note = first.note if small == first.small_expected_groups else tests[
        [t.small_expected_groups for t in tests].index(small)].note
    return {"statistic": float(stat * k), "df": int(k), "p_value": f_sf(stat, k, df_den),
            "groups": int(first.groups_used), "small_expected_groups": int(small), "kind": "D2",
            "df_denominator": None if math.isinf(df_den) else float(df_den),
            "note": ("Pooled over the imputed copies by D2 (Li, Meng, Raghunathan & Rubin 1991): the statistic is on "
                     "the chi-square scale, the p-value from its F reference. " + note)}


def pooled_assessment(fit: PooledFit) -> dict:
    """The ``assessment`` object for pooled fits: each copy's figures under the pooled coefficients, pooled.

    AUC: on the logit scale by Rubin's rules with the DeLong variance carried by the delta method
    (var logit = SE^2 / (AUC (1 - AUC))^2), then back (Marshall et al. 2009, BMC Med Res Methodol 9:57,
    recommend pooling on a scale near normal; the logit for the c statistic is common practice).
    Calibration slope and intercept: Rubin's rules over the copies.  Brier scores and R-squared: means.
    """
    from scipy.special import expit, logit
    from scipy.stats import t as t_dist

    from twofold.core.assessing.assessment import APPARENT_CALIBRATION_NOTE, PENALISED_CALIBRATION_NOTE
    from twofold.core.assessing.calibration import brier, calibration_slope_intercept, pseudo_r2, scaled_brier
    from twofold.core.assessing.discrimination import auc_delong
    from twofold.core.outputs.summary import clean_number as num

    aucs, auc_vars, slopes, slope_vars, cits, cit_vars, briers, sbriers, r2s = [], [], [], [], [], [], [], [], []
    risks = []
    n = fit.n_used
    for f in fit.fits:
        y = f.design.y
        lp = np.dot(f.used_X, fit.params)
        p = expit(lp)
        a = auc_delong(y, p)
        aucs.append(logit(a.auc))
        auc_vars.append((a.se / (a.auc * (1.0 - a.auc))) ** 2)
        c = calibration_slope_intercept(y, lp)
        slopes.append(c.slope)
        slope_vars.append(c.slope_se ** 2)
        cits.append(c.intercept)
        cit_vars.append(c.intercept_se ** 2)
        risks.append((y, p))
        briers.append(brier(y, p))
        sbriers.append(scaled_brier(y, p))
        r2s.append(pseudo_r2(log_likelihood(y, lp), f.null_llf, len(y), y, p))

    def pool(values, variances):
        r = rubin(np.array(values)[:, None], np.array(variances)[:, None, None], n - fit.n_params)
        return float(r.estimate[0]), float(r.std_errors[0]), float(r.df[0])

    auc_logit, auc_se_logit, auc_df = pool(aucs, auc_vars)
    q = t_dist.ppf(0.975, auc_df)
    auc = float(expit(auc_logit))
    slope = pool(slopes, slope_vars)
    cit = pool(cits, cit_vars)
    return {
        "auc": num(auc), "auc_ci": [num(expit(auc_logit - q * auc_se_logit)), num(expit(auc_logit + q * auc_se_logit))],
        "auc_se": num(auc_se_logit * auc * (1.0 - auc)),
        "brier": num(np.mean(briers)), "scaled_brier": num(np.mean(sbriers)),
        "calibration_slope": num(slope[0]), "calibration_slope_se": num(slope[1]),
        "calibration_intercept": num(cit[0]),
        "calibration_note": PENALISED_CALIBRATION_NOTE if _penalised(fit.fits[0]) else APPARENT_CALIBRATION_NOTE,
        "hosmer_lemeshow": pooled_hosmer_lemeshow(risks),
        **{f"{k}_r2": num(np.mean([getattr(r, k) for r in r2s])) for k in ("mcfadden", "cox_snell", "nagelkerke", "tjur")},
        "influential": [], "vif": [], "drop_one": [], "sample_size": None, "notes": [],
        "pooled": True,
        "pooled_note": (f"Pooled over {fit.m} imputed copies: each copy's figures under the pooled coefficients; the "
                        "area under the ROC curve pooled on the logit scale (Rubin's rules) and taken back, "
                        "calibration by Rubin's rules, Brier scores and R-squared averaged, the Hosmer-Lemeshow "
                        "statistics pooled by D2. Influence, variance inflation and the sample size are not pooled "
                        "and not shown here."),
    }



#: How the figures of a pooled fit name what they draw (window and report alike).
POOLED_LABEL = "pooled predictions"

#: What the pooled ROC curve and calibration plot show, said beside them in the window and the report.
POOLED_CURVES_NOTE = (
    "The ROC curve and the calibration plot are of the pooled predictions: each record's linear predictor under the "
    "pooled coefficients, averaged over the imputed copies, then turned into a risk (as the risk calculator and "
    "the saved model predict). The area under that curve can differ a little from the pooled area above, which "
    "pools each copy's area on the logit scale."
)


@dataclass(frozen=True)
class PooledCurves:
    """The ROC curve and calibration of a pooled fit's pooled predictions (see :func:`pooled_curves`)."""

    roc: object          # discrimination.RocCurve
    auc: float           # the area under that curve
    groups: object       # calibration.CalibrationGroups, or None when they cannot be formed
    smooth: object       # calibration.SmoothedCalibration, or None
    note: str = POOLED_CURVES_NOTE


def pooled_curves(fit: PooledFit) -> PooledCurves:
    """ROC points, risk groups and the smoothed calibration curve of the pooled predictions ``fit.fitted``.

    The outcome is never imputed, so it is the same in every copy; the predictions are the copies' linear
    predictors under the pooled coefficients, averaged (:attr:`PooledFit.linear_predictor`), then the risk taken.
    One curve of the predictions the pooled model makes, rather than m curves to be pooled (a curve has no
    Rubin's rules), drawn by the same routines as a single fit's.
    """
    from twofold.core.assessing.calibration import calibration_groups, smoothed_calibration
    from twofold.core.assessing.discrimination import auc_delong, roc_points
    from twofold.core.errors import TwofoldError

    y, p = fit.design.y, fit.fitted
    try:
        groups = calibration_groups(y, p)
    except TwofoldError:
        groups = None
    try:
        smooth = smoothed_calibration(y, p)
    except TwofoldError:
        smooth = None
    return PooledCurves(roc_points(y, p), float(auc_delong(y, p).auc), groups, smooth)


@dataclass(frozen=True)
class PooledTermLRTest(TermLRTest):
    """A curve or interaction test pooled over the copies (``statistic`` on F(df, df_denominator))."""

    statistic: float = float("nan")
    df_denominator: float = _INF
    kind: str = "D3"


def _term_test(term, test: PooledTest, knots=()):
    return PooledTermLRTest(term, test.g, test.df, test.p_value, tuple(knots), statistic=test.statistic,
                            df_denominator=test.df_denominator, kind=test.kind)


def pooled_nonlinearity_tests(copies: ImputedCopies, fit: PooledFit) -> list:
    """Each curve against a straight line, pooled over the copies (D3, or D2 for penalised fits)."""
    firth = _penalised(fit.fits[0])
    return [_term_test(b.column, pooled_nested(copies.fit(list(fit.design.predictors), firth=firth,
                                                          linear={b.column}), fit), b.knots)
            for b in fit.design.blocks if b.kind == "spline"]


def pooled_interaction_tests(copies: ImputedCopies, fit: PooledFit) -> list:
    """Each interaction: the model with it against the model without it, pooled over the copies."""
    firth = _penalised(fit.fits[0])
    names = list(fit.design.predictors)
    return [_term_test(n, pooled_nested(copies.fit([p for p in names if p != n], firth=firth), fit))
            for n in names if ":" in n]

