"""A report laid out on A4 pages as PDF.

matplotlib's PdfPages writes the pages: text stays text (TrueType fonts,
selectable and searchable) and plots are vector drawings, placed on the page
and drawn by :mod:`twofold.render.figures`.  The content comes from
:func:`twofold.core.outputs.report.build_report`.  matplotlib is imported only inside
the functions that lay out, never through pyplot.
"""

from __future__ import annotations

from twofold.paths import use_own_matplotlib_folder

use_own_matplotlib_folder()  # before any matplotlib import: its cache goes to our own folder

from pathlib import Path

from twofold.core.outputs.report import Bullets, Figure, Heading, Para, Report, Table
from twofold.render import figures

_PAGE_W, _PAGE_H = 8.27 * 72, 11.69 * 72   # A4 in points
_MARGIN = 54.0
_STYLES = {  # size, weight, colour
    "title": (15, "bold", "#1d1d1d"), "h2": (12.5, "bold", "#1d1d1d"), "h3": (10.5, "bold", "#1d1d1d"),
    "normal": (9, "normal", "#1d1d1d"), "note": (8.3, "normal", "#444444"), "small": (7.8, "normal", "#444444"),
    "caution": (9, "normal", "#6b4c00"), "warning": (9, "normal", "#7a2a00"), "cell": (7.6, "normal", "#1d1d1d"),
    "head": (7.6, "bold", "#1d1d1d"), "caption": (7.4, "normal", "#555555"), "footer": (7, "normal", "#777777"),
}


class _Pdf:
    """A tiny top-to-bottom layout engine on matplotlib figures, one per A4 page."""

    def __init__(self, pages, footer: str):
        self.pages = pages
        self.footer = footer
        self.fig = None
        self.y = 0.0
        self.page_no = 0
        self._fonts = {}
        self._advance = {}
        self.new_page()

    # ---- text measurement ---------------------------------------------
    def width(self, text: str, style: str) -> float:
        """Width in points: the sum of the glyphs' unhinted advances (kerning ignored, under 1%)."""
        from matplotlib.font_manager import FontProperties, findfont, get_font
        from matplotlib.ft2font import LoadFlags

        size, weight, _ = _STYLES[style]
        font = self._fonts.get((size, weight))
        if font is None:
            font = get_font(findfont(FontProperties(family="DejaVu Sans", weight=weight)))
            self._fonts[(size, weight)] = font
        total = 0.0
        for ch in text:
            key = (ch, size, weight)
            adv = self._advance.get(key)
            if adv is None:
                font.set_size(size, 72)
                glyph = font.load_char(ord(ch) if ch not in "\n\t" else 32, flags=LoadFlags.NO_HINTING)
                adv = self._advance[key] = glyph.linearHoriAdvance / 65536.0
            total += adv
        return total * 1.01

    def wrap(self, text: str, style: str, width: float) -> list[str]:
        lines = []
        for para in str(text).split("\n"):
            words = para.split(" ")
            line = ""
            for word in words:
                trial = word if not line else f"{line} {word}"
                if self.width(trial, style) <= width:
                    line = trial
                    continue
                if line:
                    lines.append(line)
                # A word longer than the line (a checksum) is cut where it must.
                while self.width(word, style) > width and len(word) > 1:
                    k = len(word)
                    while k > 1 and self.width(word[:k], style) > width:
                        k -= 1
                    lines.append(word[:k])
                    word = word[k:]
                line = word
            lines.append(line)
        return lines

    # ---- pages --------------------------------------------------------
    def new_page(self):
        from matplotlib.figure import Figure as MplFigure

        if self.fig is not None:
            self.finish_page()
        self.fig = MplFigure(figsize=(_PAGE_W / 72, _PAGE_H / 72))
        self.page_no += 1
        self.y = _MARGIN

    def finish_page(self):
        self.text_at(_MARGIN, _PAGE_H - _MARGIN / 2, f"{self.footer} - page {self.page_no}", "footer")
        self.pages.savefig(self.fig)
        self.fig = None

    def need(self, height: float):
        if self.y + height > _PAGE_H - _MARGIN:
            self.new_page()

    def text_at(self, x: float, y: float, text: str, style: str, ha="left"):
        size, weight, colour = _STYLES[style]
        self.fig.text(x / _PAGE_W, 1 - y / _PAGE_H, text, fontsize=size, fontweight=weight, color=colour,
                      va="top", ha=ha, family="DejaVu Sans", parse_math=False)

    def line(self, x0, x1, y, colour="0.55", width=0.6):
        from matplotlib.lines import Line2D

        self.fig.add_artist(Line2D([x0 / _PAGE_W, x1 / _PAGE_W], [1 - y / _PAGE_H] * 2, color=colour,
                                   linewidth=width, transform=self.fig.transFigure))

    # ---- blocks -------------------------------------------------------
    def paragraph(self, text: str, style: str = "normal", indent: float = 0.0, after: float = 5.0, bullet=False):
        size = _STYLES[style][0]
        lh = size * 1.35
        width = _PAGE_W - 2 * _MARGIN - indent - (10 if bullet else 0)
        lines = self.wrap(text, style, width)
        for k, ln in enumerate(lines):
            self.need(lh)
            if bullet and k == 0:
                self.text_at(_MARGIN + indent, self.y, "-", style)
            self.text_at(_MARGIN + indent + (10 if bullet else 0), self.y, ln, style)
            self.y += lh
        self.y += after

    def heading(self, text: str, level: int, then: float = 90.0):
        """A heading kept on one page with the first ``then`` points of what follows it."""
        style = "h2" if level <= 2 else "h3"
        size = _STYLES[style][0]
        self.need(size * 1.4 + then)
        self.y += 6 if level <= 2 else 3
        self.paragraph(text, style, after=2)
        if level <= 2:
            self.line(_MARGIN, _PAGE_W - _MARGIN, self.y - 1, "0.7")
            self.y += 3

    def table(self, t: Table):
        avail = _PAGE_W - 2 * _MARGIN
        pad = 6.0
        ncol = len(t.headers)
        natural, minimal = [], []
        al = t.alignment()
        for j in range(ncol):
            keep_whole = j < len(al) and al[j] == "r"
            cells = [(str(t.headers[j]), "head")] + [(str(r[j]), "cell") for r in t.rows]
            natural.append(max(self.width(c, st) for c, st in cells) + pad + 1.0)
            # Short cells of number columns ("1.013 to 1.025", "below 0.001") are kept on one line.
            minimal.append(max(self.width(w, st) for c, st in cells
                               for w in ([c] if keep_whole and len(c) <= 16 and st == "cell" else c.split(" ")))
                           + pad + 1.0)
        if sum(natural) <= avail:
            widths = natural
        elif sum(minimal) <= avail:
            # Every word fits whole; the room left goes to the columns that want it most.
            spare = avail - sum(minimal)
            want = [n - m for n, m in zip(natural, minimal)]
            total = sum(want) or 1.0
            widths = [m + spare * w / total for m, w in zip(minimal, want)]
        else:
            # Short columns (numbers) keep their width; the long-worded ones share the rest and break words.
            short = [m <= 70.0 for m in minimal]
            rest = avail - sum(m for m, sh in zip(minimal, short) if sh)
            long_total = sum(m for m, sh in zip(minimal, short) if not sh) or 1.0
            widths = [m if sh else max(30.0, m * rest / long_total) for m, sh in zip(minimal, short)]
        al = t.alignment()
        lh = _STYLES["cell"][0] * 1.3

        def row_lines(cells, style):
            out = []
            for j, c in enumerate(cells):
                c = str(c)
                room = max(widths[j] - pad, 10)
                out.append([c] if len(c) <= 16 and self.width(c, style) <= room + 0.5 else self.wrap(c, style, room))
            return out

        def draw_row(lines, style):
            height = max(len(ls) for ls in lines) * lh + 3
            x = _MARGIN
            for j, ls in enumerate(lines):
                for k, ln in enumerate(ls):
                    if al[j] == "r" if j < len(al) else False:
                        self.text_at(x + widths[j] - pad / 2, self.y + k * lh, ln, style, ha="right")
                    else:
                        self.text_at(x + pad / 2 - 3, self.y + k * lh, ln, style)
                x += widths[j]
            self.y += height

        head = row_lines(t.headers, "head")
        head_h = max(len(ls) for ls in head) * lh + 3
        total_w = sum(widths)

        def draw_head():
            draw_row(head, "head")
            self.line(_MARGIN, _MARGIN + total_w, self.y - 1.5)

        first = row_lines(t.rows[0], "cell") if t.rows else [[""]]
        self.need(head_h + max(len(ls) for ls in first) * lh + 6)
        draw_head()
        for row in t.rows:
            lines = row_lines(row, "cell")
            h = max(len(ls) for ls in lines) * lh + 3
            if self.y + h > _PAGE_H - _MARGIN:
                self.new_page()
                draw_head()
            draw_row(lines, "cell")
        self.line(_MARGIN, _MARGIN + total_w, self.y - 1.5, "0.8", 0.4)
        self.y += 3
        if t.caption:
            self.paragraph(t.caption, "caption", after=6)
        else:
            self.y += 5

    #: Axes size of a figure, the room under them for ticks and the axis label, and the least room it needs.
    FIGURE_W, FIGURE_H, FIGURE_BELOW = 250.0, 200.0, 34.0
    FIGURE_NEED = FIGURE_H + FIGURE_BELOW + 30

    def figure(self, f: Figure):
        w, h, below = self.FIGURE_W, self.FIGURE_H, self.FIGURE_BELOW
        self.need(self.FIGURE_NEED)
        bottom = self.y + h
        ax = self.fig.add_axes([(_MARGIN + 50) / _PAGE_W, 1 - bottom / _PAGE_H, w / _PAGE_W, (h - 10) / _PAGE_H])
        figures.draw_figure(ax, f.kind, f.data, title=False, square=True)
        for item in [ax.xaxis.label, ax.yaxis.label] + ax.get_xticklabels() + ax.get_yticklabels():
            item.set_fontsize(7.5)
        self.y = bottom + below
        self.paragraph(f.caption, "caption", after=8)


def render_pdf(rep: Report, path: Path) -> None:
    """Lay the report out on A4 pages and write it as PDF (text kept as text, plots as vector drawings)."""
    import matplotlib
    from matplotlib.backends.backend_pdf import PdfPages

    from twofold import __version__

    meta = {"Title": rep.title, "Creator": f"Twofold {__version__}",
            "Producer": f"Twofold {__version__} with matplotlib {matplotlib.__version__}", "CreationDate": None}
    # TrueType fonts (type 42) keep the text selectable and searchable.
    with matplotlib.rc_context({"pdf.fonttype": 42, "font.family": "DejaVu Sans"}), \
            PdfPages(path, metadata=meta) as pages:
        pdf = _Pdf(pages, "Twofold report: " + rep.title)
        pdf.paragraph(rep.title, "title", after=2)
        pdf.paragraph(rep.subtitle, "note", after=8)
        for i, b in enumerate(rep.blocks):
            if isinstance(b, Heading):
                after = rep.blocks[i + 1] if i + 1 < len(rep.blocks) else None
                pdf.heading(b.text, b.level, then=pdf.FIGURE_NEED if isinstance(after, Figure) else 90.0)
            elif isinstance(b, Para):
                pdf.paragraph(b.text, b.style)
            elif isinstance(b, Bullets):
                for item in b.items:
                    pdf.paragraph(item, b.style if b.style in _STYLES else "normal", after=2, bullet=True)
                pdf.y += 4
            elif isinstance(b, Table):
                pdf.table(b)
            elif isinstance(b, Figure):
                pdf.figure(b)
        pdf.finish_page()
