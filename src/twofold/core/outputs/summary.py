"""The figures of a fit as plain data: the one structure behind JSON, text and the window."""

from __future__ import annotations

import math

import numpy as np

from twofold.core.models.fit import LikelihoodRatioTest, LogisticFit

#: Shown with every set of results.
CAUTION = (
    "These figures describe statistical associations in the loaded records, not causes. "
    "Decisions about any patient's care rest with licensed clinicians and local policy."
)

#: Shown right beside every predicted risk for one patient (window and command line alike).
PATIENT_CAUTION = (
    "This is a statistical estimate from the loaded data, not a clinical decision. Decisions about a patient's "
    "care rest with licensed clinicians and local policy."
)


def clean_number(x):
    """A float for JSON: NaN and infinities become None; whole-number floats stay floats."""
    if x is None:
        return None
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    x = float(x)
    return x if math.isfinite(x) else None


def plain_value(v):
    """An outcome or level value for JSON: 1.0 -> 1, numpy scalars -> Python."""
    if isinstance(v, (np.generic,)):
        v = v.item()
    if isinstance(v, float) and v.is_integer():
        return int(v)
    return v


def _test(t: LikelihoodRatioTest | None, kind: str = "likelihood-ratio"):
    if t is None:
        return None
    return {"g": clean_number(t.g), "df": int(t.df), "p_value": clean_number(t.p_value), "kind": kind,
            **pooled_fields(t)}


def pooled_fields(t) -> dict:
    """A pooled test's ``kind`` ("D1", "D2", "D3"), F ``statistic`` and ``df_denominator``; {} for others."""
    if not hasattr(t, "df_denominator"):
        return {}
    return {"kind": t.kind, "statistic": clean_number(t.statistic), "df_denominator": clean_number(t.df_denominator)}


def fit_record(fit: LogisticFit, outcome: str, event, nested: LikelihoodRatioTest | None = None,
               smaller: list | None = None, profile: dict | None = None, assessment=None) -> dict:
    """Everything about a fit, as the JSON contract of ``twofold fit`` lays it out.

    Fields: rows_read, rows_used, events, outcome, event, intercept, terms,
    log_likelihood, null_log_likelihood, deviance, aic, bic, overall, nested,
    warnings, plus extra context (predictors, term_tests, events_per_parameter,
    mcfadden_r2, missing counts, caution).  ``profile`` (name -> odds-ratio
    interval) adds ``or_pl_low``/``or_pl_high`` to each term; ``assessment``
    (an :class:`~twofold.core.assessing.assessment.Assessment`) adds ``assessment``.
    """
    from twofold.core.models.modelling import stated_effects

    rows = fit.coefficient_rows
    intercept = rows[0]
    penalised = getattr(fit, "penalized_llf", None) is not None
    # Under Firth's fit the whole-model and nested tests are penalised likelihood-ratio tests.
    kind = "penalised likelihood-ratio" if penalised else "likelihood-ratio"
    account = getattr(fit, "account", None)
    terms = []
    for r in rows[1:]:
        terms.append({
            "column": r["column"],
            "level": plain_value(r["level"]) if r["level"] is not None else None,
            "reference": plain_value(r["reference"]) if r["reference"] is not None else None,
            "label": r["label"], "part": r["part"],
            **{k: clean_number(r[k]) for k in ("estimate", "std_error", "z", "p_value",
                                                "odds_ratio", "or_ci_low", "or_ci_high")},
            "withheld": r["withheld"],
            **({"fmi": clean_number(r["fmi"]), "df": clean_number(r["df"])} if "fmi" in r else {}),
        })
        if profile is not None and r["name"] in profile and not r["withheld"]:
            lo, hi = profile[r["name"]]
            terms[-1]["or_pl_low"], terms[-1]["or_pl_high"] = clean_number(lo), clean_number(hi)
    record = {
        "method": fit.method,
        "outcome": outcome,
        "event": plain_value(event),
        "predictors": list(fit.design.predictors),
        "rows_read": account.rows_read if account else fit.n_used,
        "rows_missing_outcome": account.missing_outcome if account else 0,
        "missing_by_column": dict(account.missing_by_column) if account else {},
        "rows_used": fit.n_used,
        "events": fit.events,
        "nonevents": fit.n_used - fit.events,
        "parameters": fit.n_params,
        "events_per_parameter": clean_number(fit.events_per_parameter),
        "converged": fit.converged,
        "iterations": fit.iterations,
        "dropped_columns": list(fit.dropped),
        "intercept": {k: clean_number(intercept[k]) for k in ("estimate", "std_error", "z", "p_value")},
        "terms": terms,
        "term_tests": [
            {"column": t.column, "label": t.label, "includes": list(t.includes),
             "statistic": clean_number(t.statistic), "df": t.df, "p_value": clean_number(t.p_value),
             **pooled_fields(t)}
            for t in fit.term_tests.values()
        ],
        "log_likelihood": clean_number(fit.llf),
        "null_log_likelihood": clean_number(fit.null_llf),
        "deviance": clean_number(fit.deviance),
        "null_deviance": clean_number(fit.null_deviance),
        "aic": clean_number(fit.aic),
        "bic": clean_number(fit.bic),
        "mcfadden_r2": clean_number(fit.mcfadden_r2),
        "overall": _test(fit.overall, kind),
        "nested": None if nested is None else {
            **_test(nested, kind), "smaller_predictors": list(smaller or []),
            "added": list(nested.added), "rows": nested.n_rows,
        },
        "effects_at_values": [
            {**{k: e[k] for k in ("column", "label")},
             **{k: clean_number(e[k]) for k in ("odds_ratio", "or_ci_low", "or_ci_high")}}
            for e in stated_effects(fit)
        ],
        "warnings": [n.as_dict() for n in fit.notices],
        "caution": CAUTION,
    }
    if penalised:
        record["penalized_log_likelihood"] = clean_number(fit.penalized_llf)
    if fit.AIC_NOTE:
        record["aic_note"] = fit.AIC_NOTE  # penalised or pooled: no AIC, and why
    if assessment is not None:
        record["assessment"] = assessment.as_record()
    return record


def validation_record(validation, fit: LogisticFit) -> dict:
    """A bootstrap validation as the JSON holds it, with the sample-size check redone on its corrected R-squared.

    Riley et al. (2020, BMJ 368:m441) base the minimum sample size on an
    anticipated Cox-Snell R-squared and recommend an optimism-adjusted value
    over the apparent one; ``sample_size_corrected`` is the same calculation
    with the bootstrap's optimism-corrected Cox-Snell R-squared (None when
    that is not above zero, or when the validation predates it).
    """
    import math

    from twofold.core.assessing.samplesize import riley_minimum_sample_size
    from twofold.core.errors import TwofoldError

    out = {k: (clean_number(x) if isinstance(x, float) else x) for k, x in validation.as_dict().items()}
    r2 = validation.cox_snell_r2_corrected
    out["sample_size_corrected"] = None
    if math.isfinite(r2) and r2 > 0 and fit.n_params > 1:
        try:
            ss = riley_minimum_sample_size(fit.n_params - 1, fit.events / fit.n_used, r2)
        except TwofoldError:
            return out
        out["sample_size_corrected"] = {"n_minimum": ss.n_minimum, "r2_cs": clean_number(r2)}
    return out


def add_study_records(record: dict, study, curves=None, crossings=None) -> None:
    """Add what the study adds to a fit record: values marked missing, and the curve and interaction tests.

    ``curves`` and ``crossings`` are :class:`~twofold.core.models.modelling.TermLRTest` lists (None: not asked).
    """
    record["values_marked_missing"] = {k: list(v) for k, v in study.missing_values.items()}
    if curves is not None:
        record["nonlinearity"] = [
            {"column": t.term, "knots": list(t.knots), "g": clean_number(t.g), "df": t.df,
             "p_value": clean_number(t.p_value), **pooled_fields(t)} for t in curves]
    if crossings is not None:
        record["interaction_tests"] = [
            {"term": t.term, "g": clean_number(t.g), "df": t.df, "p_value": clean_number(t.p_value),
             **pooled_fields(t)} for t in crossings]
