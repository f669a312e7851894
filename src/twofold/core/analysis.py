"""One analysis, described as data and run in one place.

An :class:`AnalysisSpec` says what to fit (outcome, event, predictors, the
smaller model, reference levels, role changes, options); :func:`run_analysis`
loads the data, fits, tests and assesses, and returns the record that the
command line prints as JSON, that sessions and reports are made from, and that
a re-run on a new extract reproduces.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

from twofold.core.errors import ColumnError, ModelError, TwofoldError


@dataclass
class AnalysisSpec:
    """What to fit.

    Attributes
    ----------
    data : str
        Path of the data file (read only).
    outcome : str
    event : object, optional
        The outcome value that is the event (None: 1 for a 0/1 outcome).
    predictors : list of str
    smaller : list of str, optional
        Predictors of a smaller model for the nested test (None: no test).
    references : dict
        Reference level per categorical column.
    roles : dict
        Role changes per column (``Role`` values as text).
    sheet : str, optional
    firth, profile_ci : bool
    threshold : float, optional
    splines : dict
        Knots (3, 4 or 5) per numeric predictor to model with a spline.
    interactions : list of str
        Two-way interactions as ``"A:B"``.
    validate : int, optional
        Bootstrap repetitions for optimism correction (None: none).
    seed : int, optional
        Seed of the bootstrap.
    missing : dict
        Values to treat as missing, per column (``--missing COLUMN=VALUE``).
    rows_complete_in : list of str
        Columns whose completeness decides the rows, besides the outcome and
        the model's own predictors: a row missing any of them is left out too
        (the window saves the columns of every model of its ladder here, so
        a re-run fits on the ladder's common rows).  Empty: the rows complete
        for the model alone.
    net_benefit : list of float, optional
        ``[LOW, HIGH, STEP]``: threshold risks of a decision curve (net
        benefit), added as ``net_benefit`` to the record (None: none).
    subgroups : str, optional
        A column whose groups the model's performance is shown in, added as
        ``subgroups`` to the record (None: none).
    """

    data: str
    outcome: str
    predictors: list
    event: object = None
    smaller: list | None = None
    references: dict = field(default_factory=dict)
    roles: dict = field(default_factory=dict)
    sheet: str | None = None
    firth: bool = False
    profile_ci: bool = False
    threshold: float | None = None
    splines: dict = field(default_factory=dict)
    interactions: list = field(default_factory=list)
    validate: int | None = None
    seed: int | None = None
    rows_complete_in: list = field(default_factory=list)
    #: Values that mean "missing", per column ("unknown", 999), applied before anything else.
    missing: dict = field(default_factory=dict)
    net_benefit: list | None = None
    subgroups: str | None = None
    #: Imputed copies (2 to 100) to fill in missing predictor values by multiple imputation (None: complete rows).
    impute: int | None = None
    #: Columns used only to impute (never predictors).
    auxiliary: list = field(default_factory=list)
    #: Impute columns missing in more than half the rows with an outcome (the user confirmed).
    impute_anyway: bool = False
    #: Predictors of a second model whose decision curve is drawn beside this one's (fitted on the same rows).
    net_benefit_versus: list | None = None
    #: A column naming each record's unit (ward, hospital): adds ``units`` (risk-adjusted comparison).
    unit_column: str | None = None
    #: With ``validate``: shrink the coefficients by the corrected calibration slope when it is below 1.
    shrink: bool = False

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass
class AnalysisResult:
    """The outcome of :func:`run_analysis`: the study, the fits, and the record."""

    spec: AnalysisSpec
    study: object
    fit: object
    nested: object
    smaller_fit: object
    assessment: object
    record: dict
    validation: object = None
    #: The imputed copies' description (:class:`~twofold.core.models.imputation.Imputation`), or None.
    imputation: object = None
    #: A :class:`~twofold.core.models.updating.Shrinkage` when the model was shrunk (sessions save its model).
    shrinkage: object = None
    #: The risks of the second model of the decision curve on the same rows (``net_benefit_versus``), or None.
    other_risks: object = None


def prepare_study(spec: AnalysisSpec, study=None, guess_event: bool = False):
    """Load the data (unless a study is given) and apply roles, outcome and references."""
    from twofold.core.models.study import Study

    if study is None:
        study = Study.from_file(spec.data, sheet=spec.sheet)
    for column, values in spec.missing.items():
        study.set_missing(column, values)
    allowed = role_names()
    for column, role in spec.roles.items():
        name = study.column(column)
        if name not in study.columns:  # an interaction "A:B" is not a column of the file
            raise ColumnError(f"A role belongs to a column of the file, and '{column}' is not one; "
                              "give the role of each of its columns instead.")
        value = str(getattr(role, "value", role)).strip().lower()
        if value not in allowed:
            raise ColumnError(f"The role {role!r} given to '{name}' is not one Twofold knows; "
                              f"use one of {', '.join(allowed)}.")
        study.set_role(name, value)
    event = study.set_outcome(spec.outcome, spec.event, guess=guess_event)
    for column, level in spec.references.items():
        study.set_reference(column, level)
    for column, knots in spec.splines.items():
        study.set_spline(column, int(knots))
    return study, event


def role_names() -> list[str]:
    """The role names a column can be given (the values of :class:`~twofold.core.data.roles.Role`)."""
    from twofold.core.data.roles import Role

    return [r.value for r in Role]


def parse_roles(items) -> dict:
    """``["COLUMN=ROLE", ...]`` into {column: role}, each role one of :func:`role_names`."""
    allowed = role_names()
    shown = ", ".join(allowed)
    out = {}
    for item in items:
        column, sep, role = item.partition("=")
        column, role = column.strip(), role.strip().lower()
        if not sep or not column:
            raise ColumnError(f"--role {item!r} should look like COLUMN=ROLE, for example ward=categorical; "
                              f"the roles are {shown}.")
        if role not in allowed:
            raise ColumnError(f"--role {item!r} names the role {role or '(none)'!r}, which Twofold does not know; "
                              f"use one of {shown}.")
        out[column] = role
    return out


def parse_splines(items) -> dict:
    """``["COLUMN:K", ...]`` into {column: K}, K in 3, 4, 5."""
    out = {}
    for item in items:
        column, _, k = item.rpartition(":")
        if not column or k not in ("3", "4", "5"):
            raise ColumnError(f"--spline {item!r} should look like COLUMN:K with K = 3, 4 or 5, for example age:4.")
        out[column.strip()] = int(k)
    return out


def parse_interactions(items) -> list:
    """``["A:B", ...]`` checked for shape."""
    out = []
    for item in items:
        parts = [p.strip() for p in item.split(":")]
        if len(parts) != 2 or not all(parts):
            raise ColumnError(f"--interaction {item!r} should name two predictors as A:B, for example age:sex.")
        out.append(":".join(parts))
    return out


def parse_missing(items) -> dict:
    """``["COLUMN=VALUE", ...]`` into {column: [values]}, with a clear message for a malformed item."""
    out: dict[str, list] = {}
    for item in items:
        column, sep, value = item.partition("=")
        if not sep or not column.strip() or not value.strip():
            raise ColumnError(f"--missing {item!r} should look like COLUMN=VALUE, for example lactate=999 "
                              "or readmitted=unknown.")
        out.setdefault(column.strip(), []).append(value.strip())
    return out


def parse_references(items) -> dict:
    """``["COLUMN=LEVEL", ...]`` into a dict, with a clear message for a malformed item."""
    out = {}
    for item in items:
        if "=" not in item:
            raise ColumnError(f"--reference {item!r} should look like COLUMN=LEVEL, for example discharge_destination=home.")
        column, level = item.split("=", 1)
        out[column.strip()] = level.strip()
    return out


def columns_of(study, names) -> list[str]:
    """The columns of the file that ``names`` stand for, each once, in order (``"A:B"`` stands for A and B).

    Raises
    ------
    ColumnError
        For a name that is not a column of the file.
    """
    from twofold.core.models.terms import split_interaction

    present = study.columns
    out = []
    for name in names:
        name = study.column(str(name))
        for column in ([name] if name in present else split_interaction(name)):
            if column not in out:
                out.append(column)
    return out


def extra_row_columns(study, predictors, columns) -> list[str]:
    """The columns among ``columns`` that decide rows beyond the outcome and the model's ``predictors``."""
    own = set(columns_of(study, predictors))
    return [c for c in columns_of(study, columns) if c not in own and c != study.outcome]


def count_rows_left_out(study, fit, columns) -> None:
    """Make the row counts of ``fit`` cover the other ``columns`` that decided its rows (changes ``fit``).

    :meth:`~twofold.core.models.study.Study.fit` counts the missing values of the
    model's own predictors only; when other columns also decided the rows
    (the common rows of a ladder), the rows they cost would otherwise go
    unexplained.  Each such column that misses values among the rows with an
    outcome joins ``missing_by_column``, and the ``rows_dropped`` notice is
    written again to name it.
    """
    from dataclasses import replace

    from twofold.core.errors import Notice

    own = [p for p in fit.design.predictors if ":" not in p]
    extra = [c for c in columns if c not in own]
    account = study.account(own + extra, fit.design.rows)
    missing = {k: v for k, v in account.missing_by_column.items() if k in own or v}
    account = replace(account, missing_by_column=missing)
    fit.account = account
    lost = account.rows_read - account.rows_used
    parts = [f"{account.missing_outcome} with no outcome"] if account.missing_outcome else []
    parts += [f"{count} missing '{name}'" for name, count in missing.items() if count]
    notice = Notice("rows_dropped", f"{lost:,} of {account.rows_read:,} rows were left out "
                    f"({'; '.join(parts) or 'outside the rows compared'}); results describe the complete rows only.",
                    subjects=tuple(n for n, c in missing.items() if c))
    notices = list(fit.notices)
    at = next((i for i, n in enumerate(notices) if n.code == "rows_dropped"), None)
    if at is not None:
        notices[at] = notice
    elif lost:
        notices.append(notice)
    fit.notices = notices


def add_decision_curve(record: dict, y, p, thresholds, optimism=None, smaller=None):
    """Add ``net_benefit`` (and its ``net_benefit_summary``) to a record; returns the curve.

    ``smaller``: the smaller model's risks on the same rows, whose net benefit
    joins each entry as ``smaller_model``.
    """
    from twofold.core.assessing.decision import decision_curve, net_benefit_values
    from twofold.core.outputs.summary import clean_number

    curve = decision_curve(y, p, thresholds, optimism)
    record["net_benefit"] = curve.as_records()
    if smaller is not None:
        for entry, nb in zip(record["net_benefit"], net_benefit_values(y, smaller, curve.thresholds)):
            entry["smaller_model"] = clean_number(nb)
    record["net_benefit_summary"] = curve.summary()
    return curve


def add_subgroups(record: dict, frame, column: str, rows, y, p, lp) -> None:
    """Add ``subgroups`` (performance within the groups of ``column`` on ``rows`` of ``frame``) and its note."""
    from twofold.core.assessing.subgroups import SUBGROUP_NOTE, subgroup_performance

    groups = frame[column].iloc[rows].to_numpy(dtype=object)
    record["subgroups"] = subgroup_performance(groups, y, p, lp, column)
    record["subgroups_note"] = SUBGROUP_NOTE


def run_analysis(spec: AnalysisSpec, study=None, guess_event: bool = False) -> AnalysisResult:
    """Fit, test and assess the model a spec describes.

    Returns
    -------
    AnalysisResult
        ``record`` follows the JSON contract of ``twofold fit``.
    """
    from twofold.core.assessing.assessment import assess
    from twofold.core.models.fit import nested_test
    from twofold.core.outputs.summary import fit_record

    study, event = prepare_study(spec, study, guess_event)
    predictors = [study.column(p) for p in spec.predictors]
    for term in spec.interactions:
        term = study.column(term)
        if term not in predictors:
            predictors.append(term)
    if spec.impute is not None:
        return run_imputed_analysis(spec, study, event, predictors)
    nested = smaller_fit = None
    smaller = None
    extra = extra_row_columns(study, predictors, spec.rows_complete_in)
    rows = study.complete_rows(predictors + extra) if extra else None
    if rows is not None and not len(rows):
        raise ModelError(f"No rows of {study.source} are complete for the model's predictors and "
                         f"{', '.join(repr(c) for c in extra)}, whose completeness decides the rows of this analysis; "
                         "open the analysis in the window and start a ladder without them.")
    if spec.smaller is not None:
        smaller = [study.column(p) for p in spec.smaller]
        if rows is None:
            smaller_fit, fit, nested = study.compare(smaller, predictors, firth=spec.firth)
        else:
            if not set(smaller) <= set(predictors):
                study.compare(smaller, predictors)  # refuses a smaller model that is not nested, in its own words
            # The same two fits as Study.compare, on the rows the spec names.
            smaller_fit = study.fit(smaller, rows=rows, firth=spec.firth)
            fit = study.fit(predictors, rows=rows, start=smaller_fit, firth=spec.firth)
            nested = nested_test(smaller_fit, fit)
    else:
        fit = study.fit(predictors, rows=rows, firth=spec.firth)
    if extra:
        count_rows_left_out(study, fit, extra)
    for n in study.table.notices:
        fit.notices.insert(0, n)
    assessment = assess(study, fit, threshold=spec.threshold)
    profile = None
    if spec.profile_ci:
        from twofold.core.models.penalised import profile_intervals

        profile = profile_intervals(fit)
        lost = [name for name, (lo, hi) in profile.items() if lo != lo or hi != hi]  # NaN: not found
        if lost:
            from twofold.core.errors import Notice

            fit.notices.append(Notice(
                "profile", f"The profile-likelihood interval could not be found for {', '.join(lost)} "
                "(too few records for a clear maximum); read the Wald interval with care.", tuple(lost)))
    record = fit_record(fit, study.outcome, event, nested, smaller, profile=profile, assessment=assessment)
    from twofold.core.models.modelling import bootstrap_validation, interaction_tests, nonlinearity_tests
    from twofold.core.outputs.summary import add_study_records

    add_study_records(record, study, nonlinearity_tests(study, fit) if spec.splines else None,
                      interaction_tests(study, fit) if spec.interactions else None)
    validation = None
    thresholds = None
    if spec.net_benefit is not None:
        from twofold.core.assessing.decision import grid_from_setting

        thresholds = grid_from_setting(spec.net_benefit)
    if spec.validate:
        validation = bootstrap_validation(fit, spec.validate, seed=spec.seed, thresholds=thresholds)
        from twofold.core.outputs.summary import validation_record

        record["validation"] = validation_record(validation, fit)
    if thresholds is not None:
        add_decision_curve(record, fit.design.y, fit.fitted, thresholds,
                           None if validation is None else validation.net_benefit_optimism,
                           None if smaller_fit is None else smaller_fit.fitted)
    if spec.subgroups is not None:
        add_subgroups(record, study.frame, study.column(str(spec.subgroups)), fit.design.rows, fit.design.y,
                      fit.fitted, fit.linear_predictor)
    result = AnalysisResult(spec, study, fit, nested, smaller_fit, assessment, record)
    result.validation = validation
    add_usefulness(result, thresholds)
    return result


def refuse_unpooled_options(spec: AnalysisSpec) -> None:
    """Refuse, in one sentence, an option asked for together with imputation that is not pooled (command line).

    A session saved by the window keeps its threshold and profile setting for the window's own use; a pooled
    analysis leaves them aside instead of refusing them.
    """
    if spec.impute is None:
        return
    for option, words in NOT_POOLED.items():
        if getattr(spec, option):
            raise ModelError(f"{words} cannot be combined with imputation; leave one of the two out.")


#: Options a pooled analysis does not offer, with the reason given when they are asked for together.
NOT_POOLED = {"profile_ci": "--profile-ci (profile-likelihood intervals are not pooled; the pooled intervals use "
                            "Rubin's rules)",
              "validate": "--validate (bootstrap validation is not combined with imputation here)",
              "threshold": "--threshold (a classification table of imputed rows would count invented values)"}


def complete_rows_summary(fit, overall=None) -> dict:
    """The complete-rows fit beside a pooled one: rows used, each coefficient and the G test."""
    from twofold.core.outputs.summary import clean_number

    rows = fit.coefficient_rows
    return {"rows_used": fit.n_used, "events": fit.events,
            "terms": [{"label": r["label"], "column": r["column"],
                       **{k: clean_number(r[k]) for k in ("estimate", "std_error", "p_value", "odds_ratio",
                                                          "or_ci_low", "or_ci_high")}} for r in rows[1:]],
            "overall": {"g": clean_number(fit.overall.g), "df": int(fit.overall.df),
                        "p_value": clean_number(fit.overall.p_value)}}


def run_imputed_analysis(spec: AnalysisSpec, study, event, predictors, copies=None,
                         model_only: bool = False) -> AnalysisResult:
    """The analysis of :func:`run_analysis` on m imputed copies, pooled (``spec.impute`` copies, ``spec.seed``).

    The copies are made once (every predictor of the analysis, the smaller model's and the columns of
    ``rows_complete_in`` are in the imputation model, with ``spec.auxiliary``); the model, the smaller model
    and the curve and interaction tests are fitted on all of them and pooled.  The record carries
    ``imputation`` (settings, methods, counts and the complete-rows fit for comparison).  Without a seed,
    one is drawn and written into ``spec.seed``, so the session and a re-run make the same copies.
    ``copies``: :class:`~twofold.core.models.pooling.ImputedCopies` already made for this analysis (the
    workspace keeps them), else they are made here.  ``model_only``: the pooled fit alone, with an empty
    record (what a session file needs; no assessment or further tests).
    """
    from twofold.core.models.imputation import impute
    from twofold.core.models.pooling import (
        ImputedCopies, pooled_assessment, pooled_drop_one, pooled_interaction_tests, pooled_nested,
        pooled_nonlinearity_tests,
    )
    from twofold.core.outputs.summary import add_study_records, fit_record

    smaller = None if spec.smaller is None else [study.column(p) for p in spec.smaller]
    everything = list(dict.fromkeys(predictors + (smaller or []) + [study.column(c) for c in spec.rows_complete_in]))
    if smaller is not None and not set(smaller) <= set(predictors):
        study.compare(smaller, predictors)  # refuses a smaller model that is not nested, in its own words
    if copies is None:
        if spec.seed is None:
            import secrets

            spec.seed = secrets.randbelow(2 ** 31)
        imputation = impute(study, everything, spec.impute, spec.seed, spec.auxiliary, spec.impute_anyway)
        copies = ImputedCopies(study, imputation)
    imputation = copies.imputation
    smaller_fit = nested = None
    if smaller is not None:
        smaller_fit = copies.fit(smaller, firth=spec.firth)
        fit = copies.fit(predictors, firth=spec.firth, start=smaller_fit)
        nested = pooled_nested(smaller_fit, fit)
    else:
        fit = copies.fit(predictors, firth=spec.firth)
    if model_only:
        result = AnalysisResult(spec, study, fit, nested, smaller_fit, None, {})
        result.imputation = imputation
        return result
    for n in study.table.notices:
        fit.notices.insert(0, n)
    shaped = [p for p in predictors if ":" in p or p in study.splines]
    if shaped and imputation.cells_imputed:
        from twofold.core.errors import Notice

        # White, Royston & Wood (2011, section 6): an imputation model without the analysis model's curves and
        # interactions pulls them towards none.
        fit.notices.append(Notice("imputation_model", "Each column is imputed from the others as straight lines "
                                  "without interactions, so the curves and interactions of this model ("
                                  + ", ".join(shaped) + ") are pulled towards none in the imputed values; read "
                                  "them with care, beside the complete rows.", tuple(shaped)))
    record = fit_record(fit, study.outcome, event, nested, smaller)
    record["assessment"] = pooled_assessment(fit)
    record["assessment"]["drop_one"] = pooled_drop_one(copies, fit)
    add_study_records(record, study,
                      pooled_nonlinearity_tests(copies, fit) if any(p in study.splines for p in predictors) else None,
                      pooled_interaction_tests(copies, fit) if any(":" in p for p in predictors) else None)
    record["imputation"] = imputation.record()
    try:
        complete = study.fit(predictors, firth=spec.firth)
        record["imputation"]["complete_rows"] = complete_rows_summary(complete)
    except TwofoldError:
        record["imputation"]["complete_rows"] = None  # too few complete rows for the model
    if spec.net_benefit is not None:
        from twofold.core.assessing.decision import grid_from_setting

        add_decision_curve(record, fit.design.y, fit.fitted, grid_from_setting(spec.net_benefit), None,
                           None if smaller_fit is None else smaller_fit.fitted)
    if spec.subgroups is not None:
        add_subgroups(record, study.frame, study.column(str(spec.subgroups)), fit.design.rows, fit.design.y,
                      fit.fitted, fit.linear_predictor)
    result = AnalysisResult(spec, study, fit, nested, smaller_fit, record["assessment"], record)
    result.imputation = imputation
    return result
def add_usefulness(result: AnalysisResult, thresholds=None) -> None:
    """The second model's decision curve, the comparison of units and the shrunk model a spec asks for.

    ``net_benefit_versus``: a second model fitted on the same rows, whose net
    benefit joins each ``net_benefit`` entry as ``other_model``;
    ``unit_column``: ``units`` (:func:`add_units`); ``shrink``: ``shrinkage``
    (:func:`add_shrinkage`).
    """
    spec, study, fit, record = result.spec, result.study, result.fit, result.record
    if thresholds is not None and spec.net_benefit_versus:
        from twofold.core.errors import TwofoldError

        try:
            other = study.fit([study.column(p) for p in spec.net_benefit_versus], rows=fit.design.rows,
                              firth=spec.firth)
        except TwofoldError as exc:  # a column of it missing from this extract, say: the curve goes without it
            record["net_benefit_summary"]["other_note"] = f"The second model's curve is left out: {exc}"
        else:
            add_other_curve(record, fit.design.y, other.fitted, list(other.design.predictors))
            result.other_risks = other.fitted
    if spec.unit_column is not None:
        add_units(record, study.frame, study.column(str(spec.unit_column)), fit, study.outcome)
    if spec.shrink:
        add_shrinkage(result)


def add_other_curve(record: dict, y, p_other, predictors) -> None:
    """Add a second model's net benefit (``other_model`` in each entry) to a record that has ``net_benefit``."""
    from twofold.core.assessing.decision import net_benefit_values
    from twofold.core.outputs.summary import clean_number

    thresholds = [e["threshold"] for e in record["net_benefit"]]
    for entry, nb in zip(record["net_benefit"], net_benefit_values(y, p_other, thresholds)):
        entry["other_model"] = clean_number(nb)
    record["net_benefit_summary"]["other_predictors"] = list(predictors)


def add_units(record: dict, frame, column: str, fit, outcome: str) -> None:
    """Add ``units``: the risk-adjusted comparison of the units named in ``column`` on the fit's rows."""
    from twofold.core.assessing.units import check_unit_column, compare_units

    check_unit_column(column, outcome, [p for t in fit.design.predictors for p in str(t).split(":")])
    values = frame[column].iloc[fit.design.rows].to_numpy(dtype=object)
    record["units"] = compare_units(values, fit.design.y, fit.fitted, column).as_record()


def add_shrinkage(result: AnalysisResult) -> None:
    """Shrink the model by its bootstrap's corrected calibration slope (``shrinkage`` in the record).

    Without a validation, or with a corrected slope not below 1, ``shrinkage``
    says why nothing was shrunk (``factor`` null) and the model is unchanged.
    """
    from twofold.core.models.updating import shrink_model, shrinkage_refusal
    from twofold.core.outputs.predict import frozen_model

    v = result.validation
    if v is None:
        result.record["shrinkage"] = {"factor": None, "intercept": None, "coefficients": None,
                                      "reading": "Shrinking needs a bootstrap validation; add --validate B."}
        return
    why = shrinkage_refusal(v.calibration_slope_corrected)
    if why is not None:
        result.record["shrinkage"] = {"factor": None, "intercept": None, "coefficients": None, "reading": why}
        return
    fit = result.fit
    model = frozen_model(fit, result.study.outcome, result.study.event)
    result.shrinkage = shrink_model(model, fit.design.X[:, fit.kept], fit.design.y, v.calibration_slope_corrected,
                                    source=str(result.study.source))
    result.record["shrinkage"] = result.shrinkage.as_dict()
