"""Documents laid out straight onto the canvas: text blocks, ruled grids, figures and boxes
stacked down A4 pages with simple height arithmetic and page breaks.

The certificate used platypus (a Paragraph or Table per piece, wrapped, split and drawn by
a general layout engine); measured, it took 33.5 ms where its text and plots drawn on a
plain canvas took 10.7 ms (issue 13). Here each block knows its width when it is made,
so its lines are wrapped and its height is known at once; a :class:`Sheet` places blocks
top down, keeps a group on one page when it fits there, and splits a block taller than
what is left (a grid between rows, repeating its heading rows; a text between lines).

The pages look like our platypus documents: same page, margins, running header and footer
("page x of y", :func:`shopapp.reports.common.document_canvas`), same fonts and styles.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence
from io import BytesIO

from reportlab.lib.colors import Color
from reportlab.lib.rl_accel import escapePDF, fp_str
from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfgen.canvas import Canvas

from shopapp.charts import Figure
from shopapp.reports.common import (
    BODY_BOTTOM,
    BODY_TOP,
    INK,
    MARGIN,
    PAGE_SIZE,
    RULE,
    SHADE,
    STYLES,
    DocumentMeta,
    document_canvas,
    pdf_text,
    text_width,
)
from shopapp.reports.drawing import draw_figure

CONTENT_WIDTH = PAGE_SIZE[0] - 2 * MARGIN

# Table cells: the grid_table look (cell styles, 3 pt side and 2 pt top/bottom padding).
CELL_PAD_X = 3.0
CELL_PAD_Y = 2.0


# Control characters that are not white space print as "?" (the standard fonts have no
# glyph for them), as pdf_text prints what Windows-1252 lacks; white space separates words.
_CONTROLS = str.maketrans({c: "?" for c in (*range(32), 127) if not chr(c).isspace()})


def wrap(text: str, font: str, size: float, width: float) -> list[str]:
    """``text`` (made printable, runs of white space folded) in lines no wider than ``width``.

    Lines break between words; a word wider than a whole line is cut where it reaches the
    edge (a serial number or URL with no spaces must not run off the page).
    """
    words = pdf_text(text).translate(_CONTROLS).split()
    line = " ".join(words)
    if not line:
        return []
    if text_width(line, font, size) <= width:
        return [line]
    space = text_width(" ", font, size)
    lines: list[str] = []
    current: list[str] = []
    used = 0.0
    for word in words:
        w = text_width(word, font, size)
        if current and used + space + w <= width:
            current.append(word)
            used += space + w
            continue
        if current:
            lines.append(" ".join(current))
        while w > width:  # cut an overlong word, at least one character a line
            cut = len(word) - 1
            while cut > 1 and text_width(word[:cut], font, size) > width:
                cut -= 1
            lines.append(word[:cut])
            word = word[cut:]
            w = text_width(word, font, size)
        current, used = [word], w
    lines.append(" ".join(current))
    return lines


# A document uses a handful of sizes and colours, each formatted once per process
# (reportlab's fp_str at every change of style cost more than the rest of writing a line).
_number = functools.cache(fp_str)


@functools.cache
def _fill_op(red: float, green: float, blue: float) -> str:
    return f"{fp_str(red, green, blue)} rg"


class Page:
    """A page being drawn: its canvas, and the text operators of every line on it, written
    as one PDF text object over the page's rules and shading when the page is done.

    A line is written as the operators reportlab's text object writes for it (text matrix,
    then the Windows-1252 bytes of the text shown), without the object's general path: font
    lookup, encoding through its codec and substitution fonts for every line cost more
    than the rest of the certificate's layout. ``wrap`` hands over only Windows-1252 text
    without control characters, the case where the two ways write the same bytes
    (``tests/reports/test_sheet.py`` compares them on pixels).
    """

    def __init__(self, canvas: Canvas, fonts: dict[str, str]) -> None:
        self.canvas = canvas
        self._fonts = fonts  # font name -> the document's resource name (/F1, ...)
        self._ops: list[str] = []
        self._style: ParagraphStyle | None = None
        self._font: tuple[str, float] | None = None
        self._colour: Color | None = None

    def write(self, style: ParagraphStyle, x: float, y: float, line: str) -> None:
        """One line of text in ``style`` with its baseline starting at (``x``, ``y``)."""
        ops = self._ops
        if style is not self._style:
            font = (style.fontName, style.fontSize)
            if font != self._font:
                name = self._fonts.get(style.fontName)
                if name is None:
                    name = self.canvas._doc.getInternalFontName(style.fontName)
                    self._fonts[style.fontName] = name
                ops.append(f"{name} {_number(style.fontSize)} Tf")
                self._font = font
            colour = style.textColor
            if colour != self._colour:
                ops.append(_fill_op(colour.red, colour.green, colour.blue))
                self._colour = colour
            self._style = style
        # positions to 1/1000 pt (reportlab's fp_str, to 4 or 5 digits, cost more than the
        # rest of the line; a thousandth of a point is far below a printer's dot)
        ops.append(f"1 0 0 1 {x:.3f} {y:.3f} Tm ({escapePDF(line.encode('cp1252'))}) Tj")

    def finish(self) -> None:
        """Draw the page's texts (over everything else drawn on it)."""
        if self._ops:
            self.canvas.addLiteral("BT\n" + "\n".join(self._ops) + "\nET")
            self._ops = []


class Block:
    """Something placed on a page: its height (points), the space it wants above and below."""

    height: float = 0.0
    space_before: float = 0.0
    space_after: float = 0.0

    def draw(self, page: Page, x: float, top: float) -> None:
        """Draw with the top left corner at (``x``, ``top``)."""
        raise NotImplementedError

    def split(self, room: float) -> tuple[Block, Block] | None:
        """A head no taller than ``room`` and the rest, or None when it cannot split there."""
        return None


class Gap(Block):
    """Empty space (dropped at the top of a page, as platypus drops a spacer there)."""

    def __init__(self, height: float) -> None:
        self.space_before = height

    def draw(self, page: Page, x: float, top: float) -> None:
        return None


class Text(Block):
    """A paragraph of plain text in a paragraph style, wrapped to ``width``.

    ``lines`` given: drawn as they are (for texts wrapped once and cached). ``align``:
    "left", "right" or "centre" within ``width``.
    """

    def __init__(self, text: str, style: ParagraphStyle, width: float, *,
                 lines: Sequence[str] | None = None, align: str = "left") -> None:
        self.style = style
        self.width = width
        self.align = align
        self.lines = list(lines) if lines is not None else wrap(
            text, style.fontName, style.fontSize, width)
        self.height = len(self.lines) * style.leading
        self.space_before = style.spaceBefore
        self.space_after = style.spaceAfter

    def draw(self, page: Page, x: float, top: float) -> None:
        st = self.style
        y = top - st.fontSize
        for line in self.lines:
            left = x
            if self.align != "left":
                spare = self.width - text_width(line, st.fontName, st.fontSize)
                left += spare if self.align == "right" else spare / 2
            page.write(st, left, y, line)
            y -= st.leading

    def split(self, room: float) -> tuple[Block, Block] | None:
        n = int(room // self.style.leading)
        if n < 1 or n >= len(self.lines):
            return None
        head = Text("", self.style, self.width, lines=self.lines[:n], align=self.align)
        tail = Text("", self.style, self.width, lines=self.lines[n:], align=self.align)
        head.space_after = tail.space_before = 0.0
        return head, tail


# A grid cell: its lines, whether bold (heading row, label column), whether right-aligned.
_Cell = tuple[list[str], bool, bool]


class Grid(Block):
    """A ruled table: shaded heading row(s), optional shaded label column, numbers right.

    The look of :func:`shopapp.reports.common.grid_table`; cells are texts wrapped to
    their column. A grid split over pages repeats its heading rows.
    """

    def __init__(self, rows: Sequence[Sequence[str]], widths: Sequence[float], *,
                 header_rows: int = 1, label_column: bool = False,
                 align_right_from: int | None = None) -> None:
        self.widths = list(widths)
        self.header_rows = header_rows
        self.label_column = label_column
        plain, bold = STYLES.cell, STYLES.cell_bold
        line_height = plain.leading  # the bold cell style has the same
        self.rows: list[list[_Cell]] = []
        self.row_heights: list[float] = []
        for r, row in enumerate(rows):
            cells: list[_Cell] = []
            most = 1
            for c, value in enumerate(row):
                is_bold = r < header_rows or (label_column and c == 0)
                st = bold if is_bold else plain
                right = align_right_from is not None and c >= align_right_from and r >= header_rows
                lines = wrap(value, st.fontName, st.fontSize, self.widths[c] - 2 * CELL_PAD_X)
                most = max(most, len(lines))
                cells.append((lines, is_bold, right))
            self.rows.append(cells)
            self.row_heights.append(most * line_height + 2 * CELL_PAD_Y)
        self.height = sum(self.row_heights)

    def _part(self, rows: list[list[_Cell]], heights: list[float]) -> Grid:
        part = Grid.__new__(Grid)
        part.widths, part.header_rows, part.label_column = (
            self.widths, self.header_rows, self.label_column)
        part.rows, part.row_heights, part.height = rows, heights, sum(heights)
        return part

    def split(self, room: float) -> tuple[Block, Block] | None:
        h = self.header_rows
        used, n = sum(self.row_heights[:h]), h
        while n < len(self.rows) and used + self.row_heights[n] <= room:
            used += self.row_heights[n]
            n += 1
        if n == h or n == len(self.rows):
            return None
        head = self._part(self.rows[:n], self.row_heights[:n])
        tail = self._part(self.rows[:h] + self.rows[n:],
                          self.row_heights[:h] + self.row_heights[n:])
        return head, tail

    def draw(self, page: Page, x: float, top: float) -> None:
        canvas = page.canvas
        width = sum(self.widths)
        edges = [x]
        for w in self.widths:
            edges.append(edges[-1] + w)
        bottom = top - self.height
        canvas.saveState()
        canvas.setFillColor(SHADE)
        head = sum(self.row_heights[:self.header_rows])
        if head:
            canvas.rect(x, top - head, width, head, stroke=0, fill=1)
        if self.label_column and top - head > bottom:
            canvas.rect(x, bottom, self.widths[0], top - head - bottom, stroke=0, fill=1)
        canvas.setStrokeColor(RULE)
        canvas.setLineWidth(0.4)
        # The rules as one path, numbers to 1/1000 pt (canvas.lines formats each with
        # reportlab's fp_str, which cost more than the table's text).
        right = x + width
        ops = ["n"]
        ops += [f"{e:.3f} {top:.3f} m {e:.3f} {bottom:.3f} l" for e in edges]
        y = top
        ops.append(f"{x:.3f} {y:.3f} m {right:.3f} {y:.3f} l")
        for h in self.row_heights:
            y -= h
            ops.append(f"{x:.3f} {y:.3f} m {right:.3f} {y:.3f} l")
        ops.append("S")
        canvas.addLiteral("\n".join(ops))
        canvas.restoreState()

        plain, bold = STYLES.cell, STYLES.cell_bold
        write = page.write
        y = top
        for row, h in zip(self.rows, self.row_heights, strict=True):
            for c, (lines, is_bold, right) in enumerate(row):
                st = bold if is_bold else plain
                base = y - CELL_PAD_Y - st.fontSize
                for line in lines:
                    if right:
                        left = edges[c + 1] - CELL_PAD_X - text_width(
                            line, st.fontName, st.fontSize)
                    else:
                        left = edges[c] + CELL_PAD_X
                    write(st, left, base, line)
                    base -= st.leading
            y -= h


class Figures(Block):
    """Figures side by side, each centred in an equal share of ``width``, tops aligned."""

    def __init__(self, figures: Sequence[Figure], width: float, pad: float = 6.0) -> None:
        self.figures = list(figures)
        self.width = width
        self.pad = pad
        self.height = max((f.height for f in self.figures), default=0.0) + 2 * pad

    def draw(self, page: Page, x: float, top: float) -> None:
        share = self.width / max(1, len(self.figures))
        canvas = page.canvas
        for k, fig in enumerate(self.figures):
            canvas.saveState()
            canvas.translate(x + k * share + (share - fig.width) / 2, top - self.pad - fig.height)
            draw_figure(canvas, fig)
            canvas.restoreState()


def stack_height(blocks: Sequence[Block]) -> float:
    """Height of ``blocks`` one under the other (outer space of the first and last left out)."""
    if not blocks:
        return 0.0
    total = sum(b.space_before + b.height + b.space_after for b in blocks)
    return total - blocks[0].space_before - blocks[-1].space_after


def draw_stack(page: Page, blocks: Sequence[Block], x: float, top: float) -> None:
    """Draw ``blocks`` one under the other from ``top`` (as :func:`stack_height` counts)."""
    y = top
    for k, b in enumerate(blocks):
        if k:
            y -= b.space_before
        b.draw(page, x, y)
        y -= b.height + b.space_after


class Columns(Block):
    """Stacks of blocks side by side: (x offset, blocks) each, tops aligned."""

    def __init__(self, columns: Sequence[tuple[float, Sequence[Block]]]) -> None:
        self.columns = [(dx, list(blocks)) for dx, blocks in columns]
        self.height = max(stack_height(blocks) for _, blocks in self.columns)

    def draw(self, page: Page, x: float, top: float) -> None:
        for dx, blocks in self.columns:
            draw_stack(page, blocks, x + dx, top)


class Boxed(Block):
    """A stack of blocks in a ruled box ``width`` wide, ``pad`` inside, optionally shaded.

    The blocks must have been made for ``width - 2 * pad``.
    """

    def __init__(self, blocks: Sequence[Block], width: float, *, pad: float, line_width: float,
                 fill: Color | None = None, style: ParagraphStyle | None = None) -> None:
        self.blocks = list(blocks)
        self.width = width
        self.pad = pad
        self.line_width = line_width
        self.fill = fill
        self.height = stack_height(self.blocks) + 2 * pad
        if style is not None:
            self.space_before, self.space_after = style.spaceBefore, style.spaceAfter

    def draw(self, page: Page, x: float, top: float) -> None:
        canvas = page.canvas
        canvas.saveState()
        canvas.setStrokeColor(INK)
        canvas.setLineWidth(self.line_width)
        if self.fill is not None:
            canvas.setFillColor(self.fill)
        canvas.rect(x, top - self.height, self.width, self.height, stroke=1,
                    fill=int(self.fill is not None))
        canvas.restoreState()
        draw_stack(page, self.blocks, x + self.pad, top - self.pad)


class Custom(Block):
    """A block of a given height drawn by ``paint(canvas, x, top)``."""

    def __init__(self, height: float, paint: Callable[[Canvas, float, float], None]) -> None:
        self.height = height
        self.paint = paint

    def draw(self, page: Page, x: float, top: float) -> None:
        self.paint(page.canvas, x, top)


class Sheet:
    """A document's pages: blocks placed top down within the margins, page by page."""

    def __init__(self, meta: DocumentMeta) -> None:
        self._buf = BytesIO()
        self.canvas = document_canvas(meta, self._buf)
        self.left = MARGIN
        self.top = PAGE_SIZE[1] - BODY_TOP
        self.bottom = BODY_BOTTOM
        self.y = self.top
        self._fonts: dict[str, str] = {}
        self.page = Page(self.canvas, self._fonts)

    def _new_page(self) -> None:
        self.page.finish()
        self.canvas.showPage()
        self.page = Page(self.canvas, self._fonts)
        self.y = self.top

    def place(self, *blocks: Block, keep: bool = True) -> None:
        """Place ``blocks`` in turn; with ``keep``, start a new page first when they fit on
        a page of their own but not in what is left of this one."""
        if keep and self.y < self.top:
            need = blocks[0].space_before + stack_height(blocks)
            if need > self.y - self.bottom and stack_height(blocks) <= self.top - self.bottom:
                self._new_page()
        for block in blocks:
            self._place_one(block)

    def _place_one(self, block: Block) -> None:
        if self.y < self.top:
            self.y -= block.space_before
        while block.height > self.y - self.bottom:
            parts = block.split(self.y - self.bottom)
            if parts is not None:
                head, block = parts
                head.draw(self.page, self.left, self.y)
            elif self.y == self.top:
                break  # taller than a page and cannot split: drawn as it is
            self._new_page()
        block.draw(self.page, self.left, self.y)
        self.y -= block.height + block.space_after

    def pdf(self) -> bytes:
        """Finish the last page and the document; the PDF bytes."""
        self.page.finish()
        self.canvas.showPage()
        self.canvas.save()
        return self._buf.getvalue()
