"""Drawing and laying out: figures, and reports as HTML or PDF.

This package sits outside the statistical core (:mod:`twofold.core`, which
imports neither Qt nor matplotlib) and imports no Qt itself, so the window
and the command line share it.  matplotlib is only imported inside the
functions that draw, never through pyplot, and only after
:func:`twofold.paths.use_own_matplotlib_folder`.

* :mod:`twofold.render.figures`: every plot Twofold draws, in one style.
* :mod:`twofold.render.report_html` and :mod:`twofold.render.report_pdf`:
  the layouts of a report built by :func:`twofold.core.outputs.report.build_report`.
* :mod:`twofold.render.report_writer`: :func:`write_report`, which builds,
  lays out and writes a report file.
"""
