"""The assessment's figures, drawn off the GUI thread.

matplotlib is imported here only, inside the functions, and only ever on the
worker thread: figures are drawn with the Agg canvas
(:class:`matplotlib.figure.Figure` and ``FigureCanvasAgg``, never pyplot, whose
global state is not thread-safe) into PNG bytes.  The GUI thread only turns
the bytes into a pixmap.  Colours are Okabe-Ito (Okabe & Ito 2008), always
paired with a marker or line style, so no reading depends on colour alone.
Nothing here imports Qt.
"""

from __future__ import annotations

from twofold.paths import use_own_matplotlib_folder

use_own_matplotlib_folder()  # before any matplotlib import: its cache goes to our own folder

import io

import numpy as np

# Okabe-Ito colours (the same as twofold.gui.style, which imports Qt and so is not used here).
BLACK = "#000000"
BLUE = "#0072B2"
ORANGE = "#E69F00"
VERMILLION = "#D55E00"

#: Size of each figure in inches, and its resolution.
SIZE = (3.6, 2.9)
DPI = 100

#: Most points drawn for a curve or cloud; beyond this, an even thinning looks the same.
MAX_POINTS = 4000


def _thin(n: int, keep=()) -> np.ndarray:
    """Evenly spread indices of at most MAX_POINTS of n points, always keeping ``keep``."""
    if n <= MAX_POINTS:
        return np.arange(n)
    idx = np.unique(np.concatenate([np.linspace(0, n - 1, MAX_POINTS).astype(int), np.asarray(keep, int)]))
    return idx


def _new_figure():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=SIZE, dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return buf.getvalue()


def roc_figure(roc, auc: float) -> bytes:
    """ROC curve: share of events detected against false-alarm share, over every threshold."""
    fig = _new_figure()
    ax = fig.add_subplot()
    fpr, tpr = np.asarray(roc.fpr, float), np.asarray(roc.tpr, float)
    idx = _thin(len(fpr), keep=(0, len(fpr) - 1))
    ax.plot([0, 1], [0, 1], linestyle="--", color=BLACK, linewidth=0.8, label="no better than chance")
    ax.plot(fpr[idx], tpr[idx], color=BLUE, linewidth=1.8, label=f"this model (area {auc:.3f})")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.01)
    ax.set_xlabel("False alarms: share of non-events called positive")
    ax.set_ylabel("Share of events detected")
    ax.set_title("ROC curve", fontsize="medium")
    ax.legend(loc="lower right", fontsize="small", frameon=False)
    return _png(fig)


def calibration_figure(groups, smooth, note: str = "") -> bytes:
    """Observed share with the event against predicted risk: risk groups with 95% CIs, smoothed curve."""
    fig = _new_figure()
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1], linestyle="--", color=BLACK, linewidth=0.8, label="perfect agreement")
    top = 0.0
    if smooth is not None and len(smooth.predicted):
        idx = _thin(len(smooth.predicted), keep=(0, len(smooth.predicted) - 1))
        ax.plot(smooth.predicted[idx], smooth.observed[idx], color=ORANGE, linewidth=1.6,
                linestyle="-.", label="smoothed")
        top = max(top, float(np.nanmax(smooth.predicted)))
    if groups is not None and len(groups.n):
        mp, ob = np.asarray(groups.mean_predicted, float), np.asarray(groups.observed, float)
        err = np.vstack([ob - np.asarray(groups.ci_low, float), np.asarray(groups.ci_high, float) - ob])
        ax.errorbar(mp, ob, yerr=np.clip(err, 0, None), fmt="o", color=BLUE, markersize=4, capsize=2,
                    linewidth=1, label="risk groups (95% interval)")
        top = max(top, float(np.nanmax(groups.ci_high)), float(np.nanmax(mp)))
    lim = min(1.0, max(0.05, top * 1.1))
    ax.set_xlim(0, lim)
    ax.set_ylim(0, lim)
    ax.set_xlabel("Predicted risk")
    ax.set_ylabel("Observed share with the event")
    ax.set_title("Calibration", fontsize="medium")
    ax.legend(loc="upper left", fontsize="small", frameon=False)
    if note:
        ax.text(0.98, 0.02, "Smoothed curve unsteady:\nfewer than 200 events\nor non-events",
                transform=ax.transAxes, ha="right", va="bottom", fontsize="x-small", color=VERMILLION)
    return _png(fig)


def influence_figure(influence, rows, k: int = 10) -> bytes:
    """Cook's distance of every record, by row of the data file; the k largest are marked."""
    fig = _new_figure()
    ax = fig.add_subplot()
    d = np.asarray(influence.cooks_distance, float)
    x = np.asarray(rows, float) + 1
    top = influence.most_influential(k)
    ok = np.isfinite(d)
    # Thinning keeps the largest distances, so no tall spike disappears.
    idx = _thin(len(d), keep=influence.most_influential(min(len(d), MAX_POINTS // 2)))
    idx = idx[ok[idx]]
    ax.plot(x[idx], d[idx], linestyle="none", marker=".", markersize=2.5, color=BLUE, label="records")
    top = top[ok[top]]
    ax.plot(x[top], d[top], linestyle="none", marker="D", markersize=4, color=VERMILLION,
            label=f"the {len(top)} most influential")
    ax.set_xlabel("Row of the data file")
    ax.set_ylabel("Cook's distance (pull on the estimates)")
    ax.set_title("Influence of each record", fontsize="medium")
    ax.legend(loc="upper right", fontsize="small", frameon=False)
    return _png(fig)


def assessment_figures(result) -> dict:
    """PNG bytes of the ROC curve, the calibration plot and the influence plot of a core Assessment."""
    from twofold.gui.present import SMOOTH_UNRELIABLE_NOTE

    out = {"roc": roc_figure(result.roc, float(result.auc.auc))}
    unreliable = result.smooth is not None and bool(result.smooth.unreliable)
    out["calibration"] = calibration_figure(result.groups, result.smooth,
                                            SMOOTH_UNRELIABLE_NOTE if unreliable else "")
    if result.influence is not None:
        out["influence"] = influence_figure(result.influence, result.rows)
    return out
