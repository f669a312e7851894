"""The assessment's figures for the window, drawn off the GUI thread.

The drawing itself lives in :mod:`twofold.render.figures`, shared with the
reports; this module only hands it the numbers of a core Assessment.  It is
called on the worker thread and returns PNG bytes, which the GUI thread turns
into pixmaps.  Nothing here imports Qt, and matplotlib is imported only when
a figure is drawn.
"""

from __future__ import annotations

from twofold.render import figures as shared


def assessment_figures(result) -> dict:
    """PNG bytes of the ROC curve, the calibration plot and the influence plot of a core Assessment.

    Keys ``roc`` and ``calibration``, and ``influence`` when influence was computed.
    """
    roc = result.roc
    out = {"roc": shared.roc_figure(roc.fpr, roc.tpr, float(result.auc.auc))}
    groups, smooth = result.groups, result.smooth
    cal = {}
    if groups is not None and len(groups.n):
        cal = {"mean_predicted": groups.mean_predicted, "observed": groups.observed,
               "ci_low": groups.ci_low, "ci_high": groups.ci_high}
    if smooth is not None:
        cal.update(smooth_predicted=smooth.predicted, smooth_observed=smooth.observed,
                   smooth_unsteady=bool(smooth.unreliable))
    out["calibration"] = shared.calibration_figure(**cal)
    if result.influence is not None:
        out["influence"] = shared.influence_figure(result.influence.cooks_distance, result.rows)
    return out
