"""The shared figures: one style for the window and the reports, drawn without Qt or pyplot."""

from __future__ import annotations

import ast
import io
import json
import os
import subprocess
import sys
import zlib
from pathlib import Path

import numpy as np
import pytest

from twofold.core.analysis import AnalysisSpec, run_analysis
from twofold.core.models.modelling import effect_curve
from twofold.core.outputs.report import Figure, build_report
from twofold.render import figures
from twofold.render.report_html import FIGURE_DPI, FIGURE_SIZE, report_figure_png

ROOT = Path(__file__).resolve().parents[2]
SRC = ROOT / "src"
READMIT = ROOT / "sample_studies" / "readmission_synthetic.csv"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def result():
    return run_analysis(AnalysisSpec(data=str(READMIT), outcome="readmitted_30d",
                                     predictors=["age", "sex", "prior_admissions"]))


def _png_chunks(png: bytes) -> list[tuple[bytes, bytes]]:
    """(type, data) of every chunk of a PNG file (PNG specification, section 5.3)."""
    assert png[:8] == PNG_SIGNATURE
    out, i = [], 8
    while i < len(png):
        n = int.from_bytes(png[i:i + 4], "big")
        kind, data = png[i + 4:i + 8], png[i + 8:i + 8 + n]
        assert zlib.crc32(kind + data) == int.from_bytes(png[i + 8 + n:i + 12 + n], "big")
        out.append((kind, data))
        i += 12 + n
    return out


def _size(png: bytes) -> tuple[int, int]:
    head = dict(_png_chunks(png))[b"IHDR"]
    return int.from_bytes(head[:4], "big"), int.from_bytes(head[4:8], "big")


def _axes():
    fig = figures.new_figure()
    return fig.add_subplot()


def test_every_figure_is_a_png_of_the_asked_size_with_no_text_chunks(result):
    a = result.assessment
    curve = effect_curve(result.fit, "age")
    pngs = [
        figures.roc_figure(a.roc.fpr, a.roc.tpr, float(a.auc.auc)),
        figures.calibration_figure(a.groups.mean_predicted, a.groups.observed, a.groups.ci_low, a.groups.ci_high,
                                   smooth_predicted=a.smooth.predicted, smooth_observed=a.smooth.observed),
        figures.influence_figure(a.influence.cooks_distance, a.rows),
        figures.effect_figure(curve, None),
        figures.effect_figure(curve, 4, size=(5.0, 4.0), dpi=80),
    ]
    sizes = [_size(p) for p in pngs]
    w, h = figures.SIZE
    assert sizes[:4] == [(round(w * figures.DPI), round(h * figures.DPI))] * 4
    assert sizes[4] == (400, 320)
    for png in pngs:
        kinds = {k for k, _ in _png_chunks(png)}
        # No tEXt/iTXt/zTXt: no program name or link inside the picture.
        assert not kinds & {b"tEXt", b"iTXt", b"zTXt"}, kinds


def test_window_and_report_draw_with_one_style(result):
    a = result.assessment
    window = _axes()
    figures.draw_roc(window, a.roc.fpr, a.roc.tpr, 0.7)
    report = _axes()
    fig = next(b for b in build_report(result).blocks if isinstance(b, Figure) and b.kind == "roc")
    figures.draw_figure(report, fig.kind, fig.data, title=False, square=True)

    def look(ax):
        return [(ln.get_color(), ln.get_linestyle(), ln.get_linewidth(), ln.get_label()) for ln in ax.get_lines()]

    assert [x[:3] for x in look(window)] == [x[:3] for x in look(report)]
    assert look(window)[1][0] == figures.BLUE and look(window)[0][0] == figures.BLACK
    assert window.get_xlabel() == report.get_xlabel() and window.get_ylabel() == report.get_ylabel()
    # Only the layout differs: the window titles its plot, the report squares it and captions it instead.
    assert window.get_title() == "ROC curve" and report.get_title() == ""
    assert report.get_aspect() == 1.0 and window.get_aspect() == "auto"


def test_calibration_says_what_it_leaves_out():
    ax = _axes()
    figures.draw_calibration(ax, [0.1, 0.3], [0.12, 0.28], [0.08, 0.2], [0.16, 0.36], hidden_groups=2)
    texts = [t.get_text() for t in ax.texts]
    assert any("2 group(s) with suppressed" in t for t in texts)
    assert ax.get_xlim() == (0.0, pytest.approx(0.36 * 1.1))
    ax = _axes()
    figures.draw_calibration(ax, smooth_predicted=np.linspace(0, 0.5, 50), smooth_observed=np.linspace(0, 0.5, 50),
                             smooth_unsteady=True)
    assert [t.get_text() for t in ax.texts] == [figures.SMOOTH_UNSTEADY_TEXT]
    ax = _axes()
    figures.draw_calibration(ax)  # nothing to show: only the diagonal
    assert len(ax.get_lines()) == 1 and not ax.texts


def test_influence_marks_the_largest_distances():
    d = np.array([0.1, np.nan, 0.5, 0.3, 0.5, 0.0])
    assert figures.largest_first(d, 3).tolist() == [2, 4, 3]  # ties in row order, undefined last
    assert figures.largest_first(d, 10).tolist()[-1] == 1
    ax = _axes()
    figures.draw_influence(ax, d, np.arange(6), k=2)
    marked = ax.get_lines()[1]
    assert marked.get_xdata().tolist() == [3.0, 5.0]  # rows counted from 1


def test_effect_ticks_are_plain_numbers(result):
    curve = effect_curve(result.fit, "age")
    ax = _axes()
    figures.draw_effect(ax, curve, None)
    ax.figure.canvas.draw()
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert "1" in labels and all("^" not in t and "$" not in t for t in labels)
    assert ax.get_yscale() == "log" and ax.get_title() == f"Against age = {curve['reference']:g}"


def test_thinning_keeps_the_ends_and_the_asked_points():
    idx = figures.thin(10_000, keep=(0, 9_999, 1234))
    assert len(idx) <= figures.MAX_POINTS + 3 and {0, 9_999, 1234} <= set(idx.tolist())
    assert figures.thin(10).tolist() == list(range(10))


def test_unknown_kind_is_refused():
    with pytest.raises(ValueError, match="no_such_plot"):
        figures.figure_png("no_such_plot", {})


def test_report_figures_are_drawn_by_the_shared_module(result):
    rep = build_report(result)
    found = [b for b in rep.blocks if isinstance(b, Figure)]
    assert [f.kind for f in found] == ["roc", "calibration"]
    for f in found:
        assert set(f.data) <= set(figures.DRAWERS[f.kind].__code__.co_varnames)
        json.dumps(f.data)  # plain numbers only
        png = report_figure_png(f.kind, f.data)
        assert _size(png) == (round(FIGURE_SIZE[0] * FIGURE_DPI), round(FIGURE_SIZE[1] * FIGURE_DPI))


def test_window_figures_come_from_the_shared_module(result):
    from twofold.gui import figures as window_figures

    out = window_figures.assessment_figures(result.assessment)
    assert set(out) == {"roc", "calibration", "influence"}
    a = result.assessment
    assert out["roc"] == figures.roc_figure(a.roc.fpr, a.roc.tpr, float(a.auc.auc))


def test_window_pixels_are_the_pictures_pixels(result):
    """The window gets each figure as pixels, without a PNG; decoding the PNG of the same drawing with Pillow
    (outside the project) gives the same pixels, and so does the PNG made from the pixels."""
    from PIL import Image

    from twofold.render.assessed import assessment_figures

    a = result.assessment
    raw = assessment_figures(a, raw=True)
    png = assessment_figures(a)
    assert set(raw) == set(png) == {"roc", "calibration", "influence"}
    for key in raw:
        decoded = Image.open(io.BytesIO(png[key])).convert("RGBA")
        assert (raw[key].width, raw[key].height) == decoded.size, key
        assert raw[key].rgba == decoded.tobytes(), key
        assert Image.open(io.BytesIO(raw[key].png())).convert("RGBA").tobytes() == raw[key].rgba, key
    # A different drawing gives different pixels: the comparison above can fail.
    other = figures.roc_figure(a.roc.fpr[::-1], a.roc.tpr, float(a.auc.auc), raw=True)
    assert other.rgba != raw["roc"].rgba


def _imports(path: Path) -> set[str]:
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
            names |= {f"{node.module}.{a.name}" for a in node.names}
    return names


@pytest.mark.parametrize("path", sorted((SRC / "twofold").rglob("*.py")), ids=lambda p: p.relative_to(SRC).as_posix())
def test_no_module_uses_pyplot(path):
    assert not {n for n in _imports(path) if n.startswith("matplotlib.pyplot") or n == "pylab"}


@pytest.mark.parametrize("path", sorted((SRC / "twofold" / "render").glob("*.py")), ids=lambda p: p.name)
def test_render_imports_no_qt_and_no_window(path):
    bad = {n for n in _imports(path) if n.split(".")[0] in ("PySide6", "shiboken6") or n.startswith("twofold.gui")}
    assert not bad


def test_importing_render_loads_neither_qt_nor_matplotlib(tmp_path):
    code = ("import json, sys\n"
            "import twofold.render.figures, twofold.render.report_html, twofold.render.report_pdf, "
            "twofold.render.report_writer\n"
            "print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('PySide6', 'shiboken6', 'matplotlib'))))\n")
    env = {**os.environ, "TWOFOLD_HOME": str(tmp_path)}
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, env=env)
    assert run.returncode == 0, run.stderr
    assert json.loads(run.stdout.strip().splitlines()[-1]) == []


def test_png_bytes_of_a_blank_figure_read_back():
    from matplotlib.image import imread

    fig = figures.new_figure(size=(1.0, 0.5), dpi=40)
    pixels = imread(io.BytesIO(figures.png_bytes(fig)), format="png")
    assert pixels.shape[:2] == (20, 40)
