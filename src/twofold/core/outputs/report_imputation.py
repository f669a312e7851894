"""The report's missing-data section, for an analysis whose missing values were filled in by multiple imputation.

Content only (the blocks of :mod:`twofold.core.outputs.report`): the pattern of
missing values with its counts protected, how each column was imputed, m and
the seed, the pooled tests with their reference distributions, and the
complete-rows fit beside the pooled one.  Counts follow the rest of the report
(:mod:`twofold.core.outputs.privacy`).
"""

from __future__ import annotations

import numpy as np

from twofold.core.outputs.privacy import ModelCheck, is_small, show_count
from twofold.core.outputs.text import POOLED_TEST_NAMES, fmt_num, fmt_or, fmt_p

IMPUTATION_REFERENCES = [
    "van Buuren S. Flexible Imputation of Missing Data, 2nd ed. Chapman & Hall/CRC, 2018.",
    "Rubin DB. Multiple Imputation for Nonresponse in Surveys. Wiley, 1987.",
    "Barnard J, Rubin DB. Small-sample degrees of freedom with multiple imputation. Biometrika 1999;86:948-955.",
    "Li KH, Raghunathan TE, Rubin DB. Large-sample significance levels from multiply imputed data using "
    "moment-based statistics and an F reference distribution. JASA 1991;86:1065-1073.",
    "Meng XL, Rubin DB. Performing likelihood ratio tests with multiply-imputed data sets. Biometrika "
    "1992;79:103-111.",
    "Li KH, Meng XL, Raghunathan TE, Rubin DB. Significance levels from repeated p-values with multiply-imputed "
    "data. Statistica Sinica 1991;1:65-92.",
    "White IR, Royston P, Wood AM. Multiple imputation using chained equations: issues and guidance for "
    "practice. Statistics in Medicine 2011;30:377-399.",
]

METHODS_TEXT = ("Missing predictor values were filled in by multiple imputation by chained equations (van Buuren "
                "2018): {m} imputed copies (seed {seed}), each column imputed in turn from the outcome, every other "
                "column of the analysis and any auxiliary column, by predictive mean matching for numbers and "
                "logistic or multinomial logistic regression for two-valued and grouped columns; identifiers and "
                "dates were never used and the outcome was never imputed. Every model was fitted on each copy and "
                "the results pooled: coefficients by Rubin's rules (Rubin 1987) with t intervals on the degrees of "
                "freedom of Barnard & Rubin (1999); tests of several coefficients by D1 (Li, Raghunathan & Rubin "
                "1991), likelihood-ratio tests by D3 (Meng & Rubin 1992), or D2 (Li, Meng, Raghunathan & Rubin 1991) "
                "for penalised fits, each against its F distribution. Rows without an outcome were left out.")


def complete_rows_fit(result):
    """The model fitted on complete rows only (for comparison and description), or None when it cannot be."""
    from twofold.core.errors import TwofoldError

    try:
        return result.study.fit(list(result.fit.design.predictors), firth=bool(result.spec.firth))
    except TwofoldError:
        return None


def joint_check(check: ModelCheck, other: ModelCheck | None) -> ModelCheck:
    """What may be shown when two fits are printed: everything either check withholds is withheld."""
    if other is None:
        return check
    return ModelCheck({**other.withheld, **check.withheld}, check.whole_model or other.whole_model)


def _patterns(study, columns, rows) -> tuple[list[str], list[tuple[tuple, int]]]:
    frame = study.frame.iloc[rows]
    missing = np.column_stack([frame[c].isna().to_numpy() for c in columns]) if columns else np.zeros((len(rows), 0))
    found, counts = np.unique(missing, axis=0, return_counts=True)
    order = np.lexsort((-counts, found.sum(axis=1)))
    return columns, [(tuple(bool(v) for v in found[i]), int(counts[i])) for i in order]


def missing_data_section(rep, result, threshold: int, check: ModelCheck, complete, complete_check) -> None:
    """Missing values and multiple imputation: pattern, method, m, pooled tests, complete rows beside pooled."""
    from twofold.core.outputs.report import SEE_PRIVACY, WITHHELD, Heading, Para, Table, involves

    record = result.record
    imp = record["imputation"]
    rep.add(Heading("Missing values and multiple imputation"))
    rep.add(Para(f"Every figure of the chosen model in this report is pooled over {imp['m']} imputed copies of the "
                 f"rows with an outcome (seed {imp['seed']}); no row with an outcome was left out for a missing "
                 "predictor."))
    columns = list(result.imputation.columns) if getattr(result, "imputation", None) else list(imp["methods"])
    names, patterns = _patterns(result.study, columns, result.fit.design.rows)
    occurring = [n for _, n in patterns]
    if all(not is_small(n, threshold) for n in occurring):
        rows = [["missing" if p[j] else "" for j in range(len(names))] + [f"{n:,}"] for p, n in patterns]
        rep.add(Table(names + ["rows"], rows, "l" * len(names) + "r",
                      "The pattern of missing values among the rows with an outcome: each line a combination of "
                      "columns missing together (blank: present), with its number of rows."))
    else:
        rep.add(Para(f"The pattern of missing values (which columns are missing together) is not shown: some "
                     f"combination occurs in 1 to {threshold} rows, and with the counts per column given above it "
                     f"could be worked out ({SEE_PRIVACY}).", "note"))
    missing = record.get("missing_by_column") or {}
    rows = [[c, m, show_count(missing.get(c, 0), threshold) if c in missing else "(auxiliary)"]
            for c, m in imp["methods"].items()]
    if rows:
        rep.add(Table(["column", "imputed by", "values imputed"], rows, "llr",
                      "Auxiliary columns (used only to impute): " + (", ".join(imp["auxiliary"]) or "none") + "."))
    pooled = [("The model against the event rate alone", record.get("overall"))]
    pooled += [(f"{t.get('label', t['column'])}, all its coefficients", t) for t in record.get("term_tests") or []
               if not involves(t["column"], check.withheld)]
    if record.get("nested"):
        pooled.append(("The smaller model against this one", record["nested"]))
    rows = [[what, POOLED_TEST_NAMES.get(t.get("kind"), ""), fmt_num(t.get("statistic"), 2), str(t["df"]),
             "infinite" if t.get("df_denominator") is None else fmt_num(t["df_denominator"], 1), fmt_p(t["p_value"])]
            for what, t in pooled if t and t.get("df") and check.whole_model is None]
    if rows:
        rep.add(Table(["test", "pooled by", "F", "numerator df", "denominator df", "p-value"], rows, "llrrrr",
                      "Pooled tests and their F reference distributions; an infinite denominator means the copies "
                      "agree exactly (the chi-square reference)."))
    if check.whole_model is not None:
        return
    cc = imp.get("complete_rows")
    if complete is None or not cc:
        rep.add(Para("The model could not be fitted on the complete rows alone, so no comparison is given.", "note"))
        return
    by_label = {t["label"]: t for t in cc["terms"]}
    rows = []
    for t in record["terms"]:
        if involves(t["column"], check.withheld):
            rows.append([t["label"], WITHHELD, WITHHELD, ""])
            continue
        c = by_label.get(t["label"])
        cells = [f"{fmt_or(t['odds_ratio'])} ({fmt_or(t['or_ci_low'])} to {fmt_or(t['or_ci_high'])})",
                 "" if c is None else f"{fmt_or(c['odds_ratio'])} ({fmt_or(c['or_ci_low'])} to "
                                      f"{fmt_or(c['or_ci_high'])})"]
        rows.append([t["label"], *cells, fmt_num(t.get("fmi"), 2)])
    # The complete rows' count gives the rows imputed (with the rows used): shown only when that is not small.
    rows_cc = "" if is_small(record["rows_used"] - cc["rows_used"], threshold) else f"{cc['rows_used']:,} "
    if complete_check is not None and complete_check.whole_model is not None:
        rows = [[r[0], r[1], WITHHELD, r[3]] for r in rows]
    rep.add(Table(["coefficient", "odds ratio (95% interval), imputed and pooled",
                   f"odds ratio (95% Wald interval), {rows_cc}complete rows only", "missing information"], rows,
                  "lrrr", "Reviewers ask for both: the pooled estimates use every row with an outcome; the "
                          "complete-rows estimates leave out every row missing a predictor, which biases them when "
                          "missingness depends on the outcome or other predictors. Missing information: the "
                          "fraction of a coefficient's information lost to the missing values."))


def pooled_assessment_section(rep, a: dict, check: ModelCheck) -> None:
    """Discrimination and calibration pooled over the copies (no per-record figures, which are not pooled)."""
    from twofold.core.outputs.report import SEE_PRIVACY, Heading, Para

    rep.add(Heading("How well the model separates and predicts on the records it was fitted to"))
    if check.whole_model is not None:
        rep.add(Para(f"Withheld with the model's other figures ({SEE_PRIVACY}).", "warning"))
        return
    lo, hi = a["auc_ci"]
    rep.add(Para(f"Area under the ROC curve (c statistic) {fmt_num(a['auc'], 3)}, 95% interval {fmt_num(lo, 3)} to "
                 f"{fmt_num(hi, 3)}; Brier score {fmt_num(a['brier'], 4)} (scaled {fmt_num(a['scaled_brier'], 3)}); "
                 f"calibration slope {fmt_num(a['calibration_slope'], 3)}; Nagelkerke R-squared "
                 f"{fmt_num(a['nagelkerke_r2'], 3)}."))
    rep.add(Para(a["pooled_note"] + " " + a["calibration_note"], "note"))


def describe_observed(rep, record: dict, complete, threshold: int, nameless, describe) -> None:
    """The predictors described on the complete rows (observed values only: an imputed copy would count made-up
    values), unless their number would give away a small number of imputed rows."""
    from twofold.core.outputs.report import Heading, Para

    if complete is None or is_small(record["rows_used"] - complete.n_used, threshold):
        rep.add(Heading("The predictors among the rows used"))
        rep.add(Para(f"Not described: the complete rows would give away a number of incomplete rows of 1 to "
                     f"{threshold}.", "note"))
        return
    rep.add(Para(f"The predictors below are described on the {complete.n_used:,} complete rows, with observed "
                 "values only; imputed values are not counted.", "note"))
    describe(rep, complete, threshold, nameless)
