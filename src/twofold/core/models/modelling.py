"""Tests and summaries for non-linear effects and interactions, and bootstrap validation.

* :func:`nonlinearity_tests`: the likelihood-ratio test of a straight line
  nested in a spline of the same predictor, on the same rows.
* :func:`interaction_tests`: the likelihood-ratio test of a model without an
  interaction nested in the model with it.
* :func:`conditional_odds_ratios`: the odds ratio of one predictor at chosen
  values or levels of the other, once they interact.
* :func:`effect_curve`: the odds ratio against a reference value across a
  predictor's range, with a 95% band (for splines).
* :func:`bootstrap_validation`: optimism-corrected AUC, calibration slope and
  Brier score (Efron; Harrell, Lee & Mark 1996, Stat Med 15:361).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from twofold.core.assessing.decision import net_benefit_values
from twofold.core.errors import ModelError, TwofoldError
from twofold.core.models.fit import Z95, LogisticFit, nested_test


@dataclass(frozen=True)
class TermLRTest:
    """A likelihood-ratio test of one added term: G = 2 (lnL_with - lnL_without)."""

    term: str
    g: float
    df: int
    p_value: float
    knots: tuple = ()

    def as_dict(self) -> dict:
        return {"term": self.term, "g": self.g, "df": self.df, "p_value": self.p_value}


def nonlinearity_tests(study, fit: LogisticFit) -> list[TermLRTest]:
    """For each spline in ``fit``: G of the spline against a straight line, df = knots - 2."""
    out = []
    for block in fit.design.blocks:
        if block.kind != "spline":
            continue
        linear = study.fit(list(fit.design.predictors), rows=fit.design.rows, linear={block.column})
        t = nested_test(linear, fit)
        out.append(TermLRTest(block.column, t.g, t.df, t.p_value, block.knots))
    return out


def interaction_tests(study, fit: LogisticFit) -> list[TermLRTest]:
    """For each interaction in ``fit``: G of the model with it against the model without it."""
    out = []
    predictors = list(fit.design.predictors)
    for name in predictors:
        if ":" not in name:
            continue
        without = study.fit([p for p in predictors if p != name], rows=fit.design.rows, start=fit)
        t = nested_test(without, fit)
        out.append(TermLRTest(name, t.g, t.df, t.p_value))
    return out


def _contrast_or(fit: LogisticFit, contrast: np.ndarray) -> tuple[float, float, float]:
    """exp(c'b) with its 95% Wald interval exp(c'b -/+ 1.96 sqrt(c'Vc))."""
    est = float(contrast @ fit.params)
    se = math.sqrt(max(float(contrast @ fit.cov @ contrast), 0.0))
    return math.exp(est), math.exp(est - Z95 * se), math.exp(est + Z95 * se)


def conditional_odds_ratios(fit: LogisticFit, focus: str, other: str, at=None) -> list[dict]:
    """Odds ratios of ``focus`` at values or levels of ``other`` in a model with their interaction.

    For a numeric focus the odds ratio is per unit; for a factor focus, each
    level against its reference.  ``at`` lists values of a numeric ``other``
    (default: its quartiles on the rows used); a factor ``other`` is shown at
    every level, reference included.
    """
    names = fit.names
    pos = {n: i for i, n in enumerate(names)}
    term = f"{focus}:{other}" if f"{focus}:{other}" in fit.design.predictors else f"{other}:{focus}"
    if term not in fit.design.predictors:
        raise ModelError(f"The model has no interaction between {focus} and {other}; add it first.")
    blocks = dict(zip(fit.design.predictors, fit.design.blocks))
    slices = dict(zip(fit.design.predictors, fit.design.slices))
    fb, ob, ib = blocks[focus], blocks[other], blocks[term]
    first_is_focus = term.split(":")[0] == focus
    X = fit.design.X

    def focus_levels():
        if fb.kind == "factor":
            return [(lvl, [f"{focus}[{lvl}]"]) for lvl in fb.levels]
        return [(None, [focus])]

    if ob.kind == "factor":
        settings = [(ob.reference, None)] + [(lvl, lvl) for lvl in ob.levels]
    else:
        col = slices[other].start
        values = np.quantile(X[:, col], [0.25, 0.5, 0.75]) if at is None else np.asarray(at, dtype=float)
        settings = [(float(v), float(v)) for v in values]
    rows = []
    for flevel, fnames in focus_levels():
        for shown, olevel in settings:
            c = np.zeros(len(names))
            for n in fnames:
                if n in pos:
                    c[pos[n]] = 1.0
            # The interaction columns that move with this focus level at this setting.
            for j in range(ib.width):
                lbl = ib.level_of(j)
                parts = [] if lbl is None else lbl.split(":")
                name = term if lbl is None else f"{term}[{lbl}]"
                if name not in pos:
                    continue
                f_part = parts[0 if first_is_focus else -1] if (fb.kind == "factor" and parts) else None
                o_part = parts[-1 if first_is_focus else 0] if (ob.kind == "factor" and parts) else None
                if fb.kind == "factor" and f_part != str(flevel):
                    continue
                if ob.kind == "factor":
                    if olevel is None or o_part != str(olevel):
                        continue
                    c[pos[name]] = 1.0
                else:
                    c[pos[name]] = olevel
            odds, lo, hi = _contrast_or(fit, c)
            rows.append({"focus": focus, "level": flevel, "other": other, "at": shown,
                         "odds_ratio": odds, "or_ci_low": lo, "or_ci_high": hi})
    return rows


#: Where a curve's odds ratios are stated: these percentiles of the predictor, each against its median.
CURVE_PERCENTILES = (10, 25, 75, 90)

_QUARTILE_WORDS = ("lower quartile", "median", "upper quartile")


def _ordinal(k: int) -> str:
    return f"{k}{'th' if 10 <= k % 100 <= 20 else {1: 'st', 2: 'nd', 3: 'rd'}.get(k % 10, 'th')}"


def _number(v: float) -> str:
    return f"{v:.4g}"


def _curve_contrast(fit: LogisticFit, column: str, values, reference: float):
    """(log odds ratios, standard errors) of ``values`` against ``reference`` along a predictor's own columns.

    log OR(x) = (b(x) - b(ref))' beta over the predictor's columns (the spline
    basis, or the value itself for a straight line); its variance d' V d.
    """
    from twofold.core.models.terms import rcs_basis

    blocks = dict(zip(fit.design.predictors, fit.design.blocks))
    block = blocks[column]

    def basis(v):
        v = np.atleast_1d(np.asarray(v, dtype=float))
        return rcs_basis(v, block.knots) if block.kind == "spline" else v.reshape(-1, 1)

    idx = [fit.names.index(n) for n in block.names if n in fit.names]
    diff = basis(values)[:, : len(idx)] - basis(reference)[:, : len(idx)]
    log_or = diff @ fit.params[idx]
    cov = fit.cov[np.ix_(idx, idx)]
    se = np.sqrt(np.clip(np.einsum("ij,jk,ik->i", diff, cov, diff), 0, None))
    return log_or, se


def stated_effects(fit: LogisticFit) -> list[dict]:
    """Odds ratios a reader can take at face value where one coefficient alone would mislead.

    * A predictor in an interaction: its odds ratio at stated values of the
      other predictor (the lower quartile, median and upper quartile of a
      number on the rows used; every group of a factor), from
      :func:`conditional_odds_ratios`.
    * A curve (spline): odds ratios of the 10th, 25th, 75th and 90th
      percentiles against the median, exp((b(x) - b(median))' beta), with
      95% Wald intervals.  A curve that is also in an interaction is stated
      where the other predictor is zero or at its reference group, and says so.

    Each record: ``column``, ``label`` (what is compared, where), ``odds_ratio``,
    ``or_ci_low``, ``or_ci_high``.  Nothing is stated for a fit that did not
    settle (its estimates are not the model's).
    """
    from twofold.core.models.terms import split_interaction, value_text

    if fit.odds_ratios_withheld:
        return []
    blocks = dict(zip(fit.design.predictors, fit.design.blocks))
    slices = dict(zip(fit.design.predictors, fit.design.slices))
    out = []
    with np.errstate(over="ignore"):
        for name in fit.design.predictors:
            pair = split_interaction(name)
            if pair is None:
                continue
            for focus, other in (pair, pair[::-1]):
                if blocks[focus].kind == "spline":
                    continue  # stated along its curve below
                ob = blocks[other]
                words = None
                if ob.kind != "factor":
                    words = list(_QUARTILE_WORDS)
                for row in conditional_odds_ratios(fit, focus, other):
                    if blocks[focus].kind == "factor":
                        what = f"{focus}: {value_text(row['level'])} vs {value_text(blocks[focus].reference)}"
                    else:
                        what = f"{focus} (per 1 unit)"
                    if ob.kind == "factor":
                        where = f"where {other} is {value_text(row['at'])}"
                    else:
                        where = f"where {other} is {_number(row['at'])} ({words.pop(0)})" if words else \
                            f"where {other} is {_number(row['at'])}"
                    out.append({"column": focus, "label": f"{what}, {where}", "odds_ratio": row["odds_ratio"],
                                "or_ci_low": row["or_ci_low"], "or_ci_high": row["or_ci_high"]})
        for name, block in blocks.items():
            if block.kind != "spline":
                continue
            x = fit.design.X[:, slices[name].start]
            at = np.percentile(x, CURVE_PERCENTILES)
            median = float(np.median(x))
            log_or, se = _curve_contrast(fit, name, at, median)
            others = [b if a == name else a for a, b in
                      (split_interaction(p) for p in fit.design.predictors if split_interaction(p))
                      if name in (a, b)]
            where = ""
            if others:
                where = "; " + ", ".join(
                    f"where {o} is {value_text(blocks[o].reference)}" if blocks[o].kind == "factor"
                    else f"where {o} is 0" for o in others)
            for pct, v, lo_, s_ in zip(CURVE_PERCENTILES, at, log_or, se):
                out.append({"column": name,
                            "label": f"{name} {_number(v)} ({_ordinal(pct)} percentile) vs {_number(median)} "
                                     f"(median){where}",
                            "odds_ratio": float(np.exp(lo_)), "or_ci_low": float(np.exp(lo_ - Z95 * s_)),
                            "or_ci_high": float(np.exp(lo_ + Z95 * s_))})
    return out


def effect_curve(fit: LogisticFit, column: str, reference: float | None = None, points: int = 101) -> dict:
    """Odds ratio against a reference value across a predictor's range, with a 95% band.

    log OR(x) = (b(x) - b(ref))' beta over the predictor's columns (spline or
    straight line); band exp(log OR -/+ 1.96 se) with se from the covariance.
    Default reference: the median on the rows used.
    """
    blocks = dict(zip(fit.design.predictors, fit.design.blocks))
    slices = dict(zip(fit.design.predictors, fit.design.slices))
    if column not in blocks or blocks[column].kind not in ("numeric", "spline"):
        raise ModelError(f"An effect curve needs a numeric predictor of the model; '{column}' is not one.")
    x = fit.design.X[:, slices[column].start]
    grid = np.linspace(np.quantile(x, 0.01), np.quantile(x, 0.99), points)
    ref = float(np.median(x)) if reference is None else float(reference)
    log_or, se = _curve_contrast(fit, column, grid, ref)
    return {"column": column, "reference": ref, "x": grid, "odds_ratio": np.exp(log_or),
            "low": np.exp(log_or - Z95 * se), "high": np.exp(log_or + Z95 * se)}


#: How a bootstrap validation refits its resamples: the validated model's own method.
REFIT_METHODS = ("maximum likelihood", "Firth penalised likelihood with corrected intercept (FLIC)")


@dataclass(frozen=True)
class Validation:
    """Bootstrap optimism correction: corrected = apparent - mean(boot apparent - boot on original)."""

    repetitions: int
    completed: int
    failed: int
    seed: int | None
    auc_apparent: float
    auc_optimism: float
    slope_apparent: float
    slope_optimism: float
    brier_apparent: float
    brier_optimism: float
    #: How each resample was refitted: the validated model's own method.
    method: str = REFIT_METHODS[0]
    #: Cox-Snell R-squared of the model's own risks, and its optimism (NaN in validations saved before).
    r2cs_apparent: float = float("nan")
    r2cs_optimism: float = float("nan")
    #: With ``thresholds``: the thresholds and the optimism of the net benefit at each (a session keeps them in
    #: its ``validation_result``, :meth:`net_benefit_dict`).
    net_benefit_thresholds: tuple | None = None
    net_benefit_optimism: tuple | None = None

    @property
    def cox_snell_r2_corrected(self) -> float:
        return self.r2cs_apparent - self.r2cs_optimism

    @property
    def auc_corrected(self) -> float:
        return self.auc_apparent - self.auc_optimism

    @property
    def calibration_slope_corrected(self) -> float:
        return self.slope_apparent - self.slope_optimism

    @property
    def brier_corrected(self) -> float:
        return self.brier_apparent - self.brier_optimism

    def as_dict(self) -> dict:
        return {
            "repetitions": self.repetitions, "completed": self.completed, "failed": self.failed,
            "seed": self.seed, "auc_apparent": self.auc_apparent, "auc_optimism": self.auc_optimism,
            "auc_corrected": self.auc_corrected, "calibration_slope_apparent": self.slope_apparent,
            "calibration_slope_corrected": self.calibration_slope_corrected,
            "brier_apparent": self.brier_apparent, "brier_optimism": self.brier_optimism,
            "brier_corrected": self.brier_corrected, "refit_method": self.method,
            "cox_snell_r2_apparent": self.r2cs_apparent, "cox_snell_r2_corrected": self.cox_snell_r2_corrected,
        }

    def net_benefit_dict(self) -> dict:
        """``net_benefit_thresholds`` and ``net_benefit_optimism`` as lists, when the resamples drew a decision
        curve; else empty."""
        if self.net_benefit_thresholds is None:
            return {}
        return {"net_benefit_thresholds": list(self.net_benefit_thresholds),
                "net_benefit_optimism": list(self.net_benefit_optimism)}

    @classmethod
    def from_dict(cls, d: dict) -> "Validation":
        """The validation :meth:`as_dict` wrote (a saved session's); missing figures are NaN."""
        nan = float("nan")

        def num(key):
            v = d.get(key)
            return nan if v is None else float(v)

        return cls(int(d.get("repetitions") or 0), int(d.get("completed") or 0), int(d.get("failed") or 0),
                   d.get("seed"), num("auc_apparent"), num("auc_optimism"), num("calibration_slope_apparent"),
                   num("calibration_slope_apparent") - num("calibration_slope_corrected"), num("brier_apparent"),
                   num("brier_optimism"), str(d.get("refit_method") or REFIT_METHODS[0]),
                   num("cox_snell_r2_apparent"), num("cox_snell_r2_apparent") - num("cox_snell_r2_corrected"),
                   *((tuple(float(t) for t in d["net_benefit_thresholds"]),
                      tuple(nan if v is None else float(v) for v in d["net_benefit_optimism"]))
                     if d.get("net_benefit_thresholds") is not None else (None, None)))


class ValidationCancelled(TwofoldError):
    """The bootstrap was cancelled; nothing was changed."""


def _performance(y, lp):
    """AUC (Mann-Whitney by ranks), calibration slope, Brier score and Cox-Snell R-squared of a linear predictor.

    The Cox-Snell R-squared of the risks as given (no recalibration):
    1 - exp(-(2/n) (lnL(y; lp) - lnL0)), lnL0 that of the event rate.
    """
    from scipy.special import expit
    from scipy.stats import rankdata

    p = expit(lp)
    n1 = y.sum()
    n0 = len(y) - n1
    ranks = rankdata(lp)
    auc = (ranks[y == 1].sum() - n1 * (n1 + 1) / 2) / (n1 * n0)
    brier = float(np.mean((p - y) ** 2))
    # Calibration slope: logistic regression of y on lp (Newton on two parameters).
    b = np.array([0.0, 1.0])
    Z = np.column_stack([np.ones_like(lp), lp])
    for _ in range(25):
        q = expit(np.dot(Z, b))
        # lstsq: a resample that separates gives a near-singular information matrix.
        step = np.linalg.lstsq(np.dot((Z * (q * (1 - q))[:, None]).T, Z), np.dot(Z.T, y - q), rcond=None)[0]
        b += np.clip(step, -5, 5)
        if np.max(np.abs(step)) < 1e-10:
            break
    from twofold.core.models.fit import log_likelihood, null_log_likelihood

    n = len(y)
    # Risks far worse than the event rate (a refit's on the original rows) make the exponent huge: capped,
    # so the figure stays a (very negative) number instead of overflowing.
    r2_cs = 1.0 - math.exp(min(-2.0 * (log_likelihood(y, lp) - null_log_likelihood(y)) / n, 700.0))
    return float(auc), float(b[1]), brier, float(r2_cs)


def bootstrap_validation(fit: LogisticFit, repetitions: int = 200, seed: int | None = None,
                         progress=None, cancelled=None, workers: int = 2, thresholds=None) -> Validation:
    """Harrell's bootstrap estimate of optimism for AUC, calibration slope and Brier score.

    In each of B resamples of the rows (with replacement) the whole model is
    refitted by the method of the model being validated (same predictors,
    encodings and spline knots): maximum likelihood, or for a penalised fit
    Firth's penalised likelihood with the intercept corrected (FLIC; Puhr et
    al. 2017, Stat Med 36:2302), whose risks are the ones the model gives.
    Its performance on the resample minus its performance on the original
    rows estimates the optimism, averaged over the resamples.  The apparent
    performance is that of the model's own risks (``fit.linear_predictor``).

    Parameters
    ----------
    progress : callable, optional
        Called with (done, total) as resamples finish.
    cancelled : callable, optional
        Returning True stops the run; :class:`ValidationCancelled` is raised
        and nothing is changed.
    workers : int
        Threads (the linear algebra releases the interpreter lock, so two
        threads use both cores).
    thresholds : array, optional
        Threshold risks at which the optimism of the net benefit (decision
        curve) is also estimated, from the same resamples and refits: net
        benefit on the resample minus net benefit on the original rows,
        averaged.  The other figures are the same with or without it.
    """
    from concurrent.futures import ThreadPoolExecutor

    from statsmodels.discrete.discrete_model import Logit

    from twofold.core.models.fit import one_blas_thread

    if repetitions < 1:
        raise ModelError("The number of bootstrap repetitions must be at least 1; 200 is usual.")
    X = fit.design.X[:, fit.kept]
    y = fit.design.y
    n = len(y)
    app = _performance(y, fit.linear_predictor)
    seeds = np.random.SeedSequence(seed).spawn(repetitions)
    penalised = getattr(fit, "penalized_llf", None) is not None

    def refit(yb, Xb):
        """Coefficients of the resample's model, by the validated model's own method."""
        if penalised:
            from twofold.core.models.firth import flic

            return np.asarray(flic(Xb, yb).params, dtype=float)
        res = Logit(yb, Xb, check_rank=False, hasconst=False).fit(
            method="newton", start_params=fit.params, maxiter=35, disp=0, warn_convergence=False,
            full_output=False, skip_hessian=True)
        return np.asarray(res.params)

    def one(i):
        if cancelled is not None and cancelled():
            return None
        rng = np.random.default_rng(seeds[i])
        idx = rng.integers(0, n, size=n)
        yb, Xb = y[idx], X[idx]
        if yb.min() == yb.max():
            return "failed"
        import warnings

        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            try:
                b = refit(yb, Xb)
            except (np.linalg.LinAlgError, ValueError, TwofoldError):
                return "failed"
            if not np.all(np.isfinite(b)):
                return "failed"
            try:
                lp_boot, lp_test = np.dot(Xb, b), np.dot(X, b)
                boot = _performance(yb, lp_boot)
                test = _performance(y, lp_test)
            except np.linalg.LinAlgError:
                # A separated resample: its linear predictor is degenerate.
                return "failed"
        if not np.all(np.isfinite(boot + test)):
            return "failed"
        diffs = tuple(bb - tt for bb, tt in zip(boot, test))
        if thresholds is None:
            return diffs
        from scipy.special import expit

        nb = (net_benefit_values(yb, expit(lp_boot), thresholds) - net_benefit_values(y, expit(lp_test), thresholds))
        return diffs, nb

    results = []
    done = 0
    with one_blas_thread(), ThreadPoolExecutor(max_workers=max(1, workers)) as pool:
        for r in pool.map(one, range(repetitions)):
            if r is None:
                pool.shutdown(wait=False, cancel_futures=True)
                raise ValidationCancelled("The bootstrap validation was cancelled; nothing was changed.")
            results.append(r)
            done += 1
            if progress is not None:
                progress(done, repetitions)
    ok = [r for r in results if not isinstance(r, str)]
    if not ok:
        raise ModelError("No bootstrap resample could be fitted (each had only one outcome value or failed); "
                         "the data are too small or separated for this check.")
    nb_thresholds = nb_optimism = None
    if thresholds is not None:
        nb_thresholds = tuple(float(t) for t in thresholds)
        nb_optimism = tuple(float(v) for v in np.mean(np.array([r[1] for r in ok]), axis=0))
        ok = [r[0] for r in ok]
    opt = np.mean(np.array(ok), axis=0)
    return Validation(repetitions, len(ok), len(results) - len(ok), seed, app[0], float(opt[0]),
                      app[1], float(opt[1]), app[2], float(opt[2]),
                      REFIT_METHODS[1] if penalised else REFIT_METHODS[0], app[3], float(opt[3]),
                      nb_thresholds, nb_optimism)
