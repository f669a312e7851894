"""Every plot Twofold draws, in one style, for the window and for reports alike.

Each plot has two forms:

* ``draw_<kind>(ax, ...)`` draws on a matplotlib axes given by the caller
  (a report's PDF places the axes on its page and keeps them as vector
  drawings);
* ``<kind>_figure(...)`` draws a figure of its own and returns PNG bytes
  (a report's HTML), or with ``raw=True`` its pixels as a :class:`Raster`
  (the window's panes: encoding and decoding a PNG took about a third of the
  time of drawing it).

The drawing functions take plain numbers and arrays, not Twofold's result
objects, so a report's content can carry exactly what its figures need
(:func:`draw_figure` and :func:`figure_png` draw one by its kind name).

matplotlib is imported only inside the functions that draw, with the Agg
canvas (:class:`matplotlib.figure.Figure` and ``FigureCanvasAgg``), never
pyplot, whose global state is not thread-safe: the window draws on a worker
thread.  Colours are Okabe-Ito (Okabe & Ito 2008), always paired with a
marker or line style, so no reading depends on colour alone.  Nothing here
imports Qt.
"""

from __future__ import annotations

from twofold.paths import use_own_matplotlib_folder

use_own_matplotlib_folder()  # before any matplotlib import: its cache goes to our own folder

import io
from dataclasses import dataclass

import numpy as np

# Okabe-Ito colours (the same as twofold.gui.style, which imports Qt and so is not used here).
BLACK = "#000000"
BLUE = "#0072B2"
ORANGE = "#E69F00"
VERMILLION = "#D55E00"
#: Quiet text on a plot (a remark about what is not shown).
GREY = "#595959"

#: Line widths: the curve of the model, and the reference lines it is read against.
CURVE_WIDTH = 1.8
REFERENCE_WIDTH = 0.8

#: Size of a figure in inches, and its resolution, as the window shows them.
SIZE = (3.6, 2.9)
DPI = 100

#: Most points drawn for a curve or cloud; beyond this, an even thinning looks the same.
MAX_POINTS = 4000


# ---------------------------------------------------------------------------
# figures and PNG bytes
# ---------------------------------------------------------------------------


def thin(n: int, keep=()) -> np.ndarray:
    """Evenly spread indices of at most MAX_POINTS of n points, always keeping ``keep``."""
    if n <= MAX_POINTS:
        return np.arange(n)
    return np.unique(np.concatenate([np.linspace(0, n - 1, MAX_POINTS).astype(int), np.asarray(keep, int)]))


def new_figure(size=SIZE, dpi: float = DPI):
    """An empty matplotlib figure on the Agg canvas, laid out so that labels stay inside it."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=tuple(size), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def png_bytes(fig, dpi: float | None = None) -> bytes:
    """The figure as PNG bytes at its own resolution (or ``dpi``).

    The PNG carries no text besides the pixels (no "Software" entry), so a
    report holds no link or program name inside its pictures.
    """
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=fig.dpi if dpi is None else dpi, metadata={"Software": None})
    return buf.getvalue()


@dataclass(frozen=True)
class Raster:
    """A drawn figure as pixels: ``rgba`` holds 4 bytes per pixel (red, green, blue, opacity), rows from the top."""

    width: int
    height: int
    rgba: bytes

    def png(self) -> bytes:
        """The same pixels as PNG bytes (for saving a picture the window shows)."""
        from PIL import Image  # matplotlib's own dependency

        buf = io.BytesIO()
        Image.frombuffer("RGBA", (self.width, self.height), self.rgba, "raw", "RGBA", 0, 1).save(buf, format="png")
        return buf.getvalue()


def raster(fig) -> Raster:
    """The figure's pixels at its own resolution: what :func:`png_bytes` would encode, without encoding them."""
    fig.canvas.draw()
    pixels = np.asarray(fig.canvas.buffer_rgba())
    return Raster(int(pixels.shape[1]), int(pixels.shape[0]), pixels.tobytes())


def _out(fig, raw: bool):
    return raster(fig) if raw else png_bytes(fig)


def literal_text(artist) -> None:
    """Show every text of ``artist`` (an axes or a figure) as written: a ``$`` in a column or group name is a
    dollar sign, not the start of mathematics (matplotlib reads ``$...$`` as TeX unless told not to)."""
    from matplotlib.text import Text

    for text in artist.findobj(Text):
        text.set_parse_math(False)


def _finish(ax, title: str | None, square: bool) -> None:
    if title:
        ax.set_title(title, fontsize="medium")
    if square:
        ax.set_aspect("equal")
    literal_text(ax)


#: How every plot ends (title, square axes when asked, text as written), for the plots of other modules.
finish_axes = _finish


# ---------------------------------------------------------------------------
# ROC curve
# ---------------------------------------------------------------------------


def draw_roc(ax, fpr, tpr, auc: float, *, label: str | None = None, title: bool = True,
             square: bool = False) -> None:
    """ROC curve: share of events flagged against share of non-events flagged, over every threshold.

    ``label`` names the predictions drawn when they are not simply the model's ("pooled predictions")."""
    fpr, tpr = np.asarray(fpr, float), np.asarray(tpr, float)
    idx = thin(len(fpr), keep=(0, len(fpr) - 1)) if len(fpr) else np.arange(0)
    ax.plot([0, 1], [0, 1], linestyle="--", color=BLACK, linewidth=REFERENCE_WIDTH, label="no better than chance")
    ax.plot(fpr[idx], tpr[idx], color=BLUE, linewidth=CURVE_WIDTH, label=f"{label or 'this model'} (area {auc:.3f})")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.01)
    ax.set_xlabel("1 - specificity (share of non-events flagged)")
    ax.set_ylabel("Sensitivity (share of events flagged)")
    ax.legend(loc="lower right", fontsize="small", frameon=False)
    _finish(ax, ("ROC curve" + (f", {label}" if label else "")) if title else None, square)


def roc_figure(fpr, tpr, auc: float, size=SIZE, dpi: float = DPI, title: bool = True, label: str | None = None,
               raw: bool = False):
    """PNG bytes of :func:`draw_roc` (its :class:`Raster` with ``raw``)."""
    fig = new_figure(size, dpi)
    draw_roc(fig.add_subplot(), fpr, tpr, auc, label=label, title=title)
    return _out(fig, raw)


# ---------------------------------------------------------------------------
# calibration
# ---------------------------------------------------------------------------

#: Written on the calibration plot when its smoothed curve rests on few events or non-events.
SMOOTH_UNSTEADY_TEXT = "Smoothed curve unsteady:\nfewer than 200 events\nor non-events"


def draw_calibration(ax, mean_predicted=(), observed=(), ci_low=(), ci_high=(), *, smooth_predicted=None,
                     smooth_observed=None, smooth_unsteady: bool = False, hidden_groups: int = 0,
                     label: str | None = None, title: bool = True, square: bool = False) -> None:
    """Observed share with the event against predicted risk: risk groups with 95% intervals.

    ``label`` names the predictions drawn when they are not simply the model's ("pooled predictions").

    Parameters
    ----------
    mean_predicted, observed, ci_low, ci_high : arrays
        One value per risk group shown (mean predicted risk, observed share,
        and the bounds of the share's 95% interval).
    smooth_predicted, smooth_observed : arrays, optional
        A smoothed calibration curve, drawn when given.
    smooth_unsteady : bool
        Say on the plot that the smoothed curve rests on few events.
    hidden_groups : int
        Risk groups left out because their counts are suppressed; said on the plot.
    """
    mp, ob = np.asarray(mean_predicted, float), np.asarray(observed, float)
    lo, hi = np.asarray(ci_low, float), np.asarray(ci_high, float)
    ax.plot([0, 1], [0, 1], linestyle="--", color=BLACK, linewidth=REFERENCE_WIDTH, label="perfect agreement")
    top = 0.0
    if smooth_predicted is not None and len(smooth_predicted):
        sp, so = np.asarray(smooth_predicted, float), np.asarray(smooth_observed, float)
        idx = thin(len(sp), keep=(0, len(sp) - 1))
        ax.plot(sp[idx], so[idx], color=ORANGE, linewidth=1.6, linestyle="-.", label="smoothed")
        top = max(top, float(np.nanmax(sp)))
    if len(mp):
        # Clipped: a Wilson bound can sit a rounding error beyond the observed share.
        err = np.clip(np.vstack([ob - lo, hi - ob]), 0, None)
        ax.errorbar(mp, ob, yerr=err, fmt="o", color=BLUE, markersize=4, capsize=2, linewidth=1,
                    label="risk groups (95% interval)")
        top = max(top, float(np.nanmax(hi)), float(np.nanmax(mp)))
    lim = min(1.0, max(0.05, top * 1.1))
    ax.set_xlim(0, lim)
    ax.set_ylim(0, lim)
    ax.set_xlabel("Predicted risk")
    ax.set_ylabel("Observed share with the event")
    ax.legend(loc="upper left", fontsize="small", frameon=False)
    remarks = []
    if smooth_unsteady:
        remarks.append(SMOOTH_UNSTEADY_TEXT)
    if hidden_groups:
        remarks.append(f"{hidden_groups} group(s) with suppressed\ncounts not shown")
    if remarks:
        ax.text(0.98, 0.02, "\n".join(remarks), transform=ax.transAxes, ha="right", va="bottom",
                fontsize="x-small", color=VERMILLION if smooth_unsteady else GREY)
    _finish(ax, ("Calibration" + (f", {label}" if label else "")) if title else None, square)


def calibration_figure(mean_predicted=(), observed=(), ci_low=(), ci_high=(), *, smooth_predicted=None,
                       smooth_observed=None, smooth_unsteady: bool = False, hidden_groups: int = 0,
                       size=SIZE, dpi: float = DPI, title: bool = True, label: str | None = None, raw: bool = False):
    """PNG bytes of :func:`draw_calibration` (its :class:`Raster` with ``raw``)."""
    fig = new_figure(size, dpi)
    draw_calibration(fig.add_subplot(), mean_predicted, observed, ci_low, ci_high,
                     smooth_predicted=smooth_predicted, smooth_observed=smooth_observed,
                     smooth_unsteady=smooth_unsteady, hidden_groups=hidden_groups, label=label, title=title)
    return _out(fig, raw)


# ---------------------------------------------------------------------------
# influence
# ---------------------------------------------------------------------------


def largest_first(values, k: int) -> np.ndarray:
    """Indices of the ``k`` largest values, largest first; ties keep their order, undefined ones come last."""
    d = np.asarray(values, float)
    d = np.where(np.isnan(d), -np.inf, d)
    return np.argsort(-d, kind="stable")[: max(int(k), 0)]


def draw_influence(ax, cooks_distance, rows, k: int = 10, *, title: bool = True) -> None:
    """Cook's distance of every record, by row of the data file (``rows`` count from 0); the k largest marked."""
    d = np.asarray(cooks_distance, float)
    x = np.asarray(rows, float) + 1
    top = largest_first(d, k)
    ok = np.isfinite(d)
    # Thinning keeps the largest distances, so no tall spike disappears.
    idx = thin(len(d), keep=largest_first(d, min(len(d), MAX_POINTS // 2)))
    idx = idx[ok[idx]]
    ax.plot(x[idx], d[idx], linestyle="none", marker=".", markersize=2.5, color=BLUE, label="records")
    top = top[ok[top]]
    ax.plot(x[top], d[top], linestyle="none", marker="D", markersize=4, color=VERMILLION,
            label=f"the {len(top)} most influential")
    ax.set_xlabel("Row of the data file")
    ax.set_ylabel("Cook's distance")
    # A band above the tallest point holds the legend, so it never covers a record.
    highest = float(np.nanmax(d)) if ok.any() else 1.0
    ax.set_ylim(bottom=0, top=highest * 1.4 if highest > 0 else 1.0)
    ax.legend(loc="upper center", fontsize="small", frameon=False, ncol=2, handletextpad=0.2, columnspacing=0.8)
    _finish(ax, "Influence of each record" if title else None, False)


def influence_figure(cooks_distance, rows, k: int = 10, size=SIZE, dpi: float = DPI, title: bool = True,
                     raw: bool = False):
    """PNG bytes of :func:`draw_influence` (its :class:`Raster` with ``raw``)."""
    fig = new_figure(size, dpi)
    draw_influence(fig.add_subplot(), cooks_distance, rows, k, title=title)
    return _out(fig, raw)


# ---------------------------------------------------------------------------
# effect of one predictor
# ---------------------------------------------------------------------------


def plain_log_ticks(ax, low: float, high: float) -> None:
    """Odds-ratio ticks on a log axis written as plain numbers (0.5, 1, 2), not powers of ten."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    candidates = [0.01, 0.02, 0.05, 0.1, 0.2, 0.25, 0.5, 1, 2, 4, 5, 10, 20, 50, 100]
    ticks = [t for t in candidates if low / 1.05 <= t <= high * 1.05] or [1]
    if len(ticks) > 7:
        ticks = ticks[::2] if 1 in ticks[::2] else ticks[1::2]
    ax.yaxis.set_major_locator(FixedLocator(ticks))
    ax.yaxis.set_minor_locator(NullLocator())
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))


def draw_effect(ax, curve: dict, knots, *, title: bool = True) -> None:
    """Odds ratio against the reference value, with its 95% band: exp((b(x) - b(ref))' beta).

    ``curve`` is :func:`twofold.core.models.modelling.effect_curve`'s dictionary
    (``column``, ``x``, ``odds_ratio``, ``low``, ``high``, ``reference``);
    ``knots`` is the spline's number of knots, or None for a straight line.
    """
    x = curve["x"]
    ax.fill_between(x, curve["low"], curve["high"], color=BLUE, alpha=0.2, linewidth=0,
                    label="95% confidence band")
    ax.plot(x, curve["odds_ratio"], color=BLUE, linewidth=CURVE_WIDTH,
            label="straight line" if knots is None else f"spline, {knots} knots")
    ax.axhline(1.0, color=BLACK, linestyle="--", linewidth=REFERENCE_WIDTH)
    ax.axvline(curve["reference"], color=ORANGE, linestyle=":", linewidth=1.2,
               label=f"reference value {curve['reference']:g}")
    ax.set_yscale("log")
    plain_log_ticks(ax, min(curve["low"]), max(curve["high"]))
    ax.set_xlabel(curve["column"])
    ax.set_ylabel("Odds ratio (log scale)")
    ax.legend(loc="best", fontsize="small", frameon=False)
    _finish(ax, f"Against {curve['column']} = {curve['reference']:g}" if title else None, False)


def effect_figure(curve: dict, knots, size=SIZE, dpi: float = DPI, title: bool = True) -> bytes:
    """PNG bytes of :func:`draw_effect`."""
    fig = new_figure(size, dpi)
    draw_effect(fig.add_subplot(), curve, knots, title=title)
    return png_bytes(fig)


# ---------------------------------------------------------------------------
# by kind name (a report's figures)
# ---------------------------------------------------------------------------

#: The drawing function of each kind of figure; a figure's data are its keyword arguments.
DRAWERS = {"roc": draw_roc, "calibration": draw_calibration, "influence": draw_influence, "effect": draw_effect}

#: Kinds whose two axes show shares on one scale, so they can be drawn square.
SHARED_SCALE = frozenset({"roc", "calibration"})


def _usefulness_kinds() -> None:
    """Add the kinds of :mod:`twofold.render.usefulness_figures` (decision curve, funnel plot, calibration band)."""
    global SHARED_SCALE
    from twofold.render import usefulness_figures

    DRAWERS.update(usefulness_figures.DRAWERS)
    SHARED_SCALE = SHARED_SCALE | usefulness_figures.SHARED_SCALE


def draw_figure(ax, kind: str, data: dict, *, title: bool = True, square: bool = False) -> None:
    """Draw the figure of ``kind`` (a key of :data:`DRAWERS`) from its ``data`` on ``ax``.

    ``square`` makes the axes square for the kinds of :data:`SHARED_SCALE`
    and is ignored for the others.
    """
    if kind not in DRAWERS:
        _usefulness_kinds()  # imported when first needed: that module draws with this one's helpers
    try:
        drawer = DRAWERS[kind]
    except KeyError:
        raise ValueError(f"No figure of the kind {kind!r}; known kinds: {', '.join(DRAWERS)}.") from None
    layout = {"title": title}
    if kind in SHARED_SCALE:
        layout["square"] = square
    drawer(ax, **data, **layout)


def figure_png(kind: str, data: dict, size=SIZE, dpi: float = DPI, *, title: bool = True,
               square: bool = False) -> bytes:
    """PNG bytes of :func:`draw_figure`."""
    fig = new_figure(size, dpi)
    draw_figure(fig.add_subplot(), kind, data, title=title, square=square)
    return png_bytes(fig)

