"""A readable plain-text account of a fit, in Twofold's own layout and words.

It reads the record made by :func:`twofold.core.outputs.summary.fit_record`, so the
text shows exactly the figures the JSON carries.
"""

from __future__ import annotations

import math


def fmt_p(p) -> str:
    """A p-value as people report it: 'below 0.001' or three decimals."""
    if p is None or (isinstance(p, float) and math.isnan(p)):
        return "not available"
    if p < 0.001:
        return "below 0.001"
    return f"{p:.3f}"


def fmt_num(x, digits: int = 3) -> str:
    """A number with the given decimals; huge or missing values spelled out."""
    if x is None:
        return "n/a"
    if isinstance(x, float) and math.isinf(x):
        return "infinite"
    if abs(x) >= 1e9:
        # Readers of these reports do not read powers of ten; figures this size mean a fit that ran off.
        return "over 1 billion" if x > 0 else "below -1 billion"
    if abs(x) >= 1e6:
        return f"{x:,.0f}"
    if round(x, digits) == 0:
        x = 0.0  # no "-0.000" for a value that rounds to zero from below
    return f"{x:,.{digits}f}"


def fmt_or(x) -> str:
    """An odds ratio with sensible precision (three significant figures)."""
    if x is None:
        return "n/a"
    if isinstance(x, float) and math.isinf(x):
        return "infinite"
    if x == 0:
        return "0"
    if x >= 1e6:
        return "over 1 million"
    if x >= 1000:
        return f"{float(f'{x:.3g}'):,.0f}"  # three significant figures, in plain digits
    if x < 0.001:
        return "below 0.001"
    if 0.1 <= x < 10:
        return f"{x:.3f}"
    return f"{x:.3g}" if x < 10 else f"{x:.1f}"


def reading_overall(p) -> str:
    """A one-line plain reading of the test against the constant-only model."""
    if p is None:
        return "No test is possible without predictors."
    if p < 0.05:
        return ("Together, the predictors are associated with the outcome more strongly than chance alone "
                "would easily explain (an association, not proof of cause).")
    return ("Together, the predictors do not clearly improve on simply using the overall event rate; "
            "the data are compatible with no association.")


def degrees(df) -> str:
    """"1 degree of freedom", "3 degrees of freedom"."""
    return f"{df} degree{'s' if df != 1 else ''} of freedom"


def reading_nested(p, added) -> str:
    """A one-line plain reading of the nested likelihood-ratio test."""
    from twofold.core.models.terms import term_title

    what = ", ".join(term_title(a) for a in added) if added else "the extra predictors"
    if p is None:
        return "No test: the two models have the same number of coefficients."
    if p < 0.05:
        return f"Adding {what} improves the fit more than chance alone would easily explain."
    return f"Adding {what} does not clearly improve the fit; the simpler model may serve as well."


def _term_label(t: dict) -> str:
    if t.get("label"):
        return t["label"]
    if t["level"] is None:
        return f"{t['column']} (per 1 unit)"
    return f"{t['column']}: {t['level']} vs {t['reference']}"


#: What stands in the odds-ratio cells of a coefficient whose odds ratio is not shown (by ``withheld``).
WITHHELD_CELLS = {
    "curve": ("see curve", "see below"),
    "not settled": ("not shown", "the fit did not settle"),
}


def or_cells(t: dict) -> tuple[str, str]:
    """(odds ratio, 95% interval) as printed for one coefficient record."""
    if t.get("withheld") in WITHHELD_CELLS:
        return WITHHELD_CELLS[t["withheld"]]
    return fmt_or(t["odds_ratio"]), f"{fmt_or(t['or_ci_low'])} to {fmt_or(t['or_ci_high'])}"


def stated_line(e: dict) -> str:
    """"sex: M vs F, where age is 63 (median): odds ratio 1.23 (95% interval 1.01 to 1.50)"."""
    return (f"{e['label']}: odds ratio {fmt_or(e['odds_ratio'])} (95% interval {fmt_or(e['or_ci_low'])} to "
            f"{fmt_or(e['or_ci_high'])})")


def stated_lines(record: dict) -> list[str]:
    """One line per odds ratio at stated values (predictors in interactions, curves)."""
    return [stated_line(e) for e in record.get("effects_at_values", [])]


def describe(record: dict, source: str = "") -> str:
    """The plain-text account of a fit record."""
    out: list[str] = []
    add = out.append
    event = record["event"]
    add(f"Logistic model for '{record['outcome']}' (event: {event})" + (f", data: {source}" if source else ""))
    add("")
    add("Records")
    ev, non = record["events"], record["nonevents"]
    add(f"  {record['rows_read']:,} read, {record['rows_used']:,} used: "
        f"{ev:,} with the event ({100 * ev / max(record['rows_used'], 1):.1f}%), {non:,} without.")
    lost = []
    if record["rows_missing_outcome"]:
        lost.append(f"{record['rows_missing_outcome']:,} had no outcome")
    imputed = record.get("imputation")
    for col, n in record["missing_by_column"].items():
        if n and not imputed:
            lost.append(f"{n:,} missing '{col}'")
    if lost:
        add("  Left out: " + "; ".join(lost) + ".")
    if imputed:
        out.extend(imputation_lines(record))
    epp = record["events_per_parameter"]
    add(f"  {fmt_num(epp, 1)} of the rarer outcome per estimated coefficient ({record['parameters'] - 1} besides the intercept).")
    add("")
    overall = record["overall"]
    add("Does the model as a whole carry information?")
    penalised = "penalized_log_likelihood" in record
    test_name = "Penalised likelihood-ratio" if penalised else "Likelihood-ratio"
    if overall["df"] > 0 and "df_denominator" in overall:
        add(f"  {pooled_test_text(overall)} against the constant-only model.")
    elif overall["df"] > 0:
        add(f"  {test_name} (G) test against the constant-only model: G = {fmt_num(overall['g'], 2)} "
            f"on {degrees(overall['df'])}, p-value {fmt_p(overall['p_value'])}.")
    add("  " + reading_overall(overall["p_value"] if overall["df"] > 0 else None))
    if penalised:
        # Ordinary log-likelihoods beside a penalised G would let a reader work out a different G.
        add(f"  Fitted by Firth's penalised likelihood: penalised log-likelihood "
            f"{fmt_num(record['penalized_log_likelihood'], 2)}; the tests are penalised likelihood-ratio tests "
            "and predicted risks use the corrected intercept (FLIC).")
        add(f"  {record['aic_note']}")
    else:
        add(("  Averaged over the imputed copies: l" if imputed else "  L") + f"og-likelihood {fmt_num(record['log_likelihood'], 2)} (constant-only "
            f"{fmt_num(record['null_log_likelihood'], 2)}); deviance {fmt_num(record['deviance'], 2)}; "
            f"AIC {fmt_num(record['aic'], 1)}; BIC {fmt_num(record['bic'], 1)}; "
            f"McFadden R-squared {fmt_num(record['mcfadden_r2'], 3)}.")
    add("")
    add("Each predictor (odds ratio with 95% Wald interval; Wald z test that the coefficient is zero)" if not imputed
        else "Each predictor, pooled by Rubin's rules (odds ratio with 95% interval and t test on the Barnard-Rubin "
             "degrees of freedom; missing information: the share of the coefficient's information lost to the "
             "missing values)")
    labels = [_term_label(t) for t in record["terms"]] + ["baseline odds (intercept)"]
    heads = ("predictor", "odds ratio", "95% CI", "p-value", "t" if imputed else "Wald z", "coefficient",
             "std. error") + (("missing info",) if imputed else ())
    rows = []  # (joint-test line or None, cells)
    joint = {t["column"]: t for t in record["term_tests"]}
    shown_joint = set()
    for t, label in zip(record["terms"], labels):
        col = t["column"]
        line = None
        if col in joint and col not in shown_joint:
            j = joint[col]
            line = (f"  {j.get('label', col)}, all its coefficients together: " + (
                pooled_test_text(j) if "df_denominator" in j else
                f"Wald chi-square {fmt_num(j['statistic'], 2)} on {degrees(j['df'])}, p-value {fmt_p(j['p_value'])}"))
            shown_joint.add(col)
        odds, ci = or_cells(t)
        rows.append((line, (label, odds, ci, fmt_p(t["p_value"]), fmt_num(t["z"], 2),
                            fmt_num(t["estimate"], 4), fmt_num(t["std_error"], 4))
                     + ((fmt_num(t.get("fmi"), 3),) if imputed else ())))
    i = record["intercept"]
    rows.append((None, (labels[-1], "", "", fmt_p(i["p_value"]), fmt_num(i["z"], 2), fmt_num(i["estimate"], 4),
                        fmt_num(i["std_error"], 4)) + (("",) if imputed else ())))
    # Widths from the cells themselves, so a huge estimate never pushes a column out of line.
    widths = [max([len(h)] + [len(cells[c]) for _, cells in rows]) for c, h in enumerate(heads)]
    widths[0] = max(widths[0], 20)

    def row_text(cells):
        return "  " + "  ".join(f"{v:<{w}}" if c == 0 else f"{v:>{w}}" for c, (v, w) in enumerate(zip(cells, widths)))

    head = row_text(heads)
    add(head)
    add("  " + "-" * (len(head) - 2))
    for line, cells in rows:
        if line is not None:
            add(line)
        add(row_text(cells))
    if record["dropped_columns"]:
        add("  Left out as constant or duplicated: " + ", ".join(record["dropped_columns"]) + ".")
    if record["converged"]:
        add(f"  The fit settled after {record['iterations']} iterations.")
    else:
        add(f"  The fit did not settle after {record['iterations']} iterations: its odds ratios are not shown "
            "(see the warnings).")
    stated = stated_lines(record)
    if stated:
        add("")
        add("Odds ratios at stated values (where one coefficient alone would mislead: a predictor in an "
            "interaction, or a curve)")
        for line in stated:
            add("  " + line)
    nested = record["nested"]
    if nested is not None:
        add("")
        smaller = ", ".join(nested["smaller_predictors"]) or "no predictors (constant only)"
        add(f"Smaller model ({smaller}) against this one, both on the same {nested['rows']:,} rows")
        if "df_denominator" in nested:
            add(f"  {pooled_test_text(nested)}.")
        else:
            add(f"  {test_name} test: G = {fmt_num(nested['g'], 2)} on {degrees(nested['df'])}, "
                f"p-value {fmt_p(nested['p_value'])}.")
        add("  " + reading_nested(nested["p_value"] if nested["df"] > 0 else None, nested["added"]))
    out.extend(_profile_lines(record))
    out.extend(_shape_lines(record, test_name))
    if record.get("assessment"):
        out.extend(describe_assessment(record["assessment"], record))
    out.extend(_validation_lines(record))
    out.extend(decision_lines(record))
    out.extend(subgroup_lines(record))
    out.extend(usefulness_lines(record))
    if record["warnings"]:
        add("")
        add("Warnings")
        for w in record["warnings"]:
            add(f"  - {w['message']}")
    add("")
    add("Caution: " + record["caution"])
    return "\n".join(out) + "\n"


#: The pooled tests by their ``kind``, in words, with their source.
POOLED_TEST_NAMES = {
    "D1": "Pooled Wald test (D1, Li, Raghunathan & Rubin 1991)",
    "D2": "Pooled chi-square test (D2, Li, Meng, Raghunathan & Rubin 1991)",
    "D3": "Pooled likelihood-ratio test (D3, Meng & Rubin 1992)",
}


def pooled_test_text(t: dict) -> str:
    """"Pooled likelihood-ratio test (D3, ...): F = 38.6 on 7 and 120,680 degrees of freedom (G scale 270.5), p-value ..."."""
    den = t.get("df_denominator")
    # Beyond 10,000 the F reference is the chi-square one to the digits printed; the exact figure is in the JSON.
    den_text = ("infinitely many" if den is None else "more than 10,000" if den > 10_000 else fmt_num(den, 1))
    stat = t.get("statistic")
    g = t.get("g", None if stat is None else stat * t["df"])
    return (f"{POOLED_TEST_NAMES.get(t.get('kind'), 'Pooled test')}: F = {fmt_num(t.get('statistic'), 2)} on "
            f"{t['df']} and {den_text} degrees of freedom (on the chi-square scale {fmt_num(g, 2)}), "
            f"p-value {fmt_p(t['p_value'])}")


def imputation_lines(record: dict) -> list[str]:
    """What was imputed, how, and the complete-rows fit beside the pooled one."""
    imp = record["imputation"]
    out = [f"  Missing predictor values filled in by multiple imputation by chained equations: every figure below "
           f"is pooled over {imp['m']} imputed copies (seed {imp['seed'] if imp['seed'] is not None else 'not set'}); "
           f"{imp['cells_imputed']:,} values in {imp['rows_imputed']:,} rows imputed."]
    missing = record.get("missing_by_column") or {}
    for col, method in imp["methods"].items():
        n = missing.get(col)
        out.append(f"    {col}: {method}" + (f" ({n:,} missing)" if n else ""))
    if imp.get("auxiliary"):
        out.append("    Used only to impute: " + ", ".join(imp["auxiliary"]) + ".")
    cc = imp.get("complete_rows")
    if cc:
        out.append(f"  For comparison, on the {cc['rows_used']:,} complete rows only: G = {fmt_num(cc['overall']['g'], 2)} "
                   f"on {degrees(cc['overall']['df'])}, p-value {fmt_p(cc['overall']['p_value'])}; odds ratios "
                   + "; ".join(f"{t['label']} {fmt_or(t['odds_ratio'])} ({fmt_or(t['or_ci_low'])} to "
                               f"{fmt_or(t['or_ci_high'])})" for t in cc["terms"]) + ".")
    return out


def describe_assessment(a: dict, record: dict) -> list[str]:
    """The assessment section of the plain-text account."""
    out = [""]
    add = out.append
    add("How well does it tell patients apart, and are its risks right? (on the records it was fitted to)")
    if a.get("pooled_note"):
        add(f"  {a['pooled_note']}")
    lo, hi = a["auc_ci"]
    add(f"  Discrimination: area under the ROC curve (c statistic) {fmt_num(a['auc'], 3)}, "
        f"95% CI {fmt_num(lo, 3)} to {fmt_num(hi, 3)} (DeLong); 0.5 is a coin toss, 1 perfect.")
    add(f"  Brier score {fmt_num(a['brier'], 4)} (scaled Brier {fmt_num(a['scaled_brier'], 3)}; lower Brier is better).")
    add(f"  Calibration slope {fmt_num(a['calibration_slope'], 3)}, calibration-in-the-large "
        f"{fmt_num(a['calibration_intercept'], 3)}.")
    add(f"    {a['calibration_note']}")
    hl = a["hosmer_lemeshow"]
    if hl:
        add(f"  Hosmer-Lemeshow test over {hl['groups']} risk groups: {fmt_num(hl['statistic'], 2)} on {degrees(hl['df'])}, p-value {fmt_p(hl['p_value'])}.")
        add(f"    {hl['note']}")
    add(f"  Pseudo R-squared: McFadden {fmt_num(a['mcfadden_r2'], 3)}, Cox-Snell {fmt_num(a['cox_snell_r2'], 3)}, "
        f"Nagelkerke {fmt_num(a['nagelkerke_r2'], 3)}, Tjur {fmt_num(a['tjur_r2'], 3)}.")
    if "classification" in a:
        c = a["classification"]
        add(f"  At a risk threshold of {c['threshold']:g}: sensitivity {fmt_num(c['sensitivity'], 3)}, specificity "
            f"{fmt_num(c['specificity'], 3)}, positive predictive value {fmt_num(c['ppv'], 3)}, negative predictive "
            f"value {fmt_num(c['npv'], 3)}.")
        add(f"    {c['note']}")
    if a["drop_one"]:
        add("")
        add("  Each predictor by the likelihood-ratio test (refitted without it) beside its Wald test")
        width = max(len(t.get("label", t["column"])) for t in a["drop_one"]) + 2
        add(f"    {'predictor':<{width}}{'G':>9}  {'df':>3}  {'p-value':>11}  {'Wald chi-square':>15}  {'p-value':>11}")
        for t in a["drop_one"]:
            flag = "  <- prefer the likelihood-ratio test" if t["prefer_lr"] else ""
            add(f"    {t.get('label', t['column']):<{width}}{fmt_num(t['g'], 2):>9}  {t['df']:>3}  {fmt_p(t['p_value']):>11}  "
                f"{fmt_num(t['wald'], 2):>15}  {fmt_p(t['wald_p_value']):>11}{flag}")
        if any(t["prefer_lr"] for t in a["drop_one"]):
            add("    Where marked, the two tests disagree or the estimate is so large that the Wald test loses "
                "power (Hauck & Donner 1977); the likelihood-ratio test is the one to report.")
    flagged = [v for v in a["vif"] if v.get("flagged")]
    if a["vif"]:
        worst = max(a["vif"], key=lambda v: v["value"] or 0)
        add(f"  Variance inflation: largest {fmt_num(worst['value'], 2)} ('{worst['column']}')"
            + (f"; above 10 (common practice) for {', '.join(v['column'] for v in flagged)}: those estimates are "
               "unstable because the predictors overlap." if flagged else "; none above 10 (common practice)."))
    ss = a.get("sample_size")
    if ss:
        add(f"  Sample size (Riley et al. 2020, with this model's apparent Cox-Snell R-squared of "
            f"{fmt_num(ss['r2_cs'], 3)}, as fitted to these records): at least "
            f"{ss['n_minimum']:,} records are needed for {ss['parameters']} coefficients; this extract used "
            f"{record['rows_used']:,}"
            + (" — fewer than needed, so expect the model to look better here than on new patients."
               if record["rows_used"] < ss["n_minimum"] else "."))
    for note in a.get("notes") or []:
        add(f"  Note: {note['message']}")
    if a["influential"]:
        top = a["influential"][:5]
        add("  Records with the most influence (Cook's distance), by row of the file: "
            + ", ".join(f"row {r['row']} ({fmt_num(r['cooks_distance'], 4)})" for r in top) + ".")
    return out


def corrected_sample_size_text(validation: dict, rows_used: int) -> str:
    """The minimum sample size redone with the bootstrap's optimism-corrected Cox-Snell R-squared, in words."""
    ss = validation.get("sample_size_corrected")
    if ss is None:
        return ("With the optimism-corrected Cox-Snell R-squared the minimum sample size (Riley et al. 2020) "
                "cannot be worked out here: the corrected R-squared is not above zero (or this validation was "
                "saved before Twofold recorded it).")
    n = int(ss["n_minimum"])
    return (f"With the optimism-corrected Cox-Snell R-squared of {fmt_num(ss['r2_cs'], 3)} (Riley et al. 2020 "
            f"recommend such an adjusted value over the apparent one): at least {n:,} rows are needed; this "
            f"extract used {rows_used:,}" + (" \u2014 fewer than needed." if rows_used < n else " \u2014 enough."))


def curve_reading(term: str, p) -> str:
    """Plain reading of the test of a curve against a straight line."""
    if p is None or p != p:
        return "No reading: the test could not be made."
    return (f"The effect of {term} bends more than chance alone would easily explain." if p < 0.05
            else f"A straight line for {term} may serve as well as the curve.")


def interaction_reading(a: str, b: str, p) -> str:
    """Plain reading of the test of an interaction."""
    if p is None or p != p:
        return "No reading: the test could not be made."
    return (f"The effect of {a} differs with {b} more than chance alone would easily explain." if p < 0.05
            else f"The data do not clearly show the effect of {a} differing with {b}.")


def _test_figures(t: dict) -> str:
    """"G = 2.26 on 2 degrees of freedom, p-value 0.322.", or a pooled test's figures with its kind."""
    if "df_denominator" in t:
        return pooled_test_text(t) + "."
    return f"G = {fmt_num(t['g'], 2)} on {degrees(t['df'])}, p-value {fmt_p(t['p_value'])}."


def _shape_lines(record: dict, test_name: str) -> list[str]:
    from twofold.core.models.terms import TIMES

    out = []
    for t in record.get("nonlinearity") or []:
        knots = ", ".join(f"{v:g}" for v in t["knots"])
        out += ["", f"Is the effect of {t['column']} curved? (curve with {len(t['knots'])} knots, at {knots})",
                f"  {test_name} test of the curve against a straight line, on the same rows: " + _test_figures(t),
                "  " + curve_reading(t["column"], t["p_value"])]
    for t in record.get("interaction_tests") or []:
        a, _, b = t["term"].partition(":")
        out += ["", f"Does the effect of {a} differ with {b}?",
                f"  {test_name} test of the model with {a} {TIMES} {b} against the model without it: "
                + _test_figures(t),
                "  " + interaction_reading(a, b, t["p_value"])]
    return out


def _profile_lines(record: dict) -> list[str]:
    terms = [t for t in record["terms"] if "or_pl_low" in t]
    if not terms:
        return []
    penalised = "penalized_log_likelihood" in record
    separated = any(w.get("code") == "separation" for w in record["warnings"])
    out = ["", "Profile-likelihood intervals of the odds ratios (95%)"
           + (", from the penalised likelihood" if penalised else "")]
    width = max(len(_term_label(t)) for t in terms) + 2
    for t in terms:
        out.append(f"  {_term_label(t):<{width}}{fmt_or(t['or_pl_low'])} to {fmt_or(t['or_pl_high'])}"
                   f"   (Wald: {fmt_or(t['or_ci_low'])} to {fmt_or(t['or_ci_high'])})")
    if separated or penalised:
        out.append("  Report these profile intervals rather than the Wald ones: with separation or a penalised "
                   "fit the Wald intervals are unreliable.")
    else:
        out.append("  Where the two differ, the profile interval is the better one to report: it does not assume "
                   "the estimate's uncertainty is symmetric.")
    return out


def _validation_lines(record: dict) -> list[str]:
    v = record.get("validation")
    if not v:
        return []
    out = ["", f"Bootstrap validation ({v['completed']:,} of {v['repetitions']:,} resamples used, seed {v['seed']}; "
               f"each resample refitted by {v.get('refit_method', 'maximum likelihood')})"]
    out.append(f"  Area under the ROC curve: {fmt_num(v['auc_corrected'], 3)} corrected for optimism "
               f"({fmt_num(v['auc_apparent'], 3)} on the data it was built from, optimism "
               f"{fmt_num(v['auc_optimism'], 3)}).")
    out.append(f"  Calibration slope: {fmt_num(v['calibration_slope_corrected'], 3)} corrected (1 on the data it "
               "was built from); below 1 means its risks are too extreme for new patients.")
    out.append(f"  Brier score: {fmt_num(v['brier_corrected'], 4)} corrected ({fmt_num(v['brier_apparent'], 4)} "
               f"on the data it was built from).")
    if v.get("cox_snell_r2_apparent") is not None:
        out.append(f"  Cox-Snell R-squared: {fmt_num(v['cox_snell_r2_corrected'], 3)} corrected "
                   f"({fmt_num(v['cox_snell_r2_apparent'], 3)} on the data it was built from).")
    out.append("  " + corrected_sample_size_text(v, record["rows_used"]))
    if v.get("failed"):
        out.append(f"  {v['failed']:,} resamples could not be fitted and were left out.")
    return out


def reading_not_nested(first: int, second: int, aic_difference, auc_test=None) -> str:
    """Plain reading of two models neither of which contains the other: AIC, then discrimination.

    ``aic_difference`` is AIC(second) - AIC(first).  The wording of the size
    follows Burnham & Anderson (Model Selection and Multimodel Inference, 2nd
    ed., 2002, sec. 2.6): under 2 the two are about equally supported, 4 to 7
    clearly less for the worse one, above 10 essentially none (common practice).
    """
    if aic_difference is None or aic_difference != aic_difference:
        out = "AIC cannot compare these two models here."
    else:
        better, worse = (second, first) if aic_difference < 0 else (first, second)
        size = abs(aic_difference)
        if size < 2:
            out = (f"By AIC the two models fit about equally well (difference {fmt_num(size, 1)}, under 2); "
                   "the simpler one may serve.")
        elif size <= 10:
            out = (f"By AIC model {better} fits better than model {worse} (by {fmt_num(size, 1)}; differences "
                   "of 4 to 10 are usually read as clear support for the better model).")
        else:
            out = (f"By AIC model {better} fits much better than model {worse} (by {fmt_num(size, 1)}, "
                   "more than 10).")
    if auc_test is not None and auc_test.p_value == auc_test.p_value:
        higher = second if auc_test.auc_b > auc_test.auc_a else first
        if auc_test.p_value < 0.05:
            out += (f" Model {higher} tells patients apart better, a difference in the area under the ROC curve "
                    "larger than chance alone would easily explain.")
        else:
            out += (" Their ability to tell patients apart (area under the ROC curve) does not clearly differ.")
    return out + " This compares fit, not causes."


#: At most this many thresholds of a decision curve are printed in the plain-text account.
DECISION_ROWS_SHOWN = 11


def decision_lines(record: dict) -> list[str]:
    """The decision curve of a record (``net_benefit``), its reading and a short table; [] when none."""
    curve = record.get("net_benefit")
    if not curve:
        return []
    summary = record.get("net_benefit_summary") or {}
    corrected = "model_corrected" in curve[0]
    smaller = "smaller_model" in curve[0] or "other_model" in curve[0]
    second = "smaller_model" if "smaller_model" in curve[0] else "other_model"
    out = ["", "Decision curve (net benefit per person; treating no one is 0)"]
    if summary.get("reading"):
        out.append("  " + summary["reading"])
    head = (f"    {'threshold':>9}  {'model':>8}" + (f"  {'corrected':>9}" if corrected else "")
            + (f"  {'smaller':>8}" if smaller else "") + f"  {'treat all':>9}")
    out.append(head)
    step = max(1, -(-len(curve) // DECISION_ROWS_SHOWN))
    shown = curve[::step] if curve[-1] in curve[::step] else curve[::step] + [curve[-1]]
    for e in shown:
        threshold = f"{100 * e['threshold']:.4g}%"
        row = f"    {threshold:>9}  {fmt_num(e['model'], 4):>8}"
        if corrected:
            row += f"  {fmt_num(e['model_corrected'], 4):>9}"
        if smaller:
            row += f"  {fmt_num(e[second], 4):>8}"
        out.append(row + f"  {fmt_num(e['treat_all'], 4):>9}")
    if len(shown) < len(curve):
        out.append(f"    ({len(shown)} of {len(curve)} thresholds shown; every one is in the JSON)")
    if summary.get("note"):
        out.append("  " + summary["note"])
    return out


def external_lines(record: dict) -> list[str]:
    """A frozen validation's O/E, calibration index, sample-size check and the coefficients applied."""
    a = record.get("assessment") or {}
    out = []
    oe = a.get("observed_expected")
    if oe:
        out.append(f"  Observed/expected events {fmt_num(oe['ratio'], 3)} (95% interval {fmt_num(oe['ci_low'], 3)} to "
                   f"{fmt_num(oe['ci_high'], 3)}): {oe['observed']:,} events observed, {fmt_num(oe['expected'], 1)} "
                   "expected from the model (above 1: more events than predicted).")
    if a.get("ici") is not None:
        out.append(f"  Distance between predicted risks and the smoothed calibration curve: mean (ICI) "
                   f"{fmt_num(a['ici'], 4)}, median (E50) {fmt_num(a['e50'], 4)}, 90th centile (E90) "
                   f"{fmt_num(a['e90'], 4)} (0 is perfect).")
    size = a.get("validation_sample_size")
    if size and size.get("n_required") is not None:
        verdict = "enough" if size["met"] else "fewer than needed, so read the intervals as wide"
        out.append(f"  Rows needed for a precise validation (Riley et al. 2024): {size['n_required']:,}; this extract "
                   f"has {size['n_available']:,}, {verdict}.")
    applied = record.get("coefficients_applied")
    if applied:
        out.append("  Coefficients applied: " + ", ".join(f"{c['name']} {fmt_num(c['estimate'], 4)}" for c in applied)
                   + ".")
    return out


def describe_units(record: dict) -> str:
    """The plain-text account of a comparison of units."""
    lines = [f"Events by '{record['unit_column']}' against those the model expects from each unit's patients "
             f"({record['rows_used']:,} rows)"]
    width = max(len(str(u["unit"])) for u in record["units"])
    lines.append(f"  {'unit':<{width}}  {'rows':>7}  {'observed':>8}  {'expected':>8}  {'O/E':>6}  {'95% interval':>15}")
    for u in record["units"]:
        ci = f"{fmt_num(u['ci_low'], 2)} to {fmt_num(u['ci_high'], 2)}"
        lines.append(f"  {str(u['unit']):<{width}}  {u['rows']:>7,}  {u['observed']:>8,}  {fmt_num(u['expected'], 1):>8}  "
                     f"{fmt_num(u['ratio'], 2):>6}  {ci:>15}  {u['verdict']}")
    d = record["overdispersion"]
    if d["df"]:
        lines.append(f"  Spread between units beyond chance (overdispersion): {fmt_num(d['statistic'], 2)} on "
                     f"{d['df']} degrees of freedom, p-value {fmt_p(d['p_value'])}; "
                     + (f"the limits are widened by a factor of {fmt_num(d['factor'], 2)}." if d["present"]
                        else "no more than chance, so the limits are the exact Poisson ones."))
    if record["rows_without_unit"]:
        lines.append(f"  {record['rows_without_unit']:,} rows without a unit were left out.")
    lines.append("")
    lines.append("Caution: " + record["caution"])
    return "\n".join(lines) + "\n"


def adaptation_lines(record: dict) -> list[str]:
    """``rerun --adapt``: the closed sequence of tests, each with its reading, and the choice."""
    a = record.get("adaptation")
    if not a:
        return []
    from twofold.core.models.updating import STEP_WORDS

    out = ["", "Adapting the saved model to these records (closed testing, Vergouwe et al. 2017, each step at the "
           "5% level)"]
    for t in a["tests"]:
        out.append(f"  {STEP_WORDS.get(t['step'], t['step'])}: likelihood-ratio G = {fmt_num(t['g'], 2)} on "
                   f"{degrees(t['df'])}, p-value {fmt_p(t['p_value'])}. {t['reading']}")
    out.append("  " + a["reading"])
    out.append("  Adapted coefficients: " + ", ".join(f"{c['name']} {fmt_num(c['estimate'], 4)}"
                                                     for c in a["coefficients"]) + ".")
    return out


def subgroup_lines(record: dict) -> list[str]:
    """``subgroups``: AUC and calibration within each group, with 95% intervals; [] when none."""
    groups = record.get("subgroups")
    if not groups:
        return []

    def ci(pair, digits):
        return "n/a" if pair[0] is None else f"{fmt_num(pair[0], digits)} to {fmt_num(pair[1], digits)}"

    out = ["", "Performance within groups (95% intervals)"]
    for g in groups:
        rows = "suppressed" if g["rows"] is None else f"{g['rows']:,} rows"
        if g["auc"] is None:
            out.append(f"  {g['group']} ({rows}): {g['note']}")
            continue
        line = f"  {g['group']} ({rows}): AUC {fmt_num(g['auc'], 3)} ({ci(g['auc_ci'], 3)})"
        if g["calibration_slope"] is not None:
            line += (f"; calibration-in-the-large {fmt_num(g['calibration_intercept'], 3)} "
                     f"({ci(g['calibration_intercept_ci'], 3)}); slope {fmt_num(g['calibration_slope'], 3)} "
                     f"({ci(g['calibration_slope_ci'], 3)})")
        out.append(line + ".")
    if record.get("subgroups_note"):
        out.append("  " + record["subgroups_note"])
    return out



def usefulness_lines(record: dict) -> list[str]:
    """The comparison of units (``units``) and the shrunk model (``shrinkage``) of a record; [] when neither."""
    out = []
    units = record.get("units")
    if units:
        out.append("")
        out.extend(describe_units(units).rstrip("\n").split("\n"))
    shrinkage = record.get("shrinkage")
    if shrinkage:
        out += ["", "Shrinkage", "  " + shrinkage["reading"]]
        if shrinkage.get("coefficients"):
            out.append("  Shrunk coefficients (saved and used by predict): " + ", ".join(
                f"{c['name']} {fmt_num(c['estimate'], 4)}" for c in shrinkage["coefficients"]) + ".")
    return out
