"""Turn the core's objects into display records (runs on the worker thread).

Every number here is read from the core (:class:`~twofold.core.fit.LogisticFit`,
:class:`~twofold.core.ladder.Ladder`) and formatted with the core's own
:mod:`twofold.core.text` helpers, so the window words things exactly as the
command line does.  Nothing here imports Qt.
"""

from __future__ import annotations

import math

from twofold.core.roles import MAX_CATEGORY_LEVELS, Role
from twofold.core.text import fmt_num, fmt_or, fmt_p, reading_nested, reading_overall
from twofold.gui.views import (
    ROLE_LABELS, AssessmentView, ColumnView, CoefficientLine, ComparisonView, LadderRow, LadderView, NoteView,
    OutcomeView, ResultsView, StudyView, TestView,
)


def value_label(v) -> str:
    """An outcome or level value as text: 1.0 -> '1', numpy scalars as Python."""
    if hasattr(v, "item"):
        v = v.item()
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def _degrees(df: int) -> str:
    return f"{df} degree{'s' if df != 1 else ''} of freedom"


def _role_choices(info) -> tuple:
    """The roles worth offering for a column, as (value, label) pairs."""
    out = []
    if info.is_number:
        out.append(Role.NUMERIC)
    if info.n_levels == 2:
        out.append(Role.BINARY)
    if 2 <= info.n_levels <= MAX_CATEGORY_LEVELS:
        out.append(Role.CATEGORICAL)
    out.append(Role.EXCLUDED)
    if info.role not in out:
        out.insert(0, info.role)
    return tuple((r.value, ROLE_LABELS[r.value]) for r in out)


def _is_factor(info) -> bool:
    """Whether the core encodes this column as groups against a reference level."""
    return info.role == Role.CATEGORICAL or (info.role == Role.BINARY and not info.is_number)


def column_views(study) -> tuple:
    out = []
    for name, info in study.columns.items():
        reference = None
        factor = _is_factor(info) and name != study.outcome
        if factor:
            try:
                reference = study.reference(name)
            except Exception:  # a column the core cannot encode: show no reference
                factor = False
        out.append(ColumnView(
            name=name, role=info.role.value, role_label=ROLE_LABELS[info.role.value],
            inferred_role=info.inferred_role.value, is_number=info.is_number,
            n_levels=info.n_levels, n_missing=info.n_missing,
            levels=tuple(info.levels) if factor else (),
            level_labels=tuple(value_label(v) for v in info.levels) if factor else (),
            counts=tuple(info.counts) if factor else (),
            reference=reference, reference_label=value_label(reference) if reference is not None else "",
            is_factor=factor, reason=info.reason, role_choices=_role_choices(info),
        ))
    return tuple(out)


def study_view(study, with_cells: bool = True) -> StudyView:
    """The record of a loaded study; ``with_cells`` adds the cell arrays for the data table."""
    import pandas as pd

    frame = study.frame
    arrays = ()
    numeric = ()
    if with_cells:
        # to_numpy() on these columns is a view, not a copy: no per-row work.
        arrays = tuple(frame[c].to_numpy() for c in frame.columns)
        numeric = tuple(bool(pd.api.types.is_numeric_dtype(frame[c].dtype)) for c in frame.columns)
    return StudyView(
        source=study.source, path=str(study.table.path), n_rows=study.n_rows,
        columns=column_views(study), candidates=tuple(study.candidates()),
        notices=tuple(n.message for n in study.table.notices),
        arrays=arrays, numeric=numeric, outcome=study.outcome,
    )


def outcome_view(study, message: str = "", needs_event: bool = False, name: str | None = None) -> OutcomeView:
    if needs_event and name is not None:
        info = study.columns[name]
        return OutcomeView(name, None, "", tuple(info.levels), tuple(value_label(v) for v in info.levels),
                           True, message)
    if study.outcome is None:
        return OutcomeView(None)
    levels = tuple(study.outcome_levels)
    return OutcomeView(study.outcome, study.event, value_label(study.event), levels,
                       tuple(value_label(v) for v in levels), False, message)


# ---- results --------------------------------------------------------------

def _predictors_text(predictors) -> str:
    return ", ".join(predictors) if predictors else "none (overall event rate only)"


def _change_text(rung) -> str:
    parts = [f"+ {p}" for p in rung.added] + [f"\u2212 {p}" for p in rung.removed]
    return ", ".join(parts)


def _term_label(row) -> str:
    if row["level"] is None:
        return f"{row['column']} (per 1 unit)"
    return f"{row['column']}: {value_label(row['level'])} vs {value_label(row['reference'])}"


def coefficient_lines(fit, warned: dict) -> tuple:
    """Rows of the coefficient table: a heading with the joint test above each factor's levels."""
    rows = fit.coefficient_rows
    tests = fit.term_tests
    lines = []
    headed = set()
    for r in rows[1:]:
        col = r["column"]
        if col in tests and col not in headed:
            t = tests[col]
            n_groups = len(fit.term_index[col]) + 1
            ref = value_label(r["reference"]) if r["reference"] is not None else ""
            lines.append(CoefficientLine(
                kind="heading", column=col,
                label=(f"{col} as a whole\njoint Wald chi-square {fmt_num(t.statistic, 2)} "
                       f"on {_degrees(t.df)}"),
                texts={"p_value": fmt_p(t.p_value), "statistic": fmt_num(t.statistic, 2), "df": str(t.df),
                       "groups": f"{n_groups} groups, compared with {ref}"},
                values={"p_value": t.p_value, "statistic": t.statistic, "df": t.df},
                warnings=tuple(warned.get(col, ())),
            ))
            headed.add(col)
        values = {k: r[k] for k in ("odds_ratio", "or_ci_low", "or_ci_high", "p_value", "z",
                                    "estimate", "std_error")}
        texts = {
            "odds_ratio": fmt_or(r["odds_ratio"]),
            "ci": f"{fmt_or(r['or_ci_low'])} to {fmt_or(r['or_ci_high'])}",
            "p_value": fmt_p(r["p_value"]),
            "z": fmt_num(r["z"], 2),
            "estimate": fmt_num(r["estimate"], 4),
            "std_error": fmt_num(r["std_error"], 4),
        }
        lines.append(CoefficientLine("term", col, _term_label(r), texts, values,
                                     tuple(warned.get(col, ())), level=r["level"]))
    i = rows[0]
    lines.append(CoefficientLine(
        "intercept", None, "baseline odds (intercept)",
        {"odds_ratio": "", "ci": "", "p_value": fmt_p(i["p_value"]), "z": fmt_num(i["z"], 2),
         "estimate": fmt_num(i["estimate"], 4), "std_error": fmt_num(i["std_error"], 4)},
        {k: i[k] for k in ("p_value", "z", "estimate", "std_error")},
    ))
    return tuple(lines)


def overall_view(fit) -> TestView:
    t = fit.overall
    if t.df <= 0:
        return TestView("The model as a whole", "No predictors are ticked, so there is nothing to test yet.",
                        reading_overall(None), None, 0, None)
    text = (f"Likelihood-ratio (G) test against the constant-only model: G = {fmt_num(t.g, 2)} "
            f"on {_degrees(t.df)}, p-value {fmt_p(t.p_value)}.")
    return TestView("The model as a whole", text, reading_overall(t.p_value), t.g, t.df, t.p_value)


def nested_between(ladder, i: int, j: int):
    """The core's likelihood-ratio test between rungs i and j when one is nested in the other, else None.

    ``Ladder.nested`` gives just the test (two log-likelihoods), without the
    AUC comparison that ``Ladder.compare`` adds at the cost of a sort of every row.
    """
    return ladder.nested(i, j)
    if sa <= sb:
        return nested_test(a.fit, b.fit)
    if sb <= sa:
        t = nested_test(b.fit, a.fit)
        return LikelihoodRatioTest(t.g, t.df, t.p_value, added=(), removed=tuple(p for p in a.predictors
                                                                                 if p not in sb),
                                   n_rows=t.n_rows)
    return None


def nested_view(ladder, parent: int, index: int) -> TestView:
    """The test of rung ``index`` against the rung it was built from."""
    rung = ladder.rungs[index]
    change = _change_text(rung) or "no change of predictors"
    title = f"Change from model {parent + 1} ({change})"
    t = nested_between(ladder, parent, index)
    if t is None:
        cmp = ladder.compare(parent, index)
        text = (f"{cmp.note} AIC difference (this model minus model {parent + 1}): "
                f"{fmt_num(cmp.aic_difference, 2)}; BIC difference: {fmt_num(cmp.bic_difference, 2)}.")
        return TestView(title, text, "", None, None, None, nested=False)
    which = list(t.added) or list(t.removed)
    rows = f", both on the same {t.n_rows:,} rows" if t.n_rows else ""
    if t.removed:
        lead = f"Test of the larger model (with {', '.join(t.removed)}) against this one{rows}"
    else:
        lead = f"Test of this model against model {parent + 1}{rows}"
    text = f"{lead}: G = {fmt_num(t.g, 2)} on {_degrees(t.df)}, p-value {fmt_p(t.p_value)}."
    reading = reading_nested(t.p_value if t.df > 0 else None, which)
    return TestView(title, text, reading, t.g, t.df, t.p_value)


def ladder_view(ladder, parents: dict) -> LadderView:
    rows = []
    for k, rung in enumerate(ladder.rungs):
        fit = rung.fit
        g = df = p = None
        parent = parents.get(k)
        texts = {"n_params": str(fit.n_params), "log_likelihood": fmt_num(fit.llf, 2),
                 "aic": fmt_num(fit.aic, 1), "g": "", "df": "", "p_value": ""}
        change = "first model"
        if parent is not None:
            change = (_change_text(rung) or "no change") + f" (from model {parent + 1})"
            test = nested_between(ladder, parent, k)
            if test is not None:
                g, df, p = test.g, test.df, test.p_value
                texts.update(g=fmt_num(g, 2), df=str(df), p_value=fmt_p(p))
            else:
                texts.update(g="not nested")
        rows.append(LadderRow(k, tuple(rung.predictors), _predictors_text(rung.predictors), change,
                              fit.n_params, fit.llf, fit.aic, g, df, p, texts, k == ladder.current))
    n = len(ladder.rows) if ladder.rows is not None else 0
    return LadderView(tuple(rows), ladder.current, n, tuple(x.message for x in ladder.notices))


def results_view(study, ladder, parents: dict) -> ResultsView | None:
    """The current rung's results, or None when the ladder is empty."""
    if ladder is None or ladder.current is None or not ladder.rungs:
        return None
    index = ladder.current
    rung = ladder.rungs[index]
    fit = rung.fit
    in_model = set(rung.predictors)
    warned: dict[str, list[str]] = {}
    predictor_notes, model_notes = [], []
    for n in fit.notices:
        subjects = [s for s in n.subjects if s in in_model]
        if subjects:
            for s in subjects:
                warned.setdefault(s, []).append(n.message)
                predictor_notes.append(NoteView(n.code, n.message, s))
        else:
            model_notes.append(NoteView(n.code, n.message, None))
    account = getattr(fit, "account", None)
    rows_read = account.rows_read if account else fit.n_used
    share = 100.0 * fit.events / max(fit.n_used, 1)
    epp = fit.events_per_parameter
    epp_text = (f"events per coefficient: {fmt_num(epp, 1)} (counting the rarer outcome)"
                if math.isfinite(epp) else "no coefficients besides the intercept")
    counts = (f"Rows used: {fit.n_used:,} of {rows_read:,}  \u00b7  with the event: {fit.events:,} "
              f"({share:.1f}%)  \u00b7  {epp_text}")
    event_label = value_label(study.event)
    title = f"Model {index + 1} of {len(ladder.rungs)}: the odds that {study.outcome} = {event_label}"
    parent = parents.get(index)
    previous = nested_view(ladder, parent, index) if parent is not None else None
    return ResultsView(
        rung=index, n_rungs=len(ladder.rungs), outcome=study.outcome, event_label=event_label,
        predictors=tuple(rung.predictors), title=title, counts_text=counts,
        lines=coefficient_lines(fit, warned), overall=overall_view(fit), previous=previous,
        predictor_notes=tuple(predictor_notes), model_notes=tuple(model_notes),
        ladder=ladder_view(ladder, parents), rows_used=fit.n_used, rows_read=rows_read,
        events=fit.events, events_per_parameter=epp if math.isfinite(epp) else None,
        log_likelihood=fit.llf,
    )


def comparison_view(ladder, i: int, j: int) -> ComparisonView:
    """Rungs i and j compared (likelihood-ratio test when nested; AIC and BIC always)."""
    c = ladder.compare(i, j)
    a, b = i + 1, j + 1
    diffs = (f"AIC difference (model {b} minus model {a}): {fmt_num(c.aic_difference, 2)}; "
             f"BIC difference: {fmt_num(c.bic_difference, 2)}; lower is better.")
    auc = getattr(c, "auc_test", None)
    if auc is not None:
        diffs += (f" Area under the ROC curve (c statistic): model {a} {fmt_num(auc.auc_a, 3)}, model {b} "
                  f"{fmt_num(auc.auc_b, 3)}; paired DeLong test of the difference, p-value {fmt_p(auc.p_value)}.")
    if c.test is None:
        return ComparisonView(i, j, False, diffs, "", c.note, aic_difference=c.aic_difference,
                              bic_difference=c.bic_difference)
    t = c.test
    if t.added:
        small, large, which = a, b, list(t.added)
    else:
        small, large, which = b, a, list(t.removed)
    text = (f"Model {small} is nested in model {large} (both on the same {t.n_rows:,} rows). "
            f"Likelihood-ratio test: G = {fmt_num(t.g, 2)} on {_degrees(t.df)}, p-value {fmt_p(t.p_value)}. "
            + diffs)
    reading = reading_nested(t.p_value if t.df > 0 else None, which)
    return ComparisonView(i, j, True, text, reading, c.note, t.g, t.df, t.p_value,
                          c.aic_difference, c.bic_difference)


# ---- assessment -------------------------------------------------------------

#: Shown in and beside the calibration plot when the smoothed curve is unsteady.
SMOOTH_UNRELIABLE_NOTE = (
    "Fewer than 200 records with the event or without it: the smoothed curve is unsteady, "
    "so read the risk groups rather than the curve."
)


def _pct(x) -> str:
    return "not available" if x is None or not math.isfinite(x) else f"{100 * x:.1f}%"


def assessment_view(study, ladder, result, figures: dict) -> AssessmentView:
    """The assessment of the model shown, worded (``result`` is a core ``Assessment``)."""
    from twofold.core.assessment import APPARENT_CALIBRATION_NOTE, HOSMER_LEMESHOW_NOTE, THRESHOLD_NOTE
    from twofold.core.influence import VIF_THRESHOLD

    index = ladder.current
    fit = ladder.rungs[index].fit
    a = result.auc
    values = {"auc": a.auc, "auc_ci_low": a.ci_low, "auc_ci_high": a.ci_high, "brier": result.brier,
              "scaled_brier": result.scaled_brier, "calibration_slope": result.calibration.slope,
              "calibration_intercept": result.calibration.intercept,
              "mcfadden_r2": result.pseudo_r2.mcfadden, "cox_snell_r2": result.pseudo_r2.cox_snell,
              "nagelkerke_r2": result.pseudo_r2.nagelkerke, "tjur_r2": result.pseudo_r2.tjur}
    auc_text = (f"Area under the ROC curve (c statistic): {fmt_num(a.auc, 3)}, "
                f"95% confidence interval {fmt_num(a.ci_low, 3)} to {fmt_num(a.ci_high, 3)}.")
    auc_reading = ("Of a random pair of records, one with the event and one without, the model gives the one "
                   f"with the event the higher risk in {_pct(a.auc)} of pairs (50% is no better than a coin toss)."
                   if math.isfinite(a.auc) else "")
    brier_text = (f"Brier score (mean squared gap between predicted risk and outcome): {fmt_num(result.brier, 4)}; "
                  f"scaled Brier score (share of the constant-risk model's Brier score removed): "
                  f"{fmt_num(result.scaled_brier, 3)}.")
    c = result.calibration
    calibration_text = (f"Calibration slope: {fmt_num(c.slope, 3)}; calibration-in-the-large "
                        f"(intercept with the slope fixed at 1): {fmt_num(round(c.intercept, 3) + 0.0, 3)}.")
    hl = result.hosmer_lemeshow
    if hl is None:
        hl_text = "Hosmer-Lemeshow test: not available for these data (too few distinct risk groups)."
    else:
        values.update(hl_statistic=hl.statistic, hl_df=int(hl.df), hl_p_value=hl.p_value)
        hl_text = (f"Hosmer-Lemeshow test over {hl.groups_used} risk groups: chi-square {fmt_num(hl.statistic, 2)} "
                   f"on {_degrees(int(hl.df))}, p-value {fmt_p(hl.p_value)}.")
    r = result.pseudo_r2
    pseudo = (f"Pseudo-R-squared: McFadden {fmt_num(r.mcfadden, 3)}, Cox-Snell {fmt_num(r.cox_snell, 3)}, "
              f"Nagelkerke {fmt_num(r.nagelkerke, 3)}, Tjur {fmt_num(r.tjur, 3)} (each on its own scale; "
              "none is the share of variation explained).")
    drop = tuple(
        (t.column, f"G = {fmt_num(t.g, 2)} on {_degrees(int(t.df))}, p-value {fmt_p(t.p_value)}",
         f"Wald chi-square {fmt_num(t.wald, 2)}, p-value {fmt_p(t.wald_p_value)}", bool(t.prefer_lr))
        for t in result.drop_one)
    vif = ()
    if result.vif is not None:
        vif = tuple((name, fmt_num(rec.gvif_adjusted ** 2, 2), bool(rec.flagged))
                    for name, rec in zip(result.vif_names, result.vif.records))
    vif_note = (f"Variance inflation above {VIF_THRESHOLD:g} (common practice) means the predictor is largely "
                "predictable from the others, so its odds ratio is unsteady.")
    s = result.sample_size
    short = False
    if s is None:
        sample = "Minimum sample size (Riley et al. 2020): not computed for this model."
    else:
        short = fit.n_used < s.n_minimum
        values.update(n_minimum=int(s.n_minimum))
        sample = (f"Minimum sample size for {s.parameters} coefficient{'s' if s.parameters != 1 else ''} "
                  f"(Riley et al. 2020): {s.n_minimum:,} rows, about {fmt_num(s.expected_events, 0)} with the "
                  f"event; rows used: {fit.n_used:,}"
                  + (" — fewer than needed, so expect the model to be over-fitted." if short else
                     " — enough."))
    influential = tuple((d["row"], fmt_num(d["cooks_distance"], 4), fmt_num(d["leverage"], 4))
                        for d in result.influential())
    values["influential_rows"] = tuple(d["row"] for d in result.influential())
    table = result.classification
    classification = ""
    threshold = None
    if table is not None:
        threshold = float(table.threshold)
        values.update(sensitivity=table.sensitivity, specificity=table.specificity,
                      ppv=table.positive_predictive_value, npv=table.negative_predictive_value)
        classification = (
            f"Calling every record with a predicted risk of at least {threshold:.2f} positive: "
            f"sensitivity (events caught) {_pct(table.sensitivity)}, specificity (non-events cleared) "
            f"{_pct(table.specificity)}, positive predictive value {_pct(table.positive_predictive_value)}, "
            f"negative predictive value {_pct(table.negative_predictive_value)} "
            f"({table.true_positives:,} true and {table.false_positives:,} false alarms; "
            f"{table.false_negatives:,} events missed, {table.true_negatives:,} correctly cleared).")
    unreliable = result.smooth is not None and bool(result.smooth.unreliable)
    return AssessmentView(
        rung=index, title=f"How good is model {index + 1}?", auc_text=auc_text, auc_reading=auc_reading,
        brier_text=brier_text, calibration_text=calibration_text, calibration_note=APPARENT_CALIBRATION_NOTE,
        hl_text=hl_text, hl_note=HOSMER_LEMESHOW_NOTE, pseudo_r2_text=pseudo, drop_one=drop, vif=vif,
        vif_note=vif_note, sample_size_text=sample, sample_size_short=short, influential=influential,
        classification_text=classification, threshold=threshold, threshold_note=THRESHOLD_NOTE,
        calibration_plot_note=SMOOTH_UNRELIABLE_NOTE if unreliable else "",
        notes=tuple(n.message for n in result.notices), values=values, figures=dict(figures),
    )
