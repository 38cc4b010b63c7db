"""Modal questions: a yes/no that needs a deliberate key press (anything that changes a run), and a line of text."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Footer, Input, Static


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


class TextPrompt(ModalScreen[str | None]):
    """Ask for one line of text (a folder, a reference medium), maybe with a default: Enter accepts a non-empty
    answer, Escape cancels. The question wraps, never cut."""

    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "cancel", "Cancel")]
    DEFAULT_CSS = """
    TextPrompt { align: center middle; }
    TextPrompt > Vertical { width: 76; max-width: 95%; height: auto; border: thick $primary; padding: 1 2;
                            background: $surface; }
    TextPrompt #question { width: 100%; height: auto; }
    """

    def __init__(self, question: str, hint: str, *, value: str = "", placeholder: str = "") -> None:
        super().__init__()
        self.question = question
        self.hint = hint
        self.value = value
        self.placeholder = placeholder

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(self.question, id="question")
            yield Input(value=self.value, placeholder=self.placeholder, id="answer")
            yield Static(self.hint, classes="hint")
        yield Footer(compact=True)

    @on(Input.Submitted)
    def _submitted(self, event: Input.Submitted) -> None:
        if event.value.strip():
            self.dismiss(event.value.strip())

    def action_cancel(self) -> None:
        self.dismiss(None)
