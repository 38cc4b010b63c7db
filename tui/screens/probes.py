"""Probes and their calibrations: the list, the factor history, and starting a calibration run."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static
from textual_plotext import PlotextPlot

from linerig.tui.client import DaemonError
from linerig.tui.screens.confirm import TextPrompt

if TYPE_CHECKING:
    from linerig.tui.app import LinerigApp

REFERENCE_HINT = "e.g. glycerol, agar-gelled water"


def calibration_metadata(serial: str, reference: str, site: str = "calibration bench") -> dict[str, str]:
    """Metadata that marks a run as a calibration of ``serial`` in ``reference``."""
    return {"site": site, "sample": "calibration", "material": reference,
            "notes": f"calibration of probe {serial} in {reference}"}


def factor_rows(cals: list[dict[str, Any]]) -> list[tuple[str, ...]]:
    """Calibration rows for the table, newest first, with words for accepted and expiry."""
    out = []
    for c in cals:
        f, fu = c.get("factor"), c.get("factor_u")
        out.append((str(c.get("id", "")), str(c.get("created_utc") or "")[:10], str(c.get("reference") or ""),
                    f"{c['reference_k_W_per_mK']:.3f}" if isinstance(c.get("reference_k_W_per_mK"), int | float)
                    else "", f"{c['measured_k_W_per_mK']:.3f}" if isinstance(c.get("measured_k_W_per_mK"),
                                                                              int | float) else "",
                    (f"{f:.4f}" + (f" ± {2 * fu:.4f}" if isinstance(fu, int | float) else ""))
                    if isinstance(f, int | float) else "",
                    "✓ yes" if c.get("accepted") else "✗ no", str(c.get("expires_utc") or "")[:10],
                    str(c.get("run_id") or "")))
    return out


class ProbesScreen(Screen[None]):
    """Known probes (the one in use marked), the selected probe's calibrations and their factor over time."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("c", "calibrate", "Calibration run"),
        Binding("r", "reload", "Reload"),   # F6 is Qualify everywhere
    ]

    def __init__(self) -> None:
        super().__init__()
        self.probes: list[dict[str, Any]] = []
        self.active: dict[str, Any] = {}
        self.calibrations: list[dict[str, Any]] = []
        self.shown_serial: str | None = None
        self.cals_loaded = False

    @property
    def rig(self) -> LinerigApp:
        return self.app  # type: ignore[return-value]

    def compose(self) -> ComposeResult:
        yield Static("PROBES", classes="screen-title")
        yield DataTable(id="probes", cursor_type="row")
        yield Static(id="probe-note")
        yield Static("CALIBRATIONS", classes="section", id="cal-title")
        yield DataTable(id="cals", cursor_type="row", zebra_stripes=True)
        yield PlotextPlot(id="factor-plot")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one("#probes", DataTable).add_columns("", "Serial", "Name", "Kind", "Added")
        self.query_one("#cals", DataTable).add_columns("#", "Date", "Reference", "Ref k", "Meas. k", "Factor ± U (k=2)",
                                                       "Accepted", "Expires", "Run")
        self.query_one("#probes", DataTable).focus()
        self.action_reload()

    def on_screen_resume(self) -> None:
        self.action_reload()

    def action_reload(self) -> None:
        self._load()

    @work(exclusive=True, group="probes")
    async def _load(self) -> None:
        note = self.query_one("#probe-note", Static)
        await self.rig.wait_connected()
        try:
            reply = await self.rig.request("probes")
        except DaemonError as exc:
            note.update(Text(f"✗ {exc}", style="red"))
            return
        self.active = reply.get("active") or {}
        rows = list(reply.get("probes") or [])
        if self.active.get("serial") and all(p.get("serial") != self.active["serial"] for p in rows):
            rows.insert(0, {**self.active, "added_utc": ""})
        self.probes = rows
        table = self.query_one("#probes", DataTable)
        table.clear()
        for p in rows:
            in_use = p.get("serial") == self.active.get("serial")
            table.add_row("▶ in use" if in_use else "", str(p.get("serial") or ""), str(p.get("name") or ""),
                          str(p.get("kind") or ""), str(p.get("added_utc") or "")[:10], key=str(p.get("serial")))
        note.update(Text("c starts a calibration run for the probe in use. A new probe is added by giving "
                         "linerigd its profile (--probe FILE.toml).", style="dim"))
        await self._load_calibrations(self._selected_serial())

    def _selected_serial(self) -> str | None:
        table = self.query_one("#probes", DataTable)
        if table.row_count == 0:
            return self.active.get("serial")
        return table.coordinate_to_cell_key(table.cursor_coordinate).row_key.value

    @on(DataTable.RowHighlighted, "#probes")
    def _probe_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if event.row_key.value != self.shown_serial:
            self._reload_cals(event.row_key.value)

    @work(exclusive=True, group="cals")
    async def _reload_cals(self, serial: str | None) -> None:
        await self._load_calibrations(serial)

    async def _load_calibrations(self, serial: str | None) -> None:
        if serial is None:
            return
        self.shown_serial = serial  # before any await, so the table's highlight message does not load it twice
        self.cals_loaded = False
        try:
            reply = await self.rig.request("calibrations", probe_serial=serial)
        except DaemonError as exc:
            self.query_one("#cal-title", Static).update(Text(f"CALIBRATIONS ✗ {exc}", style="red"))
            return
        self.calibrations = list(reply.get("calibrations") or [])
        self.query_one("#cal-title", Static).update(
            Text(f"CALIBRATIONS of {serial}: {len(self.calibrations) or 'none yet'}", style="bold underline"))
        table = self.query_one("#cals", DataTable)
        table.clear()
        for row in factor_rows(self.calibrations):
            table.add_row(*row)
        self._draw_factors()
        self.cals_loaded = True

    def _draw_factors(self) -> None:
        plot = self.query_one("#factor-plot", PlotextPlot)
        plt = plot.plt
        plt.clear_figure()
        pts = [(c.get("created_utc") or "", c["factor"]) for c in reversed(self.calibrations)
               if isinstance(c.get("factor"), int | float)]
        plt.title("calibration factor, oldest to newest")
        plt.xlabel("calibration number")
        if pts:
            plt.plot(list(range(1, len(pts) + 1)), [f for _, f in pts], marker="•", label="factor")
            plt.hline(1.0, "gray")
        else:
            plt.xlim(0.0, 1.0)
            plt.ylim(0.0, 1.0)
            plt.xticks([], [])
            plt.yticks([], [])
            plt.text("no calibrations yet", 0.5, 0.5, alignment="center")
        plot.refresh()

    def action_calibrate(self) -> None:
        serial = self.active.get("serial")
        if not serial:
            self.notify("No probe in use: is the daemon connected?", severity="warning")
            return

        def chosen(reference: str | None) -> None:
            if reference:
                self.rig.open_new_run("calibration", calibration_metadata(serial, reference))

        self.app.push_screen(TextPrompt(f"Calibrate probe {serial}: which reference medium is it in?",
                                        "Enter to continue to the new-run form, Escape to cancel.",
                                        placeholder=REFERENCE_HINT), chosen)
