"""The plots of usefulness and validation, for the window and for reports alike.

* decision curve: net benefit of the model (and of a second model, and the
  optimism-corrected curve) beside treating everyone and treating no one;
* funnel plot: each unit's observed/expected events against its expected
  events, with 95% and 99.8% control limits;
* calibration with a band: the smoothed calibration curve of a saved model on
  new records with its pointwise 95% confidence band.

Each has ``draw_<kind>(ax, ...)`` and ``<kind>_figure(...)`` (PNG bytes), as
in :mod:`twofold.render.figures`, whose ``draw_figure`` knows these kinds too
(``"decision"``, ``"funnel"``, ``"calibration_band"``).  Plain numbers in,
no Qt.
"""

from __future__ import annotations

import numpy as np

from twofold.render.figures import (
    BLACK, BLUE, CURVE_WIDTH, DPI, GREY, ORANGE, REFERENCE_WIDTH, SIZE, VERMILLION, finish_axes as finish, new_figure,
    png_bytes,
)

#: A bluish green of the Okabe-Ito set, for a second model.
GREEN = "#009E73"


def draw_decision(ax, thresholds, model, treat_all, *, model_corrected=None, other=None, other_label: str = "",
                  title: bool = True) -> None:
    """Net benefit against threshold risk (in %): the model, treating everyone, treating no one (0)."""
    t = 100 * np.asarray(thresholds, float)
    m, a = np.asarray(model, float), np.asarray(treat_all, float)
    ax.axhline(0.0, color=BLACK, linewidth=REFERENCE_WIDTH, linestyle=":", label="treat no one")
    ax.plot(t, a, color=GREY, linewidth=1.2, linestyle="--", label="treat everyone")
    ax.plot(t, m, color=BLUE, linewidth=CURVE_WIDTH, label="this model")
    shown = [m]
    if model_corrected is not None:
        c = np.asarray(model_corrected, float)
        ax.plot(t, c, color=VERMILLION, linewidth=1.4, linestyle="-.", label="this model, corrected for optimism")
        shown.append(c)
    if other is not None:
        o = np.asarray(other, float)
        ax.plot(t, o, color=GREEN, linewidth=1.4, linestyle=(0, (5, 2)), marker="o", markevery=max(len(t) // 8, 1),
                markersize=3, label=other_label or "second model")
        shown.append(o)
    top = max(float(np.nanmax(np.concatenate(shown + [a[:1]]))), 0.01)
    ax.set_ylim(-0.25 * top, 1.1 * top)
    ax.set_xlim(float(t[0]), float(t[-1]) if t[-1] > t[0] else float(t[0]) + 1)
    ax.set_xlabel("Threshold risk (%)")
    ax.set_ylabel("Net benefit (per person)")
    ax.legend(loc="upper right", fontsize="x-small", frameon=False)
    finish(ax, "Decision curve" if title else None, False)


def decision_figure(thresholds, model, treat_all, *, model_corrected=None, other=None, other_label: str = "",
                    size=SIZE, dpi: float = DPI, title: bool = True) -> bytes:
    fig = new_figure(size, dpi)
    draw_decision(fig.add_subplot(), thresholds, model, treat_all, model_corrected=model_corrected, other=other,
                  other_label=other_label, title=title)
    return png_bytes(fig)


def draw_funnel(ax, expected, ratio, limits_95, limits_998, *, adjusted_95=None, adjusted_998=None,
                labels=(), hidden_units: int = 0, title: bool = True) -> None:
    """Observed/expected events of each unit against its expected events, inside the funnel of control limits.

    ``limits_95`` and ``limits_998`` are lists of [expected, low, high]; the
    ``adjusted_`` ones, when given, the limits widened for overdispersion
    (drawn instead, the plain ones faint).  ``labels`` name the points (the
    window names the units outside the 95% limits, '' for the others; a
    report gives none).
    """
    e, r = np.asarray(expected, float), np.asarray(ratio, float)
    for lim, style, name in ((limits_95, "--", "95% limits"), (limits_998, ":", "99.8% limits")):
        g = np.asarray(lim, float)
        faint = adjusted_95 is not None
        ax.plot(g[:, 0], g[:, 1], color=GREY, linestyle=style, linewidth=0.8 if faint else 1.1,
                alpha=0.5 if faint else 1.0, label=None if faint else name)
        ax.plot(g[:, 0], g[:, 2], color=GREY, linestyle=style, linewidth=0.8 if faint else 1.1,
                alpha=0.5 if faint else 1.0)
    if adjusted_95 is not None:
        for lim, style, name in ((adjusted_95, "--", "95% limits, widened"), (adjusted_998, ":", "99.8% limits, widened")):
            g = np.asarray(lim, float)
            ax.plot(g[:, 0], g[:, 1], color=ORANGE, linestyle=style, linewidth=1.2, label=name)
            ax.plot(g[:, 0], g[:, 2], color=ORANGE, linestyle=style, linewidth=1.2)
    ax.axhline(1.0, color=BLACK, linewidth=REFERENCE_WIDTH)
    if len(e):
        ax.plot(e, r, "o", color=BLUE, markersize=4, label="units")
        for x, y, name in zip(e, r, labels or ()):
            if not name:
                continue  # a unit within the limits needs no name on the plot: the table names it
            ax.annotate(str(name)[:18], (x, y), textcoords="offset points", xytext=(3, 3), fontsize="xx-small")
    g = np.asarray(limits_998, float)
    high = max(float(np.nanmax(g[:, 2][np.isfinite(g[:, 2])])) if np.isfinite(g[:, 2]).any() else 2.0,
               float(np.nanmax(r)) if len(r) else 1.0)
    ax.set_xscale("log")
    _plain_x_ticks(ax, float(g[0, 0]), float(g[-1, 0]))
    ax.set_ylim(0, min(high * 1.05, max(3.0, float(np.nanmax(r)) * 1.1 if len(r) else 3.0)))
    ax.set_xlabel("Expected events (log scale)")
    ax.set_ylabel("Observed / expected events")
    ax.legend(loc="upper right", fontsize="x-small", frameon=False)
    if hidden_units:
        ax.text(0.98, 0.02, f"{hidden_units} unit(s) with suppressed\ncounts not shown", transform=ax.transAxes,
                ha="right", va="bottom", fontsize="x-small", color=GREY)
    finish(ax, "Funnel plot" if title else None, False)


def _plain_x_ticks(ax, low: float, high: float) -> None:
    """Expected counts on a log axis written as plain numbers (1, 2, 5, 10, ...), not powers of ten."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    ticks = [m * 10.0 ** k for k in range(-2, 7) for m in (1, 2, 5) if low <= m * 10.0 ** k <= high]
    if len(ticks) > 7:
        ticks = [t for t in ticks if str(t).lstrip("0.").startswith("1")] or ticks[::3]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_minor_locator(NullLocator())
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))


def funnel_figure(expected, ratio, limits_95, limits_998, *, adjusted_95=None, adjusted_998=None, labels=(),
                  hidden_units: int = 0, size=SIZE, dpi: float = DPI, title: bool = True) -> bytes:
    fig = new_figure(size, dpi)
    draw_funnel(fig.add_subplot(), expected, ratio, limits_95, limits_998, adjusted_95=adjusted_95,
                adjusted_998=adjusted_998, labels=labels, hidden_units=hidden_units, title=title)
    return png_bytes(fig)


def draw_calibration_band(ax, risk, observed, low, high, *, title: bool = True, square: bool = False) -> None:
    """The smoothed calibration curve with its shaded 95% band and the diagonal of perfect agreement."""
    x = np.asarray(risk, float)
    ax.plot([0, 1], [0, 1], linestyle="--", color=BLACK, linewidth=REFERENCE_WIDTH, label="perfect agreement")
    ax.fill_between(x, np.asarray(low, float), np.asarray(high, float), color=BLUE, alpha=0.2, linewidth=0,
                    label="95% confidence band")
    ax.plot(x, np.asarray(observed, float), color=BLUE, linewidth=CURVE_WIDTH, label="smoothed calibration")
    lim = min(1.0, max(0.05, 1.1 * max(float(np.nanmax(x)), float(np.nanmax(np.asarray(high, float))))))
    ax.set_xlim(0, lim)
    ax.set_ylim(0, lim)
    ax.set_xlabel("Predicted risk")
    ax.set_ylabel("Observed risk (smoothed)")
    ax.legend(loc="upper left", fontsize="small", frameon=False)
    finish(ax, "Calibration on the new records" if title else None, square)


def calibration_band_figure(risk, observed, low, high, *, size=SIZE, dpi: float = DPI, title: bool = True) -> bytes:
    fig = new_figure(size, dpi)
    draw_calibration_band(fig.add_subplot(), risk, observed, low, high, title=title)
    return png_bytes(fig)


#: The kinds this module adds to :data:`twofold.render.figures.DRAWERS`.
DRAWERS = {"decision": draw_decision, "funnel": draw_funnel, "calibration_band": draw_calibration_band}
#: Kinds drawn square (both axes risks).
SHARED_SCALE = frozenset({"calibration_band"})
