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
    png: bytes
    caption: str
    width_in: float = 7.0
    height_in: float = 4.0


Block = Heading | Para | Bullets | Table | Figure


@dataclass
class Report:
    title: str
    subtitle: str = ""
    blocks: list[Block] = field(default_factory=list)

    def add(self, *blocks: Block) -> Report:
        self.blocks.extend(blocks)
        return self

    def text(self) -> str:
        """Plain text of every block (for tests and quick reading)."""
        out = [self.title, self.subtitle]
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
        return "\n".join(out)
