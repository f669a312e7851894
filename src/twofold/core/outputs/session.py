"""Session files: one analysis saved as plain JSON, read back with strict checks.

A session file is Twofold's own format, JSON text only (never pickle or any
other format that can run code when read).  Its fields:

``format``           always ``"twofold-session"``
``schema_version``   1
``saved_by``         Twofold version that wrote it
``saved_at``         UTC time of saving (ISO 8601)
``data``             path of the data file (relative paths are relative to
                     the session file's folder); the data file is only ever
                     read
``data_sha256``      SHA-256 of the data file when saved
``data_rows``        data rows it had
``sheet``            workbook sheet, or null
``outcome``, ``event``
``predictors``       the chosen model's predictors
``smaller``          predictors of the smaller model of the nested test, or null
``references``       reference level in force for every categorical predictor used
``roles``            role of every predictor column used, plus the user's changes
``firth``, ``profile_ci``, ``threshold``   the options
``splines``          knots (3, 4 or 5) per predictor modelled by a spline
``interactions``     two-way interactions, each ``"A:B"``
``validate``, ``seed``   bootstrap repetitions (or null) and their seed
``rows_complete_in`` columns whose completeness decides the rows besides the
                     outcome and the predictors (the window saves every
                     column of its ladder, whose models share those rows);
                     empty: the rows complete for the chosen model alone
``report``           the report's options: ``suppress_up_to`` (counts of 1
                     up to this many people are hidden, 1 to 1000, default
                     10), ``list_records`` (true: list the most
                     influential records by row number), and the texts the
                     user typed for the first page: ``title``, ``authors``
                     and ``question`` (the question the analysis answers;
                     each may be empty, missing in older sessions: empty)
``ladder``           the models tried, each a list of predictors
``chosen``           index (from 0) of the chosen model in ``ladder``
``parents``          per model of ``ladder``, the index of the model it was
                     built from (null for the first); missing: each model was
                     built from the one before it
``validation_result`` the bootstrap validation shown when saved (the figures
                     of ``validate`` and ``seed``), or null
``model``            the chosen model as numbers: ``outcome``, ``event``,
                     ``method``, ``names``, ``coefficients``, ``covariance``
                     (null where not estimable) and ``terms`` (per predictor:
                     ``column``, ``kind``, ``levels``, ``reference``, ``range``,
                     ``knots`` for a spline, ``of`` for an interaction)

The keys ``data`` ... ``seed`` are those of
:meth:`~twofold.core.analysis.AnalysisSpec.as_dict`, so a session is a
superset of the spec it was made from.  Fields added after version 1 was
first written (``rows_complete_in``, ``report``) take their defaults when a
file lacks them, which is what the files saved before them meant.

:func:`~twofold.core.outputs.storage.load_session` refuses anything else in one
sentence: other types, unknown keys, numbers too large or not finite, strings
and lists beyond generous caps, nesting deeper than the format uses, text
that is not JSON.

This module holds the schema: making a session from an analysis, turning it
back into a spec and a model, and checking it.  Reading and writing the files
is in :mod:`twofold.core.outputs.storage`, and the autosave with its recovery after
a crash in :mod:`twofold.core.outputs.autosave`; their functions can still be
imported from here.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import re
from pathlib import Path

from twofold.core.errors import ColumnError, DataFileError, Notice
from twofold.core.outputs import DEFAULT_THRESHOLD, MAX_THRESHOLD

FORMAT = "twofold-session"
SCHEMA_VERSION = 1

#: Caps that no genuine session comes near.
MAX_FILE_BYTES = 32 * 1024 * 1024
MAX_DEPTH = 8            # the format itself nests 5 deep (model -> terms -> term -> range)
MAX_STRING = 4096        # characters in any string (paths included)
MAX_NAME = 1000          # characters in a column name or level
MAX_PREDICTORS = 500
MAX_LADDER = 500
MAX_LEVELS = 5000
MAX_PARAMETERS = 1000
MAX_INTEGER_DIGITS = 18
MAX_ABS_NUMBER = 1e300
MAX_ROWS = 10 ** 12

#: Data files Twofold reads; anything else named as data is refused.
DATA_SUFFIXES = (".csv", ".tsv", ".tab", ".txt", ".dat", ".xlsx", ".xlsm")

def _spec_keys() -> tuple:
    """The fields of AnalysisSpec, so a session always carries every one of them."""
    from dataclasses import fields

    from twofold.core.analysis import AnalysisSpec

    return tuple(f.name for f in fields(AnalysisSpec))


def _spec_defaults() -> dict:
    """Spec fields that have a default, with that default (fresh copies of lists and dicts)."""
    from dataclasses import MISSING, fields

    from twofold.core.analysis import AnalysisSpec

    out = {}
    for f in fields(AnalysisSpec):
        if f.default is not MISSING:
            out[f.name] = f.default
        elif f.default_factory is not MISSING:
            out[f.name] = f.default_factory()
    return out


SPEC_KEYS = _spec_keys()
#: Spec fields this module checks one by one; any others (added to AnalysisSpec later) get a generic check.
CHECKED_SPEC_KEYS = ("data", "outcome", "predictors", "event", "smaller", "references", "roles", "sheet", "firth",
                     "profile_ci", "threshold", "splines", "interactions", "validate", "seed", "rows_complete_in")
KEYS = ("format", "schema_version", "saved_by", "saved_at",
        *dict.fromkeys(CHECKED_SPEC_KEYS + SPEC_KEYS), "data_sha256", "data_rows", "ladder", "chosen", "model",
        "report", "parents", "validation_result", "shrinkage")
#: Fields added after version 1 was first written, with what a file without them means.
LATER_DEFAULTS = {"parents": None, "validation_result": None, "missing": {}, "shrinkage": None}
#: The report's options and what a session without them means.
REPORT_DEFAULTS = {"suppress_up_to": DEFAULT_THRESHOLD, "list_records": False, "title": "", "authors": "",
                   "question": ""}
#: The texts a user types for a report's first page, and the longest each may be.
REPORT_TEXT_LIMITS = {"title": 200, "authors": 300, "question": 1000}
TERM_KEYS = ("column", "kind", "levels", "reference", "range", "knots", "of")
ROLE_VALUES = ("numeric", "binary", "categorical", "identifier", "date", "excluded")


class SessionFileError(DataFileError):
    """A session file that cannot be used, explained in one sentence."""


def session_file_error(path, what: str) -> SessionFileError:
    """The one-sentence error for a session file that cannot be used because of ``what``."""
    return SessionFileError(f"The session file {Path(path).name} cannot be used: {what}; "
                            "open the data file and save the session again from Twofold.")


# ---------------------------------------------------------------------------
# making a session
# ---------------------------------------------------------------------------


def _rungs_of(ladder) -> list[list[str]]:
    if ladder is None:
        return []
    rungs = getattr(ladder, "rungs", ladder)
    return [list(getattr(r, "predictors", r)) for r in rungs]


def session_from_result(result, ladder=None, report=None) -> dict:
    """The session of an analysis (an :class:`~twofold.core.analysis.AnalysisResult`).

    Parameters
    ----------
    result : AnalysisResult
    ladder : Ladder or list of lists of str, optional
        The models tried; default: the smaller model (when there is one) and
        the chosen one.  The chosen model is added if the ladder lacks it.
    report : dict, optional
        The report's options, ``suppress_up_to`` and ``list_records``
        (default: :data:`REPORT_DEFAULTS`).

    Returns
    -------
    dict
        The session, ready for :func:`save_session`.
    """
    from twofold import __version__
    from twofold.core.outputs.predict import frozen_model
    from twofold.core.outputs.storage import file_sha256
    from twofold.core.outputs.summary import plain_value

    spec, study, fit = result.spec, result.study, result.fit
    data = Path(os.fspath(spec.data)).resolve()
    predictors = list(fit.design.predictors)
    smaller = None if spec.smaller is None else [study.column(p) for p in spec.smaller]
    rungs = _rungs_of(ladder)
    if not rungs:
        rungs = ([smaller] if smaller is not None else []) + [predictors]
    chosen = next((i for i, r in enumerate(rungs) if r == predictors), None)
    if chosen is None:
        chosen = next((i for i, r in enumerate(rungs) if set(r) == set(predictors)), None)
    if chosen is None:
        rungs.append(predictors)
        chosen = len(rungs) - 1
    used = [p for p in dict.fromkeys([p for r in rungs for p in r] + predictors) if ":" not in p]
    references = {str(k): plain_value(v) for k, v in spec.references.items()}
    for name in used:
        block = study.block(name, linear=True)
        if block.kind == "factor":
            references[name] = plain_value(block.reference)
    roles = {str(k): str(getattr(v, "value", v)) for k, v in spec.roles.items()}
    columns = study.columns
    for name in used:
        roles[name] = columns[name].role.value
    shrunk = getattr(result, "shrinkage", None)
    # A shrunk model is what the session saves and ``predict`` uses; ``shrinkage`` says how it was made.
    model = shrunk.model if shrunk is not None else frozen_model(fit, study.outcome, study.event)
    session = {
        "format": FORMAT,
        "schema_version": SCHEMA_VERSION,
        "saved_by": f"twofold {__version__}",
        "saved_at": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "data": str(data),
        "outcome": study.outcome,
        "predictors": predictors,
        "event": plain_value(study.event),
        "smaller": smaller,
        "references": references,
        "roles": roles,
        "sheet": spec.sheet,
        "firth": bool(spec.firth),
        "profile_ci": bool(spec.profile_ci),
        "threshold": None if spec.threshold is None else float(spec.threshold),
        "splines": {study.column(k): int(v) for k, v in spec.splines.items()},
        "interactions": [study.column(t) for t in spec.interactions],
        "validate": None if spec.validate is None else int(spec.validate),
        "seed": None if spec.seed is None else int(spec.seed),
        "rows_complete_in": [str(c) for c in spec.rows_complete_in],
        "data_sha256": file_sha256(data, reuse=True),
        "data_rows": int(study.n_rows),
        "ladder": rungs,
        "chosen": int(chosen),
        "model": model.as_dict(),
        "report": {**REPORT_DEFAULTS, **(report or {})},
        "shrinkage": None if shrunk is None else shrunk.as_dict(),
    }
    for key, value in spec.as_dict().items():
        # Fields added to AnalysisSpec after this module was written are carried as they are.
        session.setdefault(key, value)
    validate_session(session)
    return session


def spec_from_session(session: dict, data=None):
    """The :class:`~twofold.core.analysis.AnalysisSpec` a session describes.

    Parameters
    ----------
    session : dict
        As returned by :func:`load_session` or :func:`session_from_result`.
    data : path, optional
        Another data file with the same columns (default: the session's own).
    """
    from twofold.core.analysis import AnalysisSpec

    return AnalysisSpec(
        data=str(data if data is not None else session["data"]),
        outcome=session["outcome"],
        predictors=list(session["predictors"]),
        event=session["event"],
        smaller=None if session["smaller"] is None else list(session["smaller"]),
        references=dict(session["references"]),
        roles=dict(session["roles"]),
        sheet=session["sheet"],
        firth=session["firth"],
        profile_ci=session["profile_ci"],
        threshold=session["threshold"],
        splines=dict(session["splines"]),
        interactions=list(session["interactions"]),
        validate=session["validate"],
        seed=session["seed"],
        rows_complete_in=list(session["rows_complete_in"]),
        **{k: session[k] for k in SPEC_KEYS if k not in CHECKED_SPEC_KEYS and k in session},
    )


def frozen_from_session(session: dict):
    """The saved model of a session as a :class:`~twofold.core.outputs.predict.FrozenModel`."""
    from twofold.core.outputs.predict import FrozenModel

    return FrozenModel.from_dict(session["model"])


def ladder_from_lists(study, rungs, chosen=None, parents=None):
    """A :class:`~twofold.core.models.ladder.Ladder` of the given models fitted on ``study``, on common rows.

    ``chosen`` (a predictor list) becomes the current model when it is one of
    the rungs; otherwise the last rung is.  ``parents`` (one entry per rung,
    as a session saves them) says which model each was built from; without
    it, each was built from the one before.
    """
    from twofold.core.models.ladder import Ladder

    ladder = Ladder(study)
    parents = parents if parents is not None and len(parents) == len(rungs) else [None] * len(rungs)
    for i, rung in enumerate(rungs):
        if parents[i] is not None and 0 <= parents[i] < i:
            ladder.current = parents[i]
        ladder.add(list(rung))
    if chosen is not None:
        for i, rung in enumerate(ladder.rungs):
            if list(rung.predictors) == list(chosen) or set(rung.predictors) == set(chosen):
                ladder.select(i)
                break
    return ladder


def session_columns(session: dict) -> list[str]:
    """Every column a session names, outcome first."""
    names = [session["outcome"], *session["predictors"], *(session["smaller"] or [])]
    for rung in session["ladder"]:
        names.extend(rung)
    names.extend(session["references"])
    names.extend(session["roles"])
    names.extend(t["column"] for t in session["model"]["terms"])
    names.extend(session["splines"])
    names.extend(session["rows_complete_in"])
    out = []
    for name in names:
        # An interaction names two columns.
        out.extend(part.strip() for part in name.split(":")) if ":" in name else out.append(name)
    return list(dict.fromkeys(out))


def check_data(session: dict, path=None, frame=None) -> list[Notice]:
    """Notices about a data file against a session.

    ``data_changed`` when its SHA-256 differs from the saved one ("the data
    file changed since the session was saved"), and one ``column_missing``
    per column the session names that the file lacks.

    Parameters
    ----------
    session : dict
    path : path, optional
        The data file (default: the session's own).
    frame : pandas.DataFrame, optional
        The file already read (saves reading it again for its columns).
    """
    from twofold.core.outputs.storage import file_sha256

    path = Path(os.fspath(path if path is not None else session["data"]))
    require_data_file(path)
    notices = []
    if file_sha256(path) != session["data_sha256"]:
        notices.append(Notice(
            "data_changed",
            f"The data file changed since the session was saved ({path.name} had {session['data_rows']:,} rows "
            "then), so results can differ from the saved ones.",
        ))
    if frame is None:
        from twofold.core.data.io import read_table

        frame = read_table(path, sheet=session["sheet"]).frame
    present = {str(c) for c in frame.columns}
    for name in session_columns(session):
        if name not in present:
            notices.append(Notice("column_missing", f"The column '{name}' named in the session is missing from "
                                  f"{path.name}.", subjects=(name,)))
    return notices


def is_network_path(path) -> bool:
    """Whether a path names a place on another computer: a network share (``\\\\host\\share\\...``,
    ``//host/share/...``) or a Windows device path (``\\\\?\\UNC\\...``, ``\\\\.\\...``), judged on its text alone.

    Nothing is looked up: on Windows even asking whether such a file exists opens a connection to the
    host and may hand it the user's credentials.
    """
    text = os.fspath(path) if not isinstance(path, str) else path
    return len(text) > 2 and text[0] in "\\/" and text[1] in "\\/"


def network_path_error(path, where: str) -> DataFileError:
    """The sentence refusing to follow a network path that a session file (not the user) names."""
    return DataFileError(
        f"The data file named in {where} is on another computer ({str(path)[:120]}); Twofold does not follow "
        "network places written in a session file, so choose the data file yourself (File, Open a saved "
        "analysis asks where it is; on the command line give it with --data), or copy it to this computer."
    )


def require_data_file(path: Path, chosen: bool = True) -> Path:
    """Refuse a data path that is not an ordinary, existing data file (devices, folders, other types).

    ``chosen=False`` for a path taken from a session file rather than given by the user: a network path
    is then refused before anything is looked up.
    """
    if not chosen and is_network_path(path):
        raise network_path_error(path, "the session")
    if path.suffix.lower() not in DATA_SUFFIXES:
        raise DataFileError(f"{path} is not a data file Twofold reads (CSV, TSV, TXT or XLSX); "
                            "choose the data file of the analysis.")
    try:
        resolved = path.resolve(strict=True)
    except (OSError, RuntimeError):
        raise DataFileError(f"The data file {path} does not exist; give its new place with --data.") from None
    if not resolved.is_file():
        raise DataFileError(f"{path} is not an ordinary file; give the data file with --data.")
    return resolved


def missing_columns_error(notices, path) -> ColumnError | None:
    """One ColumnError naming every missing column among ``notices``, or None."""
    names = [n.subjects[0] for n in notices if n.code == "column_missing"]
    if not names:
        return None
    shown = ", ".join(f"'{c}'" for c in names[:8]) + (" ..." if len(names) > 8 else "")
    return ColumnError(f"{Path(path).name} lacks {'the column' if len(names) == 1 else 'the columns'} {shown} that "
                       "the saved analysis uses; rename them back or choose an extract with the same columns.")


# ---------------------------------------------------------------------------
# checking
# ---------------------------------------------------------------------------


def _type_name(v) -> str:
    return {str: "text", bool: "true/false", int: "a number", float: "a number", list: "a list",
            dict: "an object", type(None): "null"}.get(type(v), type(v).__name__)


class _Checker:
    """Checks one session, raising one sentence at the first problem."""

    def __init__(self, path):
        self.path = path or "(unsaved)"

    def fail(self, what):
        raise session_file_error(self.path, what)

    def text(self, v, where, cap=MAX_STRING, empty=False):
        if not isinstance(v, str):
            self.fail(f"'{where}' should be text, not {_type_name(v)}")
        if len(v) > cap:
            self.fail(f"'{where}' is {len(v):,} characters long, more than the {cap:,} allowed")
        if not empty and not v.strip():
            self.fail(f"'{where}' is empty")
        if "\x00" in v:
            self.fail(f"'{where}' holds a NUL character")
        return v

    def name(self, v, where):
        if not isinstance(v, str):
            self.fail(f"{where} should be a column name (text), not {_type_name(v)}")
        return self.text(v, where, MAX_NAME)

    def names(self, v, where, cap=MAX_PREDICTORS, empty_ok=True):
        if not isinstance(v, list):
            self.fail(f"'{where}' should be a list of column names, not {_type_name(v)}")
        if len(v) > cap:
            self.fail(f"'{where}' lists {len(v):,} items, more than the {cap:,} allowed")
        if not v and not empty_ok:
            self.fail(f"'{where}' is empty")
        for item in v:
            self.name(item, f"an entry of '{where}'")
        if len(set(v)) != len(v):
            self.fail(f"'{where}' names a column twice")
        return v

    def value(self, v, where, allow_none=True):
        """An outcome value or level: text, a finite number or (when allowed) null."""
        if v is None and allow_none:
            return v
        if isinstance(v, bool) or not isinstance(v, (str, int, float)):
            self.fail(f"'{where}' should be text or a number, not {_type_name(v)}")
        if isinstance(v, str):
            self.text(v, where, MAX_NAME, empty=True)
        return v

    def boolean(self, v, where):
        if not isinstance(v, bool):
            self.fail(f"'{where}' should be true or false, not {_type_name(v)}")
        return v

    def integer(self, v, where, low, high):
        if isinstance(v, bool) or not isinstance(v, int):
            self.fail(f"'{where}' should be a whole number, not {_type_name(v)}")
        if not low <= v <= high:
            self.fail(f"'{where}' is {v}, outside {low} to {high}")
        return v

    def number(self, v, where, allow_none=False):
        if v is None and allow_none:
            return v
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            self.fail(f"'{where}' should be a number, not {_type_name(v)}")
        if not math.isfinite(float(v)) or abs(float(v)) > MAX_ABS_NUMBER:
            self.fail(f"'{where}' is not an ordinary finite number")
        return v

    def obj(self, v, where):
        if not isinstance(v, dict):
            self.fail(f"'{where}' should be an object, not {_type_name(v)}")
        return v

    def fields(self, v, keys, owner, missing):
        """Fail at the first field of ``v`` not in ``keys`` ("{owner} the unknown field ..."), then at the
        first of ``keys`` not in ``v`` (``missing`` with ``{}`` for its name)."""
        unknown = [k for k in v if k not in keys]
        if unknown:
            self.fail(f"{owner} the unknown field '{str(unknown[0])[:40]}'")
        absent = [k for k in keys if k not in v]
        if absent:
            self.fail(missing.format(absent[0]))


def _check_imputation(c, session) -> None:
    """``impute`` (null, or copies 2 to 100), ``auxiliary`` (column names), ``impute_anyway`` (true or false)."""
    if session["impute"] is not None:
        c.integer(session["impute"], "impute", 2, 100)
    c.names(session["auxiliary"], "auxiliary", cap=MAX_PREDICTORS)
    c.boolean(session["impute_anyway"], "impute_anyway")


def _validate_net_benefit_optimism(c, v: dict) -> None:
    """A kept bootstrap's decision-curve thresholds (risks in (0, 1), rising) and the optimism at each: lists of
    the same length, at most the number of thresholds a decision curve may have."""
    from twofold.core.assessing.decision import MAX_THRESHOLDS

    thresholds, optimism = v.get("net_benefit_thresholds"), v.get("net_benefit_optimism")
    if not (isinstance(thresholds, list) and isinstance(optimism, list)) or len(thresholds) != len(optimism) \
            or not 0 < len(thresholds) <= MAX_THRESHOLDS:
        c.fail("'validation_result' should give the decision-curve thresholds and their optimism as two lists of "
               "the same length")
    for t in thresholds:
        c.number(t, "a decision-curve threshold of 'validation_result'")
        if not 0 < t < 1:
            c.fail("'validation_result' has a decision-curve threshold outside 0 to 1")
    if any(b <= a for a, b in zip(thresholds, thresholds[1:])):
        c.fail("'validation_result' has decision-curve thresholds that do not rise")
    for x in optimism:
        if x is not None:
            c.number(x, "a net-benefit optimism of 'validation_result'")


def validate_session(session, path=None) -> dict:
    """Check every field of a session (types, sizes, consistency); raise SessionFileError at the first problem."""
    c = _Checker(path)
    if not isinstance(session, dict):
        c.fail(f"it holds {_type_name(session)} where a session object was expected")
    if session.get("format") != FORMAT:
        if "format" not in session:
            c.fail("it has no 'format' marker, so it is not a Twofold session")
        c.fail(f"its format is {str(session.get('format'))[:40]!r}, not a Twofold session")
    version = session.get("schema_version")
    if isinstance(version, bool) or not isinstance(version, int):
        c.fail(f"'schema_version' should be a whole number, not {_type_name(version)}")
    if version != SCHEMA_VERSION:
        if isinstance(version, int) and version > SCHEMA_VERSION:
            raise SessionFileError(f"The session file {Path(path or '(unsaved)').name} has schema version {version}, "
                                   f"newer than this Twofold reads ({SCHEMA_VERSION}); update Twofold to open it.")
        c.fail(f"its schema version {version} is not one Twofold knows")
    for key, default in _spec_defaults().items():
        # A spec option added after a session was written takes its default (no effect).
        session.setdefault(key, default)
    session.setdefault("report", dict(REPORT_DEFAULTS))  # saved before reports had options: the defaults
    for key, default in LATER_DEFAULTS.items():
        session.setdefault(key, default)
    c.fields(session, KEYS, "it has", "the field '{}' is missing")

    c.text(session["saved_by"], "saved_by", 200)
    c.text(session["saved_at"], "saved_at", 100)
    data = c.text(session["data"], "data")
    if re.match(r"^[a-zA-Z][a-zA-Z0-9+.-]*://", data) or data.lower().startswith(("file:", "data:")):
        c.fail("'data' is a web address or URL, but the data must be a file on this computer")
    if Path(data).suffix.lower() not in DATA_SUFFIXES:
        c.fail(f"'data' names {Path(data).name[:60]!r}, which is not a data file Twofold reads (CSV, TSV, TXT or XLSX)")
    sha = c.text(session["data_sha256"], "data_sha256", 64)
    if not re.fullmatch(r"[0-9a-f]{64}", sha):
        c.fail("'data_sha256' is not a SHA-256 checksum")
    c.integer(session["data_rows"], "data_rows", 0, MAX_ROWS)
    if session["sheet"] is not None:
        c.text(session["sheet"], "sheet", MAX_NAME)
    outcome = c.name(session["outcome"], "'outcome'")
    predictors = c.names(session["predictors"], "predictors")
    c.value(session["event"], "event")
    if session["smaller"] is not None:
        smaller = c.names(session["smaller"], "smaller")
        extra = [p for p in smaller if p not in predictors]
        if extra:
            c.fail(f"the smaller model's '{extra[0][:60]}' is not among the predictors")
    refs = c.obj(session["references"], "references")
    if len(refs) > MAX_PREDICTORS:
        c.fail("'references' has more entries than allowed")
    for k, v in refs.items():
        c.name(k, "a key of 'references'")
        c.value(v, f"references of {k[:60]}", allow_none=False)
    roles = c.obj(session["roles"], "roles")
    if len(roles) > MAX_PREDICTORS:
        c.fail("'roles' has more entries than allowed")
    for k, v in roles.items():
        c.name(k, "a key of 'roles'")
        if v not in ROLE_VALUES:
            c.fail(f"the role of '{k[:60]}' is {str(v)[:40]!r}, not one of {', '.join(ROLE_VALUES)}")
    c.boolean(session["firth"], "firth")
    c.boolean(session["profile_ci"], "profile_ci")
    if session["threshold"] is not None:
        t = c.number(session["threshold"], "threshold")
        if not 0 < t < 1:
            c.fail("'threshold' should be a risk between 0 and 1")
    splines = c.obj(session["splines"], "splines")
    if len(splines) > MAX_PREDICTORS:
        c.fail("'splines' has more entries than allowed")
    for k, v in splines.items():
        c.name(k, "a key of 'splines'")
        if isinstance(v, bool) or v not in (3, 4, 5):
            c.fail(f"the spline of '{k[:60]}' should have 3, 4 or 5 knots")
    interactions = c.names(session["interactions"], "interactions")
    for t in interactions:
        if len([part for part in t.split(":") if part.strip()]) != 2:
            c.fail(f"the interaction {t[:60]!r} should name two predictors as A:B")
    if session["validate"] is not None:
        c.integer(session["validate"], "validate", 1, 100_000)
    if session["seed"] is not None:
        c.integer(session["seed"], "seed", -(2 ** 63), 2 ** 63 - 1)
    c.names(session["rows_complete_in"], "rows_complete_in", cap=MAX_PREDICTORS)
    report = c.obj(session["report"], "report")
    for key in REPORT_TEXT_LIMITS:
        report.setdefault(key, "")  # saved before reports had a title, authors and a question
    c.fields(report, REPORT_DEFAULTS, "the report options have", "the report option '{}' is missing")
    for key, cap in REPORT_TEXT_LIMITS.items():
        c.text(report[key], key, cap, empty=True)
    c.integer(report["suppress_up_to"], "suppress_up_to", 1, MAX_THRESHOLD)
    c.boolean(report["list_records"], "list_records")
    missing = c.obj(session["missing"], "missing")
    if len(missing) > MAX_PREDICTORS:
        c.fail("'missing' names more columns than allowed")
    for column, values in missing.items():
        c.name(column, "a column of 'missing'")
        c.names(values, f"the values that mean missing in {column[:40]!r}", cap=100)
    _check_imputation(c, session)
    for key in SPEC_KEYS:
        if key not in CHECKED_SPEC_KEYS + ("missing",):
            _plain_json(c, session[key], key)
    ladder = session["ladder"]
    if not isinstance(ladder, list):
        c.fail(f"'ladder' should be a list of models, not {_type_name(ladder)}")
    if not ladder or len(ladder) > MAX_LADDER:
        c.fail(f"'ladder' should list between 1 and {MAX_LADDER} models")
    for rung in ladder:
        c.names(rung, "ladder")
    chosen = c.integer(session["chosen"], "chosen", 0, len(ladder) - 1)
    parents = session["parents"]
    if parents is not None:
        if not isinstance(parents, list) or len(parents) != len(ladder):
            c.fail("'parents' should list one entry per model of the ladder")
        for i, p in enumerate(parents):
            if p is not None:
                c.integer(p, "parents", 0, max(i - 1, 0))
                if p >= i:
                    c.fail("'parents' names a model built after the one it says it came from")
    if session["validation_result"] is not None:
        v = c.obj(session["validation_result"], "validation_result")
        if len(v) > 40:
            c.fail("'validation_result' has more entries than allowed")
        for k, x in v.items():
            c.name(k, "a key of 'validation_result'")
            if k == "refit_method":
                from twofold.core.models.modelling import REFIT_METHODS

                if x not in REFIT_METHODS:
                    c.fail("'validation_result' names a way of refitting that Twofold does not use")
            elif k in ("net_benefit_thresholds", "net_benefit_optimism"):
                _validate_net_benefit_optimism(c, v)
            elif x is not None:
                c.number(x, f"validation_result of {k[:40]}")
    _validate_shrinkage(c, session["shrinkage"])
    if set(ladder[chosen]) != set(predictors):
        c.fail("the chosen model of the ladder does not have the session's predictors")
    if outcome in predictors:
        c.fail("the outcome is also listed as a predictor")
    _validate_model(c, session["model"], outcome, predictors)
    return session


def _validate_shrinkage(c: _Checker, shrinkage) -> None:
    """``shrinkage``: null, or {factor (above 0, below 1), intercept, coefficients [{name, estimate}], reading, note}."""
    if shrinkage is None:
        return
    c.obj(shrinkage, "shrinkage")
    c.fields(shrinkage, ("factor", "intercept", "coefficients", "reading", "note"), "'shrinkage' has",
             "the shrinkage field '{}' is missing")
    factor = c.number(shrinkage["factor"], "the shrinkage factor")
    if not 0 < factor < 1:
        c.fail("the shrinkage factor should lie between 0 and 1")
    c.number(shrinkage["intercept"], "the shrunk intercept")
    coefs = shrinkage["coefficients"]
    if not isinstance(coefs, list) or len(coefs) > MAX_PARAMETERS:
        c.fail(f"the shrunk coefficients should be a list of at most {MAX_PARAMETERS:,} entries")
    for entry in coefs:
        c.fields(c.obj(entry, "a shrunk coefficient"), ("name", "estimate"), "a shrunk coefficient has",
                 "a shrunk coefficient's field '{}' is missing")
        c.text(entry["name"], "a shrunk coefficient's name", MAX_NAME)
        c.number(entry["estimate"], "a shrunk coefficient", allow_none=True)
    c.text(shrinkage["reading"], "the shrinkage reading", empty=True)
    c.text(shrinkage["note"], "the shrinkage note", empty=True)


def _plain_json(c: _Checker, value, where: str) -> None:
    """A generic check for spec fields without a dedicated one: plain JSON within the caps."""
    if value is None or isinstance(value, bool):
        return
    if isinstance(value, (int, float)):
        c.number(value, where)
    elif isinstance(value, str):
        c.text(value, where, empty=True)
    elif isinstance(value, list):
        if len(value) > MAX_LEVELS:
            c.fail(f"'{where}' lists more items than allowed")
        for v in value:
            _plain_json(c, v, where)
    elif isinstance(value, dict):
        if len(value) > MAX_LEVELS:
            c.fail(f"'{where}' has more entries than allowed")
        for k, v in value.items():
            c.text(k, f"a key of '{where}'", MAX_NAME)
            _plain_json(c, v, where)
    else:
        c.fail(f"'{where}' holds {_type_name(value)}")


def _validate_model(c: _Checker, model, outcome, predictors) -> None:
    c.obj(model, "model")
    keys = ("outcome", "event", "method", "names", "coefficients", "covariance", "terms")
    c.fields(model, keys, "the model has", "the model's field '{}' is missing")
    if c.name(model["outcome"], "the model's 'outcome'") != outcome:
        c.fail("the model's outcome is not the session's outcome")
    c.value(model["event"], "the model's event")
    c.text(model["method"], "the model's method", 100)
    names = model["names"]
    if not isinstance(names, list) or not names or len(names) > MAX_PARAMETERS:
        c.fail(f"the model's 'names' should list 1 to {MAX_PARAMETERS} coefficients")
    for n in names:
        c.text(n, "a coefficient name", 2 * MAX_NAME + 2)
    if len(set(names)) != len(names):
        c.fail("the model names a coefficient twice, which no fit does")
    if names[0] != "intercept":
        c.fail("the model's first coefficient is not the intercept")
    k = len(names)
    coef = model["coefficients"]
    if not isinstance(coef, list) or len(coef) != k:
        c.fail("the model's 'coefficients' do not match its names")
    for v in coef:
        c.number(v, "a coefficient", allow_none=True)
    cov = model["covariance"]
    if not isinstance(cov, list) or len(cov) != k:
        c.fail("the model's 'covariance' is not a square table matching its coefficients")
    for row in cov:
        if not isinstance(row, list) or len(row) != k:
            c.fail("the model's 'covariance' is not a square table matching its coefficients")
        for v in row:
            c.number(v, "a covariance entry", allow_none=True)
    _fit_could_make_covariance(c, cov)
    terms = model["terms"]
    if not isinstance(terms, list) or len(terms) > MAX_PREDICTORS:
        c.fail("the model's 'terms' should be a list of predictors")
    made = ["intercept"]
    seen = {}
    for t in terms:
        c.obj(t, "a model term")
        if set(t) != set(TERM_KEYS):
            c.fail("a model term does not have exactly the fields " + ", ".join(TERM_KEYS))
        col = c.text(t["column"], "a model term's column", 2 * MAX_NAME + 1)
        kind = t["kind"]
        if kind not in ("numeric", "factor", "spline", "interaction"):
            c.fail(f"the kind of term '{col[:60]}' should be numeric, factor, spline or interaction")
        levels = t["levels"]
        if not isinstance(levels, list) or len(levels) > MAX_LEVELS:
            c.fail(f"the levels of '{col[:60]}' should be a list of at most {MAX_LEVELS:,} groups")
        for v in levels:
            c.value(v, f"a level of '{col[:60]}'", allow_none=kind == "interaction")
        if kind == "factor" and (len({repr(v) for v in levels}) != len(levels)
                                 or repr(t["reference"]) in {repr(v) for v in levels}):
            c.fail(f"the groups of '{col[:60]}' repeat a name, which no fit does")
        if kind in ("numeric", "spline"):
            if t["reference"] is not None or (kind == "numeric" and levels):
                c.fail(f"the numeric term '{col[:60]}' has groups")
            rng = t["range"]
            if rng is not None:
                if not isinstance(rng, list) or len(rng) != 2:
                    c.fail(f"the range of '{col[:60]}' should be two numbers")
                lo, hi = (c.number(v, f"the range of '{col[:60]}'") for v in rng)
                if lo > hi:
                    c.fail(f"the range of '{col[:60]}' runs backwards")
        elif t["range"] is not None:
            c.fail(f"the term '{col[:60]}' has a range but is not a number")
        if kind == "spline":
            knots = t["knots"]
            if not isinstance(knots, list) or not 3 <= len(knots) <= 5 or len(levels) != len(knots) - 2:
                c.fail(f"the spline '{col[:60]}' should have 3 to 5 knots and one label per non-linear column")
            values = [c.number(k, f"a knot of '{col[:60]}'") for k in knots]
            if any(b <= a for a, b in zip(values, values[1:])):
                c.fail(f"the knots of '{col[:60]}' are not increasing")
        elif t["knots"] is not None:
            c.fail(f"the term '{col[:60]}' has knots but is not a spline")
        if kind == "factor":
            c.value(t["reference"], f"the reference of '{col[:60]}'", allow_none=False)
        if kind == "interaction":
            of = t["of"]
            if not isinstance(of, list) or len(of) != 2 or f"{of[0]}:{of[1]}" != col:
                c.fail(f"the interaction '{col[:60]}' should name its two predictors")
            if any(seen.get(x) not in ("numeric", "factor", "spline") for x in of):
                c.fail(f"the interaction '{col[:60]}' comes before or without its predictors")
            widths = [1 if seen[x] != "factor" else len(next(tt for tt in terms if tt["column"] == x)["levels"])
                      for x in of]
            if len(levels) != widths[0] * widths[1]:
                c.fail(f"the interaction '{col[:60]}' has the wrong number of columns")
        elif t["of"] is not None:
            c.fail(f"the term '{col[:60]}' names predictors but is not an interaction")
        seen[col] = kind
        if kind == "numeric":
            made.append(col)
        elif kind == "spline":
            made.append(col)
            made.extend(f"{col}[{lvl}]" for lvl in levels)
        else:
            made.extend(col if lvl is None else f"{col}[{lvl}]" for lvl in levels)
    if [t["column"] for t in terms] != list(predictors):
        c.fail("the model's terms are not the session's predictors")
    stray = [n for n in names if n not in made]
    if stray:
        c.fail(f"the model names a coefficient '{stray[0][:60]}' that its terms do not make")
    _fit_could_make_coefficients(c, names, coef, terms)


#: The largest change of log-odds one coefficient may make across the values a session saw.  A fit's
#: risks are 0 or 1 to double precision once the log-odds pass about 37, and a fit that separates the
#: outcome stops within 35 Newton steps, far below this; only an edited file holds more.
MAX_LOG_ODDS_SPAN = 1e6


def _fit_could_make_covariance(c: _Checker, cov) -> None:
    """A covariance matrix a fit can produce: symmetric, no negative variance, correlations within -1 to 1."""
    k = len(cov)
    for i in range(k):
        vi = cov[i][i]
        if vi is not None and vi < 0:
            c.fail("the model's covariance holds a negative variance, which no fit produces")
        for j in range(i):
            a, b, vj = cov[i][j], cov[j][i], cov[j][j]
            if a is None or b is None:
                continue
            if abs(a - b) > 1e-6 * max(abs(a), abs(b), 1e-300):
                c.fail("the model's covariance is not symmetric, which no fit produces")
            if vi is not None and vj is not None and abs(a) > (1 + 1e-6) * math.sqrt(vi * vj) + 1e-300:
                c.fail("the model's covariance implies a correlation beyond -1 to 1, which no fit produces")


def _fit_could_make_coefficients(c: _Checker, names, coef, terms) -> None:
    """No coefficient changes the log-odds by more than :data:`MAX_LOG_ODDS_SPAN` across the saved values.

    Each coefficient is judged by the width of its column's saved range (1 for a group's indicator, the
    product of the widths for an interaction of numbers); the intercept by the most the others can add.
    """
    kinds = {t["column"]: t["kind"] for t in terms}
    span, size = {}, {}  # per numeric column: the width and the largest size of its saved range
    scale = {}  # per coefficient name: (width, largest size) of the column it multiplies
    for t in terms:
        col, kind = t["column"], t["kind"]
        if kind in ("numeric", "spline") and t["range"] is not None:
            lo, hi = (float(v) for v in t["range"])
            span[col], size[col] = hi - lo, max(abs(lo), abs(hi))
            for name in [col] + ([f"{col}[{lvl}]" for lvl in t["levels"]] if kind == "spline" else []):
                scale[name] = (span[col], size[col])
        elif kind == "factor":
            scale.update({f"{col}[{lvl}]": (1.0, 1.0) for lvl in t["levels"]})
        elif kind == "interaction" and all(kinds.get(x) == "factor" or x in span for x in t["of"]):
            width = math.prod(span.get(x, 1.0) for x in t["of"])
            most = math.prod(size.get(x, 1.0) for x in t["of"])
            scale.update({col if lvl is None else f"{col}[{lvl}]": (width, most) for lvl in t["levels"]})
    reach = 0.0  # the most the coefficients other than the intercept add to the log-odds at saved values
    for name, b in zip(names[1:], coef[1:]):
        if b is None or name not in scale:
            continue
        width, most = scale[name]
        if abs(b) * width > MAX_LOG_ODDS_SPAN:
            c.fail(f"the coefficient of '{name[:60]}' ({b:.3g}) changes the log-odds by more than "
                   f"{MAX_LOG_ODDS_SPAN:.0e} across the values seen, which no fit produces")
        reach += abs(b) * most
    if coef[0] is not None and len(scale) == len(names) - 1 and abs(coef[0]) > MAX_LOG_ODDS_SPAN + reach:
        c.fail(f"the intercept ({coef[0]:.3g}) is far beyond what a fit produces")


# ---------------------------------------------------------------------------
# names that moved to twofold.core.outputs.storage and twofold.core.outputs.autosave
# ---------------------------------------------------------------------------

#: Reading and writing files, in twofold.core.outputs.storage.
_STORAGE_NAMES = ("atomic_write_text", "file_sha256", "load_session", "save_session")
#: The autosave and recovery, in twofold.core.outputs.autosave.
_AUTOSAVE_NAMES = ("autosave", "autosave_path", "clean_exit", "discard_autosave", "lock_path", "recoverable",
                   "start_autosave")


def __getattr__(name: str):
    """Find the reading, writing and autosave functions in their own modules, so older imports keep working."""
    # Imported here, not at the top: those modules import this one.
    if name in _STORAGE_NAMES:
        from twofold.core.outputs import storage as module
    elif name in _AUTOSAVE_NAMES:
        from twofold.core.outputs import autosave as module
    else:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(module, name)


def adapted_session(session: dict, model, data, rows_read: int) -> dict:
    """A session for a saved model adapted to a new extract: the same analysis, the adapted coefficients.

    The data file becomes the new extract (with its checksum and row count);
    a bootstrap validation kept in the old session described the old model
    and is dropped.  ``predict`` and ``rerun --frozen`` then use the adapted
    coefficients; a plain ``rerun`` refits the analysis as before.
    """
    import datetime as _dt

    from twofold import __version__
    from twofold.core.outputs.storage import file_sha256

    data = Path(os.fspath(data)).resolve()
    out = dict(session)
    out.update({
        "saved_by": f"twofold {__version__}",
        "saved_at": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "data": str(data),
        "data_sha256": file_sha256(data, reuse=True),
        "data_rows": int(rows_read),
        "model": model.as_dict(),
        "validation_result": None,
    })
    validate_session(out)
    return out

