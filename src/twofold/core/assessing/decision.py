"""Decision curves: would acting on the model's risks do more good than harm?

At a threshold risk t a clinician treats (or investigates) everyone whose
predicted risk is at least t.  The threshold says how a missed event weighs
against a needless treatment: choosing t means accepting t/(1-t) needless
treatments to catch one event.  The net benefit of the model at t is

    NB_model(t) = TP/n - FP/n * t/(1-t)

(TP, FP the true and false positives among the n records), beside treating
everyone, NB_all(t) = prevalence - (1 - prevalence) * t/(1-t), and treating no
one, NB_none = 0.  A model is worth using at the thresholds where its net
benefit is above both.

References
----------
Vickers AJ, Elkin EB (2006). Decision curve analysis: a novel method for
evaluating prediction models. Medical Decision Making 26:565-574.

Vickers AJ, Van Calster B, Steyerberg EW (2019). A simple, step-by-step guide
to interpreting decision curve analysis. Diagnostic and Prognostic Research 3:18.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from twofold.core.errors import ModelError

#: The thresholds used when none are given: 5% to 50% in steps of 1%.
DEFAULT_RANGE = (0.05, 0.5, 0.01)
#: The most thresholds one curve may have.
MAX_THRESHOLDS = 10_000

#: Written beside every decision curve.
DECISION_NOTE = (
    "Net benefit counts true positives minus false positives weighted by the odds of the threshold, per person; "
    "the threshold is a clinical choice (how many needless treatments one caught event is worth), so read the "
    "curve over the thresholds that clinicians would accept."
)


def threshold_grid(low: float, high: float, step: float) -> np.ndarray:
    """The thresholds low, low + step, ..., up to high (included when the steps reach it).

    Each threshold is rounded to 12 decimals so that, e.g., 0.05 + 5 * 0.01 is
    0.1 exactly as written.

    Raises
    ------
    ModelError
        Thresholds outside 0 to 1 (both excluded), low above high, a step that
        is not positive, or more than :data:`MAX_THRESHOLDS` thresholds.
    """
    values = (low, high, step)
    if not all(isinstance(v, (int, float)) and math.isfinite(v) for v in values):
        raise ModelError("The thresholds must be ordinary numbers; give LOW:HIGH:STEP, for example 0.05:0.5:0.01.")
    if not (0 < low < 1 and 0 < high < 1):
        raise ModelError(f"The thresholds {low:g} to {high:g} should be risks between 0 and 1 (both excluded); "
                         "give for example 0.05:0.5:0.01.")
    if low > high:
        raise ModelError(f"The lowest threshold {low:g} is above the highest {high:g}; give LOW:HIGH:STEP with LOW "
                         "at most HIGH, for example 0.05:0.5:0.01.")
    if not step > 0:
        raise ModelError(f"The step {step:g} between thresholds should be above 0; give for example 0.05:0.5:0.01.")
    steps = (high - low) / step + 1e-9
    if not steps < MAX_THRESHOLDS:  # also a step so small that the count overflows
        raise ModelError(f"The range {low:g} to {high:g} in steps of {step:g} gives more than the "
                         f"{MAX_THRESHOLDS:,} thresholds allowed; take a larger step.")
    count = int(math.floor(steps)) + 1
    return np.round(low + step * np.arange(count), 12)


def parse_range(text: str) -> tuple[float, float, float]:
    """``"LOW:HIGH:STEP"`` (risks, e.g. ``"0.05:0.5:0.01"``) into (low, high, step), checked by :func:`threshold_grid`."""
    parts = str(text).split(":")
    if len(parts) != 3:
        raise ModelError(f"{text!r} should be three numbers LOW:HIGH:STEP, for example 0.05:0.5:0.01.")
    try:
        low, high, step = (float(p) for p in parts)
    except ValueError:
        raise ModelError(f"{text!r} holds something that is not a number; give LOW:HIGH:STEP as risks, "
                         "for example 0.05:0.5:0.01.") from None
    threshold_grid(low, high, step)
    return low, high, step


def grid_from_setting(value) -> np.ndarray:
    """The thresholds of a saved ``[LOW, HIGH, STEP]`` (an analysis setting or a session's field).

    Raises
    ------
    ModelError
        Anything but three numbers making a valid range.
    """
    if (not isinstance(value, (list, tuple)) or len(value) != 3
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)):
        raise ModelError("The decision-curve thresholds should be three numbers [LOW, HIGH, STEP], for example "
                         "[0.05, 0.5, 0.01]; save the analysis again from Twofold.")
    return threshold_grid(*(float(v) for v in value))


def net_benefit_values(y, p, thresholds) -> np.ndarray:
    """Net benefit of treating those with ``p >= t``, for each threshold t.

    One sort of the risks serves every threshold: the records at or above t
    are the top of the sorted list, and the events among them a suffix sum.
    """
    y = np.asarray(y, dtype=float)
    p = np.asarray(p, dtype=float)
    t = np.asarray(thresholds, dtype=float)
    n = y.size
    order = np.argsort(p, kind="stable")
    sorted_p = p[order]
    # events_from[i]: events among the records sorted at i or later.
    events_from = np.concatenate([np.cumsum(y[order][::-1])[::-1], [0.0]])
    first = np.searchsorted(sorted_p, t, side="left")
    tp = events_from[first]
    fp = (n - first) - tp
    return tp / n - fp / n * (t / (1.0 - t))


def treat_all_values(prevalence: float, thresholds) -> np.ndarray:
    """Net benefit of treating everyone: prevalence - (1 - prevalence) t/(1-t)."""
    t = np.asarray(thresholds, dtype=float)
    return prevalence - (1.0 - prevalence) * (t / (1.0 - t))


@dataclass(frozen=True, eq=False)
class DecisionCurve:
    """Net benefit of a model, of treating everyone and of treating no one (0), by threshold.

    ``model_corrected`` is the model's net benefit less its bootstrap optimism
    at each threshold, when a bootstrap validation was run.
    """

    thresholds: np.ndarray
    model: np.ndarray
    treat_all: np.ndarray
    prevalence: float
    n: int
    model_corrected: np.ndarray | None = None

    @property
    def best(self) -> np.ndarray:
        """The net benefit the plain reading judges by: the corrected one when there is one."""
        return self.model if self.model_corrected is None else self.model_corrected

    def useful_ranges(self) -> list[tuple[float, float]]:
        """Runs of consecutive thresholds where the model beats both treating everyone and treating no one."""
        better = self.best > np.maximum(self.treat_all, 0.0)
        out = []
        start = None
        for i, ok in enumerate(better):
            if ok and start is None:
                start = i
            if start is not None and (not ok or i == len(better) - 1):
                end = i if ok else i - 1
                out.append((float(self.thresholds[start]), float(self.thresholds[end])))
                start = None
        return out

    def reading(self) -> str:
        """Over which thresholds the model is worth using, in plain words."""
        which = " after correction for optimism" if self.model_corrected is not None else ""
        ranges = self.useful_ranges()
        lo, hi = float(self.thresholds[0]), float(self.thresholds[-1])
        span = f"{_pct(lo)} to {_pct(hi)}" if lo != hi else _pct(lo)
        if not ranges:
            return (f"At no threshold from {span} does acting on the model do better{which} than treating everyone "
                    "and than treating no one.")
        parts = ", ".join(_pct(a) if a == b else f"{_pct(a)} to {_pct(b)}" for a, b in ranges)
        return (f"Acting on the model does better{which} than treating everyone and than treating no one at "
                f"thresholds {parts} (of those examined, {span}).")

    def as_records(self) -> list[dict]:
        """The ``net_benefit`` list of the JSON: {threshold, model, treat_all[, model_corrected]}."""
        from twofold.core.outputs.summary import clean_number

        out = []
        for i, t in enumerate(self.thresholds):
            entry = {"threshold": float(t), "model": clean_number(self.model[i]),
                     "treat_all": clean_number(self.treat_all[i])}
            if self.model_corrected is not None:
                entry["model_corrected"] = clean_number(self.model_corrected[i])
            out.append(entry)
        return out

    def summary(self) -> dict:
        """``net_benefit_summary``: the useful ranges, the plain reading and the note."""
        return {"useful_ranges": [[a, b] for a, b in self.useful_ranges()], "reading": self.reading(),
                "note": DECISION_NOTE}


def _pct(t: float) -> str:
    return f"{100 * t:.4g}%"


def decision_curve(y, p, thresholds, optimism=None) -> DecisionCurve:
    """The decision curve of risks ``p`` for outcomes ``y`` (1 = event) at ``thresholds``.

    Parameters
    ----------
    optimism : array, optional
        Bootstrap optimism of the model's net benefit at each threshold
        (:func:`~twofold.core.models.modelling.bootstrap_validation` with
        ``thresholds``); the corrected curve is the model's less it.
    """
    from twofold.core.assessing.discrimination import outcome_array, probability_array

    yy = outcome_array(y)
    pp = probability_array(p, yy.size)
    t = np.asarray(thresholds, dtype=float)
    if yy.size == 0:
        raise ModelError("There are no records to draw a decision curve from.")
    prevalence = float(yy.mean())
    model = net_benefit_values(yy, pp, t)
    corrected = None
    if optimism is not None:
        corrected = model - np.asarray(optimism, dtype=float)
    return DecisionCurve(t, model, treat_all_values(prevalence, t), prevalence, int(yy.size), corrected)
