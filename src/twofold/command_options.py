"""What the commands share: exit statuses, a parser that speaks in one sentence, the report options.

Both :mod:`twofold.cli` (``fit`` and the dispatch) and :mod:`twofold.commands`
(``rerun`` and ``predict``) import from here, so neither imports the other at
module level.
"""

from __future__ import annotations

import argparse

EXIT_USAGE = 2
EXIT_INTERNAL = 3


class CommandParser(argparse.ArgumentParser):
    """argparse that reports usage mistakes in one sentence and exits 2."""

    def error(self, message):
        self.exit(EXIT_USAGE, f"twofold: {message} (see 'twofold {self.prog.split()[-1]} --help').\n")


#: The report's texts for its first page: option name -> (key of the report options, what it is, example).
REPORT_TEXT_OPTIONS = {
    "--report-title": ("title", "the report's title", "'Readmissions after discharge, 2024'"),
    "--report-authors": ("authors", "who wrote the analysis", "'A. Patel, quality team'"),
    "--report-question": ("question", "the question the analysis answers",
                          "'Which patients are readmitted within 30 days?'"),
}


def add_report_options(p: argparse.ArgumentParser, default_note: str) -> None:
    """``--suppress-up-to N``, ``--report-records`` and the report's texts, shared by ``fit`` and ``rerun``."""
    from twofold.core.outputs.privacy import DEFAULT_THRESHOLD

    p.add_argument("--suppress-up-to", type=suppress_limit, metavar="N", default=None,
                   help=f"in the report, show counts of 1 to N people as suppressed (default {DEFAULT_THRESHOLD}; "
                        f"use the limit your data owner requires; {default_note})")
    p.add_argument("--report-records", action=argparse.BooleanOptionalAction, default=None,
                   help="list the most influential records in the report by their row number in the data file "
                        "(row numbers can point back to patients; off unless asked)")
    for option, (key, what, example) in REPORT_TEXT_OPTIONS.items():
        p.add_argument(option, type=report_text(key), metavar="TEXT", default=None,
                       help=f"{what}, printed on the report's first page (for example {example}; {default_note})")


def report_text(key: str):
    """The parser of one report text: one line, at most the length a session keeps."""
    def parse(text: str) -> str:
        from twofold.core.outputs.session import REPORT_TEXT_LIMITS

        value = " ".join(text.split())
        if len(value) > REPORT_TEXT_LIMITS[key]:
            raise argparse.ArgumentTypeError(f"the report's {key} is {len(value):,} characters long; shorten it to "
                                             f"at most {REPORT_TEXT_LIMITS[key]:,}")
        return value

    parse.__name__ = f"report {key}"
    return parse


def report_texts(args) -> dict:
    """The report texts given on the command line (None where not given), by their key."""
    return {key: getattr(args, option[2:].replace("-", "_")) for option, (key, _, _) in REPORT_TEXT_OPTIONS.items()}


def report_options_need_a_place(p: argparse.ArgumentParser, args, places: dict) -> None:
    """Refuse report options that would change nothing: none of ``places`` (option -> value) is given.

    ``places`` names ``--report`` and, for ``fit``, ``--session-out`` (the
    session keeps the options for the reports of later re-runs).
    """
    texts = report_texts(args)
    given = [name for name, value in (("--suppress-up-to", args.suppress_up_to),
                                      ("--report-records", args.report_records),
                                      *((option, texts[key]) for option, (key, _, _) in REPORT_TEXT_OPTIONS.items()))
             if value is not None]
    if given and not any(places.values()):
        them = "it" if len(given) == 1 else "them"
        nor = (f" (nor --session-out, which keeps {them} for later reports)" if "--session-out" in places else "")
        p.error(f"{' and '.join(given)} change{'s' if len(given) == 1 else ''} only a report, but no --report "
                f"was given{nor}; add --report PATH.html or leave {them} out")


def suppress_limit(text: str) -> int:
    """The value of ``--suppress-up-to``: a whole number from 1 to the largest limit allowed."""
    from twofold.core.outputs.privacy import MAX_THRESHOLD

    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; give the largest count of people to "
                                         "hide, e.g. 10") from None
    if not 1 <= value <= MAX_THRESHOLD:
        raise argparse.ArgumentTypeError(f"{text} is out of range; give a whole number from 1 to {MAX_THRESHOLD}, "
                                         "e.g. 10")
    return value


def net_benefit_range(text: str) -> list:
    """The value of ``--net-benefit LOW:HIGH:STEP``: [low, high, step], threshold risks checked in the core."""
    from twofold.core.assessing.decision import parse_range
    from twofold.core.errors import TwofoldError

    try:
        return list(parse_range(text))
    except TwofoldError as exc:
        raise argparse.ArgumentTypeError(str(exc).rstrip(".")) from None


def add_net_benefit_option(p: argparse.ArgumentParser, where: str) -> None:
    """``--net-benefit LOW:HIGH:STEP``, shared by ``fit`` and ``rerun``."""
    p.add_argument("--net-benefit", type=net_benefit_range, metavar="LOW:HIGH:STEP", default=None,
                   help=f"decision curve: net benefit of acting on the model's risks at thresholds LOW to HIGH in "
                        f"steps of STEP (risks, e.g. 0.05:0.5:0.01), beside treating everyone and no one, {where}")
