"""Firth's penalised likelihood for logistic regression, and FLIC.

Firth (1993, Biometrika 80:27) removes the first-order bias of maximum
likelihood by maximising the penalised log-likelihood::

    pl(b) = l(b) + 0.5 * log det I(b),      I(b) = X' W X,  W = diag(p(1 - p))

Its score is the modified score of Heinze & Schemper (2002, Stat Med
21:2409)::

    U*(b) = X' (y - p + h (0.5 - p))

with ``h`` the diagonal of the hat matrix ``W^(1/2) X (X'WX)^-1 X' W^(1/2)``.
The estimates are finite even when a predictor separates events from
non-events, which is why the method is offered for small samples and rare
events.

Everything here works on plain numpy arrays: ``X`` with the intercept (ones)
as its first column, ``y`` a 0/1 float outcome.

Holding coefficients fixed (``fixed=``) keeps the penalty of the *full*
model, i.e. ``I(b)`` is always built from every column of ``X``.  This is the
construction behind the penalised likelihood-ratio test and the profile
penalised-likelihood interval of Heinze & Schemper (2002).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from twofold.core.errors import ModelError, Notice
from twofold.core.models.profile import (
    ProfileInterval,
    check_column,
    check_full_rank,
    check_level,
    check_xy,
    column_scale,
    frozen_array,
    interval_notices,
    json_value,
    profile_loglik,
    profile_interval,
)

__all__ = [
    "FirthResult",
    "FirthLRTest",
    "FlicResult",
    "firth_fit",
    "firth_lr_test",
    "firth_profile_ci",
    "flic",
]

_MAX_HALVINGS = 40


@dataclass(frozen=True, eq=False)
class FirthResult:
    """A Firth (penalised maximum-likelihood) logistic fit.

    Attributes
    ----------
    params : ndarray, shape (k,)
        Coefficients on the log-odds scale (fixed ones at their given value).
    cov_params : ndarray, shape (k, k)
        Inverse Fisher information ``(X'WX)^-1`` at the estimate; with fixed
        coefficients, the inverse of the free block, zeros for fixed ones.
    bse : ndarray, shape (k,)
        Standard errors, ``sqrt(diag(cov_params))`` (0 for fixed ones).
    penalized_llf : float
        ``l(b) + 0.5 log det I(b)`` at the estimate.
    llf : float
        The ordinary log-likelihood ``l(b)`` at the estimate.
    converged : bool
        Whether the last proposed step was below the tolerance.
    iterations : int
        Number of steps taken.
    max_score : float
        Largest absolute modified score of the free coefficients at the end.
    fixed : tuple of int
        Indices of coefficients that were held fixed.
    """

    params: np.ndarray
    cov_params: np.ndarray
    bse: np.ndarray
    penalized_llf: float
    llf: float
    converged: bool
    iterations: int
    max_score: float
    fixed: tuple[int, ...] = ()

    def as_dict(self) -> dict:
        """JSON-ready dictionary."""
        return {
            "params": json_value(self.params),
            "cov_params": json_value(self.cov_params),
            "bse": json_value(self.bse),
            "penalized_llf": json_value(self.penalized_llf),
            "llf": json_value(self.llf),
            "converged": self.converged,
            "iterations": self.iterations,
            "max_score": json_value(self.max_score),
            "fixed": list(self.fixed),
        }


@dataclass(frozen=True, eq=False)
class FirthLRTest:
    """Penalised likelihood-ratio test that some coefficients are zero.

    Attributes
    ----------
    statistic : float
        ``2 * (pl_full - pl_restricted)``.
    df : int
        Number of coefficients set to zero.
    p_value : float
        Upper chi-square tail probability on ``df`` degrees of freedom.
    dropped : tuple of int
        Indices of the coefficients set to zero.
    penalized_llf_full, penalized_llf_restricted : float
        The two penalised log-likelihoods.
    converged : bool
        Whether both fits converged.
    notices : tuple of Notice
        Plain-language remarks, e.g. a fit that did not converge.
    """

    statistic: float
    df: int
    p_value: float
    dropped: tuple[int, ...]
    penalized_llf_full: float
    penalized_llf_restricted: float
    converged: bool
    notices: tuple[Notice, ...] = ()

    def as_dict(self) -> dict:
        """JSON-ready dictionary."""
        return {
            "statistic": json_value(self.statistic),
            "df": self.df,
            "p_value": json_value(self.p_value),
            "dropped": list(self.dropped),
            "penalized_llf_full": json_value(self.penalized_llf_full),
            "penalized_llf_restricted": json_value(self.penalized_llf_restricted),
            "converged": self.converged,
            "notices": [n.as_dict() for n in self.notices],
        }


@dataclass(frozen=True, eq=False)
class FlicResult:
    """Firth logistic regression with intercept correction (FLIC).

    Attributes
    ----------
    params : ndarray, shape (k,)
        Firth slopes with the intercept re-estimated by maximum likelihood.
    predicted : ndarray, shape (n,)
        Predicted risks; their mean equals the observed event rate.
    firth : FirthResult
        The Firth fit the slopes come from (its standard errors apply to the
        slopes; its intercept is the uncorrected one).
    """

    params: np.ndarray
    predicted: np.ndarray
    firth: FirthResult

    def as_dict(self) -> dict:
        """JSON-ready dictionary."""
        return {
            "params": json_value(self.params),
            "predicted": json_value(self.predicted),
            "firth": self.firth.as_dict(),
        }


# ---------------------------------------------------------------------------
# core computation
# ---------------------------------------------------------------------------


class _Point:
    """Everything the iteration needs at one coefficient vector."""

    __slots__ = ("beta", "p", "llf", "logdet", "pl", "h", "R", "score")

    def __init__(self, X: np.ndarray, y: np.ndarray, offset: np.ndarray, beta: np.ndarray):
        eta = np.dot(X, beta) + offset
        p = expit(eta)
        w = p * expit(-eta)  # p(1 - p) without cancellation near 0 or 1
        A = X * np.sqrt(w)[:, None]
        R, h = _factor_and_hat(A)
        diag = np.abs(np.diag(R))
        with np.errstate(divide="ignore"):
            logdet = 2.0 * float(np.sum(np.log(diag)))
        self.beta = beta
        self.p = p
        self.llf = profile_loglik(y, eta)
        self.logdet = logdet
        self.pl = self.llf + 0.5 * logdet
        self.h = h
        self.R = R
        self.score = np.dot(X.T, y - p + self.h * (0.5 - p))


def _factor_and_hat(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Upper factor ``R`` with ``R'R = A'A`` and the hat diagonal of ``A``.

    ``h_i = a_i' (A'A)^-1 a_i`` is the row-wise sum of squares of
    ``A R^-1``; only k x k matrices are factorised, never the n x n hat
    matrix.  The Cholesky factor of the small matrix is several times faster
    than a QR decomposition of the tall one; QR is the fall-back when the
    information is numerically singular.
    """
    from scipy.linalg import solve_triangular

    try:
        L = np.linalg.cholesky(np.dot(A.T, A))
    except np.linalg.LinAlgError:
        Q, R = np.linalg.qr(A)
        return R, np.einsum("ij,ij->i", Q, Q)
    B = solve_triangular(L, A.T, lower=True, check_finite=False)
    return L.T, np.einsum("ij,ij->j", B, B)


def _free_information(R: np.ndarray, free: np.ndarray) -> np.ndarray:
    """The free-coefficient block of X'WX = R'R."""
    Rf = R[:, free]
    return np.dot(Rf.T, Rf)


def _solve_spd(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    try:
        L = np.linalg.cholesky(A)
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(A, b, rcond=None)[0]
    return np.linalg.solve(L.T, np.linalg.solve(L, b))


def _firth_core(
    X: np.ndarray,
    y: np.ndarray,
    offset: np.ndarray,
    fixed: dict[int, float],
    start: np.ndarray | None,
    maxiter: int,
    tol: float,
    max_step: float = 5.0,
) -> FirthResult:
    k = X.shape[1]
    fixed_idx = np.array(sorted(fixed), dtype=int)
    free = np.setdiff1d(np.arange(k), fixed_idx)
    beta = np.zeros(k) if start is None else np.array(start, dtype=float, copy=True)
    if fixed_idx.size:
        beta[fixed_idx] = [fixed[i] for i in fixed_idx]

    point = _Point(X, y, offset, beta)
    if start is not None and free.size:
        # Poor starting values (steps are capped, so far-off values cost many
        # iterations): keep them only if they beat zeros for the free part.
        zero = beta.copy()
        zero[free] = 0.0
        at_zero = _Point(X, y, offset, zero)
        if not point.pl >= at_zero.pl:
            point = at_zero
    converged = free.size == 0
    iterations = 0
    while not converged and iterations < maxiter:
        # Fisher-scoring step on the modified score: I_ff^-1 U*_f.
        info = _free_information(point.R, free)
        delta = _solve_spd(info, point.score[free])
        size = float(np.max(np.abs(delta)))
        if not (math.isfinite(size) and math.isfinite(point.pl)):
            break
        if size <= tol:
            # Take the last (tiny) step too: the iteration converges linearly,
            # so this roughly halves the remaining error for free.
            cand = point.beta.copy()
            cand[free] += delta
            new = _Point(X, y, offset, cand)
            if math.isfinite(new.pl) and new.pl >= point.pl - 1e-12 * (1.0 + abs(point.pl)):
                point = new
                iterations += 1
            converged = True
            break
        if size > max_step:  # cap any single coefficient's move
            delta *= max_step / size
        # Halve the step until the penalised log-likelihood does not fall
        # (a little slack for round-off near the maximum).
        slack = 1e-12 * (1.0 + abs(point.pl))
        t = 1.0
        for _half in range(_MAX_HALVINGS):
            cand = point.beta.copy()
            cand[free] += t * delta
            new = _Point(X, y, offset, cand)
            if math.isfinite(new.pl) and new.pl >= point.pl - slack:
                break
            t *= 0.5
        else:
            break  # no uphill step left: stop, not converged
        point = new
        iterations += 1

    # Covariance: inverse of the (free block of the) Fisher information.
    cov = np.zeros((k, k))
    if free.size:
        info = _free_information(point.R, free)
        try:
            cov_ff = np.linalg.inv(info)
        except np.linalg.LinAlgError:
            cov_ff = np.full((free.size, free.size), np.nan)
        cov[np.ix_(free, free)] = cov_ff
    cov = 0.5 * (cov + cov.T)
    with np.errstate(invalid="ignore"):
        bse = np.sqrt(np.diag(cov))
    max_score = float(np.max(np.abs(point.score[free]))) if free.size else 0.0
    return FirthResult(
        params=frozen_array(point.beta),
        cov_params=frozen_array(cov),
        bse=frozen_array(bse),
        penalized_llf=float(point.pl),
        llf=float(point.llf),
        converged=bool(converged),
        iterations=iterations,
        max_score=max_score,
        fixed=tuple(int(i) for i in fixed_idx),
    )


def _check_fixed(fixed, k: int) -> dict[int, float]:
    if fixed is None:
        return {}
    if not isinstance(fixed, Mapping):
        raise ModelError(
            "Fixed coefficients must be given as a mapping from column index to value, "
            "for example {1: 0.0}."
        )
    out = {}
    for key, value in fixed.items():
        if isinstance(key, (bool, np.bool_)) or not isinstance(key, (int, np.integer)):
            raise ModelError(
                f"The fixed-coefficient key {key!r} is not a column index; use whole numbers."
            )
        if not 0 <= int(key) < k:
            raise ModelError(
                f"Fixed column {int(key)} is outside the design matrix, which has "
                f"columns 0 to {k - 1}; pick one of those."
            )
        value = float(value)
        if not math.isfinite(value):
            raise ModelError(
                f"The fixed value for column {int(key)} is not a finite number; "
                "give a finite log odds value."
            )
        out[int(key)] = value
    return out


def _check_inputs(X, y, offset, start):
    X, y = check_xy(X, y)
    check_full_rank(X)
    n, k = X.shape
    if offset is None:
        offset = np.zeros(n)
    else:
        offset = np.asarray(offset, dtype=float)
        if offset.shape != (n,) or not np.all(np.isfinite(offset)):
            raise ModelError(
                f"The offset must hold {n} finite numbers, one per row; check its length "
                "and missing values."
            )
    if start is not None:
        start = np.asarray(start, dtype=float).ravel()
        if start.shape != (k,) or not np.all(np.isfinite(start)):
            raise ModelError(
                f"The starting values must be {k} finite numbers, one per design column."
            )
    return X, y, offset, start


def firth_fit(
    X,
    y,
    start=None,
    maxiter: int = 100,
    tol: float = 1e-8,
    offset=None,
    fixed: Mapping[int, float] | None = None,
) -> FirthResult:
    """Fit a logistic model by Firth's penalised maximum likelihood.

    Maximises ``pl(b) = l(b) + 0.5 log det(X'WX)``; the estimate solves
    ``U*(b) = X'(y - p + h(0.5 - p)) = 0`` (Firth 1993; Heinze & Schemper 2002).

    Parameters
    ----------
    X : array_like, shape (n, k)
        Design matrix, first column the intercept (ones), full column rank.
    y : array_like, shape (n,)
        Outcome coded 0/1.
    start : array_like, shape (k,), optional
        Starting values (zeros by default); fixed entries are overwritten.
    maxiter : int, optional
        Maximum number of steps.
    tol : float, optional
        Convergence when the largest proposed step is at most ``tol``.
    offset : array_like, shape (n,), optional
        Known term added to the linear predictor.
    fixed : mapping of int to float, optional
        Coefficients held at the given values; the penalty still uses the
        information of all columns.

    Returns
    -------
    FirthResult
        Estimates, covariance (inverse Fisher information), standard errors,
        penalised and ordinary log-likelihood, convergence information.

    Notes
    -----
    Each step is ``I_ff^-1 U*_f`` over the free coefficients, capped at 5 on
    any coefficient and halved until the penalised log-likelihood does not
    fall.  The hat diagonal is the row-wise sum of squares of
    ``W^(1/2) X R^-1`` with ``R`` the Cholesky factor of ``X'WX`` (QR of
    ``W^(1/2) X`` as a fall-back), never an n x n matrix.
    """
    X, y, offset, start = _check_inputs(X, y, offset, start)
    fixed = _check_fixed(fixed, X.shape[1])
    if int(maxiter) < 0 or not float(tol) > 0:
        raise ModelError(
            "The iteration limit must be zero or more and the tolerance above zero; "
            "use for example maxiter=100, tol=1e-8."
        )
    return _firth_core(X, y, offset, fixed, start, int(maxiter), float(tol))


def firth_lr_test(
    X,
    y,
    drop_columns: Sequence[int],
    full: FirthResult | None = None,
    maxiter: int = 100,
    tol: float = 1e-8,
) -> FirthLRTest:
    """Penalised likelihood-ratio test that the given coefficients are zero.

    ``LR = 2 * (pl(b_full) - pl(b_restricted))`` compared with chi-square on
    ``len(drop_columns)`` degrees of freedom, where the restricted fit holds
    the dropped coefficients at 0 but keeps the full model's penalty
    (Heinze & Schemper 2002).

    Parameters
    ----------
    X, y : array_like
        Design matrix (intercept first) and 0/1 outcome.
    drop_columns : sequence of int
        Indices of the coefficients to test.
    full : FirthResult, optional
        An existing unrestricted Firth fit on the same data, to save a re-fit.
    maxiter, tol : optional
        Passed to the fits.

    Returns
    -------
    FirthLRTest
    """
    from scipy.stats import chi2

    X, y, offset, _ = _check_inputs(X, y, None, None)
    k = X.shape[1]
    try:
        drop = sorted({int(check_column(X, c)) for c in drop_columns})
    except TypeError:
        raise ModelError(
            "The columns to test must be a list of column indices, for example [1, 2]."
        ) from None
    if not drop:
        raise ModelError("No columns were given to test; name at least one column index.")
    if full is None:
        full = _firth_core(X, y, offset, {}, None, maxiter, tol)
    elif full.params.shape != (k,) or full.fixed:
        raise ModelError(
            "The full fit passed in does not match this design matrix; "
            "pass an unrestricted Firth fit of the same columns."
        )
    start = np.array(full.params, dtype=float)
    restricted = _firth_core(X, y, offset, {c: 0.0 for c in drop}, start, maxiter, tol)
    stat = 2.0 * (full.penalized_llf - restricted.penalized_llf)
    # The restricted maximum cannot exceed the full one; a tiny negative value
    # is round-off.
    stat = max(stat, 0.0)
    df = len(drop)
    converged = full.converged and restricted.converged
    notices = ()
    if not converged:
        notices = (
            Notice(
                "not_converged",
                "One of the two penalised fits behind this test did not converge, so "
                "the test statistic may be inaccurate.",
            ),
        )
    return FirthLRTest(
        statistic=float(stat),
        df=df,
        p_value=float(chi2.sf(stat, df)),
        dropped=tuple(drop),
        penalized_llf_full=full.penalized_llf,
        penalized_llf_restricted=restricted.penalized_llf,
        converged=bool(converged),
        notices=notices,
    )


def firth_profile_ci(
    X,
    y,
    column: int,
    level: float = 0.95,
    full: FirthResult | None = None,
    name: str | None = None,
) -> ProfileInterval:
    """Profile penalised-likelihood confidence interval for one coefficient.

    The ends are the values ``b`` with
    ``2 * (pl_max - max_{others} pl(b_j = b, others)) = chi2_{1, level}``
    (Heinze & Schemper 2002).

    Parameters
    ----------
    X, y : array_like
        Design matrix (intercept first) and 0/1 outcome.
    column : int
        Index of the coefficient.
    level : float, optional
        Confidence level, default 0.95.
    full : FirthResult, optional
        An existing unrestricted Firth fit on the same data.
    name : str, optional
        Name of the coefficient, used as the subject of any notice.

    Returns
    -------
    ProfileInterval
        With ``method="penalized profile likelihood"``.

    Notes
    -----
    Each side is bracketed by stepping outward from the estimate (first step
    the Wald half-width, then doubling) and solved with
    :func:`scipy.optimize.brentq`; the restricted fits are warm-started.
    """
    from scipy.stats import chi2

    X, y, offset, _ = _check_inputs(X, y, None, None)
    column = check_column(X, column)
    level = check_level(level)
    if full is None:
        full = _firth_core(X, y, offset, {}, None, 100, 1e-10)
    elif full.params.shape != (X.shape[1],) or full.fixed:
        raise ModelError(
            "The full fit passed in does not match this design matrix; "
            "pass an unrestricted Firth fit of the same columns."
        )
    pl_max = full.penalized_llf
    state = {"start": np.array(full.params, dtype=float), "converged": full.converged}

    def deviance(b: float) -> float:
        res = _firth_core(X, y, offset, {column: b}, state["start"], 200, 1e-10)
        state["start"] = np.array(res.params, dtype=float)
        state["converged"] &= res.converged
        return 2.0 * (pl_max - res.penalized_llf)

    estimate = float(full.params[column])
    lower, upper, lo_inf, up_inf = profile_interval(
        deviance, estimate, float(full.bse[column]), column_scale(X[:, column]), level
    )
    ok = bool(state["converged"])
    return ProfileInterval(
        column=column,
        estimate=estimate,
        lower=lower,
        upper=upper,
        level=level,
        cutoff=float(chi2.ppf(level, 1)),
        lower_infinite=lo_inf,
        upper_infinite=up_inf,
        method="penalized profile likelihood",
        converged=ok,
        notices=interval_notices(lo_inf, up_inf, ok, name),
    )


def flic(X, y, maxiter: int = 100, tol: float = 1e-8) -> FlicResult:
    """Firth logistic regression with intercept correction (FLIC).

    Keeps the Firth slopes and re-estimates the intercept by maximum
    likelihood with ``X[:, 1:] @ b_firth[1:]`` as an offset, which solves
    ``sum(y - expit(b0 + offset)) = 0`` so the mean predicted risk equals the
    event rate (Puhr et al. 2017, Stat Med 36:2302).

    Parameters
    ----------
    X : array_like, shape (n, k)
        Design matrix whose first column is the intercept (ones).
    y : array_like, shape (n,)
        Outcome coded 0/1, with at least one event and one non-event.
    maxiter, tol : optional
        Passed to the Firth fit.

    Returns
    -------
    FlicResult
        Corrected coefficients, predicted risks and the underlying Firth fit.
    """
    from scipy.optimize import brentq

    X, y, offset, _ = _check_inputs(X, y, None, None)
    if not np.all(X[:, 0] == 1.0):
        raise ModelError(
            "The first design column is not the intercept (all ones); put the "
            "intercept first to use the intercept correction."
        )
    events = float(y.sum())
    n = y.shape[0]
    if events == 0 or events == n:
        raise ModelError(
            "The outcome has no events or no non-events, so the corrected intercept "
            "would be infinite; the correction needs both outcomes to occur."
        )
    firth = _firth_core(X, y, offset, {}, None, maxiter, tol)
    slopes_lp = np.dot(X[:, 1:], firth.params[1:])
    base = math.log(events / (n - events))  # logit of the event rate

    # The intercept score is increasing in b0; these two values bracket the
    # root exactly (all risks below, then above, the event rate).
    def excess(b0: float) -> float:
        return float(np.sum(expit(b0 + slopes_lp))) - events

    lo = base - float(slopes_lp.max())
    hi = base - float(slopes_lp.min())
    if hi - lo <= 1e-12 * (1.0 + abs(lo)):
        b0 = lo
    else:
        b0 = float(brentq(excess, lo, hi, xtol=1e-14, rtol=1e-14, maxiter=500))
    params = np.array(firth.params, dtype=float)
    params[0] = b0
    return FlicResult(
        params=frozen_array(params),
        predicted=frozen_array(expit(b0 + slopes_lp)),
        firth=firth,
    )
