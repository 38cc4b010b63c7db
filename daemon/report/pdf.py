"""PDF through ReportLab: text flows and wraps by measured width, tables wrap inside their cells, plots are drawn
as vectors (matplotlib's SVG through svglib), and every page carries the report number and "page x of y".

ReportLab and svglib are pure-Python wheels (no system libraries), so the PDF builds the same on a fresh Debian
machine and on a Raspberry Pi. DejaVu Sans, which matplotlib ships, carries the Greek letters and symbols.
"""

from __future__ import annotations

import io
import re
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

import matplotlib
from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm
from reportlab.lib.utils import simpleSplit
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.pdfgen import canvas
from reportlab.platypus import (
    Flowable,
    KeepTogether,
    ListFlowable,
    ListItem,
    Paragraph,
    SimpleDocTemplate,
    Spacer,
)
from reportlab.platypus import Table as RLTable
from reportlab.platypus import TableStyle as RLTableStyle
from svglib.svglib import svg2rlg

from .model import Bullets, Figure, Heading, Para, Report, SignOff, Table

MARGIN = 18 * mm
PAGE_W, PAGE_H = A4
TEXT_W = PAGE_W - 2 * MARGIN
FIGURE_MAX_H = 0.55 * PAGE_H
KEEP_TABLE_ROWS = 14          # a table this short never splits across pages
INK, GREY, AMBER = colors.HexColor("#1b1f23"), colors.HexColor("#555555"), colors.HexColor("#7a5200")
RULE, HEAD_BG, CAUTION_BG = colors.HexColor("#c8ccd4"), colors.HexColor("#eef1f5"), colors.HexColor("#fff7e0")

FONT, BOLD, ITALIC = "DejaVuSans", "DejaVuSans-Bold", "DejaVuSans-Oblique"
_fonts_ready = False


def _register_fonts() -> None:
    global _fonts_ready
    if _fonts_ready:
        return
    ttf = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    for name, file in ((FONT, "DejaVuSans.ttf"), (BOLD, "DejaVuSans-Bold.ttf"), (ITALIC, "DejaVuSans-Oblique.ttf"),
                       ("DejaVuSans-BoldOblique", "DejaVuSans-BoldOblique.ttf")):
        pdfmetrics.registerFont(TTFont(name, str(ttf / file)))
    pdfmetrics.registerFontFamily(FONT, normal=FONT, bold=BOLD, italic=ITALIC, boldItalic="DejaVuSans-BoldOblique")
    _fonts_ready = True


def _styles() -> dict[str, ParagraphStyle]:
    base = ParagraphStyle("body", fontName=FONT, fontSize=9, leading=12, textColor=INK, alignment=TA_LEFT,
                          spaceAfter=4)
    return {
        "title": ParagraphStyle("title", base, fontName=BOLD, fontSize=16, leading=20, spaceAfter=2),
        "subtitle": ParagraphStyle("subtitle", base, textColor=GREY, spaceAfter=8),
        "h2": ParagraphStyle("h2", base, fontName=BOLD, fontSize=12, leading=15, spaceBefore=10, spaceAfter=4),
        "h3": ParagraphStyle("h3", base, fontName=BOLD, fontSize=10, leading=13, spaceBefore=6, spaceAfter=3),
        "": base,
        "note": ParagraphStyle("note", base, fontSize=8.5, leading=11, textColor=colors.HexColor("#333333")),
        "small": ParagraphStyle("small", base, fontSize=8, leading=10.5, textColor=GREY),
        "caution": ParagraphStyle("caution", base, textColor=AMBER, backColor=CAUTION_BG, borderPadding=(3, 4, 3, 4),
                                  spaceBefore=3, spaceAfter=7),
        "caption": ParagraphStyle("caption", base, fontSize=8, leading=10.5, textColor=GREY, spaceBefore=2),
        "bullet": ParagraphStyle("bullet", base, spaceAfter=2),
    }


_LONG_TOKEN = re.compile(r"\S{18,}")


def _breakable(text: str) -> str:
    """Escape for ReportLab's markup, and let long unspaced tokens (paths, timestamps) break after / _ T or -."""
    def soften(m: re.Match[str]) -> str:
        return re.sub(r"([/_\-T:,;=])", "\\1\u200b", m.group(0))

    return escape(_LONG_TOKEN.sub(soften, text))


class _NumberedCanvas(canvas.Canvas):
    """Holds each page until the end so the footer can say "page x of y"."""

    head = ""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._pages: list[dict[str, Any]] = []

    def showPage(self) -> None:
        self._pages.append(dict(self.__dict__))
        self._startPage()

    def save(self) -> None:
        total = len(self._pages)
        for state in self._pages:
            self.__dict__.update(state)
            self._furniture(total)
            super().showPage()
        super().save()

    def _furniture(self, total: int) -> None:
        self.saveState()
        self.setFont(FONT, 7)
        self.setFillColor(GREY)
        self.setStrokeColor(RULE)
        self.line(MARGIN, PAGE_H - MARGIN + 4 * mm, PAGE_W - MARGIN, PAGE_H - MARGIN + 4 * mm)
        lines = simpleSplit(self.head, FONT, 7, TEXT_W)  # a long title wraps above the rule, never cut
        for i, text in enumerate(reversed(lines)):
            self.drawString(MARGIN, PAGE_H - MARGIN + 5.5 * mm + i * 8.5, text)
        self.line(MARGIN, MARGIN - 4 * mm, PAGE_W - MARGIN, MARGIN - 4 * mm)
        self.drawString(MARGIN, MARGIN - 8 * mm, "linerig")
        self.drawRightString(PAGE_W - MARGIN, MARGIN - 8 * mm, f"page {self._pageNumber} of {total}")
        self.restoreState()


def _canvas_for(head: str) -> type[_NumberedCanvas]:
    return type("_ReportCanvas", (_NumberedCanvas,), {"head": head})


def _column_widths(cells: list[list[str]], font: str, size: float, pad: float) -> list[float] | None:
    """Widths that fit TEXT_W: every column at least its longest word, the room left shared by content length."""
    ncol = len(cells[0])
    lo, hi = [0.0] * ncol, [0.0] * ncol
    for n, row in enumerate(cells):
        face = BOLD if n == 0 else font  # the header row is bold, so wider
        for i, c in enumerate(row):
            words = c.split() or [""]
            lo[i] = max(lo[i], max(pdfmetrics.stringWidth(w, face, size) for w in words) + pad)
            hi[i] = max(hi[i], min(pdfmetrics.stringWidth(c, face, size), 0.6 * TEXT_W) + pad)
    if sum(lo) > TEXT_W:
        return None
    if sum(hi) <= TEXT_W:
        return hi
    share = (TEXT_W - sum(lo)) / (sum(hi) - sum(lo))
    return [a + (b - a) * share for a, b in zip(lo, hi, strict=True)]


def _table(t: Table, st: dict[str, ParagraphStyle]) -> Flowable:
    cells = [list(t.headers), *[list(r) for r in t.rows]]
    size, widths = 8.0, None
    for size in (8.0, 7.5, 7.0, 6.5, 6.0):
        widths = _column_widths(cells, FONT, size, 6)
        if widths is not None:
            break
    if widths is None:  # long tokens everywhere: share by content and let the soft breaks do the rest
        n = len(cells[0])
        widths = [TEXT_W / n] * n
    cell = ParagraphStyle("cell", st[""], fontSize=size, leading=size * 1.3, spaceAfter=0)
    head = ParagraphStyle("head", cell, fontName=BOLD)
    data: list[list[Any]] = [[Paragraph(_breakable(c), head) for c in t.headers]]
    data += [[Paragraph(_breakable(c), cell) for c in r] for r in t.rows]
    style = [("GRID", (0, 0), (-1, len(t.rows)), 0.4, RULE), ("BACKGROUND", (0, 0), (-1, 0), HEAD_BG),
             ("VALIGN", (0, 0), (-1, -1), "TOP"), ("LEFTPADDING", (0, 0), (-1, -1), 3),
             ("RIGHTPADDING", (0, 0), (-1, -1), 3), ("TOPPADDING", (0, 0), (-1, -1), 1.5),
             ("BOTTOMPADDING", (0, 0), (-1, -1), 2)]
    if t.caption:  # the caption is the table's last row, kept on the page of the rows above it
        data.append([Paragraph(_breakable(t.caption), st["caption"])] + [""] * (len(t.headers) - 1))
        style += [("SPAN", (0, -1), (-1, -1)), ("NOSPLIT", (0, -2), (-1, -1)), ("LEFTPADDING", (0, -1), (-1, -1), 0)]
    tbl = RLTable(data, colWidths=widths, repeatRows=1, hAlign="LEFT", style=RLTableStyle(style))
    return KeepTogether([tbl, Spacer(1, 4)]) if len(t.rows) <= KEEP_TABLE_ROWS else tbl


def _figure(fig: Figure, st: dict[str, ParagraphStyle]) -> Flowable:
    drawing = svg2rlg(io.BytesIO(fig.svg))
    if drawing is None:
        raise ValueError("a report figure is not readable SVG")
    scale = min(TEXT_W / drawing.width, FIGURE_MAX_H / drawing.height)
    drawing.scale(scale, scale)
    drawing.width, drawing.height = drawing.width * scale, drawing.height * scale
    drawing.hAlign = "CENTER"
    return KeepTogether([Spacer(1, 4), drawing, Paragraph(_breakable(fig.caption), st["caption"]), Spacer(1, 6)])


def _signoff(b: SignOff, st: dict[str, ParagraphStyle]) -> Flowable:
    cell = ParagraphStyle("so", st[""], spaceAfter=0)
    head = ParagraphStyle("soh", cell, fontName=BOLD)
    rows: list[list[Any]] = [[Paragraph(x, head) for x in ("", "Name", "Signature", "Date")]]
    rows += [[Paragraph(escape(r), cell), "", "", ""] for r in b.roles]
    tbl = RLTable(rows, colWidths=[0.2 * TEXT_W, 0.32 * TEXT_W, 0.3 * TEXT_W, 0.18 * TEXT_W],
                  rowHeights=[None] + [11 * mm] * len(b.roles), hAlign="LEFT",
                  style=RLTableStyle([("GRID", (0, 0), (-1, -1), 0.4, RULE), ("BACKGROUND", (0, 0), (-1, 0), HEAD_BG),
                                      ("VALIGN", (0, 0), (-1, -1), "TOP")]))
    parts: list[Flowable] = []
    if b.statement:
        parts.append(Paragraph(_breakable(b.statement), st["note"]))
    return KeepTogether([*parts, tbl, Spacer(1, 6)])


def _bullets(b: Bullets, st: dict[str, ParagraphStyle]) -> Flowable:
    style = st["caution"] if b.style == "caution" else st["small"] if b.style == "small" else st["bullet"]
    if b.style == "caution":
        style = ParagraphStyle("cb", style, backColor=None, spaceBefore=0, spaceAfter=2)
    items = [ListItem(Paragraph(_breakable(x), style), leftIndent=12, value="•") for x in b.items]
    return ListFlowable(items, bulletType="bullet", start="•", leftIndent=12, bulletFontName=FONT,
                        bulletFontSize=style.fontSize, bulletColor=style.textColor)


def flowables(rep: Report) -> list[Flowable]:
    """The report's blocks as ReportLab flowables (title and subtitle first); a heading is kept with what follows."""
    _register_fonts()
    st = _styles()
    out: list[Flowable] = [Paragraph(_breakable(rep.title), st["title"])]
    if rep.subtitle:
        out.append(Paragraph(_breakable(rep.subtitle), st["subtitle"]))
    heading: Flowable | None = None
    for b in rep.blocks:
        item: Flowable
        if isinstance(b, Heading):
            if heading is not None:
                out.append(heading)
            heading = Paragraph(_breakable(b.text), st["h2" if b.level <= 2 else "h3"])
            continue
        if isinstance(b, Para):
            item = Paragraph(_breakable(b.text), st.get(b.style, st[""]))
        elif isinstance(b, Bullets):
            item = _bullets(b, st)
        elif isinstance(b, Table):
            item = _table(b, st)
        elif isinstance(b, Figure):
            item = _figure(b, st)
        else:
            item = _signoff(b, st)
        if heading is not None:  # one level of KeepTogether: nested ones push the block to a new page
            inner = list(item._content) if isinstance(item, KeepTogether) else [item]
            item, heading = KeepTogether([heading, *inner]), None
        out.append(item)
    if heading is not None:
        out.append(heading)
    return out


def render_pdf(rep: Report, dest: Path | io.BytesIO) -> None:
    target: Any = str(dest) if isinstance(dest, Path) else dest
    doc = SimpleDocTemplate(target, pagesize=A4, leftMargin=MARGIN, rightMargin=MARGIN, topMargin=MARGIN,
                            bottomMargin=MARGIN, title=rep.title, author="linerig", creator="linerig",
                            subject=rep.number or rep.title)
    doc.build(flowables(rep), canvasmaker=_canvas_for(rep.running_head))
