"""The report as a PDF file, laid out on A4 pages with matplotlib (no other program needed).

Text flows down the page in lines wrapped to the text width; tables are drawn as rows of
wrapped cells; figures are placed at the text width (smaller if the page is short of room) with
their captions. Fonts are matplotlib's own (DejaVu Sans), embedded in the file.
"""

from __future__ import annotations

import io
import textwrap

import numpy as np

from dic.report._document import FigureBlock, Paragraph, Table

__all__ = ["render_pdf"]

_PAGE = (8.27, 11.69)  # A4 portrait, inches
_MARGIN = 0.75
_TEXT_W = _PAGE[0] - 2 * _MARGIN
_BOTTOM = _PAGE[1] - _MARGIN - 0.25  # lowest text line (inches from the top), above the footer
_INK, _MUTED, _ACCENT, _WARN = "#1b1f24", "#5b6470", "#1f4e79", "#8a4b08"


def _shrink(h):
    """Share of its height a figure ``h`` inches tall may shrink to, to fit the room left on a
    page: tall figures (stacked maps, over 6 inches) to 60 %, others to 85 % so that their text stays
    readable."""
    return 0.6 if h > 6.0 else 0.85

# average advance of a DejaVu Sans character, in em (measured on English text; rough)
_CHAR_EM = 0.55


def _chars(width_in, size_pt):
    return max(10, int(width_in * 72.0 / (_CHAR_EM * size_pt)))


class _Pages:
    """A cursor over A4 pages; ``y`` is inches from the top of the page."""

    def __init__(self, pdf, title):
        self.pdf = pdf
        self.title = title
        self.fig = None
        self.page = 0
        self.y = 0.0

    # -- pages --------------------------------------------------------------------------------
    def new_page(self):
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        self.finish_page()
        self.fig = Figure(figsize=_PAGE)
        FigureCanvasAgg(self.fig)
        self.page += 1
        self.y = _MARGIN

    def finish_page(self):
        if self.fig is None:
            return
        self.fig.text(_MARGIN / _PAGE[0], 0.45 / _PAGE[1], self.title, fontsize=7.5,
                      color=_MUTED, ha="left", va="bottom")
        self.fig.text(1 - _MARGIN / _PAGE[0], 0.45 / _PAGE[1], f"page {self.page}",
                      fontsize=7.5, color=_MUTED, ha="right", va="bottom")
        self.pdf.savefig(self.fig)
        self.fig = None

    def room(self, height):
        """Start a new page unless ``height`` inches still fit on this one."""
        if self.fig is None or self.y + height > _BOTTOM:
            self.new_page()

    # -- drawing ------------------------------------------------------------------------------
    def _text(self, x_in, y_in, text, **kw):
        self.fig.text(x_in / _PAGE[0], 1 - y_in / _PAGE[1], text, va="top", ha="left", **kw)

    def lines(self, text, size=9.5, color=_INK, weight="normal", indent=0.0, gap=0.08,
              width=None):
        width = (_TEXT_W - indent) if width is None else width
        wrapped = textwrap.wrap(text, _chars(width, size)) or [""]
        step = size * 1.4 / 72.0
        for line in wrapped:
            self.room(step)
            self._text(_MARGIN + indent, self.y, line, fontsize=size, color=color,
                       fontweight=weight)
            self.y += step
        self.y += gap

    def heading(self, text, size=14, need=0.9):
        # never alone at a page foot: keep it with the start of what follows
        self.room(size * 1.5 / 72.0 + 0.16 + max(need, 0.9))
        self.y += 0.12
        self._text(_MARGIN, self.y, text, fontsize=size, color=_ACCENT, fontweight="bold")
        self.y += size * 1.5 / 72.0 + 0.04

    def caution(self, text):
        size = 9.5
        wrapped = textwrap.wrap(text, _chars(_TEXT_W - 0.25, size))
        step = size * 1.4 / 72.0
        height = step * len(wrapped) + 0.12
        self.room(height)
        from matplotlib.patches import Rectangle

        top = self.y - 0.04
        self.fig.add_artist(Rectangle((_MARGIN / _PAGE[0], 1 - (top + height) / _PAGE[1]),
                                      0.04 / _PAGE[0], height / _PAGE[1], color=_WARN,
                                      transform=self.fig.transFigure))
        self.y += 0.02
        for line in wrapped:
            self._text(_MARGIN + 0.18, self.y, line, fontsize=size, color=_INK)
            self.y += step
        self.y += 0.16

    # -- heights, to keep things together --------------------------------------------------
    @staticmethod
    def lines_height(text, size=9.5, gap=0.08):
        return len(textwrap.wrap(text, _chars(_TEXT_W, size)) or [""]) * size * 1.4 / 72.0 + gap

    @staticmethod
    def _table_layout(t: Table):
        size = 8.5
        ncol = max(len(r) for r in ([t.header] if t.header else []) + list(t.rows))
        # column widths in proportion to the longest cell text, each at least 12 % and wide
        # enough for its longest word (a word is never broken, as "Interpolat-ion" was)
        rows = list(t.rows) + ([t.header] if t.header else [])
        cells = [[str(r[i]) if i < len(r) else "" for r in rows] for i in range(ncol)]
        longest = np.array([max([len(c) for c in col] + [4]) for col in cells], dtype=float)
        word = np.array([max([len(w) for c in col for w in c.split()] + [1])
                         for col in cells], dtype=float)
        floor = np.maximum(0.12, (word * _CHAR_EM * size / 72.0 + 0.12) / _TEXT_W)
        if not t.header and ncol == 2:
            longest = np.array([0.34, 0.66])
        share = longest / longest.sum()
        # columns below their floor get it; the others share the rest as before
        fixed = np.zeros(ncol, bool)
        for _ in range(ncol):
            low = ~fixed & (share < floor)
            if not low.any():
                break
            fixed |= low
            rest = max(1.0 - floor[fixed].sum(), 0.0)
            free = longest * ~fixed
            share = np.where(fixed, floor, rest * free / max(free.sum(), 1e-12))
        widths = share / share.sum() * _TEXT_W
        return size, ncol, widths

    @classmethod
    def table_height(cls, t: Table, rows=None):
        size, ncol, widths = cls._table_layout(t)
        step = size * 1.35 / 72.0
        body = list(t.rows) if rows is None else list(t.rows)[:rows]
        total = 0.12
        for cells in ([t.header] if t.header else []) + body:
            cells = list(cells) + [""] * (ncol - len(cells))
            n = max(len(textwrap.wrap(str(c), _chars(w - 0.1, size)) or [""])
                    for c, w in zip(cells, widths))
            total += step * n + 0.06
        return total

    @staticmethod
    def figure_size(f: FigureBlock):
        """(natural height, caption height) in inches at the text width."""
        cap = textwrap.wrap(f"Figure 00. {f.caption}", _chars(_TEXT_W, 8.5))
        cap_h = len(cap) * 8.5 * 1.35 / 72.0 + 0.1
        h = _TEXT_W * f.height / f.width
        return min(h, _BOTTOM - _MARGIN - cap_h - 0.1), cap_h

    @classmethod
    def need(cls, block, whole=False):
        """Room (inches) that must be left for the start of ``block`` (all of it if
        ``whole``)."""
        if isinstance(block, Paragraph):
            return cls.lines_height(block.text, 8.5 if block.kind == "note" else 9.5)
        if isinstance(block, Table):
            return cls.table_height(block, None if whole else 3)
        if isinstance(block, FigureBlock):
            h, cap_h = cls.figure_size(block)
            return _shrink(h) * h + cap_h + 0.1
        return 0.0

    def table(self, t: Table):
        from matplotlib.lines import Line2D

        size, ncol, widths = self._table_layout(t)
        step = size * 1.35 / 72.0
        xs = _MARGIN + np.concatenate([[0.0], np.cumsum(widths)[:-1]])

        def row(cells, bold=False, color=_INK):
            cols = [textwrap.wrap(str(c), _chars(w - 0.1, size)) or [""]
                    for c, w in zip(cells, widths)]
            height = step * max(len(c) for c in cols) + 0.06
            self.room(height)
            for x, c in zip(xs, cols):
                for j, line in enumerate(c):
                    self._text(x, self.y + 0.03 + j * step, line, fontsize=size,
                               color=color, fontweight="bold" if bold else "normal")
            self.y += height
            yy = 1 - self.y / _PAGE[1]
            self.fig.add_artist(Line2D([_MARGIN / _PAGE[0], 1 - _MARGIN / _PAGE[0]], [yy, yy],
                                       color="#d5dae0", linewidth=0.6,
                                       transform=self.fig.transFigure))

        if t.header:
            self.room(3 * step + 0.3)  # keep the header with the first rows
            row(t.header, bold=True)
        for r in t.rows:
            row(list(r) + [""] * (ncol - len(r)))
        if t.caption:
            self.lines(t.caption, size=8, color=_MUTED)
        self.y += 0.12

    def figure(self, f: FigureBlock, number):
        from matplotlib.image import imread

        img = imread(io.BytesIO(f.png), format="png")
        h_px, w_px = img.shape[:2]
        cap = f"Figure {number}. {f.caption}"
        cap_lines = len(textwrap.wrap(cap, _chars(_TEXT_W, 8.5)))
        cap_h = cap_lines * 8.5 * 1.35 / 72.0 + 0.1
        full = _BOTTOM - _MARGIN - cap_h - 0.1
        w = _TEXT_W
        h = w * h_px / w_px
        if h > full:  # taller than a page: shrink to fit one
            h, w = full, full * w_px / h_px
        if self.fig is None or self.y + h + cap_h > _BOTTOM:
            # shrink rather than leave much of a page blank
            left = _BOTTOM - self.y - cap_h - 0.1
            if self.fig is not None and left >= _shrink(h) * h:
                w, h = w * left / h, left
            else:
                self.new_page()
        ax = self.fig.add_axes([(_MARGIN + (_TEXT_W - w) / 2) / _PAGE[0],
                                1 - (self.y + h) / _PAGE[1], w / _PAGE[0], h / _PAGE[1]])
        ax.imshow(img, interpolation="antialiased")
        ax.set_axis_off()
        self.y += h + 0.08
        self.lines(cap, size=8.5, color=_MUTED, gap=0.18)


def _paired(blocks, j):
    """Whether block ``j`` and the next are a table and a figure that belong together (and
    fit on one page)."""
    if j + 1 >= len(blocks):
        return False
    a, b = blocks[j], blocks[j + 1]
    pair = ((isinstance(a, Table) and isinstance(b, FigureBlock))
            or (isinstance(a, FigureBlock) and isinstance(b, Table)))
    return pair and (_Pages.need(a, whole=True) + _Pages.need(b, whole=True)
                     <= _BOTTOM - _MARGIN)


def _keep(blocks, j):
    """Room that block ``j`` needs at once: its start, or all of it and its partner."""
    if j >= len(blocks):
        return 0.0
    if _paired(blocks, j):
        return _Pages.need(blocks[j], whole=True) + _Pages.need(blocks[j + 1], whole=True)
    return _Pages.need(blocks[j])


def render_pdf(doc, path):
    """Write the report as a PDF file at ``path`` (a pathlib.Path)."""
    from matplotlib.backends.backend_pdf import PdfPages

    with PdfPages(path, metadata={"Title": doc.title, "Subject": doc.subtitle,
                                  "Creator": doc.footer}) as pdf:
        pages = _Pages(pdf, doc.title)
        pages.new_page()
        pages._text(_MARGIN, pages.y, doc.title, fontsize=18, color=_ACCENT, fontweight="bold")
        pages.y += 0.45
        pages.lines(f"{doc.subtitle} \u00b7 made {doc.generated}", size=10, color=_MUTED,
                    gap=0.2)
        pages.lines("Contents: " + "; ".join(f"{i}. {s.title}" for i, s in
                                              enumerate(doc.sections, 1)),
                    size=9, color=_MUTED, gap=0.15)
        number = 0
        for i, s in enumerate(doc.sections, 1):
            blocks = list(s.blocks)
            need = _keep(blocks, 0)
            if len(blocks) > 1 and isinstance(blocks[0], Paragraph) and need < 2.0:
                need += _keep(blocks, 1)  # a short lead-in stays with what it introduces
            pages.heading(f"{i}. {s.title}", need=need)
            for j, b in enumerate(blocks):
                if pages.fig is not None and _paired(blocks, j):
                    pages.room(_keep(blocks, j))  # a table and its figure on one page
                if isinstance(b, Paragraph):
                    if b.kind == "caution":
                        pages.caution(b.text)
                    elif b.kind == "note":
                        pages.lines(b.text, size=8.5, color=_MUTED)
                    else:
                        pages.lines(b.text)
                elif isinstance(b, Table):
                    pages.table(b)
                elif isinstance(b, FigureBlock):
                    number += 1
                    pages.figure(b, number)
        pages.lines(doc.footer, size=8, color=_MUTED)
        pages.finish_page()
    return path
