"""Every figure's words fit inside it, and the influence plot's legend covers no record.

Checked with matplotlib's own renderer: the window extent of each title, axis label, tick label and
legend entry after drawing, against the figure's bounds (and, for the legend, against the plotted points).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from twofold.core.models.modelling import effect_curve
from twofold.core.models.study import Study
from twofold.render import figures

SAMPLE = Path(__file__).resolve().parents[2] / "sample_studies" / "readmission_synthetic.csv"


@pytest.fixture(scope="module")
def fit():
    st = Study.from_file(SAMPLE)
    st.set_outcome("readmitted_30d")
    st.set_spline("age", 4)
    return st.fit(["age", "sex", "length_of_stay"])


def drawn(draw):
    fig = figures.new_figure(figures.SIZE, figures.DPI)
    ax = fig.add_subplot()
    draw(ax)
    fig.canvas.draw()
    return fig, ax


def texts_outside(fig, ax):
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    def shown_ticks(axis, limits):
        low, high = sorted(limits)
        return [t.label1 for t in axis.get_major_ticks() if low - 1e-9 <= t.get_loc() <= high + 1e-9]

    artists = [ax.title, ax.xaxis.label, ax.yaxis.label, *shown_ticks(ax.xaxis, ax.get_xlim()),
               *shown_ticks(ax.yaxis, ax.get_ylim())]
    legend = ax.get_legend()
    if legend is not None:
        artists += list(legend.get_texts())
    out = []
    for a in artists:
        if not a.get_visible() or not a.get_text():
            continue
        e = a.get_window_extent(renderer)
        if e.x0 < box.x0 - 0.5 or e.y0 < box.y0 - 0.5 or e.x1 > box.x1 + 0.5 or e.y1 > box.y1 + 0.5:
            out.append(a.get_text())
    return out


def test_no_word_of_any_figure_is_cut_off(fit):
    from twofold.core.assessing.assessment import assess

    a = assess(None, fit, drop_one=False)
    cal = a.groups
    cases = {
        "roc": lambda ax: figures.draw_roc(ax, a.roc.fpr, a.roc.tpr, a.auc.auc),
        "calibration": lambda ax: figures.draw_calibration(ax, cal.mean_predicted, cal.observed, cal.ci_low,
                                                           cal.ci_high),
        "influence": lambda ax: figures.draw_influence(ax, a.influence.cooks_distance, fit.design.rows),
        "effect": lambda ax: figures.draw_effect(ax, effect_curve(fit, "age"), 4),
    }
    for name, draw in cases.items():
        fig, ax = drawn(draw)
        assert texts_outside(fig, ax) == [], name


def test_the_influence_legend_covers_no_record(fit):
    from twofold.core.assessing.assessment import assess

    a = assess(None, fit, drop_one=False)
    fig, ax = drawn(lambda ax: figures.draw_influence(ax, a.influence.cooks_distance, fit.design.rows))
    legend = ax.get_legend().get_window_extent(fig.canvas.get_renderer())
    for line in ax.get_lines():
        points = ax.transData.transform(np.column_stack(line.get_data()))
        inside = ((points[:, 0] >= legend.x0) & (points[:, 0] <= legend.x1)
                  & (points[:, 1] >= legend.y0) & (points[:, 1] <= legend.y1))
        assert not inside.any()
