"""Laying a report out and writing it: the pictures come from the shared figures, files are written whole."""

from __future__ import annotations

import base64
import re
from pathlib import Path

import pytest

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.errors import DataFileError
from twofold.core.outputs.report import Figure, build_report
from twofold.render import report_writer
from twofold.render.report_html import render_html, report_figure_png
from twofold.render.report_pdf import render_pdf
from twofold.render.report_writer import write_report

ROOT = Path(__file__).resolve().parents[2]
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"


@pytest.fixture(scope="module")
def result():
    return run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d", predictors=["age", "sex"]))


def test_html_pictures_are_the_shared_figures(result):
    rep = build_report(result)
    html = render_html(rep)
    shown = [base64.b64decode(s) for s in re.findall(r'<img src="data:image/png;base64,([^"]+)"', html)]
    drawn = [report_figure_png(b.kind, b.data) for b in rep.blocks if isinstance(b, Figure)]
    assert len(shown) == 2 and shown == drawn


def test_pdf_draws_the_figures_as_vectors(result, tmp_path):
    path = tmp_path / "r.pdf"
    render_pdf(build_report(result), path)
    raw = path.read_bytes()
    assert raw[:5] == b"%PDF-" and b"/Subtype /Image" not in raw  # plots are drawings, not pictures


def test_a_failed_pdf_leaves_the_earlier_file_and_no_scraps(result, tmp_path, monkeypatch):
    path = tmp_path / "r.pdf"
    path.write_bytes(b"earlier report")

    def broken(rep, target):  # the PDF is laid out in memory, then written
        target.write(b"half a page")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(report_writer, "render_pdf", broken)
    with pytest.raises(DataFileError, match="the disk is full"):
        write_report(result, path)
    assert path.read_bytes() == b"earlier report"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.pdf"]


def test_a_failed_html_leaves_the_earlier_file_and_no_scraps(result, tmp_path, monkeypatch):
    path = tmp_path / "r.html"
    path.write_text("earlier report", encoding="utf-8")

    def broken(rep):
        raise OSError(13, "Permission denied")

    monkeypatch.setattr(report_writer, "render_html", broken)
    with pytest.raises(DataFileError, match="Permission denied"):
        write_report(result, path)
    assert path.read_text(encoding="utf-8") == "earlier report"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.html"]


def test_the_data_file_and_other_suffixes_are_refused(result, tmp_path):
    before = READMIT.read_bytes()
    with pytest.raises(DataFileError, match="data file itself"):
        write_report(result, READMIT)
    assert READMIT.read_bytes() == before
    with pytest.raises(DataFileError, match=r"\.html or \.pdf"):
        write_report(result, tmp_path / "r.txt")
    assert not list(tmp_path.iterdir())


def test_htm_is_written_as_html(result, tmp_path):
    path = write_report(result, tmp_path / "r.htm")
    assert path == tmp_path / "r.htm" and path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
