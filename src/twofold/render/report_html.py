"""A report laid out as one self-contained HTML page.

Plots are embedded as base64 PNG, the style is inline CSS, and there are no
scripts, fonts, links or anything fetched from elsewhere.  The content comes
from :func:`twofold.core.outputs.report.build_report`; the plots are drawn by
:mod:`twofold.render.figures`.
"""

from __future__ import annotations

import base64
import html

from twofold.core.outputs.report import Bullets, Figure, Heading, Para, Report, Table
from twofold.render import figures

#: Size of a report's plot in the HTML page (inches) and its resolution: larger than in the window.
FIGURE_SIZE = (5.0, 4.2)
FIGURE_DPI = 110


def report_figure_png(kind: str, data: dict) -> bytes:
    """PNG bytes of one of a report's figures, as the HTML page shows it (no title: the caption says it)."""
    return figures.figure_png(kind, data, size=FIGURE_SIZE, dpi=FIGURE_DPI, title=False, square=True)


CSS = """
body { font-family: system-ui, "Segoe UI", Helvetica, Arial, sans-serif; color: #1d1d1d; max-width: 58em;
       margin: 2em auto; padding: 0 1.2em; line-height: 1.45; font-size: 15px; }
h1 { font-size: 1.5em; margin-bottom: 0.2em; }
h2 { font-size: 1.2em; border-bottom: 1px solid #c9c9c9; padding-bottom: 0.2em; margin-top: 1.8em; }
h3 { font-size: 1.02em; margin-top: 1.3em; }
table { border-collapse: collapse; margin: 0.6em 0 0.3em; font-size: 0.9em; }
th, td { padding: 0.25em 0.7em; border-bottom: 1px solid #e2e2e2; vertical-align: top; }
th { text-align: left; border-bottom: 1px solid #8a8a8a; font-weight: 600; }
td.r, th.r { text-align: right; font-variant-numeric: tabular-nums; }
caption { caption-side: bottom; text-align: left; font-size: 0.85em; color: #555; padding-top: 0.3em; }
p.note, p.small, ul.small { font-size: 0.88em; color: #444; }
p.caution { border-left: 4px solid #b07d00; background: #fbf6e9; padding: 0.5em 0.8em; }
p.warning, ul.warning li { color: #7a2a00; }
figure { margin: 1em 0; }
figure img { max-width: 30em; width: 100%; height: auto; }
figcaption { font-size: 0.85em; color: #555; }
.subtitle { color: #555; margin-top: 0; }
@media print { body { max-width: none; margin: 0; } h2 { page-break-after: avoid; } table, figure { page-break-inside: avoid; } }
"""


def render_html(rep: Report) -> str:
    """The report as one self-contained HTML page (no scripts, links, fonts or external files)."""
    e = html.escape
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           f"<title>{e(rep.title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>",
           f"<h1>{e(rep.title)}</h1>", f'<p class="subtitle">{e(rep.subtitle)}</p>']
    for b in rep.blocks:
        if isinstance(b, Heading):
            out.append(f"<h{b.level}>{e(b.text)}</h{b.level}>")
        elif isinstance(b, Para):
            out.append(f'<p class="{b.style}">{e(b.text)}</p>')
        elif isinstance(b, Bullets):
            out.append(f'<ul class="{b.style}">' + "".join(f"<li>{e(i)}</li>" for i in b.items) + "</ul>")
        elif isinstance(b, Table):
            al = b.alignment()
            cls = lambda j: ' class="r"' if j < len(al) and al[j] == "r" else ""  # noqa: E731
            parts = ["<table>"]
            if b.caption:
                parts.append(f"<caption>{e(b.caption)}</caption>")
            parts.append("<thead><tr>" + "".join(f"<th{cls(j)}>{e(h)}</th>" for j, h in enumerate(b.headers))
                         + "</tr></thead><tbody>")
            for row in b.rows:
                parts.append("<tr>" + "".join(f"<td{cls(j)}>{e(str(c))}</td>" for j, c in enumerate(row)) + "</tr>")
            parts.append("</tbody></table>")
            out.append("".join(parts))
        elif isinstance(b, Figure):
            data = base64.b64encode(report_figure_png(b.kind, b.data)).decode("ascii")
            out.append(f'<figure><img src="data:image/png;base64,{data}" alt="{e(b.alt)}">'
                       f"<figcaption>{e(b.caption)}</figcaption></figure>")
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"
