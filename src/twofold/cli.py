"""The ``twofold`` command.

``twofold`` opens the window, ``twofold DATA`` opens it on a file, and
``twofold fit ...`` runs a model headless.  The fit path imports neither Qt
nor matplotlib.  Errors print one sentence on stderr and exit non-zero; no
traceback reaches the user.
"""

from __future__ import annotations

import argparse
import sys

from twofold.command_options import (  # noqa: F401  (EXIT_* and suppress_limit are read by tests)
    EXIT_INTERNAL, EXIT_USAGE, CommandParser, add_net_benefit_option, add_report_options,
    report_options_need_a_place, report_texts,
    suppress_limit,
)

SUBCOMMANDS = ("fit", "snapshot", "rerun", "predict", "units")


def _fit_parser() -> argparse.ArgumentParser:
    from twofold.core.analysis import role_names  # light: no numpy or pandas at import

    p = CommandParser(prog="twofold fit", description="Fit a logistic model to a data file and report its tests.")
    p.add_argument("data", metavar="DATA", help="CSV, TSV or XLSX file (read only, never written)")
    p.add_argument("--outcome", required=True, metavar="COLUMN", help="the yes/no outcome column")
    p.add_argument("--event", metavar="VALUE", help="which outcome value is the event (may be left out for 0/1)")
    p.add_argument("--predictor", action="extend", nargs="+", required=True, metavar="COLUMN",
                   dest="predictors", help="a predictor column (repeat for more)")
    p.add_argument("--smaller", action="extend", nargs="*", metavar="COLUMN", default=None,
                   help="predictors of a smaller model for the nested likelihood-ratio test")
    p.add_argument("--reference", action="append", default=[], metavar="COLUMN=LEVEL",
                   help="reference level of a categorical predictor")
    p.add_argument("--role", action="append", default=[], metavar="COLUMN=ROLE",
                   help="treat a column differently from what Twofold inferred (repeat for more); ROLE is one "
                        f"of {', '.join(role_names())}, e.g. --role ward_code=categorical")
    p.add_argument("--sheet", metavar="NAME", help="the sheet of a workbook (default: the first)")
    p.add_argument("--missing", action="append", default=[], metavar="COLUMN=VALUE",
                   help="treat this value of a column as missing, e.g. --missing lactate=999 or "
                        "--missing readmitted=unknown (repeat for more)")
    p.add_argument("--json", metavar="PATH|-", help="write the results as JSON to PATH, or to standard output with -")
    p.add_argument("--firth", action="store_true", help="fit by Firth's penalised likelihood (for separation or small samples)")
    p.add_argument("--profile-ci", action="store_true", help="add profile-likelihood intervals for the odds ratios")
    p.add_argument("--threshold", type=_probability, metavar="P", help="risk threshold for a classification table")
    p.add_argument("--spline", action="append", default=[], metavar="COLUMN:K",
                   help="model a numeric predictor with a restricted cubic spline of K = 3, 4 or 5 knots")
    p.add_argument("--interaction", action="append", default=[], metavar="A:B",
                   help="add the interaction of two predictors")
    p.add_argument("--validate", type=_repetitions, metavar="B", help="bootstrap optimism correction with B resamples")
    p.add_argument("--seed", type=int, metavar="S", help="seed of the bootstrap and of the imputations")
    p.add_argument("--impute", type=_imputations, metavar="M",
                   help="fill in missing predictor values by multiple imputation with M copies (2 to 100) and "
                        "pool the results, instead of leaving incomplete rows out")
    p.add_argument("--auxiliary", action="extend", nargs="+", default=[], metavar="COLUMN",
                   help="a column used only to impute (with --impute; repeat for more)")
    p.add_argument("--impute-anyway", action="store_true",
                   help="impute columns missing in more than half the rows (with --impute)")
    add_net_benefit_option(p, "with the optimism-corrected curve when --validate is given")
    p.add_argument("--subgroups", metavar="COLUMN", help="show AUC and calibration within the groups of a column "
                                                         "(sex, age band, site)")
    p.add_argument("--shrink", action="store_true",
                   help="with --validate: when the corrected calibration slope is below 1, shrink every coefficient "
                        "by it and re-estimate the intercept (the shrunk model is saved and used by predict)")
    p.add_argument("--session-out", metavar="PATH", help="save this analysis as a session file")
    p.add_argument("--report", metavar="PATH.html|PATH.pdf", help="write a report of aggregate figures")
    add_report_options(p, "saved with --session-out for later reports")
    p.add_argument("--table-out", metavar="PATH.csv|PATH.xlsx", help="write the coefficient table")
    return p


def _repetitions(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; give the number of resamples, e.g. 200") from None
    if not 1 <= value <= 100_000:
        raise argparse.ArgumentTypeError(f"{text} resamples is out of range; give between 1 and 100000, e.g. 200")
    return value


def _imputations(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; give the number of imputed copies, "
                                         "from 2 to 100, e.g. 20") from None
    if not 2 <= value <= 100:
        raise argparse.ArgumentTypeError(f"{text} imputed copies is out of range; give from 2 to 100, e.g. 20")
    return value


def _probability(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; give a risk between 0 and 1, e.g. 0.2") from None
    if not 0 < value < 1:
        raise argparse.ArgumentTypeError(f"{text} is outside 0 to 1; give a risk between 0 and 1, e.g. 0.2")
    return value


def run_fit(argv: list[str]) -> int:
    """``twofold fit``: returns the exit code."""
    parser = _fit_parser()
    args = parser.parse_args(argv)
    report_options_need_a_place(parser, args, {"--report": args.report, "--session-out": args.session_out})
    if args.impute is None and (args.auxiliary or args.impute_anyway):
        parser.error(f"{'--auxiliary' if args.auxiliary else '--impute-anyway'} works with --impute M; "
                     "add --impute M, or leave it out")
    if args.shrink and not args.validate:
        parser.error("--shrink uses the corrected calibration slope of a bootstrap validation, so it needs "
                     "--validate B; add --validate 200 or leave --shrink out")
    from twofold.core.errors import TwofoldError

    try:
        from twofold.core.outputs.storage import refuse_writing_over

        refuse_writing_over([args.session_out, args.report, args.table_out, args.json], [args.data])
        result = _fit(args)
        record, source = result.record, result.study.source
        if args.session_out or args.report or args.table_out:
            from twofold.commands import write_fit_outputs

            write_fit_outputs(result, session=args.session_out, report=args.report, table=args.table_out,
                              suppress_up_to=args.suppress_up_to, report_records=args.report_records,
                              report_texts=report_texts(args))
        if args.json:
            from twofold.commands import emit_json

            emit_json(record, args.json)
    except TwofoldError as exc:
        print(f"twofold: {exc}", file=sys.stderr)
        return EXIT_USAGE
    if not args.json:
        from twofold.core.outputs.text import describe

        sys.stdout.write(describe(record, source))
    return 0


def _spec(args):
    from twofold.core.analysis import (
        AnalysisSpec,
        parse_interactions,
        parse_missing,
        parse_references,
        parse_roles,
        parse_splines,
    )

    return AnalysisSpec(
        data=args.data, outcome=args.outcome, event=args.event, predictors=list(args.predictors),
        smaller=None if args.smaller is None else list(args.smaller),
        references=parse_references(args.reference), roles=parse_roles(args.role), sheet=args.sheet,
        firth=args.firth,
        profile_ci=args.profile_ci, threshold=args.threshold, splines=parse_splines(args.spline),
        interactions=parse_interactions(args.interaction), validate=args.validate, seed=args.seed,
        missing=parse_missing(getattr(args, "missing", [])),
        net_benefit=args.net_benefit, subgroups=args.subgroups, shrink=args.shrink,
        impute=args.impute, auxiliary=list(args.auxiliary), impute_anyway=args.impute_anyway,
    )


def _fit(args):
    from twofold.core.analysis import refuse_unpooled_options, run_analysis

    spec = _spec(args)
    refuse_unpooled_options(spec)
    return run_analysis(spec)


def run_gui(argv: list[str]) -> int:
    """Open the window (optionally on a data file)."""
    try:
        from twofold.gui.app import main as gui_main
    except ImportError as exc:
        print(f"twofold: the window cannot start here ({exc}); the command 'twofold fit' works without it.",
              file=sys.stderr)
        return EXIT_INTERNAL
    return gui_main(argv)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``twofold`` console script."""
    import multiprocessing

    multiprocessing.freeze_support()  # the window's assessment process, in a bundled application folder
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        if argv and argv[0] == "fit":
            return run_fit(argv[1:])
        if argv and argv[0] in ("rerun", "predict", "units"):
            from twofold import commands as outputs

            return getattr(outputs, f"run_{argv[0]}")(argv[1:])
        if argv and argv[0] == "snapshot":
            from twofold.gui.snapshot import run_snapshot

            return run_snapshot(argv[1:])
        if argv and argv[0] in ("-h", "--help"):
            print("usage: twofold [DATA] | twofold fit DATA --outcome COLUMN --predictor COLUMN ... | "
                  "twofold snapshot DATA ... --out PNG | twofold rerun SESSION ... | twofold predict SESSION ... | "
                  "twofold units SESSION --unit COLUMN ...")
            return 0
        return run_gui(argv)
    except KeyboardInterrupt:
        return 130
    except MemoryError:
        print("twofold: this computer ran out of memory for this analysis; close other programs, or export only "
              "the columns and rows you need.", file=sys.stderr)
        return EXIT_USAGE
    except SystemExit:
        raise
    except Exception as exc:  # the last guard: a message, never a traceback
        print(f"twofold: an unexpected problem stopped the command ({type(exc).__name__}: {exc}); "
              f"{_log_exception()}", file=sys.stderr)
        return EXIT_INTERNAL


def _log_exception() -> str:
    """Append the traceback to Twofold's own error log; where that folder cannot be written, say so.

    Never a shared folder such as the system's temporary one, where others could read it.
    """
    import traceback

    from twofold.paths import log_dir

    try:
        path = log_dir() / "twofold-error.log"
        with open(path, "a", encoding="utf-8") as fh:
            traceback.print_exc(file=fh)
        return f"details were written to {path}. Please report it with that file."
    except OSError as exc:
        return (f"the details could not be kept, because Twofold's own folder cannot be written "
                f"({exc.strerror or type(exc).__name__}). Please report the message above.")


if __name__ == "__main__":
    sys.exit(main())
