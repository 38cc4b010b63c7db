"""The operator's live screen: the plot, the running estimate, the stop verdict, power, limits and sensors.

It never waits on the daemon: it reads the app's ``LiveState`` on a timer (at most ``REDRAW_S`` apart, and
only when something changed), and sends requests from workers.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from linerig.tui.client import DaemonError
from linerig.tui.screens.confirm import Confirm
from linerig.tui.widgets.headroom import HeadroomReadout
from linerig.tui.widgets.readouts import (
    EstimateReadout,
    FaultBanner,
    PowerReadout,
    RunBar,
    SensorReadout,
    StopPrompt,
    VerdictReadout,
)
from linerig.tui.widgets.run_plot import (
    EstimatePlot,
    PlotView,
    RunPlot,
    auto_view,
    build_spec,
    legend_text,
    next_choice,
)

if TYPE_CHECKING:
    from linerig.tui.app import LinerigApp

REDRAW_S = 0.25  # at most four redraws a second, however fast samples come


class LiveScreen(Screen[None]):
    """Follows the current run (or the idle rig when there is none)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("s", "stop_heating", "Stop heat"),
        Binding("a", "abort", "Abort"),
        Binding("v", "next_view", "View"),
        Binding("u", "next_unit", "Unit"),
    ]

    def __init__(self) -> None:
        super().__init__()
        self._drawn = -1
        self._drawn_state: tuple[Any, ...] = ()

    @property
    def rig(self) -> LinerigApp:
        return self.app  # type: ignore[return-value]

    def compose(self) -> ComposeResult:
        yield RunBar(id="run-bar")
        yield FaultBanner(id="fault")
        yield StopPrompt(id="stop-prompt")
        with Horizontal(id="live-main"):
            with Vertical(id="plots"):
                yield RunPlot(id="plot")
                yield Static(id="plot-legend")
                yield EstimatePlot(id="k-plot")
            with VerticalScroll(id="side"):
                yield EstimateReadout(id="estimate")
                yield VerdictReadout(id="verdict")
                yield PowerReadout(id="power")
                yield HeadroomReadout(id="headroom")
                yield SensorReadout(id="sensors")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.set_interval(REDRAW_S, self._tick)
        self.redraw()

    def on_screen_resume(self) -> None:
        self.redraw()

    def _tick(self) -> None:
        if self.rig.live.version != self._drawn:
            self.redraw()

    def redraw(self) -> None:
        """Rebuild every readout and the plots from ``LiveState``."""
        live = self.rig.live
        self._drawn = live.version
        wide = self.size.width >= 120
        with self.app.batch_update():
            self.query_one(RunBar).show(live)
            self.query_one(FaultBanner).show(live)
            self.query_one(StopPrompt).show(live, bool(live.plan.get("auto_stop")), self.rig.unit)
            plot = self.query_one(RunPlot)
            view = plot.choice or auto_view(live.run_state, live.pulse)
            spec = build_spec(live.trace, view)
            spec.title += "" if plot.choice else " · auto"
            plot.draw(spec)
            self.query_one("#plot-legend", Static).update(legend_text(spec))
            k_plot = self.query_one(EstimatePlot)
            if k_plot.display:
                k_plot.draw(live.trace)
            self.query_one(EstimateReadout).show(live, self.rig.unit, wide=wide)
            self.query_one(VerdictReadout).show(live)
            self.query_one(PowerReadout).show(live)
            self.query_one(HeadroomReadout).show(live, wide=wide)
            self.query_one(SensorReadout).show(live)
        state = (live.run_state, live.can_stop_heating, live.connected)
        if state != self._drawn_state:
            self._drawn_state = state
            self.refresh_bindings()

    # -- actions ---------------------------------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        live = self.rig.live
        if action == "stop_heating":
            return True if live.run_state == "heating" else None
        if action == "abort":
            return True if live.active else None
        return True

    def action_next_view(self) -> None:
        plot = self.query_one(RunPlot)
        plot.choice = next_choice(plot.choice, self.rig.live.pulse)
        self.redraw()

    def action_next_unit(self) -> None:
        self.rig.unit = self.rig.unit.next()
        self.redraw()

    def action_stop_heating(self) -> None:
        live = self.rig.live
        if live.run_state != "heating":
            self.notify("No run is heating.", severity="warning")
            return
        if live.can_stop_heating:
            self._send("stop_heating", "Heating stopped; logging the cooling.")
            return

        def answered(yes: bool | None) -> None:
            if yes:
                self._send("stop_heating", "Heating stopped early; logging the cooling.")

        why = ("The verdict was withdrawn: k has moved by more than the tolerance since."
               if live.verdict_withdrawn else
               "Heating cannot stop yet: k may still move by more than the tolerance.")
        self.app.push_screen(Confirm("Stop heating now?", why + " The cooling is still logged for the "
                                     "heat–cool cross-check."), answered)

    def action_abort(self) -> None:
        live = self.rig.live
        if not live.active:
            self.notify("No run is active.", severity="warning")
            return

        def answered(yes: bool | None) -> None:
            if yes:
                self._send("abort", f"Run {live.run_id} aborted; the heater is off.", reason="operator abort")

        self.app.push_screen(Confirm(f"Abort run {live.run_id}?",
                                     "The heater goes off now; the run is kept and marked aborted."), answered)

    def _send(self, op: str, done: str, **fields: Any) -> None:
        async def go() -> None:
            try:
                await self.rig.request(op, **fields)
            except DaemonError as exc:
                self.notify(str(exc), title=op.replace("_", " "), severity="error")
                return
            self.notify(done)

        self.run_worker(go(), group="requests")

    @property
    def view(self) -> PlotView:
        """The view on screen now."""
        return self.query_one(RunPlot).choice or auto_view(self.rig.live.run_state, self.rig.live.pulse)
