"""Display records: what the window shows, prepared off the GUI thread.

The core model (:class:`~twofold.core.models.study.Study`, :class:`~twofold.core.models.ladder.Ladder`)
lives on the worker thread.  After each change the worker turns the core's
figures into these frozen records (see :mod:`twofold.gui.present`), already
worded and formatted with :mod:`twofold.core.outputs.text`, and hands them to the GUI
thread, which only displays them.  This module imports the standard library
only, so the window can be built before numpy, pandas or statsmodels load.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

#: Shown above every set of results.  It must say the same as
#: ``twofold.core.outputs.summary.CAUTION`` (a test checks that they are identical); it
#: is repeated here so the banner is there at the first paint, before the core
#: is imported.
CAUTION = (
    "These figures describe statistical associations in the loaded records, not causes. "
    "Decisions about any patient's care rest with licensed clinicians and local policy."
)

#: Plain words for each column role (the values of ``twofold.core.data.roles.Role``).
ROLE_LABELS = {
    "numeric": "number",
    "binary": "two values",
    "categorical": "groups",
    "identifier": "identifier",
    "date": "date",
    "excluded": "left out",
}


@dataclass(frozen=True)
class ColumnView:
    """One column of the loaded file as the column list shows it.

    ``levels`` holds the raw values (handed back to the core when the user
    picks a reference level); ``level_labels`` the same values as text.
    ``role_choices`` lists (role value, plain label) pairs the user may pick.
    """

    name: str
    role: str
    role_label: str
    inferred_role: str
    is_number: bool
    n_levels: int
    n_missing: int
    levels: tuple = ()
    level_labels: tuple = ()
    counts: tuple = ()
    reference: object = None
    reference_label: str = ""
    is_factor: bool = False
    reason: str = ""
    role_choices: tuple = ()
    #: Values the user marked as meaning "missing" in this column.
    missing_values: tuple = ()
    #: Why the column cannot be the outcome ("" when it can).
    outcome_refusal: str = ""
    #: Knots of the curved (spline) effect chosen for this column; None for a straight line.
    spline_knots: int | None = None


@dataclass(frozen=True)
class StudyView:
    """A loaded file: its columns and what the data table needs to show cells."""

    source: str
    path: str
    n_rows: int
    columns: tuple
    candidates: tuple
    notices: tuple = ()
    # The cell arrays, one per column (numpy arrays; opaque here).  They are
    # read-only views on the loaded frame: the data table reads single cells.
    arrays: tuple = ()
    numeric: tuple = ()
    outcome: str | None = None

    def column(self, name: str) -> ColumnView | None:
        return self.by_name.get(name)

    @cached_property
    def by_name(self) -> dict:
        """The columns by name, made once (looking each up in turn was quadratic in a file of 50,000)."""
        return {c.name: c for c in self.columns}


@dataclass(frozen=True)
class OutcomeView:
    """The chosen outcome and event value (or what still has to be chosen)."""

    outcome: str | None
    event: object = None
    event_label: str = ""
    levels: tuple = ()
    level_labels: tuple = ()
    needs_event: bool = False
    message: str = ""


@dataclass(frozen=True)
class CoefficientLine:
    """One row of the coefficient table.

    ``kind`` is "heading" (a factor as a whole, with its joint Wald test),
    "term" (one coefficient) or "intercept".  ``values`` holds the core's raw
    numbers and ``texts`` the same numbers formatted, both keyed by
    "odds_ratio", "ci", "p_value", "z", "estimate", "std_error" (and
    "statistic", "df" for headings).
    """

    kind: str
    column: str | None
    label: str
    texts: dict = field(default_factory=dict)
    values: dict = field(default_factory=dict)
    warnings: tuple = ()
    level: object = None
    #: The core's parameter name (matches the keys of :class:`ProfileView`).
    name: str = ""
    #: Why this row needs care in reading (shown as its tool tip), e.g. a curve term.
    hint: str = ""


@dataclass(frozen=True)
class TestView:
    """A likelihood-ratio test with its wording."""

    title: str
    text: str
    reading: str
    g: float | None = None
    df: int | None = None
    p_value: float | None = None
    nested: bool = True


@dataclass(frozen=True)
class NoteView:
    """A warning in plain words; ``column`` names the predictor it concerns (None: the model)."""

    code: str
    message: str
    column: str | None = None


@dataclass(frozen=True)
class LadderRow:
    """One rung of the model ladder as the ladder table shows it."""

    index: int
    predictors: tuple
    predictors_text: str
    change_text: str
    n_params: int
    log_likelihood: float
    aic: float
    g: float | None
    df: int | None
    p_value: float | None
    texts: dict = field(default_factory=dict)
    current: bool = False


@dataclass(frozen=True)
class LadderView:
    rows: tuple = ()
    current: int | None = None
    n_rows_compared: int = 0
    notices: tuple = ()


@dataclass(frozen=True)
class ResultsView:
    """The current model of the ladder, ready to display."""

    rung: int
    n_rungs: int
    outcome: str
    event_label: str
    predictors: tuple
    title: str
    counts_text: str
    lines: tuple
    overall: TestView
    previous: TestView | None
    predictor_notes: tuple
    model_notes: tuple
    ladder: LadderView
    rows_used: int = 0
    rows_read: int = 0
    events: int = 0
    events_per_parameter: float | None = None
    log_likelihood: float | None = None
    #: Plain list of what the model holds, e.g. "age (curved, 4 knots), sex, age \u00d7 sex".
    contents_text: str = ""
    #: Tests of the model's shape: curvature of each spline, each interaction (TestView each).
    shape_tests: tuple = ()
    #: Odds ratios at stated values (of a predictor in an interaction, along a curve): one line each.
    stated_effects: tuple = ()
    #: Whether the fit shown is Firth's penalised fit, and the sentence that says what that changes.
    penalised: bool = False
    method_text: str = ""
    #: Whether the ordinary fit detected separation (the penalised fit is then offered).
    separation: bool = False
    #: Whether profile-likelihood intervals are cheap enough here to work out without being asked.
    profile_auto: bool = False
    #: (copies, seed) when missing values are filled in by multiple imputation and the results are pooled, else None.
    imputed: tuple | None = None


@dataclass(frozen=True)
class ProfileView:
    """Profile-likelihood 95% intervals of the odds ratios of the model shown (worked out off the GUI thread).

    ``intervals`` maps the core's parameter name to (low, high) on the odds-ratio
    scale and ``texts`` to the same interval worded; ``penalised`` says whether
    they come from the profile penalised likelihood of a Firth fit.
    """

    rung: int
    penalised: bool
    intervals: dict = field(default_factory=dict)
    texts: dict = field(default_factory=dict)
    note: str = ""
    error: str = ""


@dataclass(frozen=True)
class ComparisonView:
    first: int
    second: int
    nested: bool
    text: str
    reading: str
    note: str
    g: float | None = None
    df: int | None = None
    p_value: float | None = None
    aic_difference: float | None = None
    bic_difference: float | None = None


@dataclass(frozen=True)
class Failure:
    """A job that did not complete: a user error (one sentence) or an unexpected one."""

    kind: str
    message: str
    unexpected: bool = False
    log_path: str = ""
    error_type: str = ""

    @property
    def cancelled(self) -> bool:
        """Opening a file was stopped on purpose (by the user or by a newer file)."""
        return self.error_type == "ReadCancelled"


@dataclass(frozen=True)
class AssessmentView:
    """How good the model shown is: worded texts, raw numbers and figures (PNG bytes).

    ``values`` holds the core's raw numbers (keys "auc", "auc_ci_low",
    "auc_ci_high", "brier", "scaled_brier", "calibration_slope",
    "calibration_intercept", "hl_statistic", "hl_p_value", ...);
    ``figures`` maps "roc", "calibration" and "influence" to PNG bytes made
    on the worker thread, so the GUI thread only decodes them.
    """

    rung: int
    title: str
    auc_text: str
    auc_reading: str
    brier_text: str
    calibration_text: str
    calibration_note: str
    hl_text: str
    hl_note: str
    pseudo_r2_text: str
    drop_one: tuple = ()     # (column, likelihood-ratio text, Wald text, prefer the LR test?)
    vif: tuple = ()          # (column, text, flagged)
    vif_note: str = ""
    sample_size_text: str = ""
    sample_size_short: bool = False
    influential: tuple = ()  # (file row number, Cook's distance text, leverage text)
    classification_text: str = ""
    threshold: float | None = None
    threshold_note: str = ""
    calibration_plot_note: str = ""
    notes: tuple = ()
    values: dict = field(default_factory=dict)
    figures: dict = field(default_factory=dict)
    #: Whether the model assessed is the penalised (Firth) fit, its risks intercept-corrected (FLIC).
    penalised: bool = False


@dataclass(frozen=True)
class HistoryView:
    """What undo and redo would do, and whether the analysis has changes not yet saved."""

    undo_text: str = ""
    redo_text: str = ""
    unsaved: bool = False
    revision: int = 0
    last_change: str = ""
    removed: int = 0
