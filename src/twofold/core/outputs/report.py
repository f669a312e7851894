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
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from twofold.core.outputs.privacy import (DEFAULT_THRESHOLD, MIN_RESIDUAL_DF, SUPPRESSED, check_model, coarse_roc,
                                          is_small, protect_table, show_count, suppression_note)
from twofold.core.models.terms import term_title
from twofold.core.outputs.text import degrees, fmt_num, fmt_or, fmt_p, or_cells, pooled_test_text

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

#: What a withheld figure shows.
WITHHELD = "withheld"

#: Where a withheld figure is explained.
SEE_PRIVACY = "see 'What this report leaves out' under Privacy"

#: Text from the data that a report must not print is replaced by this.
REDACTED = "[not shown]"

#: Codes of warnings whose messages Twofold writes from column names and its own figures only.
MODEL_CODES = frozenset({"separation", "not_converged", "collinear", "few_events", "profile", "drop_one",
                         "calibration", "hosmer_lemeshow", "pseudo_r2", "influence", "sample_size",
                         "extrapolation", "column_missing", "auc_se_unavailable", "auc_ci_unavailable",
                         "imputation_model"})

#: The report's own words for what reading the file noticed: the readers' messages may quote cells
#: of the data (a title line, an error value), so none of them is printed.
READING_WORDS = {
    "encoding": "The file is not UTF-8 text, so it was read with a Western European character set.",
    "title_row": "Text above the column names was taken as a title and skipped; it is not repeated here.",
    "two_header_rows": "The column names took two rows of the file and were joined.",
    "merged_cells": "Some cells of the sheet were merged; each merged block's value was given to all its cells.",
    "formulas": "Some formula cells of the sheet had no saved value and were read as missing.",
    "empty_columns": "Columns with neither a name nor any value were left out.",
    "empty_rows": "Rows with no value at all were left out.",
    "column_names": "Some columns had no name or a repeated name, so Twofold named them.",
    "excel_errors": "Some cells{of} showed a spreadsheet formula error and were read as missing.",
    "merged_values": "Values that differ only in capitals or spaces were taken as one{of}.",
    "thousands": "Numbers written with thousands separators were read as numbers{of}.",
    "decimal_comma": "Numbers written with a decimal comma were read as numbers with decimals{of}.",
    "infinite": "Infinite values were read as missing{of}.",
    "bool_missing": "TRUE/FALSE values with some cells empty were read as 1 and 0{of}.",
    "numbers_as_text": "Numbers stored as text were read as numbers{of}.",
}


def _label(t: dict, nameless=frozenset()) -> tuple[str, str]:
    if t.get("part") in ("curve", "interaction") and t["column"].split(":")[0] not in nameless \
            and t["column"].split(":")[-1] not in nameless:
        label = t.get("label") or t["column"]
        return term_title(t["column"]), label.split(": ", 1)[1] if ": " in label else "per 1 unit of each"
    if t.get("level") is None:
        return t["column"], "per unit"
    if t["column"] in nameless:
        return t["column"], "a group (not named)"
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


# ---- groups of people that a model's figures describe ------------------------


def block_groups(block, rows) -> tuple[list[str], list[np.ndarray]] | None:
    """The groups of people a grouped predictor makes on ``rows``: (labels, masks), or None for a measured one.

    A categorical predictor's groups are its levels (the reference first), a
    number with two values on these rows makes two groups, and an interaction
    of two grouped predictors makes the combinations of their groups.
    """
    rows = np.asarray(rows)
    if block.kind == "factor":
        vals = block.values[rows]
        masks = [vals.sum(axis=1) == 0] + [vals[:, j] == 1 for j in range(block.width)]
        return [f"{block.reference} (reference)"] + [str(lvl) for lvl in block.levels], masks
    if block.kind == "numeric" and block.width == 1:
        x = block.values[rows, 0]
        distinct = np.unique(x)
        if len(distinct) == 2:
            return [f"{v:g}" for v in distinct], [x == v for v in distinct]
        return None
    if block.kind == "interaction" and isinstance(block.reference, tuple) and len(block.reference) == 2:
        a, b = (block_groups(part, rows) for part in block.reference)
        if a is None or b is None:
            return None
        labels, masks = [], []
        for la, ma in zip(*a):
            for lb, mb in zip(*b):
                labels.append(f"{la} and {lb}")
                masks.append(ma & mb)
        return labels, masks
    return None


def model_check(design, threshold: int = DEFAULT_THRESHOLD):
    """Which of a fitted model's figures may be published (:func:`twofold.core.outputs.privacy.check_model`)."""
    y = np.asarray(design.y)
    groups, all_grouped = {}, True
    for block in design.blocks:
        found = block_groups(block, design.rows)
        if found is None:
            all_grouped = False
            continue
        groups[block.column] = [(int((m & (y == 1)).sum()), int((m & (y == 0)).sum())) for m in found[1]]
    patterns = None
    if all_grouped:
        if design.X.shape[1] > 1:
            _, inverse = np.unique(design.X[:, 1:], axis=0, return_inverse=True)
            inverse = np.asarray(inverse).ravel()
        else:
            inverse = np.zeros(len(y), dtype=int)
        events = np.bincount(inverse, weights=y).astype(int)
        people = np.bincount(inverse)
        patterns = list(zip(events.tolist(), (people - events).tolist()))
    events = int((y == 1).sum())
    return check_model(groups, patterns, len(y), design.X.shape[1], threshold, (events, len(y) - events))


def frozen_check(result, threshold: int = DEFAULT_THRESHOLD):
    """Which figures of a saved model applied to new records may be published.

    Nothing is refitted, so only the assessment is printed; it is worked out
    from each record's predicted risk and outcome.  When the model's
    predictors are all groupings (or its predicted risks take no more values
    than two-valued predictors could give), those risks are the combinations
    of groups, and the assessment is shown only when the table of
    combinations by outcome could be shown
    (:func:`twofold.core.outputs.privacy.check_model`).
    """
    y = np.asarray(result.y)
    terms = result.model.terms
    values, inverse = np.unique(np.round(np.asarray(result.predicted, dtype=float), 12), return_inverse=True)
    grouped = all(t.kind == "factor" or (t.kind == "interaction" and all(lvl is not None for lvl in t.levels))
                  for t in terms)
    patterns = None
    if grouped or len(values) <= 2 ** len(terms):
        inverse = np.asarray(inverse).ravel()
        events = np.bincount(inverse, weights=y, minlength=len(values)).astype(int)
        people = np.bincount(inverse, minlength=len(values))
        patterns = list(zip(events.tolist(), (people - events).tolist()))
    events = int((y == 1).sum())
    return check_model({}, patterns, len(y), 1, threshold, (events, len(y) - events))


def _involves(name: str, withheld) -> bool:
    """A predictor or interaction ("A:B") is withheld when it, or either predictor it multiplies, is."""
    return name in withheld or any(part in withheld for part in str(name).split(":"))


involves = _involves  # the same rule, for the report's missing-data section


#: Text that looks like a date (year first or last, with - / or . between).
_DATE_TEXT = re.compile(r"^\s*(\d{4}[-/.]\d{1,2}[-/.]\d{1,2}|\d{1,2}[-/.]\d{1,2}[-/.]\d{2,4})([ T]\d{1,2}:\d{2}(:\d{2})?)?\s*$")


def _private_columns(study) -> list[str]:
    """Columns of the file that hold identifiers or dates, by the role in force or the one Twofold inferred."""
    from twofold.core.data.roles import Role

    return [name for name, info in study.columns.items()
            if info.role in (Role.IDENTIFIER, Role.DATE) or info.inferred_role in (Role.IDENTIFIER, Role.DATE)]


def nameless_predictors(design, study=None) -> set[str]:
    """Grouped predictors whose group names must not be printed: identifiers or dates made into groups.

    A predictor is one when its column holds identifiers or dates (by the
    role Twofold inferred, whatever role the user forced), when most of its
    groups hold a single record, or when its group names look like dates.
    """
    private = set(_private_columns(study)) if study is not None else set()
    out = set()
    for block in design.blocks:
        found = block_groups(block, design.rows)
        if found is None:
            continue
        parts = str(block.column).split(":") if block.kind == "interaction" else [block.column]
        singles = sum(int(m.sum()) == 1 for m in found[1])
        names = [lbl.replace(" (reference)", "") for lbl in found[0]]
        if any(p in private or p in out for p in parts) or singles * 2 > len(found[1]) \
                or any(_DATE_TEXT.match(n) for n in names):
            out.add(block.column)
    return out


def _forbidden_text(result, design, nameless) -> set[str]:
    """Text a report must never print: values of identifier and date columns, and group names of ``nameless``."""
    out = set()
    study = getattr(result, "study", None)
    if study is not None:
        import pandas as pd

        for name in _private_columns(study):
            series = study.frame[name].dropna()
            values = pd.unique(series.to_numpy())
            for v in values:
                texts = {str(v)}
                if hasattr(v, "strftime"):
                    texts.add(v.strftime("%Y-%m-%d"))
                elif isinstance(v, np.datetime64):
                    texts.add(str(v)[:10])
                # Whole numbers are left to the rule that no row value is printed: a record number 12 cannot
                # be told from a count of 12.
                out.update(t.strip() for t in texts if len(t.strip()) >= 3 and not t.strip().lstrip("-").isdigit())
    for block in design.blocks if design is not None else ():
        if block.column in nameless:
            found = block_groups(block, design.rows)
            for label in (found[0] if found else []):
                t = label.replace(" (reference)", "").strip()
                if len(t) >= 3 and not t.lstrip("-").replace(".", "", 1).isdigit():
                    out.add(t)
    return out


_TOKEN = re.compile(r"[^\s,;()'\"]+")


def _redact_text(text: str, forbidden: set) -> tuple[str, bool]:
    if not forbidden or not text:
        return text, False
    hit = False

    def swap(m):
        nonlocal hit
        word = m.group(0)
        core = word.rstrip(".:")
        if core in forbidden:
            hit = True
            return REDACTED + word[len(core):]
        return word

    out = _TOKEN.sub(swap, text)
    for f in forbidden:
        if " " in f and f in out:
            out = out.replace(f, REDACTED)
            hit = True
    return out, hit


def redact(rep: "Report", forbidden: set) -> bool:
    """Replace any text of ``forbidden`` in the report's words; True when something was replaced."""
    found = False

    def fix(s):
        nonlocal found
        new, hit = _redact_text(str(s), forbidden)
        found |= hit
        return new

    rep.title = fix(rep.title)
    for b in rep.blocks:
        if isinstance(b, (Heading, Para)):
            b.text = fix(b.text)
        elif isinstance(b, Bullets):
            b.items = [fix(i) for i in b.items]
        elif isinstance(b, Table):
            b.caption = fix(b.caption)
            b.headers = [fix(h) for h in b.headers]
            b.rows = [[fix(c) for c in row] for row in b.rows]
        elif isinstance(b, Figure):
            b.caption, b.alt = fix(b.caption), fix(b.alt)
    return found


# ---- warnings ---------------------------------------------------------------


def _notice_fields(n) -> tuple[str, str, tuple]:
    if isinstance(n, dict):
        return n.get("code", ""), n.get("message", ""), tuple(n.get("subjects", ()))
    return n.code, n.message, tuple(getattr(n, "subjects", ()))


def _how_many(count: int, threshold: int) -> str:
    """A count in a sentence: the number, or "1 to N" when it is small enough to be suppressed."""
    return f"1 to {threshold}" if is_small(count, threshold) else f"{int(count):,}"


def _quoted(columns) -> str:
    return ", ".join(f"'{c}'" for c in columns)


def report_notices(notices, record: dict, threshold: int, check=None, reading_codes=frozenset()) -> list[str]:
    """The warnings as a report prints them: no text taken from data cells, and small counts hidden.

    Notes from reading the file are given in the report's own words (their
    messages may quote cells); the count of rows left out is rebuilt with
    every count passed through the suppression; warnings about predictors
    whose figures are withheld, or about any figure of a withheld model, are
    left out with those figures (:data:`MODEL_CODES` messages are written by
    Twofold from column names and its own figures).
    """
    withheld = set(check.withheld) if check is not None else set()
    whole = check is not None and check.whole_model is not None
    out, left_out = [], False
    for n in notices:
        code, message, subjects = _notice_fields(n)
        if code == "rows_dropped":
            if "missing_by_column" not in record:
                continue
            left = record["rows_read"] - record["rows_used"]
            if not left:
                msg = ("The rows compared changed because of missing values in a newly used predictor; every model "
                       "tried was refitted on the new common rows so that their tests stay valid.")
            else:
                parts = [f"{_how_many(record['rows_missing_outcome'], threshold)} with no outcome"] \
                    if record["rows_missing_outcome"] else []
                parts += [f"{_how_many(k, threshold)} missing '{c}'"
                          for c, k in record["missing_by_column"].items() if k and not record.get("imputation")]
                msg = (f"{_how_many(left, threshold)} rows were left out ({'; '.join(parts) or 'missing values'}); "
                       + ("an outcome is never imputed." if record.get("imputation") else
                          "results describe the complete rows only."))
        elif code in reading_codes or code in READING_WORDS or code not in MODEL_CODES:
            cols = [s for s in subjects if isinstance(s, str)]
            words = READING_WORDS.get(code)
            if words is None:
                msg = (f"Reading the file gave a note{' about ' + _quoted(cols) if cols else ''} ('{code}'); "
                       "it is shown in the window and on the command line, not here, because such notes can "
                       "quote cells of the data.")
            else:
                msg = words.format(of=f" in {_quoted(cols)}" if cols else "")
        elif whole and code == "few_events":
            msg = ("There are fewer than 10 of the rarer outcome per estimated coefficient (a rule of thumb from "
                   "Peduzzi et al. 1996): estimates may be unstable and odds ratios exaggerated; consider fewer "
                   "predictors.")
        elif whole:
            left_out = True
            continue
        elif code != "separation" and any(_involves(s, withheld) for s in subjects):
            # Separation is said even of a withheld predictor: a reader must know the model has it, and it
            # names no group.
            left_out = True
            continue
        else:
            msg = message
        if msg not in out:
            out.append(msg)
    if left_out or (check is not None and check.anything_withheld):
        out.append(f"Warnings about figures this report withholds are left out with them ({SEE_PRIVACY}).")
    return out


# ---- sections -----------------------------------------------------------------


def _warnings_section(rep: Report, notices: list[str]) -> None:
    """The warnings, first of all (before any result), so that no reader takes a figure without them."""
    rep.add(Heading("Warnings"))
    if notices:
        rep.add(Bullets(notices, "warning"))
    else:
        rep.add(Para("None."))


def _data_section(rep: Report, record: dict, threshold: int, what: str = "model") -> None:
    rep.add(Heading("The records"))
    read, used = record["rows_read"], record["rows_used"]
    left = read - used
    small_left = is_small(left, threshold)
    # Events and non-events add up to the rows used: a small one hides the other too.
    small_outcome = is_small(record["events"], threshold) or is_small(record["nonevents"], threshold)
    rows = [
        ["Rows read from the file", SUPPRESSED if small_left else f"{read:,}"],
        ["Rows without an outcome", show_count(record["rows_missing_outcome"], threshold)],
        ["Rows left out (no outcome, or a predictor missing)", show_count(left, threshold)],
        [f"Rows used by the {what}", f"{used:,}"],
        ["Events among them", SUPPRESSED if small_outcome else f"{record['events']:,} ({_pct(record['events'], used)})"],
        ["Non-events among them",
         SUPPRESSED if small_outcome else f"{record['nonevents']:,} ({_pct(record['nonevents'], used)})"],
    ]
    rep.add(Table(["", "count"], rows, "lr"))
    if small_left:
        rep.add(Para("Fewer than the suppression limit of rows were left out, so the number of rows read is "
                     "suppressed too: with both totals shown, the small number could be worked out.", "note"))
    marked = record.get("values_marked_missing") or {}
    if marked:
        # Which columns, and how many values: not the values themselves, which are text from the file.
        rep.add(Para("Values marked as meaning 'not known' were counted as missing in: "
                     + ", ".join(f"{c} ({len(v)} value{'s' if len(v) != 1 else ''})" for c, v in marked.items())
                     + "."))
    missing = [[c, show_count(n, threshold)] for c, n in record["missing_by_column"].items()]
    if any(n for n in record["missing_by_column"].values()):
        rep.add(Table(["predictor", "rows missing it (among rows with an outcome)"], missing, "lr",
                      "A row can miss several predictors, so these can add up to more than the rows left out."))
    else:
        rep.add(Para("No predictor value was missing among the rows with an outcome."))
    if small_outcome:
        rep.add(Para(f"The {'events' if is_small(record['events'], threshold) else 'non-events'} number 1 to "
                     f"{threshold} people, so neither count is shown, and the model's figures, which would reveal "
                     f"them, are withheld ({SEE_PRIVACY}).", "warning"))


def _describe_predictors(rep: Report, fit, threshold: int, nameless=frozenset()) -> None:
    """Numeric predictors by outcome (mean, SD, median, quartiles) and grouped ones cross-tabulated."""
    X, y = fit.design.X, fit.design.y
    ev, ne = y == 1, y == 0
    rep.add(Heading("The predictors among the rows used"))
    numeric_rows = []
    factor_tables = []
    for block, sl in zip(fit.design.blocks, fit.design.slices):
        if block.kind == "interaction":
            continue  # its columns are products of the predictors already described
        found = block_groups(block, fit.design.rows)
        if found is not None:
            factor_tables.append((block.column, *found))
            continue
        if block.kind in ("numeric", "spline"):
            x = X[:, sl.start]  # a spline's first column is the value itself
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
    if numeric_rows:
        rep.add(Table(["predictor", "events: mean (SD)", "events: median (quartiles)",
                       "non-events: mean (SD)", "non-events: median (quartiles)"], numeric_rows, "lrrrr",
                      "SD: standard deviation; quartiles: the 25th and 75th percentiles."))
    for column, labels, masks in factor_tables:
        if column in nameless:
            rep.add(Para(f"'{column}' is used as groups, but its values look like record identifiers or dates, "
                         f"so its {len(labels):,} groups are neither named nor counted in this report.", "note"))
            continue
        counts = np.array([[int((m & ev).sum()), int((m & ne).sum())] for m in masks])
        prot = protect_table(counts, threshold, zeros_disclose=True)
        shown = prot.as_text()
        rows = []
        for i, label in enumerate(labels):
            e, total = prot.cell(i, 0), prot.row_total(i)
            share = _pct(e, total) if e is not None and total is not None else SUPPRESSED
            rows.append([label, shown[i][0], shown[i][1], shown[i][2], share])
        m = len(labels)
        share = _pct(counts[:, 0].sum(), counts.sum()) if prot.col_total(0) is not None else SUPPRESSED
        rows.append(["all rows used", shown[m][0], shown[m][1], shown[m][2], share])
        rep.add(Table([f"{column}", "events", "non-events", "total", "share with the event"], rows, "lrrrr",
                      f"Rows used by the model, by group of {column} and outcome."))


def _withheld_row(column: str, width: int) -> list[str]:
    return [column, "all its groups", WITHHELD] + [""] * (width - 3)


def _coefficient_section(rep: Report, record: dict, fit, check, nameless=frozenset(), smaller_check=None) -> None:
    rep.add(Heading("The chosen model"))
    method = record.get("method", "maximum likelihood")
    preds = ", ".join(record["predictors"]) or "no predictors"
    rep.add(Para(f"Outcome: {record['outcome']} (event: {record['event']}). Predictors: {preds}. "
                 f"Fitted by {method} on {record['rows_used']:,} rows with {record['parameters']} coefficients "
                 f"(intercept included)."))
    if check.whole_model is not None:
        rep.add(Para(f"The model's figures are withheld ({SEE_PRIVACY}): {check.whole_model}. Merging small "
                     "groups, or adding a predictor measured on a scale, can make them publishable.", "warning"))
        return
    withheld = check.withheld
    ov = record["overall"]
    penalised = "penalized_log_likelihood" in record
    test_name = "Penalised likelihood-ratio" if penalised else "Likelihood-ratio"
    if ov and ov["df"] and "df_denominator" in ov:
        rep.add(Para(f"{pooled_test_text(ov)}, of the model against the overall event rate alone."))
    elif ov and ov["df"]:
        rep.add(Para(f"{test_name} test of the model against the overall event rate alone: "
                     f"G = {fmt_num(ov['g'], 2)} on {degrees(ov['df'])}, p-value {fmt_p(ov['p_value'])}."))
    per = (f"{fmt_num(record['events_per_parameter'], 1)} of the rarer outcome per coefficient besides "
           "the intercept.")
    if penalised:
        # Ordinary log-likelihoods beside a penalised G would let a reader work out a different G.
        rep.add(Para(f"Fitted by Firth's penalised likelihood: penalised log-likelihood "
                     f"{fmt_num(record['penalized_log_likelihood'], 2)}; the tests are penalised likelihood-ratio "
                     f"tests. {record['aic_note']} {per}"))
    else:
        rep.add(Para(f"Log-likelihood {fmt_num(record['log_likelihood'], 2)} (event rate alone "
                     f"{fmt_num(record['null_log_likelihood'], 2)}); deviance {fmt_num(record['deviance'], 2)}; "
                     f"AIC {fmt_num(record['aic'], 1)}; BIC {fmt_num(record['bic'], 1)}; {per}"))
    profile = any("or_pl_low" in t for t in record["terms"])
    headers = ["predictor", "group", "odds ratio", "95% Wald interval"] \
        + (["95% profile-likelihood interval"] if profile else []) \
        + ["p-value", "Wald z", "coefficient", "standard error"]
    rows, done, numbered = [], set(), {}
    for t in record["terms"]:
        if _involves(t["column"], withheld):
            if t["column"] not in done:
                rows.append(_withheld_row(t["column"], len(headers)))
                done.add(t["column"])
            continue
        col, group = _label(t, nameless)
        if col in nameless and t.get("level") is not None:
            numbered[col] = numbered.get(col, 1) + 1
            group = f"group {numbered[col]} (compared with group 1; groups not named)"
        row = [col, group, *or_cells(t)]
        if profile:
            row.append(_ci(t.get("or_pl_low"), t.get("or_pl_high")) if "or_pl_low" in t else "")
        row += [fmt_p(t["p_value"]), fmt_num(t["z"], 2), fmt_num(t["estimate"], 4), fmt_num(t["std_error"], 4)]
        rows.append(row)
    i = record["intercept"]
    rows.append(["intercept", "baseline log odds", "", ""] + ([""] if profile else [])
                + [fmt_p(i["p_value"]), fmt_num(i["z"], 2), fmt_num(i["estimate"], 4), fmt_num(i["std_error"], 4)])
    caption = ("Odds ratios with 95% Wald intervals; the Wald z tests that a coefficient is zero. "
               "A numeric predictor's odds ratio is per unit of the column.")
    if profile:
        caption += (" Beside the Wald interval stands the profile-likelihood interval, which does not assume the "
                    "estimate's distribution is symmetric; where the two differ, and always when a predictor "
                    "separates the outcome, use the profile-likelihood interval. An end shown as 'n/a' is "
                    "infinite (the likelihood never falls to the cut-off on that side, as under separation) or "
                    "could not be found.")
    if record.get("imputation"):
        caption += (" Pooled over the imputed copies by Rubin's rules: the intervals and p-values use t on the "
                    "Barnard-Rubin degrees of freedom, and the 'Wald z' column holds that t; the joint and "
                    "likelihood-ratio tests below are the pooled D1 and D3 (or D2) statistics on the chi-square "
                    "scale.")
    if done:
        caption += f" Rows marked '{WITHHELD}' are left out to protect small groups ({SEE_PRIVACY})."
    if nameless:
        caption += " Groups of predictors whose values look like identifiers or dates are not named."
    rep.add(Table(headers, rows, "ll" + "r" * (len(headers) - 2), caption))
    if record["dropped_columns"]:
        rep.add(Para("Left out as constant or exactly determined by other predictors: "
                     + ", ".join(c if c.split(":")[0] not in nameless else f"a group of {c.split(':')[0]}"
                                 for c in record["dropped_columns"]) + ".", "note"))
    stated = [e for e in record.get("effects_at_values") or []
              if not _involves(e["column"], withheld) and not any(w in e["label"] for w in set(withheld) | set(nameless))]
    if stated:
        rep.add(Table(["odds ratio of", "odds ratio", "95% Wald interval"],
                      [[e["label"], fmt_or(e["odds_ratio"]), _ci(e["or_ci_low"], e["or_ci_high"])] for e in stated],
                      "lrr", "Where one coefficient alone would mislead (a predictor in an interaction, or a curve), "
                             "its odds ratios at stated values of the other predictor, or between stated values "
                             "along the curve."))
    tests = [t for t in record["term_tests"]
             if not _involves(t["column"], withheld) and not any(_involves(i, withheld) for i in t.get("includes", ()))]
    if tests:
        rep.add(Table(["predictor (all its coefficients together)", "Wald chi-square", "degrees of freedom",
                       "p-value"],
                      [[t.get("label", t["column"]),  # a pooled D1 (F scale) on the chi-square scale: times df
                        fmt_num(t["statistic"] * (t["df"] if "df_denominator" in t else 1), 2), str(t["df"]),
                        fmt_p(t["p_value"])] for t in tests],
                      caption="A predictor in an interaction is tested together with the interaction (its effect "
                              "at any value of the other predictor)."))
    a = record.get("assessment") or {}
    drop = a.get("drop_one") or []
    if drop:
        rows = [[t.get("label", t["column"]), fmt_num(t["g"], 2), str(t["df"]), fmt_p(t["p_value"])]
                + ([WITHHELD, WITHHELD, ""] if _involves(t["column"], withheld) else
                   [fmt_num(t["wald"], 2), fmt_p(t["wald_p_value"]), "yes" if t["prefer_lr"] else ""])
                for t in drop]
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
    inter = [t for t in record.get("interaction_tests") or [] if not _involves(t["term"], withheld)]
    if inter:
        rep.add(Table(["interaction", "likelihood-ratio G", "degrees of freedom", "p-value"],
                      [[term_title(t["term"]), fmt_num(t["g"], 2), str(t["df"]), fmt_p(t["p_value"])]
                       for t in inter],
                      caption="Each interaction tested by refitting without it on the same rows. With an "
                              "interaction, the odds ratio of either predictor depends on the other."))
    nested = record.get("nested")
    if nested:
        smaller = ", ".join(nested["smaller_predictors"]) or "no predictors"
        if smaller_check is not None and smaller_check.whole_model is not None:
            rep.add(Para(f"The test of the smaller model ({smaller}) against this one is withheld: with this "
                         "model's log-likelihood it would give the smaller model's, whose figures would reveal "
                         f"small groups ({SEE_PRIVACY}).", "note"))
        elif "df_denominator" in nested:
            rep.add(Para(f"Smaller model ({smaller}) against this one on the same {nested['rows']:,} rows: "
                         f"{pooled_test_text(nested)}."))
        else:
            rep.add(Para(f"Smaller model ({smaller}) against this one on the same {nested['rows']:,} rows: "
                         f"likelihood-ratio G = {fmt_num(nested['g'], 2)} on {nested['df']} degrees of freedom, "
                         f"p-value {fmt_p(nested['p_value'])}."))


def _ladder_section(rep: Report, ladder, threshold: int, penalised: bool = False) -> list[str]:
    """The models tried; returns the numbers (from 1) of models whose figures are withheld."""
    rep.add(Heading("Models tried"))
    checks = [model_check(rung.fit.design, threshold) for rung in ladder.rungs]
    rows, hidden = [], []
    for k, rung in enumerate(ladder.rungs):
        t = rung.against_previous
        change = "; ".join(x for x in (("added " + ", ".join(rung.added)) if rung.added else "",
                                        ("removed " + ", ".join(rung.removed)) if rung.removed else "") if x)
        if change and rung.previous is not None and rung.previous != k - 1:
            change += f" (from model {rung.previous + 1})"
        own = checks[k].whole_model is not None
        if own:
            hidden.append(str(k + 1))
        test = ""
        if t is not None:
            # A likelihood-ratio test is a difference of the two models' log-likelihoods: it is withheld
            # with either model's figures (a predictor's coefficients being withheld does not hide it).
            before = checks[rung.previous] if rung.previous is not None else None
            blocked = own or (before is not None and before.whole_model is not None)
            test = WITHHELD if blocked else f"G = {fmt_num(t.g, 2)}, {t.df} df, p-value {fmt_p(t.p_value)}"
        rows.append([
            f"{k + 1}{' (chosen)' if k == ladder.current else ''}", ", ".join(rung.predictors) or "none",
            str(rung.fit.n_params), WITHHELD if own else fmt_num(rung.fit.aic, 1),
            WITHHELD if own else fmt_num(rung.fit.bic, 1), change or "", test,
        ])
    n_rows = len(ladder.rows) if ladder.rows is not None else 0
    note = (f"Every model was fitted on the same {n_rows:,} rows, so nested ones can be compared by the "
            "likelihood-ratio test; lower AIC and BIC are better, and a difference under 2 is small.")
    if any(WITHHELD in r for r in rows):
        note += f" Figures marked '{WITHHELD}' would reveal small groups ({SEE_PRIVACY})."
    if penalised:
        note += (" These are the ordinary (maximum-likelihood) fits; the chosen model is reported above by its "
                 "penalised fit, so its AIC there differs from the one in this table.")
    rep.add(Table(["model", "predictors", "coefficients", "AIC", "BIC", "change from the model it was built from",
                   "likelihood-ratio test against that model"], rows, "llrrrll", note))
    return hidden


def _calibration_groups(rep: Report, groups, threshold: int) -> bool:
    """The risk-group table and plot; True when some group's counts are suppressed.

    Counts of people pass the suppression (with complements, and a zero
    beside a group's count hidden too); the observed
    share and its interval reveal a group's count with its size, so they go
    with it; the mean predicted risk is an average of the model's
    predictions, not a count, and is always shown.
    """
    ev = np.rint(np.asarray(groups.observed) * np.asarray(groups.n)).astype(int)
    counts = np.column_stack([ev, np.asarray(groups.n) - ev])
    # A risk group in which everyone had the same outcome is as telling as a predictor's group: the people of
    # the highest risk group are those with the traits the model weighs most.
    prot = protect_table(counts, threshold, zeros_disclose=True)
    shown = prot.as_text()
    rows, keep = [], []
    for g in range(len(ev)):
        ok = prot.cell(g, 0) is not None and prot.cell(g, 1) is not None and prot.row_total(g) is not None
        rows.append([str(g + 1), shown[g][2], fmt_num(float(groups.mean_predicted[g]), 3),
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
    caption = "Groups from lowest to highest predicted risk."
    if prot.any_hidden:
        caption += (" Where a group's counts are suppressed, its observed share and interval are too (with the "
                    "group's size they would give the count back); its mean predicted risk, an average of the "
                    "model's predictions, is shown.")
    rep.add(Table(["risk group", "people", "mean predicted risk", "events", "non-events", "observed share",
                   "95% interval of the share"], rows, caption=caption))
    return prot.any_hidden


def _assessment_section(rep: Report, a: dict, assessment, record: dict, threshold: int, frozen: bool,
                        include_records: bool, check=None, withheld_notes=None) -> None:
    rep.add(Heading("How well the model separates and predicts" + (" on these records" if frozen else
                                                                  " on the records it was fitted to")))
    if check is not None and check.whole_model is not None:
        rep.add(Para("Discrimination, calibration, the risk groups, the Hosmer-Lemeshow test, pseudo R-squared, "
                     "the sample-size check and influence are withheld with the model's other figures "
                     f"({SEE_PRIVACY}).", "warning"))
        return
    withheld = check.withheld if check is not None else {}
    notes = withheld_notes if withheld_notes is not None else []
    lo, hi = a["auc_ci"]
    rep.add(Heading("Discrimination", 3))
    rep.add(Para(f"Area under the ROC curve (c statistic) {fmt_num(a['auc'], 3)}, 95% interval {fmt_num(lo, 3)} to "
                 f"{fmt_num(hi, 3)} (DeLong et al. 1988): the chance that a randomly chosen person with the event "
                 "has a higher predicted risk than one without; 0.5 is a coin toss and 1 perfect."))
    roc = assessment.roc
    fpr, tpr = coarse_roc(roc.fpr, roc.tpr, record["nonevents"], record["events"], threshold)
    rep.add(Figure("roc", {"fpr": _floats(fpr), "tpr": _floats(tpr), "auc": float(a["auc"] or float("nan"))},
                   "ROC curve over all risk thresholds"
                   + (f", drawn through points at least {threshold + 1} events and {threshold + 1} non-events "
                      "apart so that it shows no small count." if threshold > 0 and len(fpr) < len(roc.fpr)
                      else "."),
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
    hidden_groups = _calibration_groups(rep, groups, threshold) if groups is not None else False
    rep.add(Para(f"Brier score {fmt_num(a['brier'], 4)} (mean squared difference between predicted risk and "
                 f"outcome; lower is better); scaled Brier score {fmt_num(a['scaled_brier'], 3)} (1 - Brier / "
                 "Brier of the event rate alone)."))
    hl = a.get("hosmer_lemeshow")
    if hl and hidden_groups:
        rep.add(Para("The Hosmer-Lemeshow test is withheld: with the risk groups' sizes and mean predicted risks, "
                     f"its statistic would give back their suppressed counts ({SEE_PRIVACY}).", "note"))
        notes.append("The Hosmer-Lemeshow statistic and its p-value, because with the risk groups' sizes and mean "
                     "predicted risks it would give back the suppressed counts of the risk groups.")
    elif hl:
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
            notes.append("Sensitivity, specificity and predictive values at the risk threshold, because some "
                         "counts of the classification table are suppressed and they would reveal them.")
        else:
            rep.add(Para(f"Sensitivity {fmt_num(c['sensitivity'], 3)}, specificity {fmt_num(c['specificity'], 3)}, "
                         f"positive predictive value {fmt_num(c['ppv'], 3)}, negative predictive value "
                         f"{fmt_num(c['npv'], 3)}."))
        rep.add(Para(c["note"], "note"))
    if frozen:
        return
    vif = [v for v in a.get("vif") or [] if not _involves(v["column"], withheld)]
    if vif:
        flagged = [v["column"] for v in vif if v.get("flagged")]
        rows = [[v["column"], fmt_num(v["value"], 2), str(v["df"])] for v in vif]
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
    how_many = f"{_how_many(above, threshold)} of the {n:,} records" + (
        " (the exact number is not shown because it is small)" if is_small(above, threshold) else "")
    rep.add(Para(f"Records whose Cook's distance is above 4/n = {fmt_num(cut, 5)} (a rule of thumb, common "
                 f"practice; Cook 1977): {how_many}. The largest Cook's distance is {fmt_num(largest, 4)}. "
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
    imputed = record.get("imputation")
    if imputed:
        from twofold.core.outputs.report_imputation import IMPUTATION_REFERENCES, METHODS_TEXT

        text += METHODS_TEXT.format(m=imputed["m"], seed=imputed["seed"])
    else:
        text += "Rows with a missing outcome or predictor value were left out (complete-case analysis)."
    rep.add(Para(text))
    rep.add(Heading("Sources", 3), Bullets([REFERENCES[k] for k in dict.fromkeys(refs)]
                                           + (IMPUTATION_REFERENCES if imputed else []), "small"))


#: The privacy section's promise; :func:`build_report` checks it before the report is handed out.
PRIVACY_PROMISE = ("The report holds aggregate figures only: no values of single records, no identifiers and no "
                   "dates from the data, and no text copied from cells of the data (column names and the names "
                   "of groups of grouped predictors are shown). Plots show groups and the overall ROC curve, "
                   "not single records.")


def _closing(rep: Report, record: dict, threshold: int, withheld: list[str]) -> Para:
    """Privacy (with what was left out and why), software and the caution; returns the promise paragraph."""
    rep.add(Heading("Privacy"), Para(suppression_note(threshold)))
    if threshold > 0:
        rep.add(Para(MODEL_RULES_NOTE.format(t=threshold, df=MIN_RESIDUAL_DF), "note"))
    rep.add(Heading("What this report leaves out", 3))
    if withheld:
        rep.add(Bullets(withheld))
    else:
        rep.add(Para("No model figure had to be withheld; only counts marked 'suppressed' are hidden."))
    promise = Para(PRIVACY_PROMISE, "note")
    rep.add(promise)
    rep.add(Heading("Software"), Table(["program", "version"], _versions(), "ll"))
    rep.add(Para(record["caution"], "caution"))
    return promise


#: How model figures are checked, as the privacy section says it.
MODEL_RULES_NOTE = (
    "A row of a table of groups (a predictor's groups, or groups of predicted risk) in which everyone had the same "
    "outcome (a zero beside the group's count) tells the outcome of every member, so that zero is suppressed "
    "with its complement too. Model figures are checked "
    "as the ESSnet guidelines for output checking (Eurostat 2015) advise for regression results: a predictor "
    "whose groups hold 1 to {t} people, 1 to {t} with or without the event, or people who all had the same "
    "outcome has its coefficients, odds ratios, intervals, standard errors and Wald tests withheld; a model whose "
    "predictors are all groupings is a table in disguise, and its figures are shown only when every combination "
    "of its groups could be shown; a model with fewer than {df} records beyond one per coefficient is not "
    "described."
)


def _header(record: dict, data_path, frozen: bool, details: dict | None = None) -> Report:
    from twofold import __version__

    details = details or {}
    kind = "Saved model applied to new records" if frozen else "Logistic model"
    title = (details.get("title") or "").strip() or f"{kind}: {record['outcome']} (event: {record['event']})"
    when = _dt.date.today().isoformat()
    sub = f"Written by Twofold {__version__} on {when}."
    rep = Report(title, sub)
    if (details.get("authors") or "").strip():
        rep.add(Para(f"Authors: {details['authors'].strip()}"))
    if (details.get("question") or "").strip():
        rep.add(Para(f"The question this analysis answers: {details['question'].strip()}"))
    if (details.get("title") or "").strip():
        rep.add(Para(f"{kind}: {record['outcome']} (event: {record['event']}).", "small"))
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


def _with_profile_under_separation(record: dict, fit, check) -> dict:
    """The record, with profile-likelihood intervals added when a predictor separates the outcome.

    Under separation the Wald intervals cannot be trusted, so a report gives
    the profile-likelihood ones beside them even when they were not asked
    for (the record itself is left as it is).
    """
    separated = any(getattr(n, "code", None) == "separation" for n in fit.notices)
    if not separated or check.whole_model is not None or any("or_pl_low" in t for t in record["terms"]):
        return record
    from twofold.core.models.penalised import profile_intervals
    from twofold.core.outputs.summary import clean_number

    profile = profile_intervals(fit)
    terms = []
    for t, row in zip(record["terms"], fit.coefficient_rows[1:]):
        lo, hi = profile.get(row["name"], (float("nan"), float("nan")))
        terms.append({**t, "or_pl_low": clean_number(lo), "or_pl_high": clean_number(hi)})
    return {**record, "terms": terms}


def _finish(rep: Report, forbidden: set, promise: Para) -> Report:
    """Check the privacy promise: any text of identifier or date columns still in the report is replaced."""
    if redact(rep, forbidden):
        promise.text += (f" Some text matched values of identifier or date columns of the data and was replaced "
                         f"by '{REDACTED}'.")
    return rep


def build_report(result, ladder=None, suppress_below: int = DEFAULT_THRESHOLD, include_records: bool = False,
                 details: dict | None = None) -> Report:
    """The content of the report of an analysis, or of a saved model applied to new records.

    Parameters
    ----------
    result : AnalysisResult or FrozenResult
    ladder : Ladder or list of lists of str, optional
        The models tried (a table of them is added).
    suppress_below : int
        Counts of people from 1 up to this number are shown as suppressed
        (default 10, so 1-10 are hidden; 0 switches suppression off), and
        model figures that would reveal such counts are withheld.
    include_records : bool
        List the row numbers of the most influential records.
    details : dict, optional
        ``title``, ``authors`` and ``question`` typed by the user, printed on
        the first page.
    """
    from twofold.core.outputs.report_usefulness import usefulness_sections

    threshold = int(suppress_below)
    record = result.record
    frozen = bool(getattr(result, "frozen", False))
    rep = _header(record, result.data if frozen else result.spec.data, frozen, details)
    a = record.get("assessment") or {}
    withheld_notes: list[str] = []
    if frozen:
        check = frozen_check(result, threshold)
        notices = report_notices(list(result.notices) + list(getattr(result.assessment, "notices", [])),
                                 record, threshold, check)
        _warnings_section(rep, notices)
        preds = ", ".join(record["predictors"]) or "no predictors"
        rep.add(Para(f"The saved model ({record['method']}; predictors: {preds}) was applied without refitting."))
        _data_section(rep, record, threshold, what="saved model")
        if check.whole_model is not None:
            withheld_notes.append(f"How the saved model performs on these records, because {check.whole_model}.")
        _assessment_section(rep, a, result.assessment, record, threshold, True, include_records, check,
                            withheld_notes)
        withheld_notes += usefulness_sections(rep, result, record, threshold, True, check)
        _methods(rep, record, True, False, False, False)
        promise = _closing(rep, record, threshold, withheld_notes)
        return _finish(rep, set(), promise)
    fit = result.fit
    check = model_check(fit.design, threshold)
    imputed = record.get("imputation")
    if imputed:  # the pooled model and the complete-rows one beside it: what either withholds is withheld
        from twofold.core.outputs import report_imputation as ri

        complete = ri.complete_rows_fit(result)
        complete_check = None if complete is None else model_check(complete.design, threshold)
        check = ri.joint_check(check, complete_check)
    record = _with_profile_under_separation(record, fit, check)
    nameless = nameless_predictors(fit.design, result.study)
    lad = _as_ladder(result, ladder)
    notes = list(fit.notices) + list(getattr(result.assessment, "notices", []) if result.assessment else [])
    if lad is not None:
        notes += list(lad.notices)
    reading = frozenset(n.code for n in getattr(getattr(result.study, "table", None), "notices", ()) or ())
    _warnings_section(rep, report_notices(notes, record, threshold, check, reading))
    _data_section(rep, record, threshold)
    if imputed:
        ri.missing_data_section(rep, result, threshold, check, complete, complete_check)
    if imputed:
        ri.describe_observed(rep, record, complete, threshold, nameless, _describe_predictors)
    else:
        _describe_predictors(rep, fit, threshold, nameless)
    if check.whole_model is not None:
        withheld_notes.append(f"Every figure of the chosen model, because {check.whole_model}.")
    for column, reason in check.withheld.items():
        if check.whole_model is None:
            withheld_notes.append(f"The coefficients, odds ratios, intervals, standard errors and Wald tests of "
                                  f"'{column}' (and of any interaction with it), because {reason}.")
    if nameless:
        withheld_notes.append(f"The names of the groups of {_quoted(sorted(nameless))}, because their values "
                              "look like record identifiers or dates.")
    if lad is not None:
        hidden = _ladder_section(rep, lad, threshold, penalised=bool(result.spec.firth))
        if hidden:
            withheld_notes.append(f"The AIC, BIC and tests of model{'s' if len(hidden) > 1 else ''} "
                                  f"{', '.join(hidden)} of the models tried, whose predictors are all groupings "
                                  "with some combination of groups too small to show.")
    smaller = getattr(result, "smaller_fit", None)
    smaller_check = model_check(smaller.design, threshold) if smaller is not None else None
    if smaller_check is not None and smaller_check.whole_model is not None:
        withheld_notes.append("The likelihood-ratio test against the smaller model, whose predictors are all "
                              "groupings with some combination of groups too small to show.")
    _coefficient_section(rep, record, fit, check, nameless, smaller_check)
    if a and imputed:
        ri.pooled_assessment_section(rep, a, check)
    elif a:
        _assessment_section(rep, a, result.assessment, record, threshold, False, include_records, check,
                            withheld_notes)
    withheld_notes += usefulness_sections(rep, result, record, threshold, False, check)
    _methods(rep, record, False, bool(result.spec.firth), any("or_pl_low" in t for t in record["terms"]),
             lad is not None)
    promise = _closing(rep, record, threshold, withheld_notes)
    return _finish(rep, _forbidden_text(result, fit.design, nameless), promise)
