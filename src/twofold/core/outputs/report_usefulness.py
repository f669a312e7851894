"""The report's sections on usefulness and validation: decision curve, a saved model on new records, units,
subgroups and shrinkage.

Each takes the record of an analysis (``twofold fit`` / ``rerun`` JSON) and
adds blocks to a :class:`~twofold.core.outputs.report.Report`; counts of
people pass :mod:`twofold.core.outputs.privacy` as everywhere in a report:

* decision curve: a threshold at which the treated, the true positives or the
  false positives of a model number 1 to the limit is left out of the table
  and the plot (net benefits at thresholds with the same people treated would
  give those counts back);
* units: each unit's events and non-events are one row of a table protected
  with complements (zeros beside a count hidden too, and the rows without a
  unit as a row of their own, so the totals give nothing back); a unit with a
  hidden count shows no ratio, interval or verdict (with its expected events
  they would give the count back), and the overdispersion statistic, which
  every unit's count feeds, is withheld when any is hidden;
* subgroups: figures are recomputed at the report's own limit where the rows
  are at hand, and the groups' sizes are protected with complements against
  the rows used.
"""

from __future__ import annotations

import numpy as np

from twofold.core.outputs.privacy import DEFAULT_THRESHOLD, SUPPRESSED, is_small, protect_table
from twofold.core.outputs.text import fmt_num, fmt_p

#: Full references of these sections, listed after them when they are printed.
REFERENCES = {
    "vickers": "Vickers AJ, Elkin EB. Decision curve analysis: a novel method for evaluating prediction models. "
               "Medical Decision Making 2006;26:565-574.",
    "austin2014": "Austin PC, Steyerberg EW. Graphical assessment of internal and external calibration of logistic "
                  "regression models by using loess smoothers. Statistics in Medicine 2014;33:517-535.",
    "austin2019": "Austin PC, Steyerberg EW. The Integrated Calibration Index (ICI) and related metrics for "
                  "quantifying the calibration of logistic regression models. Statistics in Medicine "
                  "2019;38:4051-4065.",
    "riley2024": "Riley RD, Snell KIE, Archer L, et al. Evaluation of clinical prediction models (part 3): "
                 "calculating the sample size required for an external validation study. BMJ 2024;384:e074821.",
    "spiegelhalter": "Spiegelhalter DJ. Funnel plots for comparing institutional performance. Statistics in "
                     "Medicine 2005;24:1185-1202.",
    "houwelingen": "Van Houwelingen JC, Le Cessie S. Predictive value of statistical models. Statistics in "
                   "Medicine 1990;9:1303-1325.",
    "steyerberg": "Steyerberg EW. Clinical Prediction Models, 2nd edition. Springer, 2019.",
}

#: Thresholds a report's net-benefit table shows, when the curve reaches them (risks).
TABLE_THRESHOLDS = (0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5)


def _pct(t: float) -> str:
    return f"{100 * t:.4g}%"


def _small_counts(y, p, thresholds, limit: int) -> np.ndarray:
    """True at thresholds where the treated, true positives or false positives number 1 to ``limit``."""
    y = np.asarray(y, float)
    order = np.argsort(np.asarray(p, float), kind="stable")
    sp = np.asarray(p, float)[order]
    events_from = np.concatenate([np.cumsum(y[order][::-1])[::-1], [0.0]])
    first = np.searchsorted(sp, np.asarray(thresholds, float), side="left")
    treated = len(y) - first
    tp = events_from[first]
    fp = treated - tp
    small = np.zeros(len(first), dtype=bool)
    for k in (treated, tp, fp):
        small |= np.array([is_small(int(round(v)), limit) for v in k])
    return small


def decision_section(rep, record: dict, threshold: int, y, p, others=None) -> list[str]:
    """The decision curve: plot, a table at a few thresholds and the plain reading; returns withheld notes.

    ``others`` maps the record's key of another curve (``smaller_model``,
    ``other_model``) to that model's risks on the same rows, for the same
    count check.
    """
    from twofold.core.outputs.report import Figure, Heading, Para, Table

    entries = record.get("net_benefit")
    if not entries:
        return []
    t = np.array([e["threshold"] for e in entries], float)
    hide = _small_counts(y, p, t, threshold)
    for key, risks in (others or {}).items():
        if risks is not None and key in entries[0]:
            hide |= _small_counts(y, risks, t, threshold)
    keep = ~hide
    rep.add(Heading("Is acting on the model worth it? (decision curve)", 3))
    summary = record.get("net_benefit_summary") or {}
    other_name = ("the model of " + ", ".join(summary["other_predictors"])) if summary.get("other_predictors") \
        else "the smaller model"
    second = "other_model" if "other_model" in entries[0] else ("smaller_model" if "smaller_model" in entries[0]
                                                                 else None)
    col = lambda k: [e.get(k) for e, ok in zip(entries, keep) if ok]  # noqa: E731
    if keep.any():
        data = {"thresholds": [float(x) for x in t[keep]], "model": col("model"), "treat_all": col("treat_all")}
        if "model_corrected" in entries[0]:
            data["model_corrected"] = col("model_corrected")
        if second:
            data["other"], data["other_label"] = col(second), other_name
        rep.add(Figure("decision", data,
                       "Net benefit per person of acting on the model's risks, beside treating everyone and treating "
                       "no one, at each threshold risk (Vickers & Elkin 2006).",
                       "Decision curve: net benefit against threshold risk."))
    rows = []
    for target in TABLE_THRESHOLDS:
        i = int(np.argmin(np.abs(t - target)))
        if abs(t[i] - target) > 1e-9:
            continue
        e = entries[i]
        cells = [_pct(t[i])]
        if hide[i]:
            cells += [SUPPRESSED] * (2 + ("model_corrected" in e) + (second is not None))
        else:
            cells.append(fmt_num(e["model"], 4))
            if "model_corrected" in e:
                cells.append(fmt_num(e["model_corrected"], 4))
            if second:
                cells.append(fmt_num(e[second], 4))
            cells.append(fmt_num(e["treat_all"], 4))
        rows.append(cells)
    if rows:
        headers = ["threshold risk", "this model"] + (["corrected for optimism"] if "model_corrected" in entries[0]
                                                     else []) + ([other_name] if second else []) + ["treat everyone"]
        rep.add(Table(headers, rows, caption="Net benefit per person; treating no one is 0. A threshold of t means "
                                             "accepting t/(1-t) needless treatments to catch one event."))
    if summary.get("reading"):
        rep.add(Para(summary["reading"]))
    if summary.get("note"):
        rep.add(Para(summary["note"], "note"))
    if hide.any():
        rep.add(Para(f"{int(hide.sum())} threshold(s) are left out of the curve and the table: there, the people "
                     f"a model would treat, or the events or non-events among them, number 1 to {threshold}.",
                     "note"))
        return ["Net benefit at thresholds where the people treated, or the events or non-events among them, "
                "are few enough to be suppressed."]
    return []


def frozen_section(rep, record: dict) -> None:
    """A saved model on new records: O/E, the calibration curve with its band, ICI/E50/E90 and the sample size."""
    from twofold.core.outputs.report import Figure, Heading, Para

    a = record.get("assessment") or {}
    oe = a.get("observed_expected")
    if not oe:
        return
    rep.add(Heading("Does the saved model hold on these records?", 3))
    text = (f"Observed over expected events {fmt_num(oe['ratio'], 3)} (95% interval {fmt_num(oe['ci_low'], 3)} to "
            f"{fmt_num(oe['ci_high'], 3)}): above 1, more events than the model predicts; below 1, fewer.")
    if a.get("ici") is not None:
        text += (f" Integrated calibration index {fmt_num(a['ici'], 4)}, E50 {fmt_num(a['e50'], 4)}, E90 "
                 f"{fmt_num(a['e90'], 4)} (Austin & Steyerberg 2019: the mean, median and 90th centile of the "
                 "distance between predicted and smoothed observed risk).")
    rep.add(Para(text))
    band = a.get("calibration_curve")
    if band:
        rep.add(Figure("calibration_band", {k: band[k] for k in ("risk", "observed", "low", "high")},
                       band["note"], "Smoothed calibration curve of the saved model with its 95% band."))
    size = a.get("validation_sample_size")
    if size and size.get("n_required") is not None:
        met = size["met"]
        rep.add(Para(f"Rows a validation of this precision needs (Riley et al. 2024): {size['n_required']:,}; this "
                     f"extract has {size['n_available']:,}, so the requirement is "
                     + ("met." if met else "not met, and the figures above are less precise than asked for.")))


def adaptation_section(rep, record: dict) -> None:
    """How the saved model should be adapted to the new records: the closed sequence of likelihood-ratio tests and
    its choice (the adapted coefficients are in the saved session, not printed: a re-estimated coefficient of a
    small group could give its count back)."""
    from twofold.core.models.updating import STEP_WORDS
    from twofold.core.outputs.report import Heading, Para, Table

    a = record.get("adaptation")
    if not a:
        return
    rep.add(Heading("Adapting the saved model to these records", 3))
    rows = [[STEP_WORDS.get(t["step"], t["step"]), fmt_num(t["g"], 2), str(t["df"]), fmt_p(t["p_value"])]
            for t in a["tests"]]
    rep.add(Table(["step (tested in this order)", "likelihood-ratio G", "degrees of freedom", "p-value"], rows,
                  caption="Closed testing (Vergouwe et al. 2017, Stat Med 36:4529): each step at the 5% level; the "
                          "first step that is not significant names the choice."))
    rep.add(Para(a["reading"]))


def close_relations(hidden, primary, relations) -> list[bool]:
    """Which rows of a protected table to hide so that no published sum gives a hidden row back.

    ``relations`` are sets of rows whose sum the report prints elsewhere
    (the units within one group of a categorical predictor, whose events and
    people the predictor's table shows; the whole table).  While some
    relation has exactly one row not known, the smallest shown row of that
    relation is hidden too; a row that cannot be covered (every other row of
    its relation already known) counts as known.  When a row hidden for being
    small ends up known, every row is hidden.
    """
    hidden = list(hidden)
    known = [not h for h in hidden]
    changed = True
    while changed:
        changed = False
        for rel in relations:
            unknown = [i for i in rel if not known[i]]
            if len(unknown) != 1:
                continue
            shown = [i for i in rel if not hidden[i]]
            if shown:
                hidden[shown[0]] = True
                known[shown[0]] = False
            else:
                known[unknown[0]] = True
            changed = True
            break
    if any(known[i] and primary[i] for i in range(len(hidden)) if hidden[i]):
        return [True] * len(hidden)
    return hidden


def units_section(rep, units: dict, threshold: int, no_unit_events: int = 0, relations=()) -> list[str]:
    """Risk-adjusted comparison of units: funnel plot and a protected table; returns withheld notes.

    ``relations``: sets of rows (the units' indices; the rows without a unit
    are the last row) whose events and people the report prints elsewhere
    (:func:`nested_relations`).
    """
    from twofold.core.outputs.report import Figure, Heading, Para, Table

    listed = units["units"]
    events = [int(u["observed"]) for u in listed]
    rows = [int(u["rows"]) for u in listed]
    counts = [[e, r - e] for e, r in zip(events, rows)]
    without = int(units.get("rows_without_unit") or 0)
    extra = without > 0
    if extra:
        # The rows without a unit are a row of the table, so that the totals (the rows and events of the whole
        # analysis are printed elsewhere) give none of them back.
        counts.append([int(no_unit_events), without - int(no_unit_events)])
    prot = protect_table(np.array(counts, dtype=int), threshold, zeros_disclose=True)
    n_rows = len(counts)
    first = [not (prot.cell(i, 0) is not None and prot.cell(i, 1) is not None and prot.row_total(i) is not None)
             for i in range(n_rows)]
    # Smallest rows first, so a relation's complement is its smallest shown row.
    order = sorted(range(n_rows), key=lambda i: sum(counts[i]))
    rels = [sorted(r, key=order.index) for r in list(relations) + [list(range(n_rows))]]
    hide = close_relations(first, [bool(prot.primary[i, :].any()) for i in range(n_rows)], rels)
    shown = prot.as_text()
    for i in range(n_rows):
        if hide[i]:
            shown[i] = [SUPPRESSED] * len(shown[i])
    table, fx, fr = [], [], []
    hidden_units = 0
    for i, u in enumerate(listed):
        ok = not hide[i]
        if ok:
            fx.append(u["expected"])
            fr.append(u["ratio"])
            cells = [fmt_num(u["ratio"], 3), f"{fmt_num(u['ci_low'], 3)} to {fmt_num(u['ci_high'], 3)}", u["verdict"]]
        else:
            hidden_units += 1
            cells = [SUPPRESSED, SUPPRESSED, "not shown (small counts)"]
        table.append([str(u["unit"]), shown[i][2], shown[i][0], fmt_num(u["expected"], 1), *cells])
    if extra:
        table.append(["(no unit recorded)", shown[len(listed)][2], shown[len(listed)][0], "", "", "", ""])
    table.append(["all", shown[-1][2], shown[-1][0], "", "", "", ""])
    rep.add(Heading(f"Units compared by their case mix ({units['unit_column']})", 3))
    lim = units["limits"]
    data = {"expected": fx, "ratio": fr, "limits_95": lim["95"], "limits_998": lim["99.8"],
            "hidden_units": hidden_units}
    od = units["overdispersion"]
    if units.get("limits_adjusted") and not hidden_units:
        data["adjusted_95"], data["adjusted_998"] = units["limits_adjusted"]["95"], units["limits_adjusted"]["99.8"]
    rep.add(Figure("funnel", data, "Observed over expected events of each unit against its expected events, with "
                                   "the 95% and 99.8% limits of chance alone (Spiegelhalter 2005).",
                   "Funnel plot of the units' observed over expected events."))
    rep.add(Table(["unit", "people", "events", "expected events", "observed / expected", "95% interval (exact)",
                   "reading"], table, "lrrrrrl",
                  "Expected events: the sum of the model's risks for the unit's patients (indirect standardisation). "
                  "Where a unit's counts are suppressed, its ratio, interval and reading are too (with the expected "
                  "events they would give the count back)."))
    notes = []
    if hidden_units:
        rep.add(Para("The test for more spread between units than chance gives is withheld because some units' "
                     "counts are suppressed and it is worked out from every unit's count; the plot shows the plain "
                     f"limits. The readings {'do' if od.get('present') else 'do not'} allow for such spread.",
                     "note"))
        notes.append("Counts, ratios and readings of units with few events or non-events, and the test for more "
                     "spread between units than chance gives.")
    elif od.get("statistic") is not None:
        rep.add(Para(f"More spread between units than chance gives (Spiegelhalter 2005): statistic "
                     f"{fmt_num(od['statistic'], 2)} on {od['df']} degrees of freedom, p-value "
                     f"{fmt_p(od['p_value'])}; " + (f"the limits are widened by a factor of "
                                                         f"{fmt_num(od['factor'], 2)}." if od.get("present")
                                                         else "the limits are not widened.")))
    rep.add(Para(units["caution"], "caution"))
    return notes


def nested_relations(study, fit, unit_column: str, n_units: int) -> list[list[int]]:
    """The sets of units (indices in the comparison's sorted order; rows without a unit: index ``n_units``) that
    make up one group of a categorical predictor of the model exactly, so the predictor's table prints their
    sum of events and of people."""
    import pandas as pd

    from twofold.core.assessing.units import factorize_groups

    frame, rows = study.frame, fit.design.rows
    values = frame[unit_column].iloc[rows].to_numpy(dtype=object)
    has, codes, _ = factorize_groups(values, unit_column, "unit", max(n_units, 1), "units")
    index = np.full(len(values), n_units)
    index[has] = codes
    out = []
    for block in fit.design.blocks:
        if block.kind != "factor":
            continue
        groups = frame[block.column].iloc[rows].astype(str).to_numpy()
        table = pd.crosstab(index, groups)
        spread = (table > 0).sum(axis=1)  # in how many groups each unit has rows
        for g in table.columns:
            members = table.index[table[g] > 0]
            if len(members) and (spread.loc[members] == 1).all():
                out.append([int(m) for m in members])
    return out


def subgroups_section(rep, entries: list, note: str, threshold: int, rows_used: int, sizes=None,
                      relations=()) -> list[str]:
    """Performance within groups: a table whose group sizes are protected against the rows used.

    ``sizes``: every group's true size (None when only the record is at hand:
    then, if any group's size is hidden, every size is, as the rows without a
    group are not known).
    """
    from twofold.core.outputs.report import Heading, Para, Table

    if not entries:
        return []
    if sizes is None:
        if any(e["rows"] is None for e in entries):
            hidden = [True] * len(entries)
        else:
            hidden = [is_small(e["rows"], threshold) for e in entries]
            hidden = [any(hidden)] * len(entries) if any(hidden) else hidden
        sizes = [0 if e["rows"] is None else int(e["rows"]) for e in entries]
    else:
        rest = max(int(rows_used) - sum(sizes), 0)
        counts = np.array(list(sizes) + ([rest] if rest else []), dtype=int).reshape(-1, 1)
        prot = protect_table(counts, max(threshold, 0), row_totals=False)
        n_rows = len(counts)
        # Groups nested in one group of a categorical predictor add up to a size the report prints there.
        order = sorted(range(n_rows), key=lambda i: int(counts[i, 0]))
        rels = [sorted((i for i in r if i < n_rows), key=order.index) for r in list(relations) + [range(n_rows)]]
        hidden = close_relations([prot.cell(i, 0) is None for i in range(n_rows)],
                                 [bool(prot.primary[i, 0]) for i in range(n_rows)], rels)[:len(entries)]
    table = []
    for i, e in enumerate(entries):
        size = SUPPRESSED if hidden[i] else f"{sizes[i]:,}"
        ci = lambda pair: (f"{fmt_num(pair[0], 3)} to {fmt_num(pair[1], 3)}"  # noqa: E731
                           if pair and pair[0] is not None else "")
        if e["suppressed"] or e["auc"] is None:
            table.append([str(e["group"]), size, "not shown", "", "", "", "", ""])
            continue
        table.append([str(e["group"]), size, fmt_num(e["auc"], 3), ci(e["auc_ci"]),
                      fmt_num(e["calibration_intercept"], 3), ci(e["calibration_intercept_ci"]),
                      fmt_num(e["calibration_slope"], 3), ci(e["calibration_slope_ci"])])
    rep.add(Heading("Performance within groups", 3))
    rep.add(Table(["group", "people", "area under the ROC curve", "95% interval", "calibration-in-the-large",
                   "95% interval", "calibration slope", "95% interval"], table, "lrrrrrrr",
                  f"Groups with 1 to {threshold} people, events or non-events show no figures; a group's size is "
                  "suppressed when it is small or when, with the others and the rows used, it would give a small "
                  "one back."))
    rep.add(Para(note, "note"))
    return ["Figures of groups with few people, events or non-events."] if any(
        e["suppressed"] for e in entries) else []


def shrinkage_section(rep, shrinkage: dict, withheld=()) -> None:
    """The shrunk model: its factor, the reading and its coefficients (those of withheld predictors left out)."""
    from twofold.core.outputs.report import Heading, Para, Table

    if not shrinkage or shrinkage.get("factor") is None:
        if shrinkage and shrinkage.get("reading"):
            rep.add(Heading("Shrinkage", 3), Para(shrinkage["reading"]))
        return
    rep.add(Heading("The shrunk model (for predictions)", 3))
    rep.add(Para(shrinkage["reading"]), Para(shrinkage["note"], "note"))
    rows = [[e["name"], fmt_num(e["estimate"], 4)] for e in shrinkage["coefficients"]
            if not any(e["name"] == w or e["name"].startswith(f"{w}[") or w in e["name"].split(":")
                       for w in withheld)]
    rep.add(Table(["coefficient", "shrunk estimate (log odds)"], rows, "lr",
                  f"Every coefficient times {fmt_num(shrinkage['factor'], 3)}; the intercept re-estimated. Saved "
                  "sessions and predictions use these."))


def usefulness_sections(rep, result, record: dict, threshold: int, frozen: bool, check=None) -> list[str]:
    """Every usefulness section the record has, in order; returns the notes of what was withheld."""
    notes: list[str] = []
    if check is not None and check.whole_model is not None:
        return notes
    if frozen:
        y, p = result.y, result.predicted
        frozen_section(rep, record)
        adaptation_section(rep, record)
        others = None
    else:
        y, p = result.fit.design.y, result.fit.fitted
        smaller = getattr(result, "smaller_fit", None)
        others = {"smaller_model": None if smaller is None else smaller.fitted,
                  "other_model": getattr(result, "other_risks", None)}
        if "other_model" in (record.get("net_benefit") or [{}])[0] and others["other_model"] is None:
            record = {**record, "net_benefit": [{k: v for k, v in e.items() if k != "other_model"}
                                                for e in record["net_benefit"]]}
    notes += decision_section(rep, record, threshold, y, p, others)
    if record.get("subgroups"):
        entries, sizes, relations = record["subgroups"], None, []
        column = None if frozen else getattr(result.spec, "subgroups", None)
        if column is not None:
            from twofold.core.assessing.subgroups import subgroup_performance
            from twofold.core.assessing.units import factorize_groups

            fit = result.fit
            column = result.study.column(str(column))
            groups = result.study.frame[column].iloc[fit.design.rows].to_numpy(dtype=object)
            entries = subgroup_performance(groups, y, p, fit.linear_predictor, column, threshold)
            has, codes, _ = factorize_groups(groups, column, "subgroup", len(entries), "groups")
            sizes = np.bincount(codes, minlength=len(entries)).tolist()
            relations = nested_relations(result.study, fit, column, len(entries))
        if frozen and threshold > DEFAULT_THRESHOLD:
            from twofold.core.outputs.report import Para

            rep.add(Para(f"Performance within groups is not shown: it was worked out with a limit of "
                         f"{DEFAULT_THRESHOLD}, below this report's {threshold}.", "note"))
            notes.append("Performance within groups, worked out with a smaller limit than this report's.")
        else:
            notes += subgroups_section(rep, entries, record.get("subgroups_note", ""), threshold,
                                       record["rows_used"], sizes, relations if sizes is not None else ())
    if record.get("units"):
        no_unit = 0
        relations = []
        if not frozen:
            fit = result.fit
            column = result.study.column(str(record["units"]["unit_column"]))
            absent = result.study.frame[column].iloc[fit.design.rows].isna().to_numpy()
            no_unit = int(np.asarray(y)[absent].sum())
            relations = nested_relations(result.study, fit, column, len(record["units"]["units"]))
        notes += units_section(rep, record["units"], threshold, no_unit, relations)
    if not frozen and record.get("shrinkage"):
        shrinkage_section(rep, record["shrinkage"], tuple((check.withheld if check is not None else {}).keys()))
    refs = ((["vickers"] if record.get("net_benefit") else [])
            + (["austin2014", "austin2019", "riley2024"] if frozen and (record.get("assessment") or {}).get(
                "observed_expected") else [])
            + (["spiegelhalter"] if record.get("units") else [])
            + (["houwelingen", "steyerberg"] if not frozen and (record.get("shrinkage") or {}).get("factor")
               else []))
    if refs:
        from twofold.core.outputs.report import Bullets, Heading

        rep.add(Heading("Sources of the sections above", 3), Bullets([REFERENCES[k] for k in refs], "small"))
    return notes
