"""New run (placeholder)."""
from textual.screen import Screen
from textual.widgets import Footer, Static


class ProbesScreen(Screen[None]):
    def compose(self):
        yield Static("probes")
        yield Footer()
