"""Writing a report file: the content built by the core, laid out as HTML or PDF, written atomically."""

from __future__ import annotations

import io
import os
from pathlib import Path

from twofold.core.errors import DataFileError
from twofold.core.outputs.privacy import DEFAULT_THRESHOLD
from twofold.core.outputs.report import build_report
from twofold.core.outputs.storage import atomic_write_bytes, atomic_write_text, refuse_writing_over, write_failure
from twofold.render.report_html import render_html
from twofold.render.report_pdf import render_pdf


def _data_path(result):
    return result.data if getattr(result, "frozen", False) else result.spec.data


def write_report(result, path, ladder=None, suppress_below: int = DEFAULT_THRESHOLD,
                 include_records: bool = False, details: dict | None = None) -> Path:
    """Write the report of an analysis as ``.html`` or ``.pdf`` (chosen by the suffix).

    Parameters
    ----------
    result : AnalysisResult or FrozenResult
    path : path
        Ends in .html/.htm or .pdf.
    ladder : Ladder or list of lists of str, optional
    suppress_below : int
        Counts of 1 up to this many people are suppressed (default 10).
    include_records : bool
        Also list the row numbers of the most influential records.
    details : dict, optional
        ``title``, ``authors`` and ``question`` for the first page (other keys ignored).

    Raises
    ------
    DataFileError
        Another suffix, the data file itself as the target, or a folder that
        cannot be written.
    """
    path = Path(os.fspath(path))
    refuse_writing_over([path], [_data_path(result)])
    suffix = path.suffix.lower()
    if suffix not in (".html", ".htm", ".pdf"):
        raise DataFileError(f"Twofold writes reports as .html or .pdf, not '{path.suffix or path.name}'; "
                            "end the file name with .html or .pdf.")
    rep = build_report(result, ladder=ladder, suppress_below=suppress_below, include_records=include_records,
                       details=details)
    try:
        if suffix == ".pdf":
            buffer = io.BytesIO()
            render_pdf(rep, buffer)
            atomic_write_bytes(path, buffer.getvalue())
        else:
            atomic_write_text(path, render_html(rep))
    except OSError as exc:
        raise write_failure(path, exc, "the report") from None
    return path
