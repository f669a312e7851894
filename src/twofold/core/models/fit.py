"""Maximum-likelihood logistic fits and the tests built on them.

The fit itself is statsmodels' ``Logit`` (Newton's method).  What this module
adds is what an interactive, careful analysis needs around it:

* a rank check done once per design on the small cross-product matrix (so
  statsmodels' own, costlier check is switched off), with aliased columns
  dropped and named;
* the constant-only log-likelihood in closed form from the event rate;
* warm starts from a previous fit;
* detection of complete and quasi-complete separation, named by predictor;
* Wald tests per coefficient and joint Wald tests per multi-level factor, the
  overall likelihood-ratio (G) test, and the nested likelihood-ratio test.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from twofold.core.models.design import Design, aliased_columns, unit_sizes
from twofold.core.errors import ModelError, Notice

#: z for a two-sided 95% interval; NIST/SEMATECH e-Handbook normal table gives 1.960.
Z95 = 1.959963984540054

#: Events per parameter below this draw a warning (Peduzzi et al. 1996, J Clin
#: Epidemiol 49:1373).  A rule of thumb that later work found weakly supported,
#: so it warns and never refuses.
EVENTS_PER_PARAMETER_WARNING = 10

_controller = None
_limit_lock = __import__("threading").Lock()
_limit_depth = 0
_limit_ctx = None


def _limit_to_one():
    """BLAS limited to one thread now (caller holds ``_limit_lock``): threadpoolctl's limit, or None when it
    cannot inspect the libraries (then everything runs as is)."""
    global _controller
    try:
        if _controller is None:
            from threadpoolctl import ThreadpoolController

            _controller = ThreadpoolController()
        return _controller.limit(limits=1, user_api="blas")
    except Exception:
        return None


class _OneBlasThread:
    """Limit BLAS to one thread while any fit runs: two threads made small fits several times slower.

    Re-entrant and shared across Python threads: only the outermost entry
    sets the limit and only the last exit lifts it, so parallel refits never
    restore the limit under each other's feet.
    """

    def __enter__(self):
        global _limit_depth, _limit_ctx
        with _limit_lock:
            if _limit_depth == 0:
                _limit_ctx = _limit_to_one()
            _limit_depth += 1
        return self

    def __exit__(self, *exc):
        global _limit_depth, _limit_ctx
        with _limit_lock:
            _limit_depth -= 1
            if _limit_depth == 0 and _limit_ctx is not None:
                _limit_ctx.restore_original_limits()
                _limit_ctx = None
        return False


def one_blas_thread():
    return _OneBlasThread()


_kept_limit = None


def keep_one_blas_thread() -> None:
    """Limit BLAS to one thread for the rest of the process.

    For the window's process and its assessment process: their fits run one per thread already, and a second
    BLAS thread (which spins a while after each product) only took the core the window needed.
    """
    global _kept_limit
    with _limit_lock:
        if _kept_limit is None:
            _kept_limit = _limit_to_one() or False


def settle_collector() -> None:
    """Leave the objects made so far (the loaded libraries' modules, classes and functions, there for the life of
    the process) out of the garbage collector's full passes.

    A full pass walked them all, about 120,000 objects, in 50 ms or more while holding the interpreter lock, so the
    window could not answer meanwhile; objects made later are collected as before.
    """
    import gc

    gc.collect()
    gc.freeze()


class FitStopped(Exception):
    """A fit given up between two Newton steps because its ``stop()`` said so (a newer request made it pointless).

    Never shown to a user: whoever passes ``stop`` catches it (:meth:`twofold.core.models.ladder.Ladder.add`).
    """


def _stopper(stop):
    def callback(_params):
        if stop():
            raise FitStopped
    return callback


def null_log_likelihood(y: np.ndarray) -> float:
    """Log-likelihood of the constant-only model: n1 ln(n1/n) + n0 ln(n0/n)."""
    n = len(y)
    n1 = float(y.sum())
    n0 = n - n1
    out = 0.0
    if n1 > 0:
        out += n1 * math.log(n1 / n)
    if n0 > 0:
        out += n0 * math.log(n0 / n)
    return out


@dataclass(frozen=True)
class TermTest:
    """A joint Wald test that all of one predictor's coefficients are zero.

    statistic = b' V^-1 b over the predictor's coefficients; chi-square on df.
    For a predictor that is part of an interaction, the coefficients are its
    total effect: its own together with those of every interaction that
    contains it (``includes`` names those interactions).
    """

    column: str
    statistic: float
    df: int
    p_value: float
    includes: tuple = ()

    @property
    def label(self) -> str:
        """"age", or "age, with its interaction with sex"."""
        from twofold.core.models.terms import total_label

        return total_label(self.column, self.includes)


@dataclass(frozen=True)
class LikelihoodRatioTest:
    """G = 2 (lnL_larger - lnL_smaller), chi-square on the difference in parameters."""

    g: float
    df: int
    p_value: float
    added: tuple = ()
    removed: tuple = ()
    n_rows: int = 0

    def as_dict(self) -> dict:
        return {"g": self.g, "df": self.df, "p_value": self.p_value}


def chi2_sf(x: float, df: int) -> float:
    """Upper tail of the chi-square distribution on df degrees of freedom: P(X >= x)."""
    from scipy.stats import chi2

    return float(chi2.sf(x, df))


def wald_p(z):
    """Two-sided p-value of a Wald z from the standard normal: 2 (1 - Phi(|z|))."""
    from scipy.stats import norm

    return 2.0 * norm.sf(np.abs(z))


class LogisticFit:
    """A fitted logistic model with its tests, computed once and read-only.

    Build it with :func:`fit_logistic`.  Every statistic is a cached property;
    nothing is recomputed when it is read again.
    """

    method = "maximum likelihood"

    def __init__(self, design: Design, params, cov, llf, converged, iterations,
                 kept, dropped_names, notices):
        self.design = design
        self._params = np.asarray(params, dtype=float)
        self._cov = np.asarray(cov, dtype=float)
        self.llf = float(llf)
        self.converged = bool(converged)
        self.iterations = int(iterations)
        self.kept = np.asarray(kept, dtype=int)
        self.dropped = tuple(dropped_names)
        self.notices = list(notices)
        self._params.setflags(write=False)
        self._cov.setflags(write=False)

    # ---- parameters -------------------------------------------------
    @property
    def params(self) -> np.ndarray:
        """Estimated coefficients (log odds), intercept first; aliased columns left out."""
        return self._params

    @property
    def cov(self) -> np.ndarray:
        """Estimated covariance of the coefficients: inverse of the observed information."""
        return self._cov

    @cached_property
    def names(self) -> list[str]:
        """Parameter names of the kept columns."""
        all_names = self.design.names
        return [all_names[i] for i in self.kept]

    @cached_property
    def std_errors(self) -> np.ndarray:
        """Standard errors: sqrt(diag(cov))."""
        return np.sqrt(np.clip(np.diag(self._cov), 0, None))

    @cached_property
    def z(self) -> np.ndarray:
        """Wald z = estimate / standard error."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return self._params / self.std_errors

    @cached_property
    def p_values(self) -> np.ndarray:
        """Two-sided p from the standard normal: 2 * (1 - Phi(|z|))."""
        return wald_p(self.z)

    @cached_property
    def odds_ratios(self) -> np.ndarray:
        """exp(estimate)."""
        with np.errstate(over="ignore"):
            return np.exp(self._params)

    @cached_property
    def odds_ratio_ci(self) -> tuple[np.ndarray, np.ndarray]:
        """95% Wald interval for the odds ratio: exp(b -/+ 1.96 SE)."""
        with np.errstate(over="ignore"):
            return (np.exp(self._params - Z95 * self.std_errors),
                    np.exp(self._params + Z95 * self.std_errors))

    # ---- model ------------------------------------------------------
    @property
    def n_used(self) -> int:
        return len(self.design.y)

    @cached_property
    def events(self) -> int:
        return int(self.design.y.sum())

    @property
    def n_params(self) -> int:
        """Number of estimated coefficients, intercept included."""
        return len(self._params)

    @cached_property
    def null_llf(self) -> float:
        """Log-likelihood of the constant-only model on the same rows (closed form)."""
        return null_log_likelihood(self.design.y)

    @property
    def deviance(self) -> float:
        """-2 lnL (for 0/1 records the saturated log-likelihood is 0)."""
        return -2.0 * self.llf

    @property
    def null_deviance(self) -> float:
        """-2 lnL of the constant-only model."""
        return -2.0 * self.null_llf

    @cached_property
    def overall(self) -> LikelihoodRatioTest:
        """The G test against the constant model: G = null deviance - deviance on k - 1 df."""
        g = max(self.null_deviance - self.deviance, 0.0)
        df = self.n_params - 1
        p = chi2_sf(g, df) if df > 0 else float("nan")
        return LikelihoodRatioTest(g, df, p, n_rows=self.n_used)

    #: Why this kind of fit has no AIC or BIC (said wherever they would be printed); None: they are given.
    AIC_NOTE: str | None = None

    @property
    def aic(self) -> float:
        """AIC = -2 lnL + 2k (NaN when :attr:`AIC_NOTE` says why it is not given)."""
        return float("nan") if self.AIC_NOTE else self.deviance + 2 * self.n_params

    @property
    def bic(self) -> float:
        """BIC = -2 lnL + k ln(n) (NaN when :attr:`AIC_NOTE` says why it is not given)."""
        return float("nan") if self.AIC_NOTE else self.deviance + self.n_params * math.log(self.n_used)

    @property
    def mcfadden_r2(self) -> float:
        """McFadden's R-squared: 1 - lnL / lnL0."""
        return 1.0 - self.llf / self.null_llf if self.null_llf != 0 else float("nan")

    @cached_property
    def events_per_parameter(self) -> float:
        """min(events, non-events) / number of non-intercept parameters."""
        rarer = min(self.events, self.n_used - self.events)
        k = self.n_params - 1
        return rarer / k if k > 0 else float("inf")

    @cached_property
    def used_X(self) -> np.ndarray:
        """The design matrix of the kept columns (the design's own array when none was left out)."""
        X = self.design.X
        if len(self.kept) == X.shape[1]:
            return X
        return np.ascontiguousarray(np.take(X, self.kept, axis=1))

    @cached_property
    def linear_predictor(self) -> np.ndarray:
        """X b on the used rows."""
        return np.dot(self.used_X, self._params)

    @cached_property
    def fitted(self) -> np.ndarray:
        """Predicted probabilities on the used rows: 1 / (1 + exp(-X b))."""
        from scipy.special import expit

        return expit(self.linear_predictor)

    # ---- terms ------------------------------------------------------
    @cached_property
    def term_index(self) -> dict[str, np.ndarray]:
        """For each predictor column, the positions of its kept parameters."""
        where = {int(c): i for i, c in enumerate(self.kept)}
        out = {}
        for block, sl in zip(self.design.blocks, self.design.slices):
            out[block.column] = np.array([where[c] for c in range(sl.start, sl.stop) if c in where], dtype=int)
        return out

    @cached_property
    def total_index(self) -> dict[str, np.ndarray]:
        """For each predictor, the positions of its kept parameters and of every interaction containing it.

        A predictor in no interaction has just its own (:attr:`term_index`);
        an interaction has its own.
        """
        from twofold.core.models.terms import total_effects

        index = self.term_index
        within = total_effects(self.design.predictors)
        return {c: np.concatenate([idx] + [index[t] for t in within.get(c, ())]) for c, idx in index.items()}

    def joint_wald(self, idx) -> float:
        """b' V^-1 b over the parameters at positions ``idx`` (NaN when V is singular there)."""
        idx = np.asarray(idx, dtype=int)
        b = self._params[idx]
        v = self._cov[np.ix_(idx, idx)]
        try:
            return float(np.dot(b, np.linalg.solve(v, b)))
        except np.linalg.LinAlgError:
            return float("nan")

    @cached_property
    def term_tests(self) -> dict[str, TermTest]:
        """Joint Wald chi-square for each predictor whose effect has two or more kept coefficients.

        A predictor that is part of an interaction is tested with the
        interaction's coefficients (its total effect), so the test does not
        depend on where the other predictor's zero lies.
        """
        from twofold.core.models.terms import total_effects

        within = total_effects(self.design.predictors)
        out = {}
        for column, idx in self.total_index.items():
            if len(idx) < 2:
                continue
            stat = self.joint_wald(idx)
            out[column] = TermTest(column, stat, len(idx), chi2_sf(stat, len(idx)), within.get(column, ()))
        return out

    @cached_property
    def odds_ratios_withheld(self) -> str | None:
        """Why no odds ratio of this fit may be read as a result, or None.

        A fit that did not settle stopped short of the maximum: its estimates
        are not the model's, so its odds ratios are not shown.
        """
        if not self.converged:
            return "not settled"
        return None

    @cached_property
    def coefficient_rows(self) -> list[dict]:
        """One record per kept coefficient (intercept first) with all its figures.

        ``label`` words the coefficient ("ward: B vs A"), ``part`` says what
        it belongs to (number, group, curve, interaction).  The odds ratio
        and its interval are NaN, with ``withheld`` saying why, for a curve's
        coefficients (they describe one curve together: read the odds ratios
        between stated values instead) and for every row of a fit that did
        not settle.
        """
        from twofold.core.models.terms import coefficient_label, coefficient_part

        lo, hi = self.odds_ratio_ci
        level_of = {}
        for block, sl in zip(self.design.blocks, self.design.slices):
            for j, c in enumerate(range(sl.start, sl.stop)):
                level_of[c] = (block, block.level_of(j))
        rows = []
        for i, c in enumerate(self.kept):
            block, level = level_of.get(int(c), (None, None))
            withheld = self.odds_ratios_withheld or ("curve" if getattr(block, "kind", "") == "spline" else None)
            shown = (float("nan"),) * 3 if withheld or block is None else (
                float(self.odds_ratios[i]), float(lo[i]), float(hi[i]))
            rows.append({
                "name": self.names[i], "column": None if block is None else block.column, "level": level,
                "reference": None if block is None else block.factor_reference,
                "label": coefficient_label(block, level), "part": coefficient_part(block),
                "estimate": float(self._params[i]), "std_error": float(self.std_errors[i]),
                "z": float(self.z[i]), "p_value": float(self.p_values[i]),
                "odds_ratio": shown[0], "or_ci_low": shown[1], "or_ci_high": shown[2],
                "withheld": withheld if block is not None else None,
            })
        return rows

    def start_for(self, design: Design) -> np.ndarray:
        """Starting values for fitting ``design`` from this fit.

        Shared parameters keep their estimates, new ones start at 0, and the
        mean effect of each removed column is folded into the intercept
        (without that, Newton can diverge on unscaled columns).
        """
        mine = dict(zip(self.names, self._params))
        names = design.names
        start = np.array([mine.get(n, 0.0) for n in names])
        target = set(names)
        shift = 0.0
        for name, value in mine.items():
            if name != "intercept" and name not in target:
                j = self.design.names.index(name)
                shift += value * float(self.design.X[:, j].mean())
        start[0] += shift
        return start


def _separation_suspects(design: Design, X: np.ndarray, y: np.ndarray, params, kept_names,
                         converged: bool, fitted: np.ndarray) -> tuple[list[str], list[str]]:
    """Predictors involved in separation: (from empty cells, from diverging estimates)."""
    empty_cells = []
    for block, sl in zip(design.blocks, design.slices):
        if block.kind != "factor":
            continue
        # Events and non-events in the reference level and each indicator level.
        values = design.X[:, sl]
        in_ref = values.sum(axis=1) == 0
        groups = [in_ref] + [values[:, j] == 1 for j in range(block.width)]
        for g in groups:
            n_g = int(g.sum())
            ev = float(y[g].sum())
            if n_g > 0 and (ev == 0 or ev == n_g):
                empty_cells.append(block.column)
                break
    diverging = []
    extreme = (fitted < 1e-8) | (fitted > 1 - 1e-8)
    if not converged or extreme.any():
        # Take a few more Newton steps: under separation the estimates keep growing
        # along the separating direction while the likelihood barely moves.
        b = np.array(params, dtype=float)
        from scipy.special import expit

        for _ in range(8):
            p = expit(np.dot(X, b))
            w = p * (1 - p)
            h = np.dot((X * w[:, None]).T, X)
            g = np.dot(X.T, y - p)
            try:
                step = np.linalg.lstsq(h, g, rcond=None)[0]
            except np.linalg.LinAlgError:
                break
            b = b + step
        moved = np.abs(b - params) > 0.5
        column_of = {}
        for block, sl in zip(design.blocks, design.slices):
            for nm in design.names[sl]:
                column_of[nm] = block.column
        for i, nm in enumerate(kept_names):
            if i > 0 and moved[i]:
                col = column_of.get(nm)
                if col and col not in diverging:
                    diverging.append(col)
    return empty_cells, diverging


#: Rows up to which complete separation is decided exactly by a linear programme.
SEPARATION_LP_ROWS = 100_000


def separates_completely(X: np.ndarray, y: np.ndarray, fitted: np.ndarray) -> bool:
    """Whether some combination of the columns puts every event above every non-event (complete separation).

    Decided as the feasibility of the linear programme s_i x_i'b >= 1 for
    every row, s_i = +1 for an event and -1 otherwise (Albert & Anderson
    1984, Biometrika 71:1: complete separation is exactly such a b, scaled);
    solved by scipy's HiGHS.  Beyond :data:`SEPARATION_LP_ROWS` rows, the fit's
    own risks decide: every record's outcome predicted within 1e-6.
    Quasi-complete separation (ties at the boundary) gives False.
    """
    if len(y) > SEPARATION_LP_ROWS:
        return bool(np.all(np.abs(fitted - y) < 1e-6))
    from scipy.optimize import linprog

    sign = np.where(y > 0.5, 1.0, -1.0)
    A = -(X * sign[:, None])
    try:
        res = linprog(np.zeros(X.shape[1]), A_ub=A, b_ub=-np.ones(len(y)), bounds=[(None, None)] * X.shape[1],
                      method="highs")
    except ValueError:
        return False
    return res.status == 0


#: A column is fitted centred and scaled when its spread or its distance from zero is beyond these.
SCALE_LOW, SCALE_HIGH = 1e-3, 1e3


def working_scale(X: np.ndarray):
    """``(centre, scale)`` of the columns after the intercept when any is far from unit scale, else None.

    Ordinary columns (spread between 1e-3 and 1e3, mean within 1e3 spreads of
    zero) are fitted as they are: Newton settles on them, and the copy a
    rescaling needs is saved.  Constant columns keep scale 1.
    """
    if X.shape[1] <= 1 or X.shape[0] == 0:
        return None
    # Judged on at most about 10,000 evenly spread rows: any centre and scale give the same estimates once
    # carried back, so they need only be of the right size, and a pass over every row is saved.
    sample = X[:: max(1, X.shape[0] // 10_000), 1:]
    # In units of each column's largest size, so squares of very large values stay finite.
    unit = unit_sizes(sample)
    centre = (sample / unit).mean(axis=0) * unit
    spread = (sample / unit).std(axis=0) * unit
    spread = np.where(spread > 0, spread, 1.0)
    if np.all((spread >= SCALE_LOW) & (spread <= SCALE_HIGH) & (np.abs(centre) <= SCALE_HIGH * spread)):
        return None
    return centre, spread


def scaled_columns(X: np.ndarray, centre: np.ndarray, spread: np.ndarray) -> np.ndarray:
    """The intercept and (x - centre) / spread for every other column."""
    Z = np.empty_like(X, dtype=float)
    Z[:, 0] = X[:, 0]
    np.subtract(X[:, 1:], centre, out=Z[:, 1:])
    Z[:, 1:] /= spread
    return Z


def to_working(b: np.ndarray, centre: np.ndarray, spread: np.ndarray) -> np.ndarray:
    """Coefficients on the original columns as coefficients on the scaled ones: a_j = b_j s_j, a_0 = b_0 + sum b_j c_j."""
    b = np.asarray(b, dtype=float)
    a = np.empty_like(b)
    a[1:] = b[1:] * spread
    a[0] = b[0] + float(np.dot(b[1:], centre))
    return a


def from_working(a: np.ndarray, cov_a: np.ndarray, centre: np.ndarray, spread: np.ndarray):
    """Coefficients and covariance back on the original columns: b = T a, cov_b = T cov_a T'.

    T maps the scaled fit to the original columns: b_j = a_j / s_j and
    b_0 = a_0 - sum a_j c_j / s_j.
    """
    k = len(a)
    T = np.zeros((k, k))
    T[0, 0] = 1.0
    T[0, 1:] = -centre / spread
    T[np.arange(1, k), np.arange(1, k)] = 1.0 / spread
    return np.dot(T, a), np.linalg.multi_dot([T, cov_a, T.T])


def fit_logistic(design: Design, start=None, maxiter: int = 35, dropped: list[int] | None = None,
                 watch_warnings: bool = True, stop=None) -> LogisticFit:
    """Fit a logistic model by maximum likelihood (statsmodels ``Logit``, Newton).

    Parameters
    ----------
    design : Design
        Intercept and predictors on the rows to use.
    start : array_like, optional
        Starting values for all columns of ``design.X`` (e.g. from
        :meth:`LogisticFit.start_for`); default: the intercept at the logit of
        the event rate, slopes at 0.
    maxiter : int
        Newton iterations at most.
    dropped : list of int, optional
        Aliased columns when already known for this design (skips the rank
        check); default: found by :func:`~twofold.core.models.design.aliased_columns`.
    watch_warnings : bool
        Read statsmodels' warnings (its word on separation) inside a
        ``warnings.catch_warnings`` of its own.  False for fits run on
        several threads at once, whose caller watches the warnings around
        all of them (the warning filters are one per process, so entries
        and exits on two threads would restore each other's).
    stop : callable, optional
        Asked after each Newton step; true gives the fit up (:class:`FitStopped`).

    Returns
    -------
    LogisticFit

    Raises
    ------
    ModelError
        No rows, or only one outcome value among the rows used.
    """
    X_all, y = design.X, design.y
    n = len(y)
    if n == 0:
        raise ModelError("No rows are complete for the chosen outcome and predictors; "
                         "untick predictors with many missing values or check the data.")
    events = float(y.sum())
    if events == 0 or events == n:
        which = "events" if events == 0 else "non-events"
        raise ModelError(f"The {n} rows used contain no {which}, so no model can be fitted; "
                         "check the outcome, the event value and the rows used.")
    notices: list[Notice] = []
    if dropped is None:
        dropped = aliased_columns(X_all)
    names = design.names
    kept = [j for j in range(X_all.shape[1]) if j not in set(dropped)]
    if dropped:
        shown = ", ".join(names[j] for j in dropped)
        notices.append(Notice(
            "collinear",
            f"Left out {shown}: it is constant on the rows used or exactly determined by the other predictors, "
            "so its effect cannot be separated from theirs.",
            subjects=tuple(dict.fromkeys(_column_of(design, j) for j in dropped)),
        ))
    X = X_all if not dropped else np.ascontiguousarray(X_all[:, kept])
    if start is None:
        b0 = np.zeros(len(kept))
        rate = events / n
        b0[0] = math.log(rate / (1 - rate))
    else:
        b0 = np.asarray(start, dtype=float)
        if len(b0) == X_all.shape[1]:
            b0 = b0[kept]

    from statsmodels.discrete.discrete_model import Logit

    # Columns far from unit scale (a lab value in the wrong unit, money in cents, dates as yyyymmdd) are
    # fitted centred and scaled, then the estimates are carried back: Newton's steps then settle.
    scaling = working_scale(X)
    Xw = X if scaling is None else scaled_columns(X, *scaling)
    start_w = b0 if scaling is None else to_working(b0, *scaling)
    import contextlib

    watch = warnings.catch_warnings(record=True) if watch_warnings else contextlib.nullcontext([])
    with one_blas_thread(), watch as caught, np.errstate(all="ignore"):
        if watch_warnings:
            warnings.simplefilter("always")
        # hasconst=False skips statsmodels' constant search (a pass over the data); nothing we read depends on it.
        model = Logit(y, Xw, check_rank=False, hasconst=False)
        try:
            res = model.fit(method="newton", start_params=start_w, maxiter=maxiter, disp=0,
                            warn_convergence=False, callback=None if stop is None else _stopper(stop))
            params = np.asarray(res.params, dtype=float)
            cov = np.asarray(res.normalized_cov_params, dtype=float)
            converged = bool(res.mle_retvals.get("converged", False))
            iterations = int(res.mle_retvals.get("iterations", 0))
            llf = float(res.llf)
        except np.linalg.LinAlgError:
            # A singular information matrix at some step: typical of separation.
            params, converged, iterations = start_w, False, 0
            from scipy.special import expit

            p = expit(np.dot(Xw, params))
            llf = float(np.sum(y * np.log(np.clip(p, 1e-300, 1)) + (1 - y) * np.log(np.clip(1 - p, 1e-300, 1))))
            h = np.dot((Xw * (p * (1 - p))[:, None]).T, Xw)
            cov = np.linalg.pinv(h)
    if scaling is not None:
        params, cov = from_working(params, cov, *scaling)
    warned_sep = any("separation" in str(w.message).lower() for w in caught)
    bad_cov = not np.all(np.isfinite(cov)) or np.any(np.diag(cov) < 0)
    if bad_cov:
        cov = np.where(np.isfinite(cov), cov, np.nan)

    from scipy.special import expit

    fitted = expit(np.dot(X, params))
    empty, diverging = _separation_suspects(design, X, y, params, [names[j] for j in kept], converged, fitted)
    suspects = list(dict.fromkeys(empty + diverging))
    complete_sep = (warned_sep or bool(suspects)) and separates_completely(X, y, fitted)
    if complete_sep or suspects:
        kind = "completely" if complete_sep else "almost completely"
        who = ", ".join(f"'{c}'" for c in suspects) if suspects else "the predictors together"
        notices.append(Notice(
            "separation",
            f"{who} {'separates' if len(suspects) == 1 else 'separate'} the outcome {kind} "
            "(some group has only events or only non-events), so "
            + ("its odds ratio runs" if len(suspects) == 1 else "their odds ratios run")
            + " off towards 0 or infinity and the Wald tests and intervals cannot be trusted; a penalised "
            "(Firth) fit or merging groups is the usual remedy.",
            subjects=tuple(suspects),
        ))
    if not converged:
        notices.append(Notice(
            "not_converged",
            f"The fit did not settle after {iterations} iterations, so the estimates may be off; "
            "this usually comes with separation or with predictors on very different scales.",
        ))
    fit = LogisticFit(design, params, cov, llf, converged, iterations, kept,
                      [names[j] for j in dropped], notices)
    epp = fit.events_per_parameter
    if fit.n_params > 1 and epp < EVENTS_PER_PARAMETER_WARNING:
        fit.notices.append(Notice(
            "few_events",
            f"Only {epp:.1f} of the rarer outcome per estimated coefficient (fewer than 10, a rule of thumb "
            "from Peduzzi et al. 1996): estimates may be unstable and odds ratios exaggerated; "
            "consider fewer predictors.",
        ))
    return fit


#: A drop-one refit has converged when its Newton decrement g' H^-1 g is below this: the
#: log-likelihood is then within about half of it of the maximum, far below any G shown.
REFIT_DECREMENT_TOL = 1e-11

#: Chord iterations (fixed Hessian) allowed before a refit is handed to full Newton.
_CHORD_MAX_ITER = 30

#: Each chord iteration must shrink the decrement at least this much, else full Newton takes over.
_CHORD_MIN_SHRINK = 0.25

#: Elements of one n x m batch of linear predictors (bounds memory on very large files).
_BATCH_ELEMENTS = 2_000_000


@dataclass(frozen=True)
class RefitLikelihood:
    """The maximised log-likelihood of one sub-model fitted for a likelihood-ratio test.

    ``llf`` is NaN when no refit was possible (``method == "failed"``);
    ``converged`` is False when the last refit stopped without meeting its
    tolerance (typically separation in the sub-model), so ``llf`` is then
    only close to the supremum.
    """

    llf: float
    converged: bool
    iterations: int
    method: str  # "chord", "newton" or "failed"


def log_likelihood(y: np.ndarray, eta: np.ndarray) -> float:
    """Bernoulli log-likelihood on the logit scale: sum(y eta - log(1 + e^eta)).

    log(1 + e^eta) as max(eta, 0) + log1p(e^-|eta|): the same to rounding, and about twice as fast as
    ``np.logaddexp`` on 100,000 values (which every pooled likelihood-ratio test calls on each copy).
    """
    return float(np.dot(y, eta) - np.sum(np.maximum(eta, 0.0) + np.log1p(np.exp(-np.abs(eta)))))


def _newton_refit(X, y, start, maxiter, tol) -> RefitLikelihood:
    """Maximised log-likelihood of a sub-model by full Newton, for likelihood-ratio tests only.

    statsmodels ``Logit`` (Newton) on a design already known to be full rank,
    without the bookkeeping a displayed fit needs; the stopping rule is on
    the largest step, tight enough that the log-likelihood is exact to
    round-off.  A singular information matrix (a sub-model too small for its
    rows, or separated) gives ``method="failed"`` rather than an exception.
    It leaves the warning filters alone: ``warnings.catch_warnings`` swaps
    process-wide state, so threads entering and leaving it at once restore
    each other's filters; the threaded caller sets the filter once around
    all its threads instead.
    """
    from statsmodels.discrete.discrete_model import Logit

    with np.errstate(all="ignore"):
        try:
            res = Logit(y, X, check_rank=False, hasconst=False).fit(
                method="newton", start_params=start, maxiter=maxiter, tol=tol, disp=0,
                warn_convergence=False, full_output=True, skip_hessian=True)  # no covariance needed
        except (np.linalg.LinAlgError, ValueError, FloatingPointError):
            # ValueError covers statsmodels' PerfectSeparationError in older releases.
            return RefitLikelihood(float("nan"), False, 0, "failed")
        params = np.asarray(res.params, dtype=float)
        llf = log_likelihood(y, np.dot(X, params)) if np.all(np.isfinite(params)) else float("nan")
    converged = bool(res.mle_retvals.get("converged", False))
    if not math.isfinite(llf):
        return RefitLikelihood(float("nan"), False, int(res.mle_retvals.get("iterations", 0)), "failed")
    return RefitLikelihood(llf, converged, int(res.mle_retvals.get("iterations", 0)), "newton")


def _chord_refits(X: np.ndarray, y: np.ndarray, info: np.ndarray, drops: list, starts: list) -> list:
    """Chord-Newton refits of several sub-models at once; None where full Newton must take over.

    Each sub-model sets the parameters ``drops[j]`` to zero.  Its iteration
    is ``b_K += H_KK^-1 X_K'(y - p)`` with ``H_KK`` the kept block of the full
    fit's information, factorised once: a step costs one gradient, never a
    new X'WX.  All sub-models share each pass over ``X`` (one matrix product
    for their linear predictors, one for their gradients).  Convergence is
    linear with the rate at which the information changes between the full
    and the reduced estimate, small when the dropped effect is; a sub-model
    whose decrement does not shrink fast enough is returned as None.
    """
    from scipy.linalg import cho_factor, cho_solve
    from scipy.special import expit

    k = X.shape[1]
    m = len(drops)
    out: list = [None] * m
    keeps, factors = [], []
    B = np.zeros((m, k))  # one row of coefficients per sub-model (dropped entries stay 0)
    active = []
    for j, drop in enumerate(drops):
        keep = np.setdiff1d(np.arange(k), drop)
        keeps.append(keep)
        try:
            factors.append(cho_factor(info[np.ix_(keep, keep)], lower=True, check_finite=False))
        except np.linalg.LinAlgError:
            factors.append(None)
            continue
        B[j, keep] = starts[j]
        active.append(j)
    previous = {j: math.inf for j in active}
    XT = X.T
    for iteration in range(_CHORD_MAX_ITER + 1):
        if not active:
            break
        # (a x k) @ (k x n): each sub-model's linear predictor is one contiguous row.
        E = np.dot(B[active], XT)
        R = expit(E)
        np.subtract(y, R, out=R)
        G = np.dot(R, X)  # (a x n) @ (n x k): every gradient in one pass
        still = []
        for row, j in enumerate(active):
            keep = keeps[j]
            g = G[row, keep]
            step = cho_solve(factors[j], g, check_finite=False)
            dec = float(np.dot(g, step))
            if not math.isfinite(dec):
                continue  # left as None: full Newton takes over
            if dec <= REFIT_DECREMENT_TOL:
                out[j] = RefitLikelihood(log_likelihood(y, E[row]), True, iteration, "chord")
                continue
            if dec > _CHORD_MIN_SHRINK * previous[j] or iteration == _CHORD_MAX_ITER:
                continue
            B[j, keep] += step
            previous[j] = dec
            still.append(j)
        active = still
    return out


def drop_refits(fit: "LogisticFit", drops: list) -> list:
    """Maximised log-likelihood of ``fit``'s model without each parameter set in ``drops``.

    Parameters
    ----------
    fit : LogisticFit
        A maximum-likelihood fit.
    drops : list of int arrays
        Positions (among the kept parameters) to leave out, one array per sub-model.

    Returns
    -------
    list of RefitLikelihood
        In the order of ``drops``.

    Notes
    -----
    Each refit starts from the one-step constrained estimate
    ``b_K + H_KK^-1 H_KD b_D`` (:func:`reduced_start`) and iterates with the
    full fit's information held fixed (:func:`_chord_refits`), which needs
    only a gradient per step; one that does not converge quickly is finished
    by full Newton (:func:`_newton_refit`).  Either way the result is
    the maximum to a tight tolerance, so G is exact.  The work is split
    between two threads.
    """
    from concurrent.futures import ThreadPoolExecutor

    drops = [np.asarray(d, dtype=int) for d in drops]
    if not drops:
        return []
    X = fit.used_X
    y = fit.design.y
    k = fit.n_params
    b = np.asarray(fit.params, dtype=float)
    usable = np.all(np.isfinite(b)) and np.all(np.isfinite(fit.cov))
    info = None
    if usable:
        try:
            info = np.linalg.inv(fit.cov)
            info = 0.5 * (info + info.T)
        except np.linalg.LinAlgError:
            info = None
    starts = [reduced_start(fit, d, info=info) for d in drops]

    def newton(j):
        keep = np.setdiff1d(np.arange(k), drops[j])
        Xr = np.take(X, keep, axis=1)
        first = _newton_refit(Xr, y, starts[j], 50, 1e-10)
        if first.converged:
            return first
        # A start taken from a full fit that ran off (separation) can be far off:
        # try once more from the event rate, and keep the better maximum.
        plain = np.zeros(len(keep))
        rate = float(np.clip(y.mean(), 1e-12, 1 - 1e-12))
        if 0 in keep:
            plain[0] = math.log(rate / (1 - rate))
        second = _newton_refit(Xr, y, plain, 50, 1e-10)
        if second.method == "failed":
            return first
        if first.method == "failed" or second.converged or second.llf > first.llf:
            return second
        return first

    def run(indices):
        out = {}
        if info is not None:
            per_batch = max(1, _BATCH_ELEMENTS // max(len(y), 1))
            for at in range(0, len(indices), per_batch):
                chunk = indices[at:at + per_batch]
                with np.errstate(all="ignore"):
                    done = _chord_refits(X, y, info, [drops[j] for j in chunk], [starts[j] for j in chunk])
                out.update(zip(chunk, done))
        for j in indices:
            if out.get(j) is None:
                out[j] = newton(j)
        return out

    everything = list(range(len(drops)))
    # One warning filter around both threads (see _newton_refit).
    with one_blas_thread(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if len(drops) < 2:
            results = run(everything)
        else:
            with ThreadPoolExecutor(max_workers=2) as pool:
                results = {}
                for part in pool.map(run, [everything[0::2], everything[1::2]]):
                    results.update(part)
    return [results[j] for j in everything]


def reduced_start(fit: "LogisticFit", drop: np.ndarray, info: np.ndarray | None = None) -> np.ndarray:
    """Starting values for the fit without parameters ``drop``: the one-step constrained estimate.

    b_K + H_KK^-1 H_KD b_D, with H the full fit's information matrix: the
    maximum of the full log-likelihood's quadratic approximation with
    b_D = 0, so Newton (or the chord iteration) starts a small step away.
    ``info`` is H when already at hand (else the inverse of ``fit.cov``).
    """
    drop = np.asarray(drop, dtype=int)
    keep = np.setdiff1d(np.arange(fit.n_params), drop)
    b = np.asarray(fit.params, dtype=float)
    if info is None and np.all(np.isfinite(fit.cov)):
        try:
            info = np.linalg.inv(fit.cov)
        except np.linalg.LinAlgError:
            info = None
    if info is None or not np.all(np.isfinite(b)):
        return np.where(np.isfinite(b[keep]), b[keep], 0.0)
    try:
        return b[keep] + np.linalg.solve(info[np.ix_(keep, keep)], np.dot(info[np.ix_(keep, drop)], b[drop]))
    except np.linalg.LinAlgError:
        return b[keep].copy()


def _column_of(design: Design, j: int) -> str | None:
    for block, sl in zip(design.blocks, design.slices):
        if sl.start <= j < sl.stop:
            return block.column
    return None


def nested_test(smaller: LogisticFit, larger: LogisticFit) -> LikelihoodRatioTest:
    """The likelihood-ratio test of a smaller model nested in a larger one.

    G = 2 (lnL_larger - lnL_smaller) on df = difference in the number of
    coefficients (a k-level factor counts k - 1).  Both must be fitted on the
    same rows.

    Raises
    ------
    ModelError
        When the smaller model is not nested in the larger, or the rows differ.
    """
    small_cols = set(smaller.design.predictors)
    large_cols = set(larger.design.predictors)
    if not small_cols <= large_cols:
        extra = ", ".join(sorted(small_cols - large_cols))
        raise ModelError(
            f"The smaller model is not nested in the larger one: it has {extra}, which the larger model lacks; "
            "compare them by AIC instead, or add those predictors to the larger model."
        )
    for col in small_cols:
        a = smaller.design.blocks[smaller.design.predictors.index(col)]
        b = larger.design.blocks[larger.design.predictors.index(col)]
        # A straight line is nested in a spline of the same predictor (its first column).
        if a.kind != b.kind and not (a.kind == "numeric" and b.kind == "spline"):
            raise ModelError(f"'{col}' is coded differently in the two models, so they are not nested; "
                             "use the same role for it in both.")
    if len(smaller.design.rows) != len(larger.design.rows) or not np.array_equal(smaller.design.rows, larger.design.rows):
        raise ModelError("The two models were fitted on different rows, so the likelihood-ratio test is not valid; "
                         "refit the smaller model on the rows of the larger one.")
    added = tuple(c for c in larger.design.predictors if c not in small_cols)
    if hasattr(larger, "lr_test_against"):
        # Penalised fits: the penalised likelihood-ratio test of the parameters the
        # smaller model lacks (added terms, or a spline's non-linear part).
        return larger.lr_test_against(smaller, added)
    df = larger.n_params - smaller.n_params
    g = 2.0 * (larger.llf - smaller.llf)
    # Rounding can leave a tiny negative G when nothing was added.
    g = max(g, 0.0) if g > -1e-6 else g
    p = chi2_sf(g, df) if df > 0 else float("nan")
    return LikelihoodRatioTest(g, df, p, added=added, n_rows=larger.n_used)


def warm_up() -> None:
    """Import the fitting library and touch the distributions once, so the first fit of a session is quick."""
    import statsmodels.discrete.discrete_model  # noqa: F401

    import twofold.core.assessing.assessment  # noqa: F401
    import twofold.core.workspace  # noqa: F401

    wald_p(0.0)
    chi2_sf(1.0, 1)
