"""Multiple imputation by chained equations of the rows that have an outcome.

m imputed copies are made once per analysis and reused by every model of
the ladder, so nested tests compare models on the same imputed data.  Each
copy comes from its own chain (van Buuren 2018, Flexible Imputation of
Missing Data, 2nd ed., section 4.5): missing cells start as random draws
from the column's observed cells, then for ``ITERATIONS`` (5) cycles every
incomplete column is imputed from all the others in turn, by

* predictive mean matching for numbers (van Buuren 2018, algorithm 3.3:
  a Bayesian linear-regression draw of the coefficients, then for each
  missing cell one of the ``DONORS`` observed cells whose predicted mean is
  nearest, matching type 1);
* logistic regression for two-valued columns and multinomial logistic
  regression for groups (van Buuren 2018, algorithms 3.4 and the
  multinomial analogue: a draw of the coefficients from the normal
  approximation of their posterior, then a draw of the value from the
  predicted probabilities).  The fits are statsmodels' ``Logit`` and
  ``MNLogit``.

The imputation model of every column holds the outcome, every other column
of the analysis and the chosen auxiliary columns; identifier and date
columns are never used; the outcome is never imputed.  statsmodels'
``MICEData`` is not used: it imputes every column by a linear model with
formulas and cannot impute two-valued or group columns by their own models.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass

import numpy as np

from twofold.core.errors import ColumnError, ModelError, TwofoldError

#: Cycles of the chained equations per imputed copy: the default of van Buuren's mice (maxit = 5); van Buuren
#: (2018, section 6.5.2) finds 5 to 10 usually enough (value from memory).
ITERATIONS = 5

#: Donors among which predictive mean matching draws (the default of van Buuren's mice, d = 5).
DONORS = 5

#: A column missing in more than this share of the rows with an outcome is imputed only when confirmed.
LARGE_MISSING_SHARE = 0.5

#: Ridge added to the normal equations of the linear draw, relative to their diagonal (as mice does).
RIDGE = 1e-5

METHOD_NAMES = {"pmm": "predictive mean matching", "logistic": "logistic regression",
                "multinomial": "multinomial logistic regression"}


class ImputationCancelled(TwofoldError):
    """Making the imputations was stopped by the progress callback."""


def default_m(share_incomplete: float) -> int:
    """Imputed copies: the percentage of incomplete rows, at least 5 and at most 100.

    White, Royston & Wood (2011, Stat Med 30:377, section 7): m at least
    100 times the fraction of incomplete cases.
    """
    return int(min(100, max(5, math.ceil(100.0 * float(share_incomplete) - 1e-9))))


@dataclass(frozen=True)
class Imputation:
    """m imputed copies of the cells missing among the rows with an outcome.

    ``cells[column]`` holds the positions (rows of the file) of the column's
    imputed cells, ``draws[column]`` an (m, len(cells)) array of the values
    put there in each copy (in the column's own kind: numbers, or the group
    values as they appear in the file).
    """

    m: int
    seed: int | None
    methods: dict
    rows: np.ndarray
    columns: tuple
    cells: dict
    draws: dict
    rows_imputed: int
    auxiliary: tuple = ()

    @property
    def cells_imputed(self) -> int:
        return int(sum(len(v) for v in self.cells.values()))

    def frame(self, frame, j: int):
        """The data frame with copy ``j``'s values in the imputed cells (a shallow copy; the file's never changes)."""
        import pandas as pd

        out = frame.copy(deep=False)
        for column, where in self.cells.items():
            series = frame[column]
            values = self.draws[column][j]
            if pd.api.types.is_numeric_dtype(series):
                filled = series.to_numpy(dtype=float, na_value=np.nan, copy=True)
                filled[where] = values.astype(float)
                out[column] = pd.Series(filled, index=series.index, name=column)
            else:
                filled = series.astype(object).to_numpy(copy=True)
                filled[where] = values
                out[column] = pd.Series(filled, index=series.index, name=column, dtype=object)
        return out

    def record(self) -> dict:
        """The ``imputation`` object of the JSON."""
        return {"m": self.m, "seed": self.seed, "methods": dict(self.methods),
                "rows_imputed": int(self.rows_imputed), "cells_imputed": self.cells_imputed,
                "auxiliary": list(self.auxiliary)}


@dataclass
class _Column:
    name: str
    kind: str  # "number", "binary", "groups"
    values: np.ndarray  # floats (numbers) or codes (groups), current state
    missing: np.ndarray  # bool over the chosen rows
    levels: tuple = ()

    def features(self) -> np.ndarray:
        """This column as predictor columns of another's imputation model."""
        if self.kind == "number":
            return self.values[:, None]
        codes = self.values.astype(int)
        return np.stack([(codes == j).astype(float) for j in range(1, len(self.levels))], axis=1)


def imputation_columns(study, predictors, auxiliary=()) -> tuple[list[str], list[str]]:
    """(columns of the analysis, auxiliary columns) the imputation model uses, checked.

    Raises
    ------
    ColumnError
        An auxiliary column that is the outcome, an identifier or a date, or not a column of the file.
    """
    from twofold.core.analysis import columns_of
    from twofold.core.data.roles import Role

    own = [c for c in columns_of(study, predictors) if c != study.outcome]
    extra = []
    for name in auxiliary:
        if str(name) not in study.columns:
            raise ColumnError(f"The auxiliary column '{name}' is not a column of {study.source}; "
                              "check its spelling (names are matched exactly).")
        name = str(name)
        if name == study.outcome:
            raise ColumnError(f"'{name}' is the outcome; it is always in the imputation model, so leave it out "
                              "of the auxiliary columns.")
        role = study.columns[name].role
        if role in (Role.IDENTIFIER, Role.DATE, Role.EXCLUDED):
            raise ColumnError(f"The auxiliary column '{name}' is marked as {role.value}, and such columns are never "
                              "used to impute; choose another column or change its role first.")
        if name not in own and name not in extra:
            extra.append(name)
    return own, extra


def _kind(info) -> str:
    from twofold.core.data.roles import Role

    if info.role == Role.NUMERIC or (info.role == Role.BINARY and info.is_number and info.n_levels > 2):
        return "number"
    return "binary" if info.n_levels <= 2 else "groups"


def _prepare(study, names, rows) -> list[_Column]:
    import pandas as pd

    out = []
    for name in names:
        info = study.columns[name]
        series = study.frame[name].iloc[rows]
        missing = series.isna().to_numpy()
        kind = _kind(info)
        if kind == "number":
            try:
                values = pd.to_numeric(series, errors="raise").to_numpy(dtype=float, na_value=np.nan)
            except (ValueError, TypeError):
                raise ColumnError(f"The column '{name}' holds text, so it cannot be imputed as a number; "
                                  "use it as groups (categorical) instead.") from None
            out.append(_Column(name, kind, values, missing))
            continue
        levels = tuple(pd.unique(series.dropna()))
        try:
            levels = tuple(sorted(levels))
        except TypeError:
            pass
        codes = pd.Categorical(series, categories=list(levels)).codes.astype(float)
        codes[missing] = np.nan
        out.append(_Column(name, "binary" if len(levels) <= 2 else "groups", codes, missing, levels))
    return out


def check_missing(study, names, rows, allow_large: bool = False) -> None:
    """Refuse, by name, a predictor missing in every row with an outcome, and a large share unless confirmed."""
    frame = study.frame
    shares = {name: float(frame[name].iloc[rows].isna().mean()) if len(rows) else 0.0 for name in names}
    for name, share in shares.items():
        if share == 1.0:
            raise ColumnError(f"'{name}' is missing in every row that has an outcome, so it cannot be imputed; "
                              "leave it out of the model.")
    for name, share in shares.items():
        if share > LARGE_MISSING_SHARE and not allow_large:
            raise ColumnError(f"'{name}' is missing in {100 * share:.0f}% of the rows that have an outcome, more "
                              f"than the {100 * LARGE_MISSING_SHARE:.0f}% Twofold imputes without asking; confirm "
                              "with --impute-anyway (in the window: tick 'impute anyway'), or leave it out.")


def _scaled(col: _Column) -> np.ndarray:
    f = col.features()
    if col.kind == "number":
        obs = col.values[~col.missing]
        centre = float(obs.mean())
        spread = float(obs.std()) or 1.0
        f = (f - centre) / spread
    return f


def _draw_pmm(X, y, miss, rng) -> np.ndarray:
    """Predictive mean matching, type 1 (van Buuren 2018, algorithm 3.3 with a Bayesian linear draw, 3.1)."""
    Xo, yo, Xm = X[~miss], y[~miss], X[miss]
    xtx = np.dot(Xo.T, Xo)
    xtx += RIDGE * np.diag(np.diag(xtx))
    inv = np.linalg.inv(xtx)
    beta = inv @ np.dot(Xo.T, yo)
    resid = yo - np.dot(Xo, beta)
    dof = max(len(yo) - X.shape[1], 1)
    sigma = math.sqrt(float(resid @ resid) / rng.chisquare(dof))
    chol = np.linalg.cholesky(0.5 * (inv + inv.T))
    beta_star = beta + sigma * (chol @ rng.standard_normal(len(beta)))
    fitted = np.dot(Xo, beta)
    target = np.dot(Xm, beta_star)
    order = np.argsort(fitted, kind="stable")
    sorted_fit = fitted[order]
    n = len(sorted_fit)
    d = min(DONORS, n)
    at = np.searchsorted(sorted_fit, target)
    # The d nearest lie within d places of the insertion point on either side.
    window = at[:, None] + np.arange(-d, d)[None, :]
    window = np.clip(window, 0, n - 1)
    dist = np.abs(sorted_fit[window] - target[:, None])
    dist += 1e-12 * rng.random(dist.shape)  # random tie-breaking among equally near donors
    nearest = np.argsort(dist, axis=1)[:, :d]
    pick = nearest[np.arange(len(target)), rng.integers(0, d, len(target))]
    return yo[order[window[np.arange(len(target)), pick]]]


def _fit_failed(name: str) -> ModelError:
    return ModelError(f"The imputation model of '{name}' could not be fitted (some group of it is predicted "
                      "perfectly by the other columns, or the group is too small); merge its rare groups, leave "
                      "an auxiliary column out, or leave incomplete rows out instead.")


def _draw_logistic(name, X, codes, miss, levels, rng, start=None) -> tuple[np.ndarray, np.ndarray]:
    """Logistic (two groups) or multinomial draw (van Buuren 2018, algorithm 3.4 and its multinomial analogue).

    Returns the drawn values and the estimates, which start the same column's fit in the next cycle (the
    column changes little between cycles, so Newton then needs a step or two).
    """
    import warnings

    from scipy.special import softmax
    from statsmodels.discrete.discrete_model import Logit, MNLogit

    Xo, yo, Xm = X[~miss], codes[~miss].astype(int), X[miss]
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        try:
            model = Logit(yo.astype(float), Xo, check_rank=False) if len(levels) == 2 else \
                MNLogit(yo, Xo, check_rank=False)
            # A tolerance of 1e-6 on the steps: far below the spread of the draw that follows.
            res = model.fit(method="newton", disp=0, maxiter=50, tol=1e-6, start_params=start)
            params = np.asarray(res.params, dtype=float)
            cov = np.asarray(res.cov_params(), dtype=float)
        except (np.linalg.LinAlgError, ValueError, FloatingPointError):
            raise _fit_failed(name) from None
    flat = params.ravel(order="F")
    if not (np.all(np.isfinite(flat)) and np.all(np.isfinite(cov))) or np.max(np.abs(flat)) > 30:
        raise _fit_failed(name)
    try:
        chol = np.linalg.cholesky(0.5 * (cov + cov.T) + 1e-12 * np.eye(len(cov)))
    except np.linalg.LinAlgError:
        raise _fit_failed(name) from None
    draw = (flat + chol @ rng.standard_normal(len(flat))).reshape(params.shape, order="F")
    if len(levels) == 2:
        p1 = 1.0 / (1.0 + np.exp(-np.dot(Xm, draw)))
        return (rng.random(len(p1)) < p1).astype(float), flat
    eta = np.column_stack([np.zeros(len(Xm)), np.dot(Xm, draw)])
    prob = softmax(eta, axis=1)
    u = rng.random(len(Xm))[:, None]
    return np.minimum((np.cumsum(prob, axis=1) < u).sum(axis=1), len(levels) - 1).astype(float), flat


def _chain(columns: list[_Column], y: np.ndarray, rng, tick) -> list[np.ndarray]:
    """One chain: returns the imputed values of each incomplete column (in the order of ``columns``)."""
    state = [_Column(c.name, c.kind, c.values.copy(), c.missing, c.levels) for c in columns]
    for c in state:
        if c.missing.any():
            observed = c.values[~c.missing]
            c.values[c.missing] = rng.choice(observed, int(c.missing.sum()))
    order = sorted((i for i, c in enumerate(state) if c.missing.any()), key=lambda i: state[i].missing.sum())
    starts: dict = {}
    # With one incomplete column its imputation model never changes, so one cycle is the whole chain.
    for _ in range(ITERATIONS if len(order) > 1 else 1):
        feats = [_scaled(c) for c in state]
        for i in order:
            c = state[i]
            X = np.column_stack([np.ones(len(y)), y] + [f for j, f in enumerate(feats) if j != i])
            if c.kind == "number":
                c.values[c.missing] = _draw_pmm(X, c.values, c.missing, rng)
            else:
                c.values[c.missing], starts[i] = _draw_logistic(c.name, X, c.values, c.missing, c.levels, rng,
                                                                starts.get(i))
            feats[i] = _scaled(c)
        tick()
    return [state[i].values[state[i].missing] for i in range(len(state))]


def impute(study, predictors, m: int | None = None, seed: int | None = None, auxiliary=(),
           allow_large: bool = False, progress=None) -> Imputation:
    """Make the imputed copies of the rows with an outcome.

    Parameters
    ----------
    study : Study
        With its outcome chosen.
    predictors : list of str
        Every predictor of the analysis (interactions stand for their two columns).
    m : int, optional
        Copies (2 to 100); default :func:`default_m` of the share of incomplete rows.
    seed : int, optional
        Seed of the draws (the same seed gives the same copies).
    auxiliary : list of str
        Further columns used only to impute.
    allow_large : bool
        Impute a column missing in more than half the rows (the user confirmed).
    progress : callable, optional
        ``progress(fraction)``; returning False stops with :class:`ImputationCancelled`.

    Raises
    ------
    ColumnError, ModelError
        Refusals named in their sentence; the study is never changed.
    """
    y_all = study.outcome_values()
    rows = np.flatnonzero(~np.isnan(y_all))
    own, extra = imputation_columns(study, predictors, auxiliary)
    # In the file's order, whoever asks: the same columns, m and seed always give the same copies (the window's
    # ladder and a re-run of its session name the same columns in different orders).
    chosen = set(own + extra)
    names = [c for c in study.columns if c in chosen]
    check_missing(study, own + extra, rows, allow_large)
    columns = _prepare(study, names, rows)
    incomplete = np.zeros(len(rows), dtype=bool)
    for c in columns:
        if c.name in own:
            incomplete |= c.missing
    if m is None:
        m = default_m(float(incomplete.mean()) if len(rows) else 0.0)
    m = int(m)
    if not 2 <= m <= 100:
        raise ModelError(f"{m} imputed copies is out of range; give a whole number from 2 to 100.")
    y = y_all[rows]
    methods = {c.name: METHOD_NAMES["pmm" if c.kind == "number" else
                                     "logistic" if c.kind == "binary" else "multinomial"]
               for c in columns if c.missing.any()}
    seeds = np.random.SeedSequence(seed).spawn(m)
    done = [0]
    total = m * (ITERATIONS if len(methods) > 1 else 1)

    lock = threading.Lock()  # a caller's progress may be shared between threads

    def tick():
        with lock:
            done[0] += 1
            if progress is not None and progress(done[0] / total) is False:
                raise ImputationCancelled("Making the imputed copies was stopped; nothing was changed.")

    draws = {c.name: [] for c in columns if c.missing.any()}
    if methods:
        chains = [_chain(columns, y, np.random.default_rng(seeds[j]), tick) for j in range(m)]
        for values in chains:
            for c, v in zip(columns, values):
                if c.name in draws:
                    draws[c.name].append(v if c.kind == "number" else np.array(c.levels, dtype=object)[v.astype(int)])
    cells = {c.name: rows[c.missing] for c in columns if c.missing.any()}
    any_missing = np.zeros(len(rows), dtype=bool)
    for c in columns:
        any_missing |= c.missing
    return Imputation(m, seed, methods, rows, tuple(names), cells,
                      {k: np.array(v) if v else np.empty((m, 0)) for k, v in draws.items()},
                      int(any_missing.sum()), tuple(extra))
