"""The model ladder: every change of predictors adds a rung, all on the same rows.

Each rung is a fitted model.  The ladder keeps every rung on the rows that
are complete for every predictor any rung uses, so that any two nested rungs
can be compared by a valid likelihood-ratio test.  When a new predictor has
missing values and the common rows shrink, every rung is refitted on the new
common rows and the ladder says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

from twofold.core.errors import ModelError, Notice
from twofold.core.events import Event
from twofold.core.models.fit import FitStopped, LikelihoodRatioTest, LogisticFit, nested_test


class Deferred:
    """A rung's fit and nested test, put off until first read (shared by the copies undo keeps: made once).

    ``make(watch=True, stop=None)`` returns the fit (``watch=False`` when fits run on two threads at once, and
    ``stop`` to give it up, see :func:`~twofold.core.models.fit.fit_logistic`); ``test(fit)`` the nested test
    against the rung it was built from (which reads that rung's fit, but not its test: reading one fit never
    makes a chain of them).
    """

    _UNKNOWN = object()

    def __init__(self, make, test=None):
        self._make, self.test = make, test
        self.fit = None
        self._against = self._UNKNOWN

    @property
    def done(self) -> bool:
        return self.fit is not None and self._against is not self._UNKNOWN

    def fit_now(self):
        if self.fit is None:
            self.fit = self._make()
        return self.fit

    def fit_beside(self, make_other, stop=None):
        """Make this fit and another at once, on two threads; returns the other's fit (``make_other(watch, stop)``).

        statsmodels' Newton steps are numpy's linear algebra, which lets go of the interpreter lock, so the two
        take little longer than one.  Warnings are watched around both; should any come (statsmodels' word on
        separation, which must reach the fit it belongs to), both are made again, one after the other.  A fit
        already made is not made again.  Should ``stop()`` become true, both are given up
        (:class:`~twofold.core.models.fit.FitStopped`) and this one stays put off.
        """
        import warnings
        from concurrent.futures import ThreadPoolExecutor

        from twofold.core.models.fit import one_blas_thread

        if self.fit is not None:
            return make_other(True, stop)
        with one_blas_thread():
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                with ThreadPoolExecutor(max_workers=1, thread_name_prefix="twofold-fit") as pool:
                    mine = pool.submit(self._make, False, stop)
                    try:
                        other = make_other(False, stop)
                    finally:
                        fit = mine.result()  # waits for it either way; its failure is the ladder's to report
            if caught:
                fit, other = self._make(True, stop), make_other(True, stop)
        self.fit = fit
        return other

    def test_now(self):
        if self._against is self._UNKNOWN:
            fit = self.fit_now()
            self._against = None if self.test is None else self.test(fit)
        return self._against


class Rung:
    """One model of the ladder.

    Attributes
    ----------
    predictors : tuple of str
    fit : LogisticFit
        Made when first read if the rung was added with its fit put off (:meth:`Ladder.add` ``defer=True``).
    added, removed : tuple of str
        What changed from the rung before.
    against_previous : LikelihoodRatioTest or None
        The nested test against the rung it was built from, when one is nested in the other.
    previous : int or None
        The index of the rung it was built from (the current rung when it was added).
    """

    def __init__(self, predictors, fit=None, added=(), removed=(), against_previous=None, previous=None,
                 deferred: Deferred | None = None):
        self.predictors = tuple(predictors)
        self._fit = fit
        self.added, self.removed = tuple(added), tuple(removed)
        self._against = against_previous
        self.previous = previous
        self.deferred = deferred if fit is None else None

    @property
    def fitted(self) -> bool:
        """Whether the fit is made (reading :attr:`fit` makes it)."""
        return self._fit is not None or self.deferred.fit is not None

    @property
    def fit(self) -> LogisticFit:
        return self._fit if self._fit is not None else self.deferred.fit_now()

    @fit.setter
    def fit(self, fit) -> None:
        self._fit, self.deferred = fit, None

    def put_off(self, deferred: Deferred) -> None:
        """Replace the fit and the nested test by ones made when first read."""
        self._fit, self._against, self.deferred = None, None, deferred

    @property
    def against_previous(self) -> LikelihoodRatioTest | None:
        return self._against if self.deferred is None else self.deferred.test_now()

    @against_previous.setter
    def against_previous(self, test) -> None:
        if self.deferred is not None:
            self._fit, self.deferred = self.deferred.fit_now(), None
        self._against = test

    @property
    def n_params(self) -> int:
        return self.fit.n_params

    def as_dict(self) -> dict:
        t = self.against_previous
        return {
            "predictors": list(self.predictors), "parameters": self.fit.n_params,
            "log_likelihood": self.fit.llf, "aic": self.fit.aic, "bic": self.fit.bic,
            "added": list(self.added), "removed": list(self.removed),
            "against_previous": None if t is None else t.as_dict(),
        }


@dataclass(frozen=True)
class Comparison:
    """Two rungs compared: a likelihood-ratio test when nested, AIC and BIC always.

    ``aic_difference`` is AIC(second) - AIC(first): negative favours the second.
    ``auc_test`` is the paired DeLong test of the two AUCs on the common rows
    (DeLong et al. 1988, Biometrics 44:837).
    """

    first: int
    second: int
    nested: bool
    test: LikelihoodRatioTest | None
    aic_difference: float
    bic_difference: float
    note: str
    auc_test: object = None


class Ladder:
    """A sequence of models of one study's outcome, on common rows.

    Parameters
    ----------
    study : Study
        With its outcome set.
    """

    def __init__(self, study):
        self.study = study
        self.rungs: list[Rung] = []
        self.current: int | None = None
        self.rows: np.ndarray | None = None
        self.notices: list[Notice] = []
        self.events = SimpleNamespace(changed=Event("changed"))

    def __len__(self) -> int:
        return len(self.rungs)

    @property
    def used_predictors(self) -> list[str]:
        """Every predictor used by some rung, in order of first use."""
        seen: dict[str, None] = {}
        for rung in self.rungs:
            for p in rung.predictors:
                seen.setdefault(p, None)
        return list(seen)

    def state(self) -> tuple:
        """The ladder as it stands (copies of its rungs), for :meth:`restore` to put back (undo)."""
        import copy

        return ([copy.copy(r) for r in self.rungs], self.current, self.rows, list(self.notices))

    def restore(self, state: tuple) -> None:
        """Put back a state taken by :meth:`state`; the fits are the ones it held, not refitted."""
        import copy

        rungs, current, rows, notices = state
        self.rungs = [copy.copy(r) for r in rungs]
        self.current, self.rows, self.notices = current, rows, list(notices)
        self.events.changed.emit("restored")

    def clear(self) -> None:
        self.rungs.clear()
        self.current = None
        self.rows = None
        self.notices = []
        self.events.changed.emit("cleared")

    def _test(self, a: Rung, b: Rung) -> LikelihoodRatioTest | None:
        """The nested test between two rungs when one is nested in the other."""
        sa, sb = set(a.predictors), set(b.predictors)
        if sa == sb:
            return None
        if sa <= sb:
            return nested_test(a.fit, b.fit)
        if sb <= sa:
            t = nested_test(b.fit, a.fit)
            return LikelihoodRatioTest(t.g, t.df, t.p_value, added=(), removed=tuple(sorted(sa - sb)), n_rows=t.n_rows)
        return None

    def add(self, predictors, defer: bool = False) -> Rung:
        """Fit the model with these predictors and append it as a new rung.

        Returns the new rung.  If its predictors shrink the common rows, every
        earlier rung is refitted on the new rows first (a notice says so).
        ``defer=True`` puts the fit off until it is first read (when the rows
        stay as they are): a quick succession of ticks then shows the newest
        model first, and the ones in between are fitted afterwards
        (:meth:`complete`) or whenever something reads them.  ``defer`` may
        be a callable, asked between the Newton steps of this fit (and of the
        fit of the model it is built from, when that was put off: the two are
        then made at once): true gives them up and puts this one off too, so
        the newer tick never waits for a fit it no longer needs.
        """
        predictors = tuple(self.study.column(p) for p in predictors)
        union = list(dict.fromkeys(self.used_predictors + list(predictors)))
        rows = self.study.complete_rows(union)
        if len(rows) == 0:
            raise ModelError("No rows are complete for every predictor tried in this ladder; "
                             "untick the predictor with many missing values or start a new ladder.")
        notices = []
        previous = self.rungs[self.current] if self.current is not None else None
        changed = self.rows is not None and not np.array_equal(rows, self.rows)
        made = None
        if callable(defer):
            newer, defer = defer, False
            if not changed and previous is not None:
                names = self.study.check_predictors(predictors)
                try:
                    if not previous.fitted:
                        # That fit was put off: it and this one are made at once, on two threads, so the tick
                        # shows after about one fit's time rather than two (from the newest fit made, as the
                        # put-off one would be); its nested test needs that fit either way.
                        start = self._start_near(previous)
                        made = previous.deferred.fit_beside(
                            lambda watch, stop: self.study.fit(names, rows=rows, start=start, watch_warnings=watch,
                                                               stop=stop), stop=newer)
                    else:
                        made = self.study.fit(names, rows=rows, start=previous.fit, stop=newer)
                except FitStopped:
                    # A newer tick came meanwhile: it would wait behind fits it no longer needs.
                    defer = True
        if defer and not changed and previous is not None:
            import copy

            names, before = self.study.check_predictors(predictors), copy.copy(previous)  # (as it stands now)
            rung = Rung(predictors, previous=self.current, deferred=Deferred(
                lambda watch=True, stop=None: self.study.fit(names, rows=rows, start=self._start_near(before),
                                                             watch_warnings=watch, stop=stop),
                lambda fit: self._test(before, Rung(predictors, fit))))
            rung.added = tuple(p for p in predictors if p not in previous.predictors)
            rung.removed = tuple(p for p in previous.predictors if p not in predictors)
            self.notices = []
            self.rungs.append(rung)
            self.current = len(self.rungs) - 1
            self.events.changed.emit("added")
            return rung
        # Fit the new model first: if it fails, the ladder is left exactly as it was.
        start = previous.fit if previous is not None and not changed else None
        fit = made if made is not None else self.study.fit(list(predictors), rows=rows, start=start)
        if changed:
            notices.append(Notice(
                "rows_dropped",
                f"The rows compared changed from {len(self.rows):,} to {len(rows):,} because of missing values "
                "in a newly used predictor; every model in the ladder was refitted on the new common rows "
                "so that their tests stay valid.",
            ))
            self._refit_all(rows, defer=True)
        self.rows = rows
        self.notices = notices
        rung = Rung(predictors, fit, previous=self.current)
        if previous is not None:
            rung.added = tuple(p for p in predictors if p not in previous.predictors)
            rung.removed = tuple(p for p in previous.predictors if p not in predictors)
            rung.against_previous = self._test(previous, rung)
        self.rungs.append(rung)
        self.current = len(self.rungs) - 1
        self.events.changed.emit("added")
        return rung

    def _start_near(self, rung: Rung):
        """Starting values for a fit near ``rung``: its fit, or the newest fit made (never makes one)."""
        if rung.fitted:
            return rung.fit
        return next((r.fit for r in reversed(self.rungs) if r.fitted), None)

    @property
    def pending(self) -> list[int]:
        """Indices of the rungs whose fit (or nested test) is still put off."""
        return [k for k, r in enumerate(self.rungs) if r.deferred is not None and not r.deferred.done]

    def complete(self, stop=None) -> int:
        """Make the fits put off, newest first; ``stop()`` true ends early.  Returns how many were made."""
        made = 0
        for k in reversed(self.pending):
            if stop is not None and stop():
                break
            self.rungs[k].against_previous  # noqa: B018  (its fit, and the fit of the rung it was built from)
            made += 1
        return made

    def _refit_all(self, rows: np.ndarray, defer: bool = False) -> None:
        if defer:
            # Each fit on the new rows is made when first read (the new model's nested test reads the one it
            # was built from): the tick shows after two fits, and the others follow (:meth:`complete`).
            import copy

            for r in self.rungs:
                start = r.fit if r.fitted else None
                r.put_off(Deferred(lambda watch=True, stop=None, names=list(r.predictors), start=start:
                                   self.study.fit(names, rows=rows, start=start, watch_warnings=watch, stop=stop)))
            for r in self.rungs:
                if r.previous is not None:
                    before = copy.copy(self.rungs[r.previous])
                    r.deferred.test = lambda fit, before=before, names=r.predictors: self._test(before,
                                                                                               Rung(names, fit))
            return
        fits = [self.study.fit(list(r.predictors), rows=rows, start=r.fit if r.fitted else None)
                for r in self.rungs]
        for rung, fit in zip(self.rungs, fits):
            rung.fit = fit
        for rung in self.rungs:
            if rung.previous is not None:
                rung.against_previous = self._test(self.rungs[rung.previous], rung)

    def nested(self, i: int, j: int) -> LikelihoodRatioTest | None:
        """The likelihood-ratio test between rungs i and j, or None when neither is nested in the other."""
        return self._test(self.rungs[i], self.rungs[j])

    def refit(self) -> None:
        """Refit every rung (after a change of role or reference level)."""
        union = self.used_predictors
        if not union and not self.rungs:
            return
        rows = self.study.complete_rows(union)
        self.rows = rows
        self._refit_all(rows)
        self.events.changed.emit("refitted")

    def select(self, index: int) -> Rung:
        """Return to an earlier rung (it becomes the current model; nothing is removed)."""
        if not 0 <= index < len(self.rungs):
            raise ModelError(f"There is no model number {index + 1} in the ladder.")
        self.current = index
        self.events.changed.emit("selected")
        return self.rungs[index]

    def compare(self, i: int, j: int) -> Comparison:
        """Compare rungs i and j: likelihood-ratio test if nested, else AIC and BIC only."""
        a, b = self.rungs[i], self.rungs[j]
        test = self._test(a, b)
        d_aic = b.fit.aic - a.fit.aic
        d_bic = b.fit.bic - a.fit.bic
        if test is not None:
            note = "One model is nested in the other, so the likelihood-ratio test applies."
        elif set(a.predictors) == set(b.predictors):
            note = "The two models have the same predictors."
        else:
            note = ("Neither model contains the other, so no likelihood-ratio test applies; "
                    "compare them by AIC and BIC (lower is better; a difference under 2 is small).")
        from twofold.core.assessing.discrimination import delong_paired

        auc_test = None
        if np.array_equal(a.fit.design.rows, b.fit.design.rows):
            auc_test = delong_paired(a.fit.design.y, a.fit.fitted, b.fit.fitted)
        return Comparison(i, j, test is not None, test, d_aic, d_bic, note, auc_test)
