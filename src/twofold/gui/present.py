"""Turn the core's objects into display records (runs on the worker thread).

Every number here is read from the core (:class:`~twofold.core.models.fit.LogisticFit`,
:class:`~twofold.core.models.ladder.Ladder`) and formatted with the core's own
:mod:`twofold.core.outputs.text` helpers, so the window words things exactly as the
command line does.  Nothing here imports Qt.
"""

from __future__ import annotations

import math

from twofold.core.data.checks import outcome_refusal
from twofold.core.data.roles import MAX_CATEGORY_LEVELS, Role
from twofold.core.models.terms import TIMES, value_text
from twofold.core.outputs.text import (
    curve_reading, degrees, fmt_num, fmt_or, fmt_p, interaction_reading, or_cells, stated_line, reading_nested,
    reading_not_nested, reading_overall, pooled_test_text,
)
from twofold.gui.views import (
    ROLE_LABELS, AssessmentView, ColumnView, CoefficientLine, ComparisonView, LadderRow, LadderView, NoteView,
    OutcomeView, ProfileView, ResultsView, StudyView, TestView,
)

from twofold.core.workspace import is_penalised, profile_auto  # noqa: F401  (used by the panes' texts)



def value_label(v) -> str:
    """An outcome or level value as text: 1.0 -> '1', numpy scalars as Python."""
    return value_text(v)


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
            spline_knots=study.splines.get(name), missing_values=tuple(study.missing_values.get(name, ())),
            outcome_refusal=outcome_refusal(info) or "",
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

def interaction_parts(study, name: str):
    """``(a, b)`` when ``name`` is the interaction "a:b" of two columns, else None."""
    if name in study.columns or ":" not in name:
        return None
    a, b = name.split(":", 1)
    return a.strip(), b.strip()


def term_text(study, name: str, long: bool = False) -> str:
    """A predictor as the user should read it: "age (curved, 4 knots)", "age \u00d7 sex".

    ``long`` adds what an interaction means and where a spline's knots are.
    """
    pair = interaction_parts(study, name)
    if pair is not None:
        text = f"{pair[0]} {TIMES} {pair[1]}"
        return text + (f" (interaction: the effect of {pair[0]} may differ with {pair[1]})" if long else "")
    knots = study.splines.get(name)
    if knots is None:
        return name
    if long:
        try:
            at = ", ".join(f"{v:g}" for v in study.block(name).knots)
        except Exception:  # a spline the core cannot encode is reported by the fit itself
            at = ""
        return f"{name} (curved: spline with {knots} knots" + (f" at {at})" if at else ")")
    return f"{name} (curved, {knots} knots)"


def _predictors_text(predictors, study=None) -> str:
    if not predictors:
        return "none (overall event rate only)"
    return ", ".join(term_text(study, p) if study is not None else p for p in predictors)


def _change_text(rung, study=None) -> str:
    def name(p):
        return term_text(study, p) if study is not None else p

    parts = [f"+ {name(p)}" for p in rung.added] + [f"\u2212 {name(p)}" for p in rung.removed]
    return ", ".join(parts)


#: Tool tips of rows that are not read one by one.
SPLINE_HINT = ("Part of a curved effect (a spline): these rows describe one curve together, and the curve "
               "terms have no meaning on their own. The effect plot (Model shape menu) shows the curve.")
INTERACTION_HINT = ("An interaction coefficient: how much the odds ratio of one predictor is multiplied for "
                    "each step of the other. The Model shape menu shows the odds ratios at chosen values.")


def _heading(col, block, t, first_row) -> tuple[str, str]:
    """The label of a multi-coefficient term's heading row and what its coefficients are."""
    joint = f"all its coefficients together: chi-square {fmt_num(t.statistic, 2)} on {degrees(t.df)}"
    if t.includes:
        return (f"{t.label}\n{joint}",
                f"{t.df} coefficients: its effect together with its interaction{'s' if len(t.includes) > 1 else ''}")
    if block is not None and block.kind == "spline":
        knots = ", ".join(f"{v:g}" for v in block.knots)
        return (f"{col} as a whole, curved (spline with {len(block.knots)} knots)\nknots at {knots}\n{joint}",
                f"{t.df} coefficients describing one curve")
    if block is not None and block.kind == "interaction":
        return (f"{t.label} as a whole (interaction)\n{joint}", f"{t.df} interaction coefficients")
    ref = value_label(first_row["reference"]) if first_row["reference"] is not None else ""
    return f"{col} as a whole\n{joint}", f"{t.df + 1} groups, compared with {ref}"


def coefficient_lines(fit, warned: dict) -> tuple:
    """Rows of the coefficient table: a heading with the joint test above each multi-coefficient term."""
    rows = fit.coefficient_rows
    tests = fit.term_tests
    blocks = {b.column: b for b in fit.design.blocks}
    lines = []
    headed = set()
    for r in rows[1:]:
        col = r["column"]
        block = blocks.get(col)
        if col in tests and col not in headed:
            t = tests[col]
            label, what = _heading(col, block, t, r)
            lines.append(CoefficientLine(
                kind="heading", column=col, label=label,
                texts={"p_value": fmt_p(t.p_value), "statistic": fmt_num(t.statistic, 2), "df": str(t.df),
                       "groups": what},
                values={"p_value": t.p_value, "statistic": t.statistic, "df": t.df},
                warnings=tuple(warned.get(col, ())),
            ))
            headed.add(col)
        values = {k: r[k] for k in ("odds_ratio", "or_ci_low", "or_ci_high", "p_value", "z",
                                    "estimate", "std_error")}
        odds, ci = or_cells(r)
        texts = {
            "odds_ratio": odds,
            "ci": ci,
            "p_value": fmt_p(r["p_value"]),
            "z": fmt_num(r["z"], 2),
            "estimate": fmt_num(r["estimate"], 4),
            "std_error": fmt_num(r["std_error"], 4),
        }
        hint = {"spline": SPLINE_HINT, "interaction": INTERACTION_HINT}.get(getattr(block, "kind", ""), "")
        lines.append(CoefficientLine("term", col, r["label"], texts, values,
                                     tuple(warned.get(col, ())), level=r["level"], name=r["name"], hint=hint))
    i = rows[0]
    lines.append(CoefficientLine(
        "intercept", None, "baseline odds (intercept)",
        {"odds_ratio": "", "ci": "", "p_value": fmt_p(i["p_value"]), "z": fmt_num(i["z"], 2),
         "estimate": fmt_num(i["estimate"], 4), "std_error": fmt_num(i["std_error"], 4)},
        {k: i[k] for k in ("p_value", "z", "estimate", "std_error")}, name=i["name"],
    ))
    return tuple(lines)


def _lr_name(fit) -> str:
    return "Penalised likelihood-ratio" if is_penalised(fit) else "Likelihood-ratio"


def _pooled_text(t) -> str | None:
    """A pooled test's words and figures (kind, F and its degrees of freedom), or None for an ordinary test."""
    if not hasattr(t, "df_denominator"):
        return None
    from twofold.core.outputs.summary import pooled_fields

    return pooled_test_text({"g": t.g, "df": t.df, "p_value": t.p_value, **pooled_fields(t)})


def overall_view(fit) -> TestView:
    t = fit.overall
    if t.df <= 0:
        return TestView("The model as a whole", "No predictors are ticked, so there is nothing to test yet.",
                        reading_overall(None), None, 0, None)
    text = (f"{_lr_name(fit)} (G) test against the constant-only model: G = {fmt_num(t.g, 2)} "
            f"on {degrees(t.df)}, p-value {fmt_p(t.p_value)}.")
    pooled = _pooled_text(t)
    if pooled:
        text = f"{pooled}, against the constant-only model."
    return TestView("The model as a whole", text, reading_overall(t.p_value), t.g, t.df, t.p_value)


def nested_view(ws, parent: int, index: int) -> TestView:
    """The test of rung ``index`` against the rung it was built from (penalised when that fit is shown)."""
    ladder, study = ws.ladder, ws.study
    rung = ladder.rungs[index]
    change = _change_text(rung, study) or "no change of predictors"
    title = f"Change from model {parent + 1} ({change})"
    penalised = ws.penalised
    t = ws.nested_between(parent, index)
    if t is None:
        cmp = ladder.compare(parent, index)
        text = (f"{cmp.note} AIC difference (this model minus model {parent + 1}): "
                f"{fmt_num(cmp.aic_difference, 2)}; BIC difference: {fmt_num(cmp.bic_difference, 2)}.")
        return TestView(title, text, "", None, None, None, nested=False)
    which = [term_text(study, p) if study is not None else p for p in (list(t.added) or list(t.removed))]
    rows = f", both on the same {t.n_rows:,} rows" if t.n_rows else ""
    kind = "Penalised likelihood-ratio test" if penalised else "Test"
    if t.removed:
        lead = f"{kind} of the larger model (with {', '.join(which)}) against this one{rows}"
    else:
        lead = f"{kind} of this model against model {parent + 1}{rows}"
    text = f"{lead}: " + (_pooled_text(t) or f"G = {fmt_num(t.g, 2)} on {degrees(t.df)}, p-value {fmt_p(t.p_value)}") + "."
    reading = reading_nested(t.p_value if t.df > 0 else None, which)
    return TestView(title, text, reading, t.g, t.df, t.p_value)


#: A ladder figure not worked out yet.
PENDING = "being fitted\u2026"


#: The ladder table's headings and tips when it lists pooled fits (column key -> (heading, tip)).
POOLED_LADDER_HEADERS = {
    "log_likelihood": ("Log-likelihood\n(copies' mean)", "Each copy's maximum log-likelihood, averaged over the "
                       "imputed copies (higher fits better)"),
    "aic": ("AIC", "Not defined for models pooled over imputed copies: see the note above the table"),
    "g": ("Pooled test against\nthe model before (F)", "The pooled likelihood-ratio statistic D3 (Meng & Rubin "
          "1992) against the model it was built from, on its F distribution (D2 for penalised fits)"),
    "df": ("Degrees of\nfreedom (F)", "The F distribution's two degrees of freedom: the coefficients added, and "
           "the denominator's (Li, Raghunathan & Rubin 1991)"),
    "p_value": ("p-value", "p-value of the pooled test on its F distribution"),
}

#: Why the ladder shows no AIC for pooled fits (the reason is the core's, :attr:`PooledFit.AIC_NOTE`).
POOLED_LADDER_NOTE = (
    "Missing values are filled in: each row is its model fitted on every one of the {m} imputed copies and pooled. "
    "The log-likelihood is the copies' average, and the test against the model before is the pooled "
    "likelihood-ratio test (D3; D2 for penalised fits) on its F distribution, as in the results pane. "
)


def _pooled_cells(test) -> dict:
    """A pooled test's cells in the ladder table: 'F (kind)', 'k and denominator', p."""
    den = test.df_denominator
    return {"g": f"{fmt_num(test.statistic, 2)} ({test.kind})",
            "df": f"{test.df} and " + ("infinite" if not math.isfinite(den) else fmt_num(den, 1)),
            "p_value": fmt_p(test.p_value)}


def ladder_view(ws) -> LadderView:
    """The ladder table: each rung's fit and its test against the rung it was built from.

    With multiple imputation on, each row is the rung's pooled fit (those not yet made on the copies in force say
    "being fitted" until :meth:`Workspace.complete` makes them) and its pooled nested test.
    """
    ladder, parents, study, penalised = ws.ladder, ws.parents, ws.study, ws.penalised
    pooled = bool(ws.imputation)
    rows = []
    for k, rung in enumerate(ladder.rungs):
        # A model passed over by quicker ticks is fitted just after the newest is shown: it is not waited for.
        fit = ws.known_fit(k)
        g = df = p = None
        parent = parents.get(k)
        texts = {"n_params": "", "log_likelihood": PENDING, "aic": "", "g": "", "df": "", "p_value": ""}
        if fit is not None:
            texts.update(n_params=str(fit.n_params), log_likelihood=fmt_num(fit.llf, 2),
                         aic="not defined" if pooled else fmt_num(fit.aic, 1))
        change = "first model"
        extra = {}
        if parent is not None:
            change = (_change_text(rung, study) or "no change") + f" (from model {parent + 1})"
            ready = fit is not None and ws.known_fit(parent) is not None
            test = PENDING if not ready else ws.nested_between(parent, k) if pooled else ladder.nested(parent, k)
            if test is PENDING:
                texts.update(g=PENDING if fit is not None else "")
            elif test is not None:
                g, df, p = test.g, test.df, test.p_value
                if pooled:
                    texts.update(_pooled_cells(test))
                    extra = {"statistic": test.statistic, "df_denominator": test.df_denominator, "kind": test.kind}
                else:
                    texts.update(g=fmt_num(g, 2), df=str(df), p_value=fmt_p(p))
            else:
                texts.update(g="not nested")
        figures = (fit.n_params, fit.llf, None if pooled else fit.aic) if fit is not None else (None, None, None)
        rows.append(LadderRow(k, tuple(rung.predictors), _predictors_text(rung.predictors, study), change,
                              *figures, g, df, p, texts, k == ladder.current, **extra))
    n = len(ladder.rows) if ladder.rows is not None else 0
    notices = [x.message for x in ladder.notices]
    if pooled:
        # Every row with an outcome (the rows of the complete-rows ladder and its notices do not apply).
        n = next((f.n_used for f in map(ws.known_fit, range(len(ladder.rungs))) if f is not None), 0)
        from twofold.core.models.pooling import PooledFit

        notices = [POOLED_LADDER_NOTE.format(m=ws.imputation["m"]) + PooledFit.AIC_NOTE]
    elif penalised:
        notices.append("The ladder lists the ordinary (maximum-likelihood) fits, so its log-likelihoods, AIC and "
                       "tests differ from the penalised ones the results pane shows for the model chosen.")
    return LadderView(tuple(rows), ladder.current, n, tuple(notices),
                      headers=dict(POOLED_LADDER_HEADERS) if pooled else {})


#: What the results pane says once the penalised fit is chosen.
PENALISED_TEXT = (
    "Penalised fit in use (Firth's method). The estimates, intervals and tests below come from the penalised "
    "likelihood: the model tests are penalised likelihood-ratio tests, the profile intervals are profile "
    "penalised-likelihood intervals, and the Wald intervals use the penalised fit's standard errors. "
    "Predicted risks use the intercept-corrected version (FLIC), so on average they match the observed event rate."
)


def shape_tests(ws, fit) -> tuple:
    """Tests of the model's shape, worded: a straight line against each spline, the model without each interaction."""
    study = ws.study
    out = []
    curves, crossings = ws.shape_tests(fit)
    for t in curves:
        text = (f"{_lr_name(fit)} test of the curve ({len(t.knots)} knots) against a straight line, on the same "
                "rows: " + (_pooled_text(t) or f"G = {fmt_num(t.g, 2)} on {degrees(t.df)}, p-value {fmt_p(t.p_value)}")
                + ".")
        reading = curve_reading(t.term, t.p_value)
        out.append(TestView(f"Is the effect of {t.term} curved?", text, reading, t.g, t.df, t.p_value))
    for t in crossings:
        a, b = interaction_parts(study, t.term) or (t.term, "")
        text = (f"{_lr_name(fit)} test of the model with {a} {TIMES} {b} against the model without it: "
                + (_pooled_text(t) or f"G = {fmt_num(t.g, 2)} on {degrees(t.df)}, p-value {fmt_p(t.p_value)}")
                + ".")
        reading = interaction_reading(a, b, t.p_value)
        out.append(TestView(f"Does the effect of {a} differ with {b}?", text, reading, t.g, t.df, t.p_value))
    return tuple(out)


def profile_view(ws, fit, rung: int) -> ProfileView:
    """The core's profile-likelihood intervals of ``fit`` (profile penalised likelihood for a Firth fit), worded.

    Safe on a thread of its own: the workspace traces them from the read-only fit.
    """
    from twofold.core.errors import TwofoldError

    penalised = is_penalised(fit)
    try:
        intervals = ws.profile_intervals(fit)
    except TwofoldError as exc:
        return ProfileView(rung, penalised, error=f"The profile-likelihood intervals could not be worked out: {exc}")
    missing = [name for name, (lo, hi) in intervals.items() if math.isnan(lo) or math.isnan(hi)]
    texts = {name: ("not available" if name in missing else f"{fmt_or(lo)} to {fmt_or(hi)}")
             for name, (lo, hi) in intervals.items()}
    open_ended = [name for name, (lo, hi) in intervals.items() if lo == 0 or math.isinf(hi)]
    notes = []
    if open_ended:
        notes.append("An interval that reads 0 or infinite has no end on that side: the data set no limit there, "
                     "as happens when a group has only events or only non-events.")
    if missing:
        notes.append("Where an interval reads \"not available\", its ends could not be traced on these rows "
                     "(the likelihood is too flat there); read the Wald interval with care.")
    note = " ".join(notes)
    return ProfileView(rung, penalised, dict(intervals), texts, note)


def results_view(ws) -> ResultsView | None:
    """The current rung's results (its penalised refit when that is chosen), or None when the ladder is empty."""
    if not ws.has_model:
        return None
    study, ladder, parents = ws.study, ws.ladder, ws.parents
    index = ladder.current
    rung = ladder.rungs[index]
    fit = ws.fit_of(index)
    penalised = is_penalised(fit)
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
    if ws.method_problem:
        model_notes.append(NoteView("not_converged", ws.method_problem, None))
        ws.method_problem = ""
    separation = any(n.code == "separation" for n in rung.fit.notices)
    account = getattr(fit, "account", None)
    rows_read = account.rows_read if account else fit.n_used
    share = 100.0 * fit.events / max(fit.n_used, 1)
    epp = fit.events_per_parameter
    epp_text = (f"events per coefficient: {fmt_num(epp, 1)} (counting the rarer outcome)"
                if math.isfinite(epp) else "no coefficients besides the intercept")
    counts = (f"Rows used: {fit.n_used:,} of {rows_read:,}  \u00b7  with the event: {fit.events:,} "
              f"({share:.1f}%)  \u00b7  {epp_text}")
    if ws.imputation:  # which results these are, when the analysis fills in missing values
        counts += (f"  \u00b7  missing values filled in: pooled over {ws.imputation['m']} imputed copies "
                   f"(seed {ws.imputation['seed']})")
    event_label = value_label(study.event)
    title = f"Model {index + 1} of {len(ladder.rungs)}: the odds that {study.outcome} = {event_label}"
    parent = parents.get(index)
    previous = nested_view(ws, parent, index) if parent is not None else None
    contents = "In the model: " + _predictors_text(rung.predictors, study) + "."
    if any(study.splines.get(p) or interaction_parts(study, p) for p in rung.predictors):
        contents = "In the model: " + ", ".join(term_text(study, p, long=True) for p in rung.predictors) + "."
    return ResultsView(
        rung=index, n_rungs=len(ladder.rungs), outcome=study.outcome, event_label=event_label,
        predictors=tuple(rung.predictors), title=title, counts_text=counts,
        lines=coefficient_lines(fit, warned), overall=overall_view(fit), previous=previous,
        predictor_notes=tuple(predictor_notes), model_notes=tuple(model_notes),
        ladder=ladder_view(ws), rows_used=fit.n_used, rows_read=rows_read,
        events=fit.events, events_per_parameter=epp if math.isfinite(epp) else None,
        log_likelihood=fit.llf, contents_text=contents, shape_tests=shape_tests(ws, fit),
        stated_effects=stated_lines(fit),
        penalised=penalised, method_text=PENALISED_TEXT if penalised else "", separation=separation,
        profile_auto=profile_auto(fit) and not ws.imputation,  # no profile intervals for pooled fits
        imputed=(ws.imputation["m"], ws.imputation["seed"]) if ws.imputation else None,
    )


def stated_lines(fit) -> tuple:
    """"sex: M vs F, where age is 63 (median): odds ratio 1.23 (95% interval 1.01 to 1.50)", one per stated effect."""
    from twofold.core.models.modelling import stated_effects

    return tuple(stated_line(e) for e in stated_effects(fit))


def comparison_view(ws, i: int, j: int) -> ComparisonView:
    """Rungs i and j compared (likelihood-ratio test when nested; AIC and BIC always)."""
    c = ws.compare(i, j)
    a, b = i + 1, j + 1
    diffs = (f"AIC difference (model {b} minus model {a}): {fmt_num(c.aic_difference, 2)}; "
             f"BIC difference: {fmt_num(c.bic_difference, 2)}; lower is better.")
    if ws.imputation:
        diffs = "No AIC or BIC: they are not defined for models pooled over imputed copies."
    auc = getattr(c, "auc_test", None)
    if auc is not None:
        diffs += (f" Area under the ROC curve (c statistic): model {a} {fmt_num(auc.auc_a, 3)}, model {b} "
                  f"{fmt_num(auc.auc_b, 3)}; paired DeLong test of the difference, p-value {fmt_p(auc.p_value)}.")
    if c.test is None:
        rungs = ws.ladder.rungs
        same = set(rungs[i].predictors) == set(rungs[j].predictors)
        reading = "" if same else reading_not_nested(a, b, c.aic_difference, auc)
        return ComparisonView(i, j, False, diffs, reading, c.note, aic_difference=c.aic_difference,
                              bic_difference=c.bic_difference)
    t = c.test
    if t.added:
        small, large, which = a, b, list(t.added)
    else:
        small, large, which = b, a, list(t.removed)
    test_text = (_pooled_text(t) or f"Likelihood-ratio test: G = {fmt_num(t.g, 2)} on {degrees(t.df)}, "
                 f"p-value {fmt_p(t.p_value)}")
    text = f"Model {small} is nested in model {large} (both on the same {t.n_rows:,} rows). {test_text}. " + diffs
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


def assessment_view(index: int, result, figures: dict, fit) -> AssessmentView:
    """The assessment of the model shown, worded (``result`` is a core ``Assessment`` of ``fit``)."""
    from twofold.core.assessing.assessment import HOSMER_LEMESHOW_NOTE, THRESHOLD_NOTE
    from twofold.core.assessing.influence import VIF_THRESHOLD

    penalised = is_penalised(fit)
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
                   f"on {degrees(int(hl.df))}, p-value {fmt_p(hl.p_value)}.")
    r = result.pseudo_r2
    pseudo = (f"Pseudo-R-squared: McFadden {fmt_num(r.mcfadden, 3)}, Cox-Snell {fmt_num(r.cox_snell, 3)}, "
              f"Nagelkerke {fmt_num(r.nagelkerke, 3)}, Tjur {fmt_num(r.tjur, 3)} (each on its own scale; "
              "none is the share of variation explained).")
    drop = tuple(
        (t.label, f"G = {fmt_num(t.g, 2)} on {degrees(int(t.df))}, p-value {fmt_p(t.p_value)}",
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
                  f"(Riley et al. 2020, with this model's apparent Cox-Snell R-squared of {fmt_num(s.r2_cs, 3)}): "
                  f"{s.n_minimum:,} rows, about {fmt_num(s.expected_events, 0)} with the event; rows used: "
                  f"{fit.n_used:,}"
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
        rung=index, title=f"How good is model {index + 1}?" + (
            " (penalised fit; predicted risks intercept-corrected, FLIC)" if penalised else ""),
        auc_text=auc_text, auc_reading=auc_reading,
        brier_text=brier_text, calibration_text=calibration_text,
        calibration_note=result.calibration_note,
        hl_text=hl_text, hl_note=HOSMER_LEMESHOW_NOTE if hl is None else hl.note, pseudo_r2_text=pseudo, drop_one=drop, vif=vif,
        vif_note=vif_note, sample_size_text=sample, sample_size_short=short, influential=influential,
        classification_text=classification, threshold=threshold, threshold_note=THRESHOLD_NOTE,
        calibration_plot_note=SMOOTH_UNRELIABLE_NOTE if unreliable else "",
        notes=tuple(n.message for n in result.notices), values=values, figures=dict(figures),
        penalised=penalised,
    )


def _pooled_hl_text(hl: dict | None) -> str:
    if hl is None:
        return "Hosmer-Lemeshow test: not available for these copies (too few risk groups, or not the same in each)."
    return (f"Hosmer-Lemeshow test over {hl['groups']} risk groups: "
            + pooled_test_text({**hl, "statistic": hl["statistic"] / hl["df"], "g": hl["statistic"]}) + ".")


def pooled_assessment_view(index: int, a: dict, fit, figures=None, curves=None) -> AssessmentView:
    """The pooled assessment (the core's record of it, ``Workspace.pooled_assessment``), worded, with the figures of
    the pooled predictions (``curves``: :func:`twofold.core.models.pooling.pooled_curves`; ``figures``: their pictures,
    drawn) when given."""
    lo, hi = a["auc_ci"]
    plot_note = ""
    if curves is not None:
        unsteady = curves.smooth is not None and bool(curves.smooth.unreliable)
        plot_note = curves.note + (" " + SMOOTH_UNRELIABLE_NOTE if unsteady else "")
    auc = a["auc"]
    drop = tuple(
        (t["label"], pooled_test_text({**t, "g": t["g"]}) if t["available"] else "not available",
         f"D1 Wald chi-square {fmt_num(t['wald'], 2)}, p-value {fmt_p(t['wald_p_value'])}", bool(t["prefer_lr"]))
        for t in a["drop_one"])
    return AssessmentView(
        rung=index, title=f"How good is model {index + 1}? (pooled over the imputed copies)",
        auc_text=(f"Area under the ROC curve (c statistic): {fmt_num(auc, 3)}, 95% confidence interval "
                  f"{fmt_num(lo, 3)} to {fmt_num(hi, 3)} (pooled on the logit scale)."),
        auc_reading=(f"Of a random pair of records, one with the event and one without, the model gives the one with "
                     f"the event the higher risk in {_pct(auc)} of pairs (50% is no better than a coin toss)."
                     if auc is not None else ""),
        brier_text=f"Brier score {fmt_num(a['brier'], 4)}; scaled Brier score {fmt_num(a['scaled_brier'], 3)}.",
        calibration_text=(f"Calibration slope: {fmt_num(a['calibration_slope'], 3)}; calibration-in-the-large: "
                          f"{fmt_num(a['calibration_intercept'], 3)}."),
        calibration_note=a["calibration_note"], hl_text=_pooled_hl_text(a["hosmer_lemeshow"]),
        hl_note="" if a["hosmer_lemeshow"] is None else a["hosmer_lemeshow"]["note"],
        pseudo_r2_text=(f"Pseudo-R-squared (averaged over the copies): McFadden {fmt_num(a['mcfadden_r2'], 3)}, "
                        f"Cox-Snell {fmt_num(a['cox_snell_r2'], 3)}, Nagelkerke {fmt_num(a['nagelkerke_r2'], 3)}, "
                        f"Tjur {fmt_num(a['tjur_r2'], 3)}."),
        drop_one=drop, sample_size_text="Minimum sample size: not worked out for pooled fits.",
        classification_text="Classification at a risk threshold: not pooled (it would count imputed values).",
        threshold_note="The pooled figures above do not depend on the threshold.",
        notes=(a["pooled_note"],), values={"auc": auc, "auc_ci_low": lo, "auc_ci_high": hi},
        penalised=is_penalised(fit), figures=dict(figures or {}), calibration_plot_note=plot_note,
    )


def side_by_side(ws) -> dict:
    """The model shown, pooled over the imputed copies beside its fit on complete rows only, worded row by row.

    ``{"title", "headers", "rows"}``; each row: coefficient, pooled odds ratio (95% interval), complete-rows odds
    ratio (95% interval), missing information.
    """
    from twofold.core.errors import ModelError

    if not ws.imputation or not ws.has_model:
        raise ModelError("Choose 'fill in by multiple imputation' under missing values first; the two are then "
                         "shown side by side.")
    index = ws.ladder.current
    pooled = ws.fit_of(index)
    complete = ws.study.fit(list(ws.ladder.rungs[index].predictors), firth=ws.penalised)
    by_name = {r["name"]: r for r in complete.coefficient_rows}

    def cell(r):
        if r is None:
            return "not in this fit"
        odds, ci = or_cells(r)
        return f"{odds} ({ci})"

    rows = tuple((r["label"], cell(r), cell(by_name.get(r["name"])), fmt_num(r.get("fmi"), 2))
                 for r in pooled.coefficient_rows[1:])
    return {"title": f"Model {index + 1}: imputed and pooled over {pooled.m} copies ({pooled.n_used:,} rows) beside "
                     f"complete rows only ({complete.n_used:,} rows)",
            "headers": ("coefficient", "odds ratio, imputed and pooled (95% interval)",
                        "odds ratio, complete rows only (95% interval)", "missing information"),
            "rows": rows}
