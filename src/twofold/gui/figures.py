"""The window's assessment figures: drawn by :mod:`twofold.render.assessed`, shared with reports' drawing."""

from __future__ import annotations

from twofold.render.assessed import assessment_figures, pooled_figures  # noqa: F401  (the window's names for them)
