"""Names with a dollar sign are printed as written in the PDF, the HTML and the figures (no mathematics)."""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.render import figures
from twofold.render.report_writer import write_report

DOSE = r"dose $\frac$"
WARD = "ward $x$ y"
LEVEL = "east $2 $ wing"


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    rng = np.random.default_rng(11)
    n = 300
    dose = rng.normal(5, 2, n).round(1)
    ward = rng.choice([LEVEL, "west", "north"], n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(-1 + 0.2 * (dose - 5))))).astype(int)
    path = tmp_path_factory.mktemp("dollar") / "dollar.csv"
    pd.DataFrame({DOSE: dose, WARD: ward, "died": y}).to_csv(path, index=False)
    return run_analysis(AnalysisSpec(data=str(path), outcome="died", predictors=[DOSE, WARD], splines={DOSE: 3}))


def test_pdf_prints_dollar_names_literally(result, tmp_path):
    pdf = write_report(result, tmp_path / "r.pdf")  # `$\frac$` made matplotlib's mathtext fail before
    assert pdf.stat().st_size > 0
    if shutil.which("pdftotext"):
        text = subprocess.run(["pdftotext", "-raw", str(pdf), "-"], capture_output=True, text=True,
                              check=True).stdout
        assert DOSE in text and WARD in text and LEVEL in text


def test_html_prints_dollar_names_literally(result, tmp_path):
    html = write_report(result, tmp_path / "r.html").read_text(encoding="utf-8")
    assert DOSE in html and LEVEL in html


def test_figures_keep_dollar_signs():
    fig = figures.new_figure()
    ax = fig.add_subplot()
    curve = {"column": DOSE, "x": [1.0, 2.0, 3.0], "odds_ratio": [1.0, 1.5, 2.0], "low": [1.0, 1.2, 1.4],
             "high": [1.0, 1.9, 2.9], "reference": 1.0}
    figures.draw_effect(ax, curve, 3)
    assert ax.xaxis.label.get_text() == DOSE and not ax.xaxis.label.get_parse_math()
    assert all(not t.get_parse_math() for t in ax.get_legend().get_texts())
    png = figures.png_bytes(fig)  # drawing must not read the name as TeX (it raised before)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
