"""A yes/no question that needs a deliberate key press, for anything that changes a run."""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Footer, Static


class Confirm(ModalScreen[bool]):
    """Dismisses with True on ``y``, False on ``n`` or Escape."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "answer(True)", "Yes"),
        Binding("n", "answer(False)", "No"),
        Binding("escape", "answer(False)", "Cancel", show=False),
    ]
    DEFAULT_CSS = """
    Confirm { align: center middle; }
    Confirm > Vertical { width: 64; max-width: 95%; height: auto; border: thick $warning; padding: 1 2;
                         background: $surface; }
    Confirm #question { text-style: bold; }
    """

    def __init__(self, question: str, detail: str = "") -> None:
        super().__init__()
        self.question = question
        self.detail = detail

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(self.question, id="question")
            if self.detail:
                yield Static(self.detail, id="detail")
            yield Static("[b]y[/b] yes    [b]n[/b] no", id="keys")
        yield Footer()

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)
