"""The report as PDF, drawn with matplotlib's PdfPages (no system library needed).

Text flows down A4 pages from a cursor; figures are placed two to a page with their captions.
"""

from __future__ import annotations

import io
import textwrap
from pathlib import Path
from typing import Any

import matplotlib.image as mpimg
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from perfcheck import figures

A4 = (8.27, 11.69)
MARGIN = 0.7
LINE = {"title": 0.32, "h": 0.26, "lead": 0.19, "para": 0.155, "pre": 0.12, "table": 0.15}
SIZE = {"title": 14, "h": 11, "lead": 10.5, "para": 8.5, "pre": 6.5, "table": 7}
WRAP = {"title": 64, "h": 84, "lead": 92, "para": 104, "pre": 125}
FIGURE_WIDTH = 0.84  # share of the text width, so that three figures fit on a page


class Pages:
    """A cursor over A4 pages; ``need(h)`` starts a new page when ``h`` inches do not fit."""

    def __init__(self, pdf: PdfPages, footer: str):
        self.pdf, self.footer, self.fig, self.y, self.n = pdf, footer, None, 0.0, 0

    def new(self) -> None:
        self.close()
        self.n += 1
        self.fig = Figure(figsize=A4, facecolor="white")
        self.fig.text(MARGIN / A4[0], 0.35 / A4[1], f"{self.footer}  ·  page {self.n}",
                      fontsize=6.5, color=figures.MUTED)
        self.fig.add_artist(_rule(A4[1] - 0.45))
        self.y = A4[1] - MARGIN

    def close(self) -> None:
        if self.fig is not None:
            self.pdf.savefig(self.fig)
            self.fig = None

    def need(self, h: float) -> None:
        if self.fig is None or self.y - h < MARGIN:
            self.new()

    def text(self, kind: str, line: str, x: float = MARGIN, **kw: Any) -> None:
        self.need(LINE[kind])
        self.y -= LINE[kind]
        style = dict(fontsize=SIZE[kind], color=figures.INK, va="baseline")
        if kind in ("title", "h"):
            style.update(fontweight="bold", color=figures.MEASURED if kind == "h" else
                         figures.INK)
        if kind == "lead":
            style.update(color=figures.MEASURED)
        if kind == "pre":
            style.update(family="monospace")
        style.update(kw)
        self.fig.text(x / A4[0], self.y / A4[1], line, **style)


def _rule(y_in: float):
    from matplotlib.lines import Line2D

    x0, x1 = MARGIN / A4[0], 1 - MARGIN / A4[0]
    return Line2D([x0, x1], [y_in / A4[1]] * 2, color=figures.GRID, lw=0.8)


def _table(pages: Pages, head: list[str], rows: list[list[str]]) -> None:
    width = A4[0] - 2 * MARGIN
    chars = [max(len(str(r[i])) for r in [head, *rows]) + 2 for i in range(len(head))]
    scale = width / sum(chars)
    xs = [MARGIN + scale * sum(chars[:i]) for i in range(len(head))]
    pages.need(LINE["table"] * 2)
    for r, row in enumerate([head, *rows]):
        if r:
            pages.need(LINE["table"])
        pages.y -= LINE["table"]
        for x, cell in zip(xs, row, strict=True):
            pages.fig.text(x / A4[0], pages.y / A4[1], str(cell), fontsize=SIZE["table"],
                           color=figures.INK, fontweight="bold" if r == 0 else "normal")
    pages.y -= LINE["table"] * 0.6


def _monthly(pages: Pages, head: list[str], rows: list[list[str]], per_block: int = 4) -> None:
    """The monthly table turned on its side (a row per quantity), four months per block."""
    for i in range(0, max(len(rows), 1), per_block):
        block = rows[i:i + per_block]
        t_head = ["Quantity"] + [r[0] for r in block]
        t_rows = [[h] + [r[k] for r in block] for k, h in enumerate(head) if k > 0]
        _table(pages, t_head, t_rows)


def _figures(pages: Pages, pngs: dict[str, bytes]) -> None:
    pages.need(10)  # figures start on a fresh page
    pages.text("h", "Figures")
    for stem, caption, _ in figures.FIGURES:
        img = mpimg.imread(io.BytesIO(pngs[stem]))
        width = (A4[0] - 2 * MARGIN) * FIGURE_WIDTH
        height = width * img.shape[0] / img.shape[1]
        left = (A4[0] - width) / 2
        pages.need(height + 0.55)
        ax = pages.fig.add_axes([left / A4[0], (pages.y - height) / A4[1], width / A4[0],
                                 height / A4[1]])
        ax.imshow(img, interpolation="none")
        ax.set_axis_off()
        pages.y -= height + 0.05
        for line in _wrap(caption, WRAP["para"] + 8):
            pages.text("para", line, x=left, fontsize=7.5, color=figures.MUTED, style="italic")
        pages.y -= 0.15


def _wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width) or [""]


def write_pdf(blocks: list[tuple[str, Any]], pngs: dict[str, bytes], path: Path,
              title: str) -> None:
    """Write text blocks ``(kind, content)`` and the figures (PNG bytes) to ``path`` (A4 PDF).

    Kinds: ``title``, ``h``, ``lead``, ``para`` (a string each), ``pre`` (preformatted text),
    ``table`` and ``monthly`` (``(head, rows)``), ``figures`` (all figures, from a fresh page).
    """
    with PdfPages(path, metadata={"Title": title, "Creator": "perfcheck"}) as pdf:
        pages = Pages(pdf, title)
        for kind, content in blocks:
            if kind == "figures":
                _figures(pages, pngs)
                pages.need(99)
            elif kind == "table":
                _table(pages, *content)
            elif kind == "monthly":
                _monthly(pages, *content)
            elif kind == "pre":
                for raw in content.splitlines():
                    for line in _wrap(raw, WRAP["pre"]) if raw else [""]:
                        pages.text("pre", line)
            elif kind in ("title", "h"):
                pages.need(LINE[kind] + 3 * LINE["para"])  # keep a heading with its text
                pages.y -= 0.08
                for line in _wrap(content, WRAP[kind]):
                    pages.text(kind, line)
                pages.y -= 0.04
            else:
                for line in _wrap(content, WRAP[kind]):
                    pages.text(kind, line)
                pages.y -= 0.07
        pages.close()
