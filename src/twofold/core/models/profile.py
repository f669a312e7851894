"""Profile-likelihood confidence intervals for maximum-likelihood logistic fits.

For one coefficient ``b_j`` the profile log-likelihood is the log-likelihood
maximised over all other coefficients with ``b_j`` held fixed.  The interval
collects the values of ``b_j`` that a likelihood-ratio test at the chosen
level would not reject (Venzon & Moolgavkar 1988, Appl Stat 37:87)::

    {b : 2 * (llf_hat - llf_profile(b)) <= chi2_{1, level}}

Unlike the Wald interval it needs no symmetry around the estimate, and under
separation one end can be infinite: the profile never climbs back to the
cut-off on that side.  That is reported with a flag (and the endpoint is
``inf``), not as an error.

The module works on plain numpy arrays: a design matrix ``X`` whose first
column is the intercept (ones) and a 0/1 float outcome ``y``.  It also holds
small helpers shared by :mod:`twofold.core.models.firth` and
:mod:`twofold.core.assessing.influence` (input checks, JSON conversion, the outward
bracketing and root search).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from twofold.core.errors import ModelError, Notice

__all__ = [
    "ProfileInterval",
    "ProfileTable",
    "profile_likelihood_ci",
    "profile_all",
]

# Give up on an endpoint once the search has moved this many standard
# deviations of the predictor (in logit units) away from the estimate: a
# change of 100 in the log odds per standard deviation is no finite answer.
_LOGIT_LIMIT = 100.0


# ---------------------------------------------------------------------------
# shared helpers (used by firth.py and influence.py as well)
# ---------------------------------------------------------------------------


def json_value(value):
    """Turn numpy values and arrays into JSON-safe Python values.

    Non-finite floats (``inf``, ``nan``) become ``None`` because JSON has no
    spelling for them; the records carry explicit flags where it matters.
    """
    if isinstance(value, np.ndarray):
        return json_value(value.tolist())
    if isinstance(value, (list, tuple)):
        return [json_value(v) for v in value]
    if isinstance(value, dict):
        return {str(k): json_value(v) for k, v in value.items()}
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    if hasattr(value, "as_dict"):
        return value.as_dict()
    return value


def frozen_array(values, dtype=float) -> np.ndarray:
    """A private read-only copy, so a frozen record cannot be changed in place."""
    arr = np.array(values, dtype=dtype, copy=True)
    arr.setflags(write=False)
    return arr


def check_xy(X, y) -> tuple[np.ndarray, np.ndarray]:
    """Check and convert a design matrix and a 0/1 outcome to float arrays."""
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    if X.ndim != 2:
        raise ModelError(
            "The design matrix must be two-dimensional (rows by columns); "
            "pass one row per person and one column per coefficient."
        )
    if y.ndim != 1 or y.shape[0] != X.shape[0]:
        raise ModelError(
            f"The outcome has {y.size} values but the design matrix has "
            f"{X.shape[0]} rows; pass one outcome value per row."
        )
    if X.shape[0] == 0 or X.shape[1] == 0:
        raise ModelError(
            "The design matrix is empty; pass at least one row and the intercept column."
        )
    if not np.all(np.isfinite(X)):
        raise ModelError(
            "The design matrix contains missing or infinite values; "
            "remove or fill those rows before fitting."
        )
    if not np.all((y == 0) | (y == 1)):
        raise ModelError(
            "The outcome contains values other than 0 and 1; "
            "code it as 1 for yes (event) and 0 for no."
        )
    return X, y


def check_full_rank(X: np.ndarray) -> None:
    """Refuse a design whose columns are linearly dependent."""
    from twofold.core.models.design import unit_sizes

    # In units of each column's largest size: the rank of the columns, not of their units (a column of
    # values near 1e50 beside 0/1 columns would otherwise sink them below the rank tolerance).
    rank = np.linalg.matrix_rank(X / unit_sizes(X))
    if rank < X.shape[1]:
        raise ModelError(
            f"The design matrix has {X.shape[1]} columns but only {rank} are "
            "linearly independent; remove the constant or duplicated predictors."
        )


def check_column(X: np.ndarray, column) -> int:
    k = X.shape[1]
    if isinstance(column, (bool, np.bool_)) or not isinstance(column, (int, np.integer)):
        raise ModelError(
            f"The column to profile must be given as a whole-number index, not {column!r}."
        )
    column = int(column)
    if not 0 <= column < k:
        raise ModelError(
            f"Column index {column} is outside the design matrix, which has "
            f"columns 0 to {k - 1}; pick one of those."
        )
    return column


def check_level(level) -> float:
    level = float(level)
    if not 0.0 < level < 1.0:
        raise ModelError(
            f"The confidence level {level} is not between 0 and 1; use for example 0.95."
        )
    return level


def profile_loglik(y: np.ndarray, eta: np.ndarray) -> float:
    """Bernoulli log-likelihood on the logit scale: sum(y*eta - log(1 + e^eta))."""
    return float(np.sum(y * eta - np.logaddexp(0.0, eta)))


def column_scale(x: np.ndarray) -> float:
    """Typical size of a column (standard deviation, or size of a constant)."""
    sd = float(np.std(x))
    if sd > 0:
        return sd
    size = float(np.mean(np.abs(x)))
    return size if size > 0 else 1.0


def profile_interval(
    deviance: Callable[[float], float],
    estimate: float,
    step: float,
    scale: float,
    level: float,
) -> tuple[float, float, bool, bool]:
    """Find where ``deviance(b)`` crosses the chi-square cut-off on each side.

    ``deviance(b)`` is ``2 * (maximum - profile(b))``; it is about 0 at the
    estimate and grows away from it.  The search steps outward from the
    estimate, doubling the distance, until the deviance exceeds the cut-off,
    then refines the crossing with :func:`scipy.optimize.brentq`.  If the
    deviance stays below the cut-off out to ``_LOGIT_LIMIT / scale`` from the
    estimate, that side is reported as infinite.

    Returns ``(lower, upper, lower_infinite, upper_infinite)``.
    """
    from scipy.optimize import brentq
    from scipy.stats import chi2

    cutoff = float(chi2.ppf(level, 1))

    def excess(b: float) -> float:
        value = deviance(b) - cutoff
        # brentq interpolates, so an infinite deviance (an impossible
        # coefficient) is replaced by a large finite one of the same sign.
        return min(value, 1e12)

    # First trial: the Wald half-width, but no more than 10 log-odds units
    # per standard deviation of the predictor (under separation the Wald
    # standard error is huge and meaningless).
    wald = step * math.sqrt(cutoff) if (math.isfinite(step) and step > 0) else math.inf
    first = min(wald, 10.0 / scale)
    limit = _LOGIT_LIMIT / scale
    # brentq tolerances: far below any printed digit, above the noise of the
    # inner re-fits.
    xtol = 1e-10 * max(1.0, 1.0 / scale)

    if excess(estimate) > 0:
        raise ModelError(
            "The maximised log-likelihood passed in is higher than the model reaches "
            "at its own estimates; pass the estimates and log-likelihood of the same fit."
        )
    ends = []
    for side in (-1.0, 1.0):
        inner, distance, found = estimate, first, None
        while distance <= limit:
            b = estimate + side * distance
            if excess(b) > 0:
                found = b
                break
            inner = b
            distance *= 2.0
        if found is None:
            ends.append(side * math.inf)
            continue
        lo, hi = sorted((inner, found))
        ends.append(float(brentq(excess, lo, hi, xtol=xtol, rtol=1e-12, maxiter=200)))
    lower, upper = ends
    return lower, upper, math.isinf(lower), math.isinf(upper)


# ---------------------------------------------------------------------------
# maximum likelihood with an offset (the inner re-fits)
# ---------------------------------------------------------------------------


def _solve_sym(H: np.ndarray, g: np.ndarray) -> np.ndarray:
    """Solve H d = g for a symmetric positive (semi)definite H."""
    try:
        L = np.linalg.cholesky(H)
    except np.linalg.LinAlgError:
        # Near-singular information (e.g. separation): least squares still
        # gives an uphill direction.
        return np.linalg.lstsq(H, g, rcond=None)[0]
    z = np.linalg.solve(L, g)
    return np.linalg.solve(L.T, z)


def _logit_ml(
    X: np.ndarray,
    y: np.ndarray,
    offset: np.ndarray,
    start: np.ndarray,
    maxiter: int = 200,
    tol: float = 1e-10,
    max_step: float = 5.0,
) -> tuple[np.ndarray, float, bool]:
    """Maximise the logistic log-likelihood with an offset by Newton steps.

    Steps are capped at ``max_step`` on any coefficient and halved until the
    log-likelihood does not fall.  When the estimates run off to infinity
    (separation) the log-likelihood still rises to its supremum, so the
    returned value is usable even though ``converged`` is False.

    Returns ``(params, llf, converged)``.
    """
    beta = np.array(start, dtype=float, copy=True)
    eta = offset + np.dot(X, beta) if X.shape[1] else offset.copy()
    llf = profile_loglik(y, eta)
    if X.shape[1] == 0:
        return beta, llf, True
    for _ in range(maxiter):
        p = expit(eta)
        w = p * expit(-eta)  # p(1 - p) without cancellation
        grad = np.dot(X.T, y - p)
        hess = np.dot((X * w[:, None]).T, X)
        delta = _solve_sym(hess, grad)
        size = float(np.max(np.abs(delta))) if np.all(np.isfinite(delta)) else math.inf
        steep = float(np.max(np.abs(grad)))
        if steep == 0.0 or (size <= tol and steep <= 1e-8 * (1.0 + y.shape[0])):
            return beta, llf, True
        if size <= tol or not math.isfinite(size):
            # The weights have underflowed (far out on the logit scale) while
            # the slope has not: climb along the gradient instead.
            delta = grad * (max_step / steep)
            size = max_step
        if size > max_step:
            delta *= max_step / size
        # Halve until the log-likelihood does not fall (allowing round-off).
        slack = 1e-12 * (1.0 + abs(llf))
        t = 1.0
        for _half in range(40):
            cand = beta + t * delta
            cand_eta = offset + np.dot(X, cand)
            cand_llf = profile_loglik(y, cand_eta)
            if cand_llf >= llf - slack:
                break
            t *= 0.5
        else:
            return beta, llf, False
        gain = cand_llf - llf
        beta, eta, llf = cand, cand_eta, cand_llf
        # Large steps buying nothing: the estimates are diverging and the
        # log-likelihood has reached its supremum to machine precision.
        if gain <= 1e-13 * (1.0 + abs(llf)) and t * min(size, max_step) > 1e-3:
            return beta, llf, False
    return beta, llf, False


# ---------------------------------------------------------------------------
# public results and functions
# ---------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ProfileInterval:
    """A profile-likelihood confidence interval for one coefficient.

    Attributes
    ----------
    column : int
        Index of the coefficient in the design matrix.
    estimate : float
        The point estimate the profile is centred on.
    lower, upper : float
        Interval ends on the coefficient (log odds) scale; ``-inf``/``inf``
        when the profile never reaches the cut-off on that side.
    level : float
        Confidence level, e.g. 0.95.
    cutoff : float
        The chi-square quantile on 1 degree of freedom the deviance is cut at.
    lower_infinite, upper_infinite : bool
        Whether the corresponding end is infinite.
    method : str
        ``"profile likelihood"`` (maximum likelihood) or
        ``"penalized profile likelihood"`` (Firth).
    converged : bool
        Whether every inner re-fit met its convergence test.
    notices : tuple of Notice
        Plain-language remarks (an infinite end, inner fits that did not
        converge).
    """

    column: int
    estimate: float
    lower: float
    upper: float
    level: float
    cutoff: float
    lower_infinite: bool
    upper_infinite: bool
    method: str
    converged: bool
    notices: tuple[Notice, ...] = ()

    @property
    def odds_ratio_interval(self) -> tuple[float, float]:
        """The interval on the odds-ratio scale, ``(exp(lower), exp(upper))``."""
        return (math.exp(self.lower), math.exp(self.upper))

    def as_dict(self) -> dict:
        """JSON-ready dictionary; infinite ends become ``None`` (see the flags)."""
        return {
            "column": self.column,
            "estimate": json_value(self.estimate),
            "lower": json_value(self.lower),
            "upper": json_value(self.upper),
            "level": self.level,
            "cutoff": self.cutoff,
            "lower_infinite": self.lower_infinite,
            "upper_infinite": self.upper_infinite,
            "method": self.method,
            "converged": self.converged,
            "notices": [n.as_dict() for n in self.notices],
        }


@dataclass(frozen=True, eq=False)
class ProfileTable:
    """Profile-likelihood intervals for several coefficients."""

    intervals: tuple[ProfileInterval, ...]

    def __iter__(self):
        return iter(self.intervals)

    def __len__(self) -> int:
        return len(self.intervals)

    def __getitem__(self, i: int) -> ProfileInterval:
        return self.intervals[i]

    def as_dict(self) -> dict:
        """JSON-ready dictionary with one entry per coefficient."""
        return {"intervals": [iv.as_dict() for iv in self.intervals]}


def interval_notices(
    lower_inf: bool, upper_inf: bool, converged: bool, subject: str | None
) -> tuple[Notice, ...]:
    subjects = () if subject is None else (str(subject),)
    notices = []
    for side, flag in (("lower", lower_inf), ("upper", upper_inf)):
        if flag:
            notices.append(
                Notice(
                    "separation",
                    f"The {side} end of the confidence interval is infinite because "
                    "the likelihood never falls to the cut-off on that side, which "
                    "happens when a predictor separates events from non-events.",
                    subjects=subjects,
                )
            )
    if not converged:
        notices.append(
            Notice(
                "not_converged",
                "Some of the re-fits used to trace the profile likelihood did not "
                "converge, so the interval ends may be slightly off.",
                subjects=subjects,
            )
        )
    return tuple(notices)


def _wald_se(X: np.ndarray, params: np.ndarray, column: int) -> float:
    """Wald standard error from the information at ``params`` (nan if singular)."""
    eta = np.dot(X, params)
    p = expit(eta)
    w = p * expit(-eta)
    info = np.dot((X * w[:, None]).T, X)
    try:
        var = float(np.linalg.inv(info)[column, column])
    except np.linalg.LinAlgError:
        return math.nan
    return math.sqrt(var) if var > 0 and math.isfinite(var) else math.nan


def _profile_ml(
    X: np.ndarray,
    y: np.ndarray,
    column: int,
    params_hat: np.ndarray,
    llf_hat: float,
    level: float,
    name: str | None,
) -> ProfileInterval:
    x_j = X[:, column]
    others = np.delete(X, column, axis=1)
    state = {"start": np.delete(params_hat, column), "converged": True}

    def deviance(b: float) -> float:
        # Coefficient j fixed at b enters as an offset; the others are
        # re-maximised, warm-started from the previous re-fit.
        params, llf, ok = _logit_ml(others, y, b * x_j, state["start"])
        if np.all(np.isfinite(params)):
            state["start"] = params
        state["converged"] &= ok
        return 2.0 * (llf_hat - llf)

    estimate = float(params_hat[column])
    lower, upper, lo_inf, up_inf = profile_interval(
        deviance,
        estimate,
        _wald_se(X, params_hat, column),
        column_scale(x_j),
        level,
    )
    from scipy.stats import chi2

    return ProfileInterval(
        column=column,
        estimate=estimate,
        lower=lower,
        upper=upper,
        level=level,
        cutoff=float(chi2.ppf(level, 1)),
        lower_infinite=lo_inf,
        upper_infinite=up_inf,
        method="profile likelihood",
        converged=bool(state["converged"]),
        notices=interval_notices(lo_inf, up_inf, bool(state["converged"]), name),
    )


def _check_params(X: np.ndarray, params_hat, llf_hat) -> tuple[np.ndarray, float]:
    params_hat = np.asarray(params_hat, dtype=float).ravel()
    if params_hat.shape[0] != X.shape[1]:
        raise ModelError(
            f"There are {params_hat.shape[0]} estimates for {X.shape[1]} design "
            "columns; pass one estimate per column, intercept first."
        )
    llf_hat = float(llf_hat)
    if not (np.all(np.isfinite(params_hat)) and math.isfinite(llf_hat)):
        raise ModelError(
            "The estimates or the log-likelihood passed in are not finite numbers; "
            "pass the values from a completed fit."
        )
    return params_hat, llf_hat


def profile_likelihood_ci(
    X,
    y,
    column: int,
    params_hat,
    llf_hat: float,
    level: float = 0.95,
    name: str | None = None,
) -> ProfileInterval:
    """Profile-likelihood confidence interval for one logistic coefficient.

    The ends are the values ``b`` with
    ``2 * (llf_hat - max_{others} llf(b_j = b, others)) = chi2_{1, level}``
    (Venzon & Moolgavkar 1988).

    Parameters
    ----------
    X : array_like, shape (n, k)
        Design matrix, first column the intercept (ones).
    y : array_like, shape (n,)
        Outcome coded 0/1.
    column : int
        Index of the coefficient to profile.
    params_hat : array_like, shape (k,)
        Maximum-likelihood estimates of the fit.
    llf_hat : float
        Maximised log-likelihood of the fit.
    level : float, optional
        Confidence level, default 0.95.
    name : str, optional
        Name of the coefficient, used as the subject of any notice.

    Returns
    -------
    ProfileInterval
        The interval; an end that does not exist (separation) is ``inf``
        with its flag set, not an error.

    Notes
    -----
    The other coefficients are re-maximised by a Newton routine with the
    fixed coefficient as an offset, warm-started from the previous value
    along the profile; each end is found with :func:`scipy.optimize.brentq`
    after stepping outward from the estimate to bracket it.
    """
    X, y = check_xy(X, y)
    column = check_column(X, column)
    level = check_level(level)
    params_hat, llf_hat = _check_params(X, params_hat, llf_hat)
    return _profile_ml(X, y, column, params_hat, llf_hat, level, name)


def profile_all(
    X,
    y,
    params_hat,
    llf_hat: float,
    columns: Sequence[int] | None = None,
    level: float = 0.95,
    names: Sequence[str] | None = None,
) -> ProfileTable:
    """Profile-likelihood intervals for several coefficients.

    Each interval is :func:`profile_likelihood_ci` for one column:
    ``{b : 2 * (llf_hat - llf_profile(b)) <= chi2_{1, level}}``.

    Parameters
    ----------
    X, y, params_hat, llf_hat, level
        As for :func:`profile_likelihood_ci`.
    columns : sequence of int, optional
        Columns to profile; all columns (intercept included) by default.
    names : sequence of str, optional
        One name per design column, used as notice subjects.

    Returns
    -------
    ProfileTable
        One :class:`ProfileInterval` per requested column, in order.
    """
    X, y = check_xy(X, y)
    level = check_level(level)
    params_hat, llf_hat = _check_params(X, params_hat, llf_hat)
    if columns is None:
        columns = range(X.shape[1])
    if names is not None and len(names) != X.shape[1]:
        raise ModelError(
            f"There are {len(names)} names for {X.shape[1]} design columns; "
            "pass one name per column, intercept first."
        )
    out = []
    for c in columns:
        c = check_column(X, c)
        out.append(
            _profile_ml(
                X, y, c, params_hat, llf_hat, level, None if names is None else names[c]
            )
        )
    return ProfileTable(tuple(out))
