"""PDF through matplotlib's PdfPages: A4 pages laid out line by line (no extra dependency; DejaVu Sans carries
the Greek letters and symbols the trade uses)."""

from __future__ import annotations

import io
import textwrap
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.image as mpimg
import matplotlib.pyplot as plt
from matplotlib.backends.backend_pdf import PdfPages

from .model import Bullets, Figure, Heading, Para, Report, Table

PAGE_W, PAGE_H = 8.27, 11.69     # A4, inches
MARGIN = 0.7
LINE = 0.19                      # inches per 9-pt line


class _Pager:
    def __init__(self, pdf: PdfPages, title: str) -> None:
        self.pdf = pdf
        self.title = title
        self.page = 0
        self.fig: plt.Figure | None = None
        self.y = 0.0

    def new_page(self) -> None:
        self.finish()
        self.page += 1
        self.fig = plt.figure(figsize=(PAGE_W, PAGE_H))
        self.fig.text(MARGIN / PAGE_W, 0.4 / PAGE_H, self.title, fontsize=7, color="#666")
        self.fig.text(1 - MARGIN / PAGE_W, 0.4 / PAGE_H, f"page {self.page}", fontsize=7, color="#666", ha="right")
        self.y = PAGE_H - MARGIN

    def finish(self) -> None:
        if self.fig is not None:
            self.pdf.savefig(self.fig)
            plt.close(self.fig)
            self.fig = None

    def need(self, h: float) -> None:
        if self.fig is None or self.y - h < MARGIN:
            self.new_page()

    def line(self, text: str, size: float = 9, weight: str = "normal", color: str = "black", indent: float = 0.0,
             family: str = "sans-serif") -> None:
        h = LINE * size / 9
        self.need(h)
        assert self.fig is not None
        self.fig.text((MARGIN + indent) / PAGE_W, self.y / PAGE_H, text, fontsize=size, weight=weight, color=color,
                      va="top", family=family)
        self.y -= h * 1.15

    def para(self, text: str, size: float = 9, color: str = "black", indent: float = 0.0, width: int = 100,
             bullet: str = "") -> None:
        width = int(width * 9 / size) - int(indent * 12)   # smaller type fits more characters per line
        lines = textwrap.wrap(text, width=width) or [""]
        for i, ln in enumerate(lines):
            self.line((bullet if i == 0 else " " * len(bullet)) + ln, size, color=color, indent=indent)
        self.y -= 0.06

    def image(self, png: bytes, caption: str) -> None:
        img = mpimg.imread(io.BytesIO(png), format="png")
        h_px, w_px = img.shape[:2]
        w = PAGE_W - 2 * MARGIN
        h = w * h_px / w_px
        if h > PAGE_H - 2 * MARGIN - 0.6:
            h = PAGE_H - 2 * MARGIN - 0.6
            w = h * w_px / h_px
        room = self.y - MARGIN - 0.4
        if room < h and room >= 0.6 * h:   # shrink a little rather than leave half a page empty
            w, h = w * room / h, room
        self.need(h + 0.4)
        assert self.fig is not None
        ax = self.fig.add_axes((MARGIN / PAGE_W, (self.y - h) / PAGE_H, w / PAGE_W, h / PAGE_H))
        ax.imshow(img)
        ax.axis("off")
        self.y -= h + 0.08
        self.para(caption, size=7.5, color="#444")


def _table_lines(t: Table) -> list[str]:
    cols = list(zip(t.headers, *t.rows, strict=True)) if t.rows else [(h,) for h in t.headers]
    widths = [min(max(len(str(c)) for c in col), 28) for col in cols]

    def fmt(row: tuple[str, ...]) -> str:
        return "  ".join((c if len(c) <= w else c[: w - 1] + "…").ljust(w) for c, w in zip(row, widths, strict=True))

    return [fmt(t.headers), "  ".join("─" * w for w in widths), *(fmt(r) for r in t.rows)]


def render_pdf(rep: Report, dest: Path | io.BytesIO) -> None:
    with PdfPages(dest, metadata={"Title": rep.title, "Creator": "linerig"}) as pdf:
        pg = _Pager(pdf, rep.title)
        pg.new_page()
        pg.para(rep.title, size=16)
        if rep.subtitle:
            pg.para(rep.subtitle, size=9, color="#555")
        for b in rep.blocks:
            if isinstance(b, Heading):
                pg.need(1.6)   # never leave a heading alone at the foot of a page
                pg.y -= 0.12
                pg.line(b.text, size=12 if b.level <= 2 else 10.5, weight="bold")
            elif isinstance(b, Para):
                color = {"note": "#333", "small": "#555", "caution": "#7a5200"}.get(b.style, "black")
                pg.para(b.text, size=8.5 if b.style in ("small", "note") else 9, color=color)
            elif isinstance(b, Bullets):
                for item in b.items:
                    pg.para(item, bullet="• ", color="#7a5200" if b.style == "caution" else "black", indent=0.15)
            elif isinstance(b, Table):
                lines = _table_lines(b)
                width = max(len(s) for s in lines)
                size = max(5.0, min(8.0, 8.0 * 118 / max(width, 1)))
                for s in lines:
                    pg.line(s, size=size, family="monospace")
                if b.caption:
                    pg.para(b.caption, size=7.5, color="#444")
                pg.y -= 0.08
            elif isinstance(b, Figure):
                pg.image(b.png, b.caption)
        pg.finish()
