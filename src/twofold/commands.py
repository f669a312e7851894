"""Command-line glue for what an analysis leaves behind: sessions, reports, tables, re-runs, predictions.

``twofold fit ... --session-out/--report/--table-out`` ends in
:func:`write_fit_outputs`; ``twofold rerun`` and ``twofold predict`` are
:func:`run_rerun` and :func:`run_predict`.  The work itself is done in
:mod:`twofold.core.outputs.session`, :mod:`twofold.core.outputs.report` (rendered by :mod:`twofold.render`),
:mod:`twofold.core.outputs.export` and :mod:`twofold.core.outputs.predict`.  Errors print one
sentence on stderr and exit 2; nothing here ever writes to a data file.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from twofold.command_options import (
    EXIT_USAGE, CommandParser, add_net_benefit_option, add_report_options, report_options_need_a_place,
    report_texts,
)

def _refuse_data_targets(outputs, data_files, session_file=None) -> None:
    from twofold.core.outputs.storage import refuse_writing_over

    refuse_writing_over(outputs, data_files, session_file=session_file)


def write_fit_outputs(result, session=None, report=None, table=None, ladder=None, suppress_up_to=None,
                      report_records=None, report_texts=None) -> list[Path]:
    """Write the session file, the report and the coefficient table of a fit (each optional).

    Parameters
    ----------
    result : AnalysisResult
    session, report, table : path, optional
        Session file (JSON), report (.html or .pdf), table (.csv or .xlsx).
    ladder : Ladder or list of lists of str, optional
        The models tried, kept in the session and shown in the report.
    suppress_up_to : int, optional
        Counts of 1 up to this many people are hidden in the report
        (default 10); kept in the session for later reports.
    report_records : bool, optional
        List the most influential records by row number in the report
        (default False); kept in the session too.
    report_texts : dict, optional
        ``title``, ``authors`` and ``question`` for the report's first page
        (None or missing: empty); kept in the session too.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    TwofoldError
        An output path that is the data file, an unknown suffix, a folder that
        cannot be written.
    """
    from twofold.core.errors import DataFileError

    _refuse_data_targets([session, report, table], [result.spec.data])
    # Suffixes are checked before anything is written, so a wrong one leaves no half set of files.
    if report and Path(report).suffix.lower() not in (".html", ".htm", ".pdf"):
        raise DataFileError(f"Twofold writes reports as .html or .pdf, not '{Path(report).suffix or report}'; "
                            "end the file name with .html or .pdf.")
    if table and Path(table).suffix.lower() not in (".csv", ".xlsx"):
        raise DataFileError(f"Twofold writes tables as .csv or .xlsx, not '{Path(table).suffix or table}'; "
                            "end the file name with .csv or .xlsx.")
    from twofold.core.outputs.session import REPORT_DEFAULTS

    options = report_options(REPORT_DEFAULTS, suppress_up_to, report_records, report_texts)
    written = []
    if session:
        from twofold.core.outputs.session import save_session, session_from_result

        written.append(save_session(session_from_result(result, ladder=ladder, report=options), session))
    if table:
        from twofold.core.outputs.export import export_coefficients

        lad = ladder if ladder is None or hasattr(ladder, "rungs") else None
        written.append(export_coefficients(result, table, ladder=lad))
    if report:
        from twofold.render.report_writer import write_report

        written.append(write_report(result, report, ladder=ladder, suppress_below=options["suppress_up_to"],
                                    include_records=options["list_records"], details=options))
    return written


def report_options(saved: dict, suppress_up_to=None, report_records=None, texts=None) -> dict:
    """The report's options: those given (not None) over those ``saved`` (a session's ``report``).

    ``texts`` holds the report's ``title``, ``authors`` and ``question`` given now (None: the saved one).
    """
    texts = texts or {}
    out = {"suppress_up_to": int(saved["suppress_up_to"] if suppress_up_to is None else suppress_up_to),
           "list_records": bool(saved["list_records"] if report_records is None else report_records)}
    for key in ("title", "authors", "question"):
        out[key] = str(saved.get(key, "") if texts.get(key) is None else texts[key])
    return out


# ---------------------------------------------------------------------------
# twofold rerun
# ---------------------------------------------------------------------------


def _rerun_parser() -> argparse.ArgumentParser:
    p = CommandParser(prog="twofold rerun",
                description="Apply a saved analysis to a new extract with the same columns.")
    p.add_argument("session", metavar="SESSION", help="a session file saved by Twofold")
    p.add_argument("--data", metavar="NEW", help="the new extract (default: the session's own data file)")
    p.add_argument("--frozen", action="store_true",
                   help="do not refit: apply the saved model unchanged and report how it performs on the new rows")
    p.add_argument("--report", metavar="PATH.html|PATH.pdf", help="write a report of aggregate figures")
    add_report_options(p, "default for a re-run: the session's own")
    p.add_argument("--json", metavar="PATH|-", help="write the results as JSON to PATH, or to standard output with -")
    add_net_benefit_option(p, "on the new rows (default: the session's own thresholds, if it has any)")
    _add_adapt_options(p)
    return p


def _add_adapt_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--adapt", action="store_true",
                   help="apply the saved model to the new rows and choose how to adapt it (none, a new intercept, "
                        "a new intercept and slope, or re-estimating every coefficient) by a closed sequence of "
                        "likelihood-ratio tests")
    p.add_argument("--session-out", metavar="PATH", help="with --adapt: save the adapted model as a new session")
    p.add_argument("--subgroups", metavar="COLUMN",
                   help="show AUC and calibration within the groups of a column (default: the session's own, if any)")


def emit_json(record: dict, target: str) -> None:
    """The record as JSON on standard output (``-``) or in the file ``target``, written atomically."""
    from twofold.core.outputs.storage import atomic_write_text, write_failure

    text = json.dumps(record, indent=2, ensure_ascii=False, allow_nan=False)
    if target == "-":
        sys.stdout.write(text + "\n")
        return
    try:
        atomic_write_text(Path(target), text + "\n")
    except OSError as exc:
        raise write_failure(target, exc) from None


def _frozen_text(record: dict, source: str) -> str:
    from twofold.core.outputs.text import fmt_num, fmt_p

    a = record["assessment"]
    lo, hi = a["auc_ci"]
    s_lo, s_hi = a["calibration_slope_ci"]
    i_lo, i_hi = a["calibration_intercept_ci"]
    lines = [
        f"Saved model of '{record['outcome']}' applied unchanged to {source} (no refitting)",
        f"  Rows: {record['rows_read']:,} read, {record['rows_used']:,} used, {record['events']:,} events.",
        f"  Area under the ROC curve {fmt_num(a['auc'], 3)} (95% interval {fmt_num(lo, 3)} to {fmt_num(hi, 3)}, DeLong).",
        f"  Calibration slope {fmt_num(a['calibration_slope'], 3)} (95% interval {fmt_num(s_lo, 3)} to {fmt_num(s_hi, 3)}); "
        f"calibration-in-the-large {fmt_num(a['calibration_intercept'], 3)} ({fmt_num(i_lo, 3)} to {fmt_num(i_hi, 3)}).",
        f"    {a['calibration_note']}",
        f"  Brier score {fmt_num(a['brier'], 4)} (scaled {fmt_num(a['scaled_brier'], 3)}).",
    ]
    hl = a.get("hosmer_lemeshow")
    if hl:
        lines.append(f"  Hosmer-Lemeshow test over {hl['groups']} risk groups: {fmt_num(hl['statistic'], 2)} on {hl['df']} "
                     f"degrees of freedom, p-value {fmt_p(hl['p_value'])}.")
    groups = a.get("calibration_groups")
    if groups:
        lines.append("  Risk groups (people, mean predicted risk, observed share):")
        for n, p, o in zip(groups["n"], groups["mean_predicted"], groups["observed"]):
            lines.append(f"    {n:>7,}  {fmt_num(p, 3):>6}  {fmt_num(o, 3):>6}")
    from twofold.core.outputs.text import adaptation_lines, decision_lines, external_lines, subgroup_lines

    lines.extend(external_lines(record))
    lines.extend(adaptation_lines(record))
    lines.extend(subgroup_lines(record))
    lines.extend(decision_lines(record))
    if record["warnings"]:
        lines.append("Warnings")
        lines.extend(f"  - {w['message']}" for w in record["warnings"])
    lines.append("")
    lines.append("Caution: " + record["caution"])
    return "\n".join(lines) + "\n"


def _note(message: str) -> None:
    print(f"twofold: note: {message}", file=sys.stderr)


def run_rerun(argv: list[str]) -> int:
    """``twofold rerun SESSION [--data NEW] [--frozen] [--report PATH] [--json PATH|-]``: returns the exit code."""
    parser = _rerun_parser()
    args = parser.parse_args(argv)
    report_options_need_a_place(parser, args, {"--report": args.report})
    if args.session_out and not args.adapt:
        parser.error("--session-out saves an adapted model, so it needs --adapt; add --adapt or leave it out")
    args.frozen = args.frozen or args.adapt  # adapting starts from the saved model applied unchanged
    from twofold.core.errors import TwofoldError

    try:
        record, source = _rerun(args)
    except TwofoldError as exc:
        print(f"twofold: {exc}", file=sys.stderr)
        return EXIT_USAGE
    if args.json:
        try:
            emit_json(record, args.json)
        except TwofoldError as exc:
            print(f"twofold: {exc}", file=sys.stderr)
            return EXIT_USAGE
    elif record.get("frozen"):
        sys.stdout.write(_frozen_text(record, source))
    else:
        from twofold.core.outputs.text import describe

        sys.stdout.write(describe(record, source))
    return 0


def _rerun(args):
    from twofold.core.outputs import session as ses
    from twofold.core.data.io import read_table

    session = ses.load_session(args.session)
    options = report_options(session["report"], args.suppress_up_to, args.report_records, report_texts(args))
    own = args.data is None
    data = Path(session["data"] if own else args.data)
    if own and ses.is_network_path(session["data"]):
        raise ses.network_path_error(session["data"], args.session)
    # The session's own data file is refused as an output too when a new extract is read instead.
    _refuse_data_targets([args.report, args.json], [data, session["data"]], session_file=args.session)
    ses.require_data_file(data)
    table = read_table(data, sheet=session["sheet"])
    notices = ses.check_data(session, data, frame=table.frame)
    needed = set([session["outcome"], *session["predictors"], *(session["smaller"] or [])])
    rows_from = set(session["rows_complete_in"]) - needed
    if args.frozen:
        needed |= {t["column"] for t in session["model"]["terms"]}
    hard = [n for n in notices if n.code == "column_missing" and n.subjects[0] in needed]
    error = ses.missing_columns_error(hard, data)
    if error is not None:
        raise error
    for n in notices:
        if n.code == "data_changed" and own:
            _note(n.message)
        elif n.code == "column_missing" and n not in hard:
            if n.subjects[0] in rows_from and not args.frozen:
                _note(n.message[:-1] + "; the rows are no longer limited to those complete in it, and the models "
                      "that use it are left out of the report.")
            else:
                _note(n.message[:-1] + "; the models that use it are left out of the report.")
    if args.frozen:
        from twofold.core.outputs.predict import evaluate_frozen

        result = evaluate_frozen(ses.frozen_from_session(session), data, sheet=session["sheet"],
                                 threshold=session["threshold"], subgroups=args.subgroups or session["subgroups"])
        _frozen_decision_curve(result, args.net_benefit if args.net_benefit is not None else session["net_benefit"])
        if args.adapt:
            _adapt(result, session, data, args)
        if args.report:
            from twofold.render.report_writer import write_report

            if args.report_records:
                _note("a saved model applied unchanged is not refitted, so its report lists no influential records.")
            write_report(result, args.report, suppress_below=options["suppress_up_to"], details=options)
        return result.record, result.source
    from twofold.core.analysis import run_analysis
    from twofold.core.models.study import Study

    spec = ses.spec_from_session(session, data)
    if args.net_benefit is not None:
        spec.net_benefit = args.net_benefit
    if args.subgroups is not None:
        spec.subgroups = args.subgroups
    present = {str(c) for c in table.frame.columns}
    # A column missing from this extract no longer limits the rows (noted above); "A:B" stands for two columns.
    spec.rows_complete_in = [c for c in spec.rows_complete_in
                             if all(part in present for part in ([c] if c in present else c.split(":")))]
    study = Study(table)
    result = run_analysis(spec, study=study)
    if args.report:
        from twofold.render.report_writer import write_report

        rungs = [r for r in session["ladder"] if all(c in present for c in r)]
        # The saved parents hold while no model was left out; otherwise each model follows the one before.
        parents = session["parents"] if len(rungs) == len(session["ladder"]) else None
        ladder = ses.ladder_from_lists(result.study, rungs, session["predictors"], parents) if len(rungs) > 1 else None
        write_report(result, args.report, ladder=ladder, suppress_below=options["suppress_up_to"],
                     include_records=options["list_records"], details=options)
    return result.record, result.study.source


def _adapt(result, session, data, args) -> None:
    """Add ``adaptation`` to a frozen result's record and, with ``--session-out``, save the adapted model."""
    from twofold.core.outputs.predict import add_adaptation

    adaptation = add_adaptation(result)
    if args.session_out:
        from twofold.core.outputs.session import adapted_session
        from twofold.core.outputs.storage import save_session

        _refuse_data_targets([args.session_out], [data], session_file=args.session)
        save_session(adapted_session(session, adaptation.model, data, result.rows_read), args.session_out)


def _frozen_decision_curve(result, setting) -> None:
    """Add the decision curve of a saved model on the new rows to its record, when thresholds are set."""
    if setting is None:
        return
    from twofold.core.analysis import add_decision_curve
    from twofold.core.assessing.decision import grid_from_setting

    add_decision_curve(result.record, result.y, result.predicted, grid_from_setting(setting))


# ---------------------------------------------------------------------------
# twofold predict
# ---------------------------------------------------------------------------


def _predict_parser() -> argparse.ArgumentParser:
    p = CommandParser(prog="twofold predict",
                description="Predicted risk for one described patient from a saved model.")
    p.add_argument("session", metavar="SESSION", help="a session file saved by Twofold")
    p.add_argument("--value", action="append", default=[], metavar="COLUMN=VALUE",
                   help="the patient's value of one predictor (repeat for each)")
    p.add_argument("--json", metavar="PATH|-", help="write the result as JSON to PATH, or to standard output with -")
    return p


def _values(items) -> dict:
    from twofold.core.errors import ModelError

    out = {}
    for item in items:
        if "=" not in item:
            raise ModelError(f"--value {item!r} should look like COLUMN=VALUE, for example age=70.")
        column, value = item.split("=", 1)
        column = column.strip()
        if column in out:
            raise ModelError(f"'{column}' is given twice; give each predictor once.")
        out[column] = value.strip()
    return out


def run_predict(argv: list[str]) -> int:
    """``twofold predict SESSION --value COLUMN=VALUE ... [--json PATH|-]``: returns the exit code."""
    args = _predict_parser().parse_args(argv)
    from twofold.core.errors import TwofoldError

    try:
        from twofold.core.outputs.predict import predict
        from twofold.core.outputs.session import frozen_from_session, load_session
        from twofold.core.outputs.summary import PATIENT_CAUTION, plain_value

        session = load_session(args.session)
        _refuse_data_targets([args.json], [session["data"]], session_file=args.session)
        model = frozen_from_session(session)
        values = _values(args.value)
        pred = predict(model, values)
        record = {**pred.as_dict(), "outcome": model.outcome, "event": plain_value(model.event),
                  "values": values, "caution": PATIENT_CAUTION}
        if args.json:
            emit_json(record, args.json)
            return 0
    except TwofoldError as exc:
        print(f"twofold: {exc}", file=sys.stderr)
        return EXIT_USAGE
    from twofold.core.outputs.text import fmt_num

    shown = ", ".join(f"{k} = {v}" for k, v in values.items())
    sys.stdout.write(
        f"Predicted risk of {model.outcome} = {plain_value(model.event)} for {shown}: {fmt_num(100 * pred.probability, 1)}% "
        f"(95% interval {fmt_num(100 * pred.ci_low, 1)}% to {fmt_num(100 * pred.ci_high, 1)}%).\n"
        f"Caution: {PATIENT_CAUTION}\n")
    return 0


# ---------------------------------------------------------------------------
# twofold units
# ---------------------------------------------------------------------------


def _units_parser() -> argparse.ArgumentParser:
    p = CommandParser(prog="twofold units",
                      description="Compare wards, hospitals or teams: events observed against those the saved "
                                  "model expects from each unit's patients, with funnel limits.")
    p.add_argument("session", metavar="SESSION", help="a session file saved by Twofold")
    p.add_argument("--unit", required=True, metavar="COLUMN",
                   help="the column naming each record's unit (ward, hospital, team); not a predictor of the model")
    p.add_argument("--data", metavar="NEW", help="the extract to compare units in (default: the session's own data)")
    p.add_argument("--json", metavar="PATH|-", help="write the results as JSON to PATH, or to standard output with -")
    return p


def run_units(argv: list[str]) -> int:
    """``twofold units SESSION --unit COLUMN [--data NEW] [--json PATH|-]``: returns the exit code."""
    args = _units_parser().parse_args(argv)
    from twofold.core.errors import TwofoldError

    from twofold.core.outputs.text import describe_units

    try:
        record = units_record(args.session, args.unit, args.data, json_target=args.json)
        if args.json:
            emit_json(record, args.json)
        else:
            sys.stdout.write(describe_units(record))
    except TwofoldError as exc:
        print(f"twofold: {exc}", file=sys.stderr)
        return EXIT_USAGE
    return 0


def units_record(session_file, unit: str, data=None, json_target=None) -> dict:
    """The JSON of ``twofold units``: the saved model's expected events by unit, with funnel limits."""
    from twofold.core.assessing.units import check_unit_column, compare_units
    from twofold.core.data.checks import require_column
    from twofold.core.outputs import session as ses
    from twofold.core.outputs.predict import score_file

    session = ses.load_session(session_file)
    path = Path(session["data"] if data is None else data)
    ses.require_data_file(path)
    _refuse_data_targets([json_target], [path], session_file=session_file)
    model = ses.frozen_from_session(session)
    scored = score_file(model, path, sheet=session["sheet"])
    frame, source = scored.study.frame, scored.study.source
    column = require_column(frame.columns, unit, source)
    check_unit_column(column, model.outcome, model.columns)
    values = frame[column].iloc[scored.rows].to_numpy(dtype=object)
    comparison = compare_units(values, scored.y, scored.predicted, column)
    from twofold.core.outputs.summary import plain_value

    return {**comparison.as_record(), "outcome": model.outcome, "event": plain_value(scored.event),
            "data": source, "rows_read": int(len(frame))}
