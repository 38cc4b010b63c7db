"""New run (placeholder)."""
from textual.screen import Screen
from textual.widgets import Footer, Static


class HistoryScreen(Screen[None]):
    def compose(self):
        yield Static("history")
        yield Footer()
