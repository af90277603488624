"""The report as PDF, drawn with matplotlib's PdfPages (no system library needed).

Text flows down A4 pages from a cursor; tables fit the page width (smaller type, then wrapped
cells) and repeat their heading on each page they continue on; figures are numbered, with their
captions, as in the HTML.
"""

from __future__ import annotations

import contextlib
import textwrap
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from perfcheck.lazy import lazy_module

# matplotlib's PDF backend imports fontTools' subsetter at its top but calls it only to embed
# TrueType (Type 42) fonts; these pages embed Type 3 fonts (matplotlib's default), so the
# subsetter is bound lazily first and never loads
lazy_module("fontTools.subset")

import matplotlib  # noqa: E402
from matplotlib import _text_helpers  # noqa: E402
from matplotlib.artist import Artist  # noqa: E402
from matplotlib.backends.backend_pdf import PdfPages  # noqa: E402
from matplotlib.colors import to_rgba  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.font_manager import FontProperties  # noqa: E402
from matplotlib.ft2font import LoadFlags  # noqa: E402
from matplotlib.transforms import Affine2D  # noqa: E402

from perfcheck import figures  # noqa: E402

A4 = (8.27, 11.69)
MARGIN = 0.7
LINE = {"title": 0.32, "h": 0.26, "lead": 0.19, "para": 0.155, "pre": 0.12, "table": 0.15}
SIZE = {"title": 14, "h": 11, "lead": 10.5, "para": 8.5, "pre": 6.5, "table": 7}
WRAP = {"title": 64, "h": 84, "lead": 92, "para": 104, "pre": 125}
FIGURE_WIDTH = 0.84  # share of the text width, so that three figures fit on a page


class _Line(Artist):
    """One line of text, its baseline starting at (x, y) in fractions of the page.

    The pages place every line themselves, so the measuring pass of matplotlib's ``Text``
    (a layout of every glyph before the one that draws it) buys nothing here: the line goes
    to the renderer as ``Text`` sends a left-aligned line at its baseline, as plain text.
    """

    zorder = 3  # that of Text: the page draws in the same order

    def __init__(self, x: float, y: float, text: str, colour: str, **font: Any):
        super().__init__()
        self.xy, self.line, self.colour = (x, y), text, colour
        self.font = FontProperties(**font)

    def draw(self, renderer: Any) -> None:
        if not self.line:
            return
        gc = renderer.new_gc()
        gc.set_foreground(to_rgba(self.colour), isRGBA=True)
        x, y = self.get_transform().transform(self.xy)
        renderer.draw_text(gc, x, y, self.line, self.font, 0.0)
        gc.restore()


class _Picture(Artist):
    """Pixels (8-bit RGB, rows from the top) filling the box (x0, y0, x1, y1) in fractions of
    the page, embedded as they are (not resampled).

    ``imshow`` with ``interpolation="none"`` on an Axes spanning the box embeds them the same
    way, at the cost of building and drawing a whole (hidden) Axes.
    """

    def __init__(self, box: tuple[float, float, float, float], pixels: np.ndarray):
        super().__init__()
        self.box, self.pixels = box, pixels

    def draw(self, renderer: Any) -> None:
        (x0, y0), (x1, y1) = self.get_transform().transform([self.box[:2], self.box[2:]])
        gc = renderer.new_gc()
        # the image spans the unit square; its first row goes to the top, as imshow puts it
        renderer.draw_image(gc, x0, y0, self.pixels,
                            Affine2D().scale(x1 - x0, y0 - y1).translate(0, y1 - y0))
        gc.restore()


@contextlib.contextmanager
def _glyph_positions_only() -> Iterator[None]:
    """Within: matplotlib's PDF backend lays its lines out without loading each glyph.

    Its layout (``matplotlib._text_helpers.layout``) loads every glyph into the font as it
    places it, which only a raster backend draws from; the PDF backend takes the positions
    and glyph numbers of that layout and embeds the glyphs from the font file when the
    document closes, and matplotlib's own glyph tracking for PDF fonts lays text out the same
    way without the load. The pages come out byte for byte the same (a test compares them),
    in about a third less time. Features or a language of the text go through unchanged. It
    replaces a private function of matplotlib 3.11, so any other version lays text out as
    shipped.
    """
    if not matplotlib.__version__.startswith("3.11."):  # the layout checked; others as shipped
        yield
        return
    original = _text_helpers.layout

    def positions(string: str, font: Any, *, features: Any = None,
                  language: Any = None) -> Any:
        return font._layout(string, LoadFlags.NO_HINTING, features=features,
                            language=language)

    _text_helpers.layout = positions
    try:
        yield
    finally:
        _text_helpers.layout = original


class Pages:
    """A cursor over A4 pages; ``need(h)`` starts a new page when ``h`` inches do not fit."""

    def __init__(self, pdf: PdfPages, footer: str):
        self.pdf, self.footer, self.fig, self.y, self.n = pdf, footer, None, 0.0, 0

    def new(self) -> None:
        self.close()
        self.n += 1
        self.fig = Figure(figsize=A4, facecolor="white")
        self.line(MARGIN, 0.35, f"{self.footer}  ·  page {self.n}", size=6.5,
                  colour=figures.MUTED)
        self.fig.add_artist(_rule(A4[1] - 0.45))
        self.y = A4[1] - MARGIN

    def close(self) -> None:
        if self.fig is not None:
            self.pdf.savefig(self.fig)
            self.fig = None

    def need(self, h: float) -> None:
        if self.fig is None or self.y - h < MARGIN:
            self.new()

    def line(self, x: float, y: float, text: str, colour: str = figures.INK,
             **font: Any) -> None:
        """A line of text on the page, its baseline starting at (x, y) [in]; ``font``:
        FontProperties (size, weight, family, style)."""
        self.fig.add_artist(_Line(x / A4[0], y / A4[1], text, colour, **font))

    def text(self, kind: str, line: str, x: float = MARGIN, **kw: Any) -> None:
        self.need(LINE[kind])
        self.y -= LINE[kind]
        style: dict[str, Any] = dict(size=SIZE[kind], colour=figures.INK)
        if kind in ("title", "h"):
            style.update(weight="bold", colour=figures.MEASURED if kind == "h" else
                         figures.INK)
        if kind == "lead":
            style.update(colour=figures.MEASURED)
        if kind == "pre":
            style.update(family="monospace")
        style.update(kw)
        self.line(x, self.y, line, **style)


def _rule(y_in: float):
    from matplotlib.lines import Line2D

    x0, x1 = MARGIN / A4[0], 1 - MARGIN / A4[0]
    return Line2D([x0, x1], [y_in / A4[1]] * 2, color=figures.GRID, lw=0.8)


# Average glyph width of the PDF's sans-serif font in tables, as a share of its size (DejaVu
# Sans digits are 0.64 em, lower-case letters about 0.55; common practice for layout).
GLYPH_EM = 0.6
TABLE_SIZES = (7.0, 6.0, 5.5)  # tried in turn before long cells are wrapped


def _columns(head: list[str], rows: list[list[str]]) -> tuple[float, list[int]]:
    """The font size and each column's width [characters]: headings wrap at their words; the
    largest size of ``TABLE_SIZES`` at which the body fits the text width unwrapped, else the
    smallest with the widest columns narrowed, never below their longest word."""
    width_pt = (A4[0] - 2 * MARGIN) * 72
    cols = list(zip(*[head, *rows], strict=True))
    words = [max(len(w) for c in col for w in (str(c).split() or [""])) + 2 for col in cols]
    widths = [max([len(str(c)) + 2 for c in col[1:]] + [w]) for col, w in zip(cols, words,
                                                                              strict=True)]
    for size in TABLE_SIZES:
        cap = int(width_pt / (GLYPH_EM * size))
        if sum(widths) <= cap:
            return size, widths
    while sum(widths) > cap:
        wider = [i for i, (w, m) in enumerate(zip(widths, words, strict=True)) if w > m]
        if not wider:
            break
        i = max(wider, key=lambda k: widths[k])
        widths[i] -= 1
    return size, widths


def _table(pages: Pages, head: list[str], rows: list[list[str]]) -> None:
    """A table whose columns fit the page; a row never splits, and a page the table continues
    on starts with the heading again."""
    size, widths = _columns(head, rows)
    scale = (A4[0] - 2 * MARGIN) / sum(widths)
    xs = [MARGIN + scale * sum(widths[:i]) for i in range(len(head))]
    step = LINE["table"] * size / SIZE["table"]

    def draw(row: list[str], bold: bool) -> None:
        cells = [textwrap.wrap(str(c), max(w - 2, 1), break_long_words=False) or [""]
                 for c, w in zip(row, widths, strict=True)]
        height = step * max(len(c) for c in cells)
        if pages.fig is None or pages.y - height < MARGIN:
            pages.new()
            if not bold:
                draw(head, True)
        for x, lines in zip(xs, cells, strict=True):
            for k, line in enumerate(lines):
                pages.line(x, pages.y - step * (k + 1), line, size=size,
                           weight="bold" if bold else "normal")
        pages.y -= height

    pages.need(step * 3)
    draw(head, True)
    for row in rows:
        draw(row, False)
    pages.y -= LINE["table"] * 0.6


def _figures(pages: Pages, pixels: dict[str, np.ndarray], notes: dict[str, str]) -> None:
    """Every figure, numbered, with its caption and, where ``notes`` has one for its stem,
    the note on it that the data of this report call for."""
    for n, (stem, caption, _) in enumerate(figures.FIGURES, 1):
        # the PNG's 8-bit channels as they are: matplotlib embeds them without normalising
        # a float image first
        img = pixels[stem]
        width = (A4[0] - 2 * MARGIN) * FIGURE_WIDTH
        height = width * img.shape[0] / img.shape[1]
        left = (A4[0] - width) / 2
        note = notes.get(stem)
        lines = _wrap(note, WRAP["para"] + 8) if note else []
        pages.need(height + 0.55 + len(lines) * LINE["para"])  # the note stays with it
        pages.fig.add_artist(_Picture((left / A4[0], (pages.y - height) / A4[1],
                                       (left + width) / A4[0], pages.y / A4[1]), img))
        pages.y -= height + 0.05
        for line in _wrap(f"Figure {n}. {caption}", WRAP["para"] + 8):
            pages.text("para", line, x=left, size=7.5, colour=figures.MUTED, style="italic")
        for line in lines:
            pages.text("para", line, x=left, size=7.5)
        pages.y -= 0.15


def _wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width) or [""]


def write_pdf(blocks: list[tuple[str, Any]], pixels: dict[str, np.ndarray], path: Path,
              title: str) -> None:
    """Write text blocks ``(kind, content)`` and the figures (their PNGs' pixels, 8-bit RGB,
    by stem: :func:`perfcheck.figures.pixels`) to ``path`` (A4 PDF).

    Kinds: ``title``, ``h``, ``lead``, ``para`` (a string each), ``pre`` (preformatted text),
    ``table`` (``(head, rows)``, months or items down), ``figures`` (all figures, numbered,
    with their captions; the content a dict of notes by figure stem, or None).
    """
    with (_glyph_positions_only(),
          PdfPages(path, metadata={"Title": title, "Creator": "perfcheck"}) as pdf):
        pages = Pages(pdf, title)
        for kind, content in blocks:
            if kind == "figures":
                _figures(pages, pixels, content or {})
            elif kind == "table":
                _table(pages, *content)
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
