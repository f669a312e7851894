"""What an analysis leaves behind: session files, report content, exports, predictions, JSON and text."""

# The small-count limits live here, not in ``privacy`` (which needs numpy), so that the window can read a
# session's report defaults while it starts, before numpy is loaded; ``privacy`` gives the same names.

#: Counts of 1 up to this many people are hidden (CMS cell-size policy; common practice, no single standard).
DEFAULT_THRESHOLD = 10

#: The largest limit a user may set (command line, window, session file): beyond it a report says nearly nothing.
MAX_THRESHOLD = 1000
