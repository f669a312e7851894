"""Errors and warning classes shared by the whole core.

A :class:`TwofoldError` carries one sentence meant for the user: what is wrong,
where (file, column, row) and how to fix it.  The command line and the window
show ``str(error)`` as it is, never a traceback.

Warnings about a fit are not raised through :mod:`warnings`; they are collected
as :class:`Notice` objects on the results, each with a stable ``code`` that the
JSON output carries.  The warning classes below name those codes, so scripted
users can still filter or re-raise them (``notice.category``).
"""

from __future__ import annotations

from dataclasses import dataclass


class TwofoldError(ValueError):
    """A problem with the user's input, explained in one sentence."""


class DataFileError(TwofoldError):
    """The data file cannot be read (missing, empty, unreadable)."""


class ColumnError(TwofoldError):
    """A named column is missing or cannot play the role asked of it."""


class ModelError(TwofoldError):
    """The model cannot be fitted as asked (no usable rows, not nested, ...)."""


class TwofoldWarning(UserWarning):
    """Base class of every warning about a fit."""

    code = "warning"


class SeparationWarning(TwofoldWarning):
    """Some predictor separates events from non-events (estimates diverge)."""

    code = "separation"


class NotConvergedWarning(TwofoldWarning):
    """The maximum-likelihood iterations stopped before converging."""

    code = "not_converged"


class CollinearWarning(TwofoldWarning):
    """A column is constant or a linear combination of others and was dropped."""

    code = "collinear"


class FewEventsWarning(TwofoldWarning):
    """Fewer than 10 events per parameter (a rule of thumb, Peduzzi et al. 1996)."""

    code = "few_events"


class RowsDroppedWarning(TwofoldWarning):
    """Rows were left out because the outcome or a predictor was missing."""

    code = "rows_dropped"


class EncodingWarning_(TwofoldWarning):
    """The file was not UTF-8 and was read as Latin-1."""

    code = "encoding"


WARNING_CLASSES = {
    cls.code: cls
    for cls in (
        SeparationWarning,
        NotConvergedWarning,
        CollinearWarning,
        FewEventsWarning,
        RowsDroppedWarning,
        EncodingWarning_,
    )
}


@dataclass(frozen=True)
class Notice:
    """One warning attached to a result: a stable code and a plain message.

    ``subjects`` names the predictor columns the warning is about (empty for
    the model as a whole), so a display can put it beside the numbers it
    affects.
    """

    code: str
    message: str
    subjects: tuple = ()

    @property
    def category(self) -> type[TwofoldWarning]:
        """The warning class for this code."""
        return WARNING_CLASSES.get(self.code, TwofoldWarning)

    def as_dict(self) -> dict:
        return {"code": self.code, "message": self.message}
