"""Assessing a fitted model beyond its tests, in one place.

:func:`assess` gathers discrimination, calibration, pseudo-R-squared,
influence, variance inflation, drop-one likelihood-ratio tests and the
sample-size check for one fit, from the single-purpose modules
(:mod:`~twofold.core.assessing.discrimination`, :mod:`~twofold.core.assessing.calibration`,
:mod:`~twofold.core.assessing.influence`, :mod:`~twofold.core.assessing.samplesize`).  The window,
the command line and reports all read the same :class:`Assessment`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from twofold.core.errors import Notice, TwofoldError
from twofold.core.models.fit import LogisticFit

#: Written beside slope and calibration-in-the-large on the development data.
APPARENT_CALIBRATION_NOTE = (
    "On the records the model was fitted to, the calibration slope is 1 and calibration-in-the-large is 0 "
    "by construction, so these two say nothing here; they become informative on a new extract or after "
    "bootstrap correction."
)

#: Beside the calibration figures of a penalised fit (in place of the note above).
PENALISED_CALIBRATION_NOTE = (
    "With the penalised fit and its intercept correction (FLIC), calibration-in-the-large is 0 by construction "
    "on the records it was fitted to, so it says nothing here; the slope is usually above 1 on them, because the "
    "penalty pulls the estimates towards zero. Both become informative on a new extract or after bootstrap "
    "correction."
)

#: Added to the note when the maximum-likelihood fit stopped before its maximum.
UNSETTLED_CALIBRATION_NOTE = (
    " Here the fit did not settle (see the warnings), so they can stray from 1 and 0."
)

from twofold.core.assessing.calibration import HOSMER_LEMESHOW_NOTE  # noqa: F401  (read by the displays)

#: Written beside the classification table.
THRESHOLD_NOTE = (
    "The risk threshold is a clinical choice that weighs missed cases against false alarms, "
    "not a statistical one."
)

#: How many influential records the record lists.
TOP_INFLUENTIAL = 10


@dataclass
class Assessment:
    """Everything Twofold reports about how good a fitted model is.

    Attributes are the result objects of the single-purpose modules; see
    :meth:`as_record` for the JSON layout.
    """

    auc: object
    roc: object
    brier: float
    scaled_brier: float
    calibration: object
    hosmer_lemeshow: object | None
    groups: object | None
    smooth: object | None
    pseudo_r2: object
    influence: object | None
    rows: np.ndarray
    vif: object | None
    vif_names: list
    drop_one: list
    sample_size: object | None
    classification: object | None = None
    notices: list = field(default_factory=list)
    calibration_note: str = APPARENT_CALIBRATION_NOTE

    def influential(self, k: int = TOP_INFLUENTIAL) -> list[dict]:
        """The k records with the largest Cook's distance: 1-based data row of the file, largest first.

        A record fitted exactly (leverage 1, as in a saturated model) has no
        finite distance: it comes first, with ``None``.
        """
        from twofold.core.outputs.summary import clean_number as num

        if self.influence is None:
            return []
        idx = self.influence.most_influential(k)
        return [{"row": int(self.rows[i]) + 1, "cooks_distance": num(self.influence.cooks_distance[i]),
                 "leverage": num(self.influence.leverage[i])} for i in idx]

    def as_record(self) -> dict:
        """The ``assessment`` object of the ``twofold fit --json`` contract."""
        from twofold.core.outputs.summary import clean_number as num

        hl = self.hosmer_lemeshow
        rec = {
            "auc": num(self.auc.auc),
            "auc_ci": [num(self.auc.ci_low), num(self.auc.ci_high)],
            "auc_se": num(self.auc.se),
            "brier": num(self.brier),
            "scaled_brier": num(self.scaled_brier),
            "calibration_slope": num(self.calibration.slope),
            "calibration_intercept": num(self.calibration.intercept),
            "calibration_note": self.calibration_note,
            "hosmer_lemeshow": None if hl is None else {
                "statistic": num(hl.statistic), "df": int(hl.df), "p_value": num(hl.p_value),
                "groups": int(hl.groups_used), "note": hl.note,
                "small_expected_groups": hl.small_expected_groups,
            },
            "mcfadden_r2": num(self.pseudo_r2.mcfadden),
            "cox_snell_r2": num(self.pseudo_r2.cox_snell),
            "nagelkerke_r2": num(self.pseudo_r2.nagelkerke),
            "tjur_r2": num(self.pseudo_r2.tjur),
            "influential": self.influential(),
            "vif": [] if self.vif is None else [
                {"column": name, "value": num(r.gvif_adjusted ** 2), "gvif": num(r.gvif), "df": int(r.df),
                 "flagged": bool(r.flagged)}
                for name, r in zip(self.vif_names, self.vif.records)
            ],
            "drop_one": [{k: (num(v) if isinstance(v, float) else v) for k, v in t.as_dict().items()}
                         for t in self.drop_one],
            "sample_size": None if self.sample_size is None else {
                k: (num(v) if isinstance(v, float) else v) for k, v in self.sample_size.as_dict().items()
            },
            "notes": [n.as_dict() for n in self.notices],
        }
        if self.classification is not None:
            c = self.classification
            rec["classification"] = {
                "threshold": num(c.threshold), "sensitivity": num(c.sensitivity),
                "specificity": num(c.specificity), "ppv": num(c.positive_predictive_value), "npv": num(c.negative_predictive_value),
                "counts": {"true_positives": c.true_positives, "false_positives": c.false_positives,
                           "false_negatives": c.false_negatives, "true_negatives": c.true_negatives},
                "note": THRESHOLD_NOTE,
            }
        return rec


def assess(study, fit: LogisticFit, threshold: float | None = None, groups: int = 10,
           anticipated_r2_cs: float | None = None, drop_one: bool = True, predicted=None,
           checkpoint=None) -> Assessment:
    """Assess a fit on the rows it was fitted to.

    Parameters
    ----------
    study : Study
        The study the fit came from (needed for the drop-one refits).
    fit : LogisticFit
    threshold : float, optional
        A risk threshold for the classification table.
    groups : int
        Risk groups for the Hosmer-Lemeshow test and the calibration table.
    anticipated_r2_cs : float, optional
        Cox-Snell R-squared for the Riley et al. (2020) sample size;
        default: the current model's.
    drop_one : bool
        Whether to run the drop-one likelihood-ratio tests.
    predicted : array, optional
        Predicted risks to assess instead of the fit's own (e.g. FLIC's).
    checkpoint : callable, optional
        Called between the parts of the work; it may raise to abandon an
        assessment nobody waits for any more (the window's newer tick).
    """
    step = checkpoint if checkpoint is not None else (lambda: None)
    from twofold.core.assessing import calibration as cal
    from twofold.core.assessing import discrimination as disc
    from twofold.core.assessing.influence import gvif, influence_measures
    from twofold.core.assessing.samplesize import riley_minimum_sample_size
    from twofold.core.models.study import drop_one_tests

    y = fit.design.y
    p = fit.fitted if predicted is None else np.asarray(predicted, dtype=float)
    lp = np.log(p) - np.log1p(-p) if predicted is not None else fit.linear_predictor
    notices: list[Notice] = []
    auc = disc.auc_delong(y, p)
    step()
    roc = disc.roc_points(y, p)
    nan = float("nan")
    try:
        calibration = cal.calibration_slope_intercept(y, lp)
    except TwofoldError as exc:
        # Tiny or separated data: the recalibration model has no finite fit.  The
        # figures are shown as not available rather than stopping the assessment.
        calibration = cal.CalibrationFit(nan, nan, nan, nan, nan, nan, nan, nan, 0.95,
                                         (Notice("calibration", str(exc)),))
        notices.append(Notice("calibration", str(exc)))
    try:
        hl = cal.hosmer_lemeshow(y, p, groups)
        table = cal.calibration_groups(y, p, groups)
    except TwofoldError as exc:
        hl, table = None, None
        notices.append(Notice("hosmer_lemeshow", str(exc)))
    step()
    try:
        smooth = cal.smoothed_calibration(y, p)
        notices.extend(smooth.notices)
    except TwofoldError as exc:
        smooth = None
        notices.append(Notice("calibration", str(exc)))
    try:
        pseudo = cal.pseudo_r2(fit.llf, fit.null_llf, fit.n_used, y, p)
    except TwofoldError as exc:
        pseudo = cal.PseudoR2(nan, nan, nan, nan)
        notices.append(Notice("pseudo_r2", str(exc)))
    step()
    X = fit.used_X
    try:
        # The fit's covariance is (X'WX)^-1 at its estimates: no need to form it again.
        infl = influence_measures(X, y, fit.params, cov=fit.cov) if np.all(np.isfinite(fit.params)) else None
    except TwofoldError as exc:
        infl = None
        notices.append(Notice("influence", str(exc)))
    names, groups_idx = [], {}
    for column, idx in fit.term_index.items():
        if len(idx):
            names.append(column)
            groups_idx[column] = [int(i) for i in idx]
    vif_table = None
    if len(names) >= 2:
        try:
            vif_table = gvif(X, groups_idx)
        except TwofoldError as exc:
            notices.append(Notice("collinear", str(exc)))
    step()
    tests = drop_one_tests(study, fit) if drop_one else []
    notices.extend(Notice("drop_one", t.note, (t.column,)) for t in tests if t.note)
    r2 = pseudo.cox_snell if anticipated_r2_cs is None else anticipated_r2_cs
    sample = None
    prevalence = fit.events / fit.n_used
    if fit.n_params > 1 and 0 < r2 < 1 - math.exp(2 * (prevalence * math.log(prevalence)
                                                       + (1 - prevalence) * math.log(1 - prevalence))):
        try:
            sample = riley_minimum_sample_size(fit.n_params - 1, prevalence, r2)
        except TwofoldError as exc:
            notices.append(Notice("sample_size", str(exc)))
    classification = disc.classification_table(y, p, threshold) if threshold is not None else None
    if hasattr(fit, "lr_test_of"):  # a penalised fit: its slope is not 1 on its own data
        note = PENALISED_CALIBRATION_NOTE
    else:
        note = APPARENT_CALIBRATION_NOTE + ("" if fit.converged else UNSETTLED_CALIBRATION_NOTE)
    return Assessment(auc, roc, cal.brier(y, p), cal.scaled_brier(y, p), calibration, hl, table, smooth,
                      pseudo, infl, fit.design.rows, vif_table, names, tests, sample, classification, notices,
                      note)
