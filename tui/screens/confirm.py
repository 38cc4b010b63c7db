"""Modal questions: a yes/no that needs a deliberate key press (anything that changes a run), and a folder."""

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


class FolderPrompt(ModalScreen[str | None]):
    """Ask where to write, with a default filled in: Enter accepts, Escape cancels."""

    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "cancel", "Cancel")]
    DEFAULT_CSS = """
    FolderPrompt { align: center middle; }
    FolderPrompt > Vertical { width: 76; max-width: 95%; height: auto; border: thick $primary; padding: 1 2;
                              background: $surface; }
    FolderPrompt #question { width: 100%; height: auto; }
    """

    def __init__(self, question: str, default: str) -> None:
        super().__init__()
        self.question = question
        self.default = default

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(self.question, id="question")
            yield Input(value=self.default, id="folder")
            yield Static("Enter writes there (the folder is made if needed); Escape cancels.", classes="hint")
        yield Footer(compact=True)

    @on(Input.Submitted)
    def _submitted(self, event: Input.Submitted) -> None:
        if event.value.strip():
            self.dismiss(event.value.strip())

    def action_cancel(self) -> None:
        self.dismiss(None)
