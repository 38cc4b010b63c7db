"""New run (placeholder)."""
from textual.screen import Screen
from textual.widgets import Footer, Static


class StartScreen(Screen[None]):
    def compose(self):
        yield Static("new run")
        yield Footer()
