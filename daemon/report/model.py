"""A report as a flat list of blocks, so the HTML and PDF writers share one description of the content."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Heading:
    text: str
    level: int = 2


@dataclass(frozen=True)
class Para:
    text: str
    style: str = ""      # "" | "note" | "caution" | "small"


@dataclass(frozen=True)
class Bullets:
    items: tuple[str, ...]
    style: str = ""


@dataclass(frozen=True)
class Table:
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    caption: str = ""


@dataclass(frozen=True)
class Figure:
    """A plot as SVG (vector in both writers: the HTML embeds it, the PDF draws it)."""

    svg: bytes
    caption: str


@dataclass(frozen=True)
class SignOff:
    """Blank lines for the people who answer for the report, each with name, signature and date."""

    roles: tuple[str, ...] = ("Tested by", "Checked by", "Approved by")
    statement: str = ""


Block = Heading | Para | Bullets | Table | Figure | SignOff


@dataclass
class Report:
    """``number`` identifies the document (every page carries it); ``kind`` names the test for the cautions."""

    title: str
    subtitle: str = ""
    blocks: list[Block] = field(default_factory=list)
    number: str = ""
    kind: str = ""

    def add(self, *blocks: Block) -> Report:
        self.blocks.extend(blocks)
        return self

    @property
    def running_head(self) -> str:
        return f"Report {self.number} · {self.title}" if self.number else self.title

    def text(self) -> str:
        """Plain text of every block (for tests and quick reading)."""
        out = [self.title, self.subtitle, self.number]
        for b in self.blocks:
            if isinstance(b, Heading | Para):
                out.append(b.text)
            elif isinstance(b, Bullets):
                out.extend(b.items)
            elif isinstance(b, Table):
                out.append(" | ".join(b.headers))
                out.extend(" | ".join(r) for r in b.rows)
                out.append(b.caption)
            elif isinstance(b, Figure):
                out.append(b.caption)
            elif isinstance(b, SignOff):
                out.append(b.statement)
                out.extend(b.roles)
        return "\n".join(out)
