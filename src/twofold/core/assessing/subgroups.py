"""How a model performs within groups of a column (sex, age band, site).

For each group: its rows, the AUC with DeLong's 95% interval,
calibration-in-the-large (the intercept of a logistic regression of the
outcome with the linear predictor as offset: above 0, risks too low in that
group) and the calibration slope, each with its 95% interval.  A model can
discriminate and calibrate well on the whole and poorly in one group
(TRIPOD+AI 2024; Riley et al. 2024, BMJ 384:e074819).

Groups with 1 to 10 events or non-events (the default small-count limit of
reports) show no figures: they would be unstable and could point back to
a few people.
"""

from __future__ import annotations

import numpy as np

from twofold.core.errors import TwofoldError

#: The most groups a subgroup column may have.
MAX_GROUPS = 50

SUBGROUP_NOTE = (
    "Performance within groups: calibration-in-the-large (ideal 0; above 0, risks predicted too low in that group) "
    "and the calibration slope (ideal 1) are not fixed at their ideal values within a group, even on the rows the "
    "model was fitted to, so they show where the model fits some patients worse than others. Groups with few "
    "events or non-events show no figures."
)


def subgroup_performance(groups, y, p, lp, column: str, suppress_up_to: int | None = None) -> list[dict]:
    """One entry per group of ``groups`` (one value per record; missing values left out), in sorted order.

    Each entry: ``group``, ``rows``, ``auc``, ``auc_ci``, ``calibration_intercept``,
    ``calibration_intercept_ci``, ``calibration_slope``, ``calibration_slope_ci``,
    ``suppressed`` and ``note`` (why figures are missing, or None).

    Raises
    ------
    ColumnError
        No record with a group, or more than :data:`MAX_GROUPS` groups.
    """
    from twofold.core.assessing.calibration import calibration_slope_intercept
    from twofold.core.assessing.discrimination import auc_delong
    from twofold.core.assessing.units import factorize_groups
    from twofold.core.outputs.privacy import DEFAULT_THRESHOLD, is_small
    from twofold.core.outputs.summary import clean_number, plain_value

    limit = DEFAULT_THRESHOLD if suppress_up_to is None else int(suppress_up_to)
    y = np.asarray(y, dtype=float)
    p = np.asarray(p, dtype=float)
    lp = np.asarray(lp, dtype=float)
    has, codes, labels = factorize_groups(groups, column, "subgroup", MAX_GROUPS,
                                          "groups such as sex, age band or site")
    idx = np.flatnonzero(has)
    out = []
    for j, label in enumerate(labels):
        rows = idx[codes == j]
        yg, pg, lg = y[rows], p[rows], lp[rows]
        events = int(yg.sum())
        nonevents = int(len(yg) - events)
        entry = {"group": plain_value(label), "rows": int(len(rows)), "auc": None, "auc_ci": [None, None],
                 "calibration_intercept": None, "calibration_intercept_ci": [None, None],
                 "calibration_slope": None, "calibration_slope_ci": [None, None], "suppressed": False, "note": None}
        if is_small(len(rows), limit):
            entry.update(rows=None, suppressed=True,
                         note=f"A group of 1 to {limit} rows shows no figures (small-count limit).")
        elif is_small(events, limit) or is_small(nonevents, limit):
            entry.update(suppressed=True, note=f"A group with 1 to {limit} events or non-events shows no figures "
                                               "(small-count limit; they would be unstable).")
        elif events == 0 or nonevents == 0:
            entry["note"] = "Every record of this group has the same outcome, so its performance cannot be measured."
        else:
            auc = auc_delong(yg, pg)
            entry.update(auc=clean_number(auc.auc), auc_ci=[clean_number(auc.ci_low), clean_number(auc.ci_high)])
            try:
                cal = calibration_slope_intercept(yg, lg)
            except TwofoldError as exc:
                entry["note"] = str(exc)
            else:
                entry.update(
                    calibration_intercept=clean_number(cal.intercept),
                    calibration_intercept_ci=[clean_number(cal.intercept_ci_low), clean_number(cal.intercept_ci_high)],
                    calibration_slope=clean_number(cal.slope),
                    calibration_slope_ci=[clean_number(cal.slope_ci_low), clean_number(cal.slope_ci_high)])
        out.append(entry)
    return out
