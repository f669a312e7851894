"""The content of a report of one analysis for a committee.

The report holds aggregate figures only: no row-level values, no identifiers,
no dates from the data.  Every count of people in its descriptive tables,
risk-group table and cross-tabulations passes through
:mod:`twofold.core.outputs.privacy` (small counts hidden, with complementary
suppression).  Record numbers of influential rows appear only when asked for.

:func:`build_report` builds the content once, as a list of blocks (headings,
paragraphs, tables, figures).  A figure carries the kind of plot and the
aggregate numbers it shows, not a drawing: laying the report out as HTML or
PDF, and drawing its plots, happens outside the statistical core, in
:mod:`twofold.render` (``twofold.render.report_writer.write_report`` writes
the file).  Nothing here imports matplotlib or Qt.
"""

from __future__ import annotations

import datetime as _dt
import platform
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from twofold.core.outputs.privacy import DEFAULT_THRESHOLD, SUPPRESSED, is_small, protect_table, show_count, suppression_note
from twofold.core.outputs.text import fmt_num, fmt_or, fmt_p

#: Cook's distance above 4/n marks an influential record (common practice, a rule of thumb).
COOKS_RULE = 4.0

REFERENCES = {
    "statsmodels": "Seabold S, Perktold J. Statsmodels: econometric and statistical modeling with Python. "
                   "Proceedings of the 9th Python in Science Conference, 2010.",
    "delong": "DeLong ER, DeLong DM, Clarke-Pearson DL. Comparing the areas under two or more correlated receiver "
              "operating characteristic curves: a nonparametric approach. Biometrics 1988;44:837-845.",
    "hl": "Hosmer DW, Lemeshow S. Goodness of fit tests for the multiple logistic regression model. "
          "Communications in Statistics - Theory and Methods 1980;9:1043-1069.",
    "vancalster": "Van Calster B, Nieboer D, Vergouwe Y, De Cock B, Pencina MJ, Steyerberg EW. A calibration "
                  "hierarchy for risk models was defined: from utopia to empirical data. "
                  "Journal of Clinical Epidemiology 2016;74:167-176.",
    "peduzzi": "Peduzzi P, Concato J, Kemper E, Holford TR, Feinstein AR. A simulation study of the number of events "
               "per variable in logistic regression analysis. Journal of Clinical Epidemiology 1996;49:1373-1379.",
    "riley": "Riley RD, Ensor J, Snell KIE, et al. Calculating the sample size required for developing a clinical "
             "prediction model. BMJ 2020;368:m441.",
    "wilson": "Wilson EB. Probable inference, the law of succession, and statistical inference. "
              "Journal of the American Statistical Association 1927;22:209-212.",
    "cook": "Cook RD. Detection of influential observation in linear regression. Technometrics 1977;19:15-18.",
    "fox": "Fox J, Monette G. Generalized collinearity diagnostics. "
           "Journal of the American Statistical Association 1992;87:178-183.",
    "hauck": "Hauck WW, Donner A. Wald's test as applied to hypotheses in logit analysis. "
             "Journal of the American Statistical Association 1977;72:851-853.",
    "firth": "Firth D. Bias reduction of maximum likelihood estimates. Biometrika 1993;80:27-38.",
    "heinze": "Heinze G, Schemper M. A solution to the problem of separation in logistic regression. "
              "Statistics in Medicine 2002;21:2409-2419.",
    "puhr": "Puhr R, Heinze G, Nold M, Lusa L, Geroldinger A. Firth's logistic regression with rare events: accurate "
            "effect estimates and predictions? Statistics in Medicine 2017;36:2302-2317.",
    "venzon": "Venzon DJ, Moolgavkar SH. A method for computing profile-likelihood-based confidence intervals. "
              "Applied Statistics 1988;37:87-94.",
}


# ---------------------------------------------------------------------------
# content blocks
# ---------------------------------------------------------------------------


@dataclass
class Heading:
    text: str
    level: int = 2


@dataclass
class Para:
    text: str
    style: str = "normal"  # normal | note | caution | warning | small


@dataclass
class Bullets:
    items: list
    style: str = "normal"


@dataclass
class Table:
    headers: list
    rows: list          # lists of str
    align: str = ""     # one letter per column: l or r (default: first l, rest r)
    caption: str = ""

    def alignment(self) -> str:
        return self.align or ("l" + "r" * (len(self.headers) - 1))


@dataclass
class Figure:
    """A plot: its kind and the aggregate numbers it shows, with a caption and a text alternative.

    ``kind`` names the plot (``"roc"`` or ``"calibration"``); ``data`` holds
    its numbers as keyword arguments of the drawing function of that kind in
    :mod:`twofold.render.figures` (lists of floats, so the content stays plain).
    """

    kind: str
    data: dict
    caption: str
    alt: str


@dataclass
class Report:
    title: str
    subtitle: str
    blocks: list = field(default_factory=list)

    def add(self, *blocks):
        self.blocks.extend(blocks)

    def text(self) -> str:
        """All the words of the report (headings, paragraphs, table cells, captions), for checks."""
        out = [self.title, self.subtitle]
        for b in self.blocks:
            if isinstance(b, (Heading, Para)):
                out.append(b.text)
            elif isinstance(b, Bullets):
                out.extend(b.items)
            elif isinstance(b, Table):
                out.append(b.caption)
                out.extend(b.headers)
                out.extend(c for row in b.rows for c in row)
            elif isinstance(b, Figure):
                out.extend([b.caption, b.alt])
        return "\n".join(out)


# ---------------------------------------------------------------------------
# building the content
# ---------------------------------------------------------------------------


def _label(t: dict) -> tuple[str, str]:
    if t.get("level") is None:
        return t["column"], "per unit"
    if t.get("reference") is None:
        return t["column"], str(t["level"])
    return t["column"], f"{t['level']} (compared with {t['reference']})"


def _ci(lo, hi, f=fmt_or) -> str:
    return f"{f(lo)} to {f(hi)}"


def _floats(values) -> list[float]:
    return [float(v) for v in np.asarray(values, dtype=float)]


def _pct(a, b) -> str:
    return f"{100.0 * a / b:.1f}%" if b else "n/a"


def _versions() -> list[list[str]]:
    import importlib.metadata as md

    from twofold import __version__

    rows = [["Twofold", __version__], ["Python", platform.python_version()]]
    for name in ("numpy", "scipy", "pandas", "statsmodels", "matplotlib"):
        try:
            rows.append([name, md.version(name)])
        except md.PackageNotFoundError:
            rows.append([name, "not installed"])
    return rows


def _data_section(rep: Report, record: dict, threshold: int, what: str = "model") -> None:
    rep.add(Heading("The records"))
    read, used = record["rows_read"], record["rows_used"]
    left = read - used
    small_left = is_small(left, threshold)
    rows = [
        ["Rows read from the file", SUPPRESSED if small_left else f"{read:,}"],
        ["Rows without an outcome", show_count(record["rows_missing_outcome"], threshold)],
        ["Rows left out (no outcome, or a predictor missing)", show_count(left, threshold)],
        [f"Rows used by the {what}", f"{used:,}"],
        ["Events among them", f"{record['events']:,} ({_pct(record['events'], used)})"],
        ["Non-events among them", f"{record['nonevents']:,} ({_pct(record['nonevents'], used)})"],
    ]
    rep.add(Table(["", "count"], rows, "lr"))
    if small_left:
        rep.add(Para("Fewer than the suppression limit of rows were left out, so the number of rows read is "
                     "suppressed too: with both totals shown, the small number could be worked out.", "note"))
    missing = [[c, show_count(n, threshold)] for c, n in record["missing_by_column"].items()]
    if any(n for n in record["missing_by_column"].values()):
        rep.add(Table(["predictor", "rows missing it (among rows with an outcome)"], missing, "lr",
                      "A row can miss several predictors, so these can add up to more than the rows left out."))
    else:
        rep.add(Para("No predictor value was missing among the rows with an outcome."))
    if is_small(record["events"], threshold) or is_small(record["nonevents"], threshold):
        rep.add(Para(f"The {'events' if is_small(record['events'], threshold) else 'non-events'} number "
                     f"{threshold} or fewer people; they are shown because no model can be described without "
                     "them, so check the local rules before sharing this report.", "warning"))


def _describe_predictors(rep: Report, fit, threshold: int) -> None:
    """Numeric predictors by outcome (mean, SD, median, quartiles) and categorical ones cross-tabulated."""
    X, y = fit.design.X, fit.design.y
    ev, ne = y == 1, y == 0
    rep.add(Heading("The predictors among the rows used"))
    numeric_rows = []
    factor_tables = []
    for block, sl in zip(fit.design.blocks, fit.design.slices):
        if block.kind == "interaction":
            continue  # its columns are products of the predictors already described
        if block.kind in ("numeric", "spline"):
            x = X[:, sl.start]  # a spline's first column is the value itself
            distinct = np.unique(x)
            if len(distinct) == 2:
                factor_tables.append((block.column, [f"{v:g}" for v in distinct],
                                      [x == v for v in distinct], None))
                continue
            cells = [block.column]
            for mask in (ev, ne):
                v = x[mask]
                if is_small(len(v), threshold) or not len(v):
                    cells += [SUPPRESSED, SUPPRESSED]
                    continue
                q1, med, q3 = np.percentile(v, [25, 50, 75])
                sd = float(np.std(v, ddof=1)) if len(v) > 1 else float("nan")
                cells += [f"{fmt_num(float(v.mean()), 2)} ({fmt_num(sd, 2)})",
                          f"{fmt_num(float(med), 1)} ({fmt_num(float(q1), 1)} to {fmt_num(float(q3), 1)})"]
            numeric_rows.append(cells)
        elif block.kind == "factor":
            vals = X[:, sl]
            masks = [vals.sum(axis=1) == 0] + [vals[:, j] == 1 for j in range(block.width)]
            labels = [f"{block.reference} (reference)"] + [str(lvl) for lvl in block.levels]
            factor_tables.append((block.column, labels, masks, block.reference))
    if numeric_rows:
        rep.add(Table(["predictor", "events: mean (SD)", "events: median (quartiles)",
                       "non-events: mean (SD)", "non-events: median (quartiles)"], numeric_rows, "lrrrr",
                      "SD: standard deviation; quartiles: the 25th and 75th percentiles."))
    for column, labels, masks, _ref in factor_tables:
        counts = np.array([[int((m & ev).sum()), int((m & ne).sum())] for m in masks])
        prot = protect_table(counts, threshold)
        shown = prot.as_text()
        rows = []
        for i, label in enumerate(labels):
            e, total = prot.cell(i, 0), prot.row_total(i)
            share = _pct(e, total) if e is not None and total is not None else SUPPRESSED
            rows.append([label, shown[i][0], shown[i][1], shown[i][2], share])
        m = len(labels)
        rows.append(["all rows used", shown[m][0], shown[m][1], shown[m][2], _pct(counts[:, 0].sum(), counts.sum())])
        rep.add(Table([f"{column}", "events", "non-events", "total", "share with the event"], rows, "lrrrr",
                      f"Rows used by the model, by group of {column} and outcome."))


def _coefficient_section(rep: Report, record: dict, fit) -> None:
    rep.add(Heading("The chosen model"))
    method = record.get("method", "maximum likelihood")
    preds = ", ".join(record["predictors"]) or "no predictors"
    rep.add(Para(f"Outcome: {record['outcome']} (event: {record['event']}). Predictors: {preds}. "
                 f"Fitted by {method} on {record['rows_used']:,} rows with {record['parameters']} coefficients "
                 f"(intercept included)."))
    ov = record["overall"]
    if ov and ov["df"]:
        rep.add(Para(f"Likelihood-ratio test of the model against the overall event rate alone: "
                     f"G = {fmt_num(ov['g'], 2)} on {ov['df']} degrees of freedom, p-value {fmt_p(ov['p_value'])}."))
    rep.add(Para(f"Log-likelihood {fmt_num(record['log_likelihood'], 2)} (event rate alone "
                 f"{fmt_num(record['null_log_likelihood'], 2)}); deviance {fmt_num(record['deviance'], 2)}; "
                 f"AIC {fmt_num(record['aic'], 1)}; BIC {fmt_num(record['bic'], 1)}; "
                 f"{fmt_num(record['events_per_parameter'], 1)} of the rarer outcome per coefficient besides "
                 "the intercept."))
    profile = any("or_pl_low" in t for t in record["terms"])
    headers = ["predictor", "group", "odds ratio", "95% interval"] + (["95% profile interval"] if profile else []) \
        + ["p-value", "Wald z", "coefficient", "standard error"]
    rows = []
    for t in record["terms"]:
        col, group = _label(t)
        row = [col, group, fmt_or(t["odds_ratio"]), _ci(t["or_ci_low"], t["or_ci_high"])]
        if profile:
            row.append(_ci(t.get("or_pl_low"), t.get("or_pl_high")))
        row += [fmt_p(t["p_value"]), fmt_num(t["z"], 2), fmt_num(t["estimate"], 4), fmt_num(t["std_error"], 4)]
        rows.append(row)
    i = record["intercept"]
    rows.append(["intercept", "baseline log odds", "", ""] + ([""] if profile else [])
                + [fmt_p(i["p_value"]), fmt_num(i["z"], 2), fmt_num(i["estimate"], 4), fmt_num(i["std_error"], 4)])
    rep.add(Table(headers, rows, "ll" + "r" * (len(headers) - 2),
                  "Odds ratios with 95% Wald intervals; the Wald z tests that a coefficient is zero. "
                  "A numeric predictor's odds ratio is per unit of the column."))
    if record["dropped_columns"]:
        rep.add(Para("Left out as constant or exactly determined by other predictors: "
                     + ", ".join(record["dropped_columns"]) + ".", "note"))
    if record["term_tests"]:
        rep.add(Table(["predictor (all its groups together)", "Wald chi-square", "degrees of freedom", "p-value"],
                      [[t["column"], fmt_num(t["statistic"], 2), str(t["df"]), fmt_p(t["p_value"])]
                       for t in record["term_tests"]]))
    a = record.get("assessment") or {}
    if a.get("drop_one"):
        rows = [[t["column"], fmt_num(t["g"], 2), str(t["df"]), fmt_p(t["p_value"]), fmt_num(t["wald"], 2),
                 fmt_p(t["wald_p_value"]), "yes" if t["prefer_lr"] else ""] for t in a["drop_one"]]
        rep.add(Table(["predictor", "likelihood-ratio G", "degrees of freedom", "p-value", "Wald chi-square",
                       "p-value", "report the likelihood-ratio test"], rows,
                      caption="Each predictor tested by refitting without it on the same rows, beside its Wald "
                              "test. Where the two disagree, or the estimate is so large that the Wald test "
                              "loses power (Hauck & Donner 1977), the likelihood-ratio test is the one to report."))
    if record.get("nonlinearity"):
        rep.add(Table(["predictor", "knots", "likelihood-ratio G", "degrees of freedom", "p-value"],
                      [[t["column"], str(len(t["knots"])), fmt_num(t["g"], 2), str(t["df"]), fmt_p(t["p_value"])]
                       for t in record["nonlinearity"]],
                      caption="Curved effects: each restricted cubic spline tested against a straight line on the "
                              "same rows. The spline's coefficients have no direct reading on their own."))
    if record.get("interaction_tests"):
        rep.add(Table(["interaction", "likelihood-ratio G", "degrees of freedom", "p-value"],
                      [[t["term"], fmt_num(t["g"], 2), str(t["df"]), fmt_p(t["p_value"])]
                       for t in record["interaction_tests"]],
                      caption="Each interaction tested by refitting without it on the same rows. With an "
                              "interaction, the odds ratio of either predictor depends on the other."))
    nested = record.get("nested")
    if nested:
        smaller = ", ".join(nested["smaller_predictors"]) or "no predictors"
        rep.add(Para(f"Smaller model ({smaller}) against this one on the same {nested['rows']:,} rows: "
                     f"likelihood-ratio G = {fmt_num(nested['g'], 2)} on {nested['df']} degrees of freedom, "
                     f"p-value {fmt_p(nested['p_value'])}."))


def _ladder_section(rep: Report, ladder, penalised: bool = False) -> None:
    rep.add(Heading("Models tried"))
    rows = []
    for k, rung in enumerate(ladder.rungs):
        t = rung.against_previous
        change = "; ".join(x for x in (("added " + ", ".join(rung.added)) if rung.added else "",
                                        ("removed " + ", ".join(rung.removed)) if rung.removed else "") if x)
        if change and rung.previous is not None and rung.previous != k - 1:
            change += f" (from model {rung.previous + 1})"
        rows.append([
            f"{k + 1}{' (chosen)' if k == ladder.current else ''}", ", ".join(rung.predictors) or "none",
            str(rung.fit.n_params), fmt_num(rung.fit.aic, 1), fmt_num(rung.fit.bic, 1), change or "",
            "" if t is None else f"G = {fmt_num(t.g, 2)}, {t.df} df, p-value {fmt_p(t.p_value)}",
        ])
    n_rows = len(ladder.rows) if ladder.rows is not None else 0
    note = (f"Every model was fitted on the same {n_rows:,} rows, so nested ones can be compared by the "
            "likelihood-ratio test; lower AIC and BIC are better, and a difference under 2 is small.")
    if penalised:
        note += (" These are the ordinary (maximum-likelihood) fits; the chosen model is reported above by its "
                 "penalised fit, so its AIC there differs from the one in this table.")
    rep.add(Table(["model", "predictors", "coefficients", "AIC", "BIC", "change from the model it was built from",
                   "likelihood-ratio test against that model"], rows, "llrrrll", note))


def _assessment_section(rep: Report, a: dict, assessment, record: dict, threshold: int, frozen: bool,
                        include_records: bool) -> None:
    rep.add(Heading("How well the model separates and predicts" + (" on these records" if frozen else
                                                                  " on the records it was fitted to")))
    lo, hi = a["auc_ci"]
    rep.add(Heading("Discrimination", 3))
    rep.add(Para(f"Area under the ROC curve (c statistic) {fmt_num(a['auc'], 3)}, 95% interval {fmt_num(lo, 3)} to "
                 f"{fmt_num(hi, 3)} (DeLong et al. 1988): the chance that a randomly chosen person with the event "
                 "has a higher predicted risk than one without; 0.5 is a coin toss and 1 perfect."))
    roc = assessment.roc
    rep.add(Figure("roc", {"fpr": _floats(roc.fpr), "tpr": _floats(roc.tpr),
                           "auc": float(a["auc"] or float("nan"))},
                   "ROC curve over all risk thresholds.",
                   f"ROC curve of the model; area under the curve {fmt_num(a['auc'], 3)}."))
    rep.add(Heading("Calibration", 3))
    cal_text = (f"Calibration slope {fmt_num(a['calibration_slope'], 3)} and calibration-in-the-large "
                f"{fmt_num(a['calibration_intercept'], 3)}")
    if frozen and a.get("calibration_slope_ci"):
        s_lo, s_hi = a["calibration_slope_ci"]
        i_lo, i_hi = a["calibration_intercept_ci"]
        cal_text += (f" (95% intervals {fmt_num(s_lo, 3)} to {fmt_num(s_hi, 3)} and {fmt_num(i_lo, 3)} to "
                     f"{fmt_num(i_hi, 3)})")
    rep.add(Para(cal_text + " (Van Calster et al. 2016)."), Para(a["calibration_note"], "note"))
    groups = assessment.groups
    if groups is not None:
        ev = np.rint(np.asarray(groups.observed) * np.asarray(groups.n)).astype(int)
        counts = np.column_stack([ev, np.asarray(groups.n) - ev])
        prot = protect_table(counts, threshold)
        shown = prot.as_text()
        rows, keep = [], []
        for g in range(len(ev)):
            ok = prot.cell(g, 0) is not None and prot.cell(g, 1) is not None and prot.row_total(g) is not None
            # A group with hidden counts also hides its mean predicted risk: with the group size, the mean
            # and the Hosmer-Lemeshow statistic published, the hidden count could be solved for.
            rows.append([str(g + 1), shown[g][2], fmt_num(float(groups.mean_predicted[g]), 3) if ok else SUPPRESSED,
                         shown[g][0], shown[g][1],
                         fmt_num(float(groups.observed[g]), 3) if ok else SUPPRESSED,
                         _ci(float(groups.ci_low[g]), float(groups.ci_high[g]), lambda v: fmt_num(v, 3))
                         if ok else SUPPRESSED])
            keep.append(ok)
        keep = np.array(keep, dtype=bool)
        rep.add(Figure("calibration",
                       {"mean_predicted": _floats(np.asarray(groups.mean_predicted)[keep]),
                        "observed": _floats(np.asarray(groups.observed)[keep]),
                        "ci_low": _floats(np.asarray(groups.ci_low)[keep]),
                        "ci_high": _floats(np.asarray(groups.ci_high)[keep]),
                        "hidden_groups": int((~keep).sum())},
                       f"Observed against predicted risk in {groups.groups_used} groups of predicted risk "
                       "(about equal numbers of people each), with 95% Wilson intervals; points on the dashed "
                       "line are perfectly calibrated.",
                       "Calibration plot: observed share with the event against mean predicted risk, by risk group."))
        rows.append(["all", shown[-1][2], "", shown[-1][0], shown[-1][1], "", ""])
        rep.add(Table(["risk group", "people", "mean predicted risk", "events", "non-events", "observed share",
                       "95% interval of the share"], rows, caption="Groups from lowest to highest predicted risk."))
    rep.add(Para(f"Brier score {fmt_num(a['brier'], 4)} (mean squared difference between predicted risk and "
                 f"outcome; lower is better); scaled Brier score {fmt_num(a['scaled_brier'], 3)} (1 - Brier / "
                 "Brier of the event rate alone)."))
    hl = a.get("hosmer_lemeshow")
    if hl:
        rep.add(Para(f"Hosmer-Lemeshow test over {hl['groups']} risk groups (Hosmer & Lemeshow 1980): "
                     f"{fmt_num(hl['statistic'], 2)} on {hl['df']} degrees of freedom, p-value "
                     f"{fmt_p(hl['p_value'])}."), Para(hl["note"], "note"))
    rep.add(Para(f"Pseudo R-squared: McFadden {fmt_num(a['mcfadden_r2'], 3)}, Cox-Snell {fmt_num(a['cox_snell_r2'], 3)}, "
                 f"Nagelkerke {fmt_num(a['nagelkerke_r2'], 3)}, Tjur {fmt_num(a['tjur_r2'], 3)}."))
    v = record.get("validation")
    if v and not frozen:
        rep.add(Heading("Corrected for optimism (bootstrap)", 3))
        rep.add(Para(f"Refitting the model in {v.get('completed')} bootstrap resamples (Efron's optimism "
                     f"correction): area under the ROC curve {fmt_num(v.get('auc_apparent'), 3)} on the records "
                     f"themselves, {fmt_num(v.get('auc_corrected'), 3)} after correction; calibration slope "
                     f"{fmt_num(v.get('calibration_slope_corrected'), 3)} after correction (below 1 means the "
                     f"model's risks will be too extreme on new patients); Brier score "
                     f"{fmt_num(v.get('brier_corrected'), 4)} after correction."))
    c = a.get("classification")
    if c:
        k = c["counts"]
        prot = protect_table([[k["true_positives"], k["false_negatives"]],
                              [k["false_positives"], k["true_negatives"]]], threshold)
        s = prot.as_text()
        rep.add(Heading(f"At a risk threshold of {c['threshold']:g}", 3))
        rep.add(Table(["", "flagged (risk at or above the threshold)", "not flagged", "total"],
                      [["events", *s[0]], ["non-events", *s[1]], ["total", *s[2]]]))
        if prot.any_hidden:
            rep.add(Para("Sensitivity, specificity and predictive values are not shown because some counts of "
                         "the table are suppressed and they would reveal them.", "note"))
        else:
            rep.add(Para(f"Sensitivity {fmt_num(c['sensitivity'], 3)}, specificity {fmt_num(c['specificity'], 3)}, "
                         f"positive predictive value {fmt_num(c['ppv'], 3)}, negative predictive value "
                         f"{fmt_num(c['npv'], 3)}."))
        rep.add(Para(c["note"], "note"))
    if frozen:
        return
    if a.get("vif"):
        flagged = [v["column"] for v in a["vif"] if v.get("flagged")]
        rows = [[v["column"], fmt_num(v["value"], 2), str(v["df"])] for v in a["vif"]]
        rep.add(Heading("Overlap between predictors", 3))
        rep.add(Table(["predictor", "variance inflation", "degrees of freedom"], rows,
                      caption="Generalised variance inflation (Fox & Monette 1992), squared to the scale of an "
                              "ordinary variance inflation factor; above 10 (common practice) the estimates are "
                              "unstable because the predictors overlap."
                              + (f" Above 10: {', '.join(flagged)}." if flagged else " None is above 10.")))
    ss = a.get("sample_size")
    rep.add(Heading("Sample size", 3))
    epp = record["events_per_parameter"]
    text = (f"{fmt_num(epp, 1)} of the rarer outcome per coefficient besides the intercept; fewer than 10 "
            "(a rule of thumb, Peduzzi et al. 1996) warns of unstable estimates.")
    if ss:
        text += (f" The criteria of Riley et al. (2020), with this model's own Cox-Snell R-squared, ask for at least "
                 f"{ss['n_minimum']:,} records for {ss['parameters']} coefficients; this analysis used "
                 f"{record['rows_used']:,}"
                 + (", fewer than needed, so expect the model to look better here than on new patients."
                    if record["rows_used"] < ss["n_minimum"] else "."))
    rep.add(Para(text))
    _influence_section(rep, assessment, record, threshold, include_records)


def _influence_section(rep: Report, assessment, record: dict, threshold: int, include_records: bool) -> None:
    infl = assessment.influence
    rep.add(Heading("Influential records", 3))
    if infl is None:
        rep.add(Para("Influence could not be computed for this fit."))
        return
    d = np.asarray(infl.cooks_distance, dtype=float)
    n = len(d)
    cut = COOKS_RULE / n if n else float("nan")
    above = int(np.sum(d > cut))
    largest = float(np.nanmax(d)) if n and np.isfinite(d).any() else float("nan")
    count = show_count(above, threshold)
    rep.add(Para(f"Records with a Cook's distance above 4/n = {fmt_num(cut, 5)} (a rule of thumb, common practice; "
                 f"Cook 1977): {count} of {n:,}. The largest Cook's distance is {fmt_num(largest, 4)}. "
                 "Records above the rule are worth checking for data errors; they are not to be removed for "
                 "being influential alone."))
    if include_records:
        top = assessment.influential(10)
        if top:
            rep.add(Table(["row of the data file", "Cook's distance", "leverage"],
                          [[str(r["row"]), fmt_num(r["cooks_distance"], 4), fmt_num(r["leverage"], 4)] for r in top],
                          "lrr", "The ten records with the largest Cook's distance, by their row among the "
                                 "records of the data file (the first record is row 1). They are listed because "
                                 "the person who wrote this report asked for record numbers; row numbers can "
                                 "point back to patients, so share it only as the local rules allow."))


def _clean_notices(notices: list[dict], record: dict, threshold: int) -> list[str]:
    """The warnings' messages, with the row-count message rebuilt so that small counts stay hidden."""
    out = []
    for n in notices:
        if n["code"] == "rows_dropped" and "missing_by_column" in record:
            left = record["rows_read"] - record["rows_used"]
            parts = [f"{show_count(record['rows_missing_outcome'], threshold)} with no outcome"] \
                if record["rows_missing_outcome"] else []
            parts += [f"{show_count(k, threshold)} missing '{c}'" for c, k in record["missing_by_column"].items() if k]
            msg = (f"{show_count(left, threshold)} rows were left out ({'; '.join(parts) or 'missing values'}); "
                   "results describe the complete rows only.")
            if msg not in out:
                out.append(msg)
        elif n["message"] not in out:
            out.append(n["message"])
    return out


def _methods(rep: Report, record: dict, frozen: bool, firth: bool, profile: bool, ladder: bool) -> None:
    refs = ["statsmodels", "delong", "vancalster", "wilson", "hl"]
    rep.add(Heading("Methods"))
    if frozen:
        text = ("A logistic model saved earlier was applied, unchanged, to these records: its coefficients and the "
                "coding of each predictor (the same reference groups) were reused and nothing was refitted. ")
    elif firth:
        text = ("The model is a logistic regression fitted by Firth's penalised likelihood (Firth 1993), which "
                "keeps estimates finite when a predictor separates the outcome; its tests are penalised "
                "likelihood-ratio tests (Heinze & Schemper 2002) and its predicted risks have the intercept "
                "corrected so that they average to the event rate (Puhr et al. 2017). ")
        refs += ["firth", "heinze", "puhr"]
    else:
        text = ("The model is a logistic regression fitted by maximum likelihood (Newton's method, with the "
                "statsmodels library). ")
    if not frozen:
        text += ("Each coefficient is tested by its Wald z statistic and given a 95% Wald interval for its odds "
                 "ratio; the groups of a categorical predictor are tested together by a joint Wald test; the model "
                 "as a whole, each predictor, and any smaller model are tested by likelihood-ratio tests (twice the "
                 "difference in log-likelihood, against a chi-square distribution). ")
        if profile:
            text += "Profile-likelihood intervals (Venzon & Moolgavkar 1988) are given beside the Wald ones. "
            refs.append("venzon")
        if ladder:
            text += "All models tried were fitted on the same rows, so that nested ones can be compared. "
    text += ("Discrimination is the area under the ROC curve with the standard error of DeLong et al. (1988); "
             "calibration is shown by observed against predicted risk in groups of predicted risk (Wilson "
             "intervals), the calibration slope and calibration-in-the-large (Van Calster et al. 2016), the Brier "
             "score and the Hosmer-Lemeshow test (Hosmer & Lemeshow 1980). ")
    if not frozen:
        text += ("The number of events per coefficient is compared with the rule of thumb of Peduzzi et al. (1996) "
                 "and the number of records with the criteria of Riley et al. (2020); influence is summarised by "
                 "Cook's distance (Cook 1977) and overlap between predictors by generalised variance inflation "
                 "(Fox & Monette 1992); the Wald and likelihood-ratio tests are compared as Hauck & Donner (1977) "
                 "advise. ")
        refs += ["peduzzi", "riley", "cook", "fox", "hauck"]
    text += "Rows with a missing outcome or predictor value were left out (complete-case analysis)."
    rep.add(Para(text))
    rep.add(Heading("Sources", 3), Bullets([REFERENCES[k] for k in dict.fromkeys(refs)], "small"))


def _closing(rep: Report, record: dict, notices: list[str], threshold: int) -> None:
    rep.add(Heading("Warnings"))
    if notices:
        rep.add(Bullets(notices, "warning"))
    else:
        rep.add(Para("None."))
    rep.add(Heading("Privacy"), Para(suppression_note(threshold)),
            Para("The report holds aggregate figures only: no values of single records, no identifiers and no "
                 "dates from the data. Plots show groups and the overall ROC curve, not single records.", "note"))
    rep.add(Heading("Software"), Table(["program", "version"], _versions(), "ll"))
    rep.add(Para(record["caution"], "caution"))


def _header(record: dict, data_path, frozen: bool) -> Report:
    from twofold import __version__

    kind = "Saved model applied to new records" if frozen else "Logistic model"
    title = f"{kind}: {record['outcome']} (event: {record['event']})"
    when = _dt.date.today().isoformat()
    sub = f"Written by Twofold {__version__} on {when}."
    rep = Report(title, sub)
    if data_path is not None:
        p = Path(data_path)
        try:
            from twofold.core.outputs.storage import file_sha256

            digest = file_sha256(p)
        except OSError:
            digest = "not available"
        rep.add(Para(f"Data file: {p.name}; SHA-256 checksum {digest} (identifies the exact file analysed).", "small"))
    rep.add(Para(record["caution"], "caution"))
    return rep


def _as_ladder(result, ladder):
    if ladder is None or hasattr(ladder, "rungs"):
        return ladder if ladder is None or len(ladder.rungs) else None
    from twofold.core.outputs.session import ladder_from_lists

    return ladder_from_lists(result.study, ladder, list(result.fit.design.predictors))


def build_report(result, ladder=None, suppress_below: int = DEFAULT_THRESHOLD, include_records: bool = False) -> Report:
    """The content of the report of an analysis, or of a saved model applied to new records.

    Parameters
    ----------
    result : AnalysisResult or FrozenResult
    ladder : Ladder or list of lists of str, optional
        The models tried (a table of them is added).
    suppress_below : int
        Counts of people from 1 up to this number are shown as suppressed
        (default 10, so 1-10 are hidden; 0 switches suppression off).
    include_records : bool
        List the row numbers of the most influential records.
    """
    threshold = int(suppress_below)
    record = result.record
    frozen = bool(getattr(result, "frozen", False))
    rep = _header(record, result.data if frozen else result.spec.data, frozen)
    a = record.get("assessment") or {}
    if frozen:
        preds = ", ".join(record["predictors"]) or "no predictors"
        rep.add(Para(f"The saved model ({record['method']}; predictors: {preds}) was applied without refitting."))
        _data_section(rep, record, threshold, what="saved model")
        _assessment_section(rep, a, result.assessment, record, threshold, True, include_records)
        notices = _clean_notices(record["warnings"] + a.get("notes", []), record, threshold)
        _methods(rep, record, True, False, False, False)
        _closing(rep, record, notices, threshold)
        return rep
    lad = _as_ladder(result, ladder)
    _data_section(rep, record, threshold)
    _describe_predictors(rep, result.fit, threshold)
    if lad is not None:
        _ladder_section(rep, lad, penalised=bool(result.spec.firth))
    _coefficient_section(rep, record, result.fit)
    if a:
        _assessment_section(rep, a, result.assessment, record, threshold, False, include_records)
    notes = list(record["warnings"]) + list(a.get("notes", []))
    if lad is not None:
        notes += [n.as_dict() for n in lad.notices]
    notices = _clean_notices(notes, record, threshold)
    _methods(rep, record, False, bool(result.spec.firth), any("or_pl_low" in t for t in record["terms"]),
             lad is not None)
    _closing(rep, record, notices, threshold)
    return rep
