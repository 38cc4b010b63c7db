"""The operator's terminal UI: a pure client of linerigd.

One worker owns the socket: it connects, subscribes, folds every event into ``LiveState`` and posts a
message for what the app must react to. When the daemon goes away it retries with a growing pause. Closing
the UI only closes that socket; the daemon carries on with any run.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import signal
import sys
from pathlib import Path
from typing import Any, ClassVar

from textual.app import App
from textual.binding import Binding, BindingType
from textual.driver import Driver
from textual.screen import Screen

from linerig.tui.client import Client, DaemonError
from linerig.tui.messages import (
    DaemonConnected,
    DaemonLost,
    FaultRaised,
    LinkChanged,
    ReadingsArrived,
    RunFinished,
    RunStateChanged,
)
from linerig.tui.screens.confirm import Confirm
from linerig.tui.screens.live_state import LiveState
from linerig.tui.terminal_output import surviving_hangup
from linerig.tui.units import DisplayUnit, parse_unit

BACKOFF_FIRST_S = 0.25
TERMINAL_CHECK_S = 1.0
EXIT_HUNG_UP = 128 + signal.SIGHUP
BACKOFF_MAX_S = 5.0
REQUEST_TIMEOUT_S = 15.0
AUTOSTART_METADATA = {"site": "demo bench", "sample": "demo sample", "notes": "started automatically by the UI"}
# A heating the default 100 mm needle can use in moist soil (its line bends with axial loss after 2–3 min), a
# 2 min baseline and 10 W/m, so the demo shows the "heating can stop" verdict well before the planned end.
AUTOSTART_PLAN = {"heat_s": 120.0, "baseline_s": 120.0, "recover_s": 240.0, "power_W_per_m": 10.0}


def _live_screen() -> Screen[Any]:
    from linerig.tui.screens.live import LiveScreen

    return LiveScreen()


def _start_screen() -> Screen[Any]:
    from linerig.tui.screens.start import StartScreen

    return StartScreen()


def _history_screen() -> Screen[Any]:
    from linerig.tui.screens.history import HistoryScreen

    return HistoryScreen()


def _probes_screen() -> Screen[Any]:
    from linerig.tui.screens.probes import ProbesScreen

    return ProbesScreen()


def _qualify_screen() -> Screen[Any]:
    from linerig.tui.screens.qualify import QualifyScreen

    return QualifyScreen()


class LinerigApp(App[int]):
    """Live run, new run, history and probes, each a mode with its own screen stack."""

    CSS_PATH = "linerig.tcss"
    TITLE = "linerig"
    HORIZONTAL_BREAKPOINTS: ClassVar[list[tuple[int, str]]] = [(0, "-narrow"), (120, "-wide")]
    VERTICAL_BREAKPOINTS: ClassVar[list[tuple[int, str]]] = [(0, "-short"), (36, "-tall")]
    MODES: ClassVar[dict[str, Any]] = {
        "live": _live_screen, "start": _start_screen, "history": _history_screen, "probes": _probes_screen,
        "qualify": _qualify_screen}
    DEFAULT_MODE = "live"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("f2", "switch_mode('live')", "Live"),
        Binding("f3", "switch_mode('start')", "New run"),
        Binding("f4", "switch_mode('history')", "Runs"),
        Binding("f5", "switch_mode('probes')", "Probes"),
        # for instrument builders, not operators: kept out of the footer (README lists it)
        Binding("f6", "switch_mode('qualify')", "Qualify", show=False),
        Binding("ctrl+q", "request_quit", "Quit", priority=True),
    ]

    def __init__(self, socket_path: Path | None = None, autostart: bool = False,
                 unit: DisplayUnit | None = None, owns_daemon: bool = False) -> None:
        super().__init__()
        self.socket_path = socket_path
        self.autostart = autostart
        self.owns_daemon = owns_daemon   # the demo: quitting stops the daemon and the simulator too
        self.unit = unit or parse_unit(os.environ.get("LINERIG_UNIT"))
        self.live = LiveState()
        self.client: Client | None = None
        self._autostarted = False
        self.pending_preset: tuple[str, dict[str, Any]] | None = None
        self._connected = asyncio.Event()

    def get_driver_class(self) -> type[Driver]:
        return surviving_hangup(super().get_driver_class())

    def on_mount(self) -> None:
        self.run_worker(self._link(), name="daemon link", group="link", exclusive=True, exit_on_error=False)
        self._watch_terminal()

    def _watch_terminal(self) -> None:
        """Leave when the terminal goes away (window closed, SSH dropped): on SIGHUP, and also when the hang-up
        signal was ignored (nohup, some multiplexers), by noticing that stdin is no longer a terminal. Without
        this a UI whose terminal is gone keeps running, and the demo keeps its daemon and simulator."""
        if self.is_headless:
            return
        try:
            fd = sys.__stdin__.fileno() if sys.__stdin__ is not None else -1
        except (OSError, ValueError):
            return
        if fd < 0 or not os.isatty(fd):
            return
        with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):  # not on the main thread
            asyncio.get_running_loop().add_signal_handler(signal.SIGHUP, self._hung_up)

        def check() -> None:
            if not os.isatty(fd):
                self._hung_up()

        self.set_interval(TERMINAL_CHECK_S, check)

    def _hung_up(self) -> None:
        self.exit(EXIT_HUNG_UP)

    # -- the daemon link ---------------------------------------------------------------------------------------
    async def _link(self) -> None:
        delay = BACKOFF_FIRST_S
        ever_connected = False
        first_loss = True
        while True:
            client = Client(self.socket_path)
            try:
                await client.connect()
                await client.request("subscribe")  # subscribe first so nothing between status and stream is lost
                status = await client.request("status")
            except (DaemonError, OSError) as exc:
                await client.close()
                self.live.mark_lost(str(exc))
                self.post_message(DaemonLost(str(exc), delay, first_loss))
                first_loss = False
                await asyncio.sleep(delay)  # back off: the daemon is restarting or not installed
                delay = min(delay * 2, BACKOFF_MAX_S)
                continue
            delay, first_loss = BACKOFF_FIRST_S, True
            self.client = client
            self._connected.set()
            self.live.apply_status(status, fresh=True)
            self.post_message(DaemonConnected(status, ever_connected))
            ever_connected = True
            reason = "the daemon closed the connection"
            try:
                await self._backfill(client)
                async for ev in client.events():
                    self._dispatch(ev)
            except (DaemonError, OSError) as exc:
                reason = str(exc)
            finally:
                self.client = None
                self._connected.clear()
                await client.close()
            self.live.mark_lost(reason)
            self.post_message(DaemonLost(reason, delay, True))
            first_loss = False

    async def _backfill(self, client: Client) -> None:
        """Fetch the samples of a run already under way, where the daemon offers them."""
        live = self.live
        if live.trace is None or not live.active:
            return
        try:
            reply = await client.request("samples", run_id=live.trace.run_id)
        except DaemonError:
            return  # older daemon without a samples request: the plot starts from now
        _merge_samples(live, reply.get("samples") or {})

    def _dispatch(self, ev: dict[str, Any]) -> None:
        live = self.live
        known_run = live.run_id
        kind = live.apply_event(ev)
        if kind in ("sample", "estimate"):
            self.post_message(ReadingsArrived())
        elif kind == "state":
            self.post_message(RunStateChanged(ev.get("run_id"), str(ev.get("state")), str(ev.get("reason") or "")))
            if ev.get("run_id") != known_run:
                self.run_worker(self._refresh_status(), group="status")
        elif kind == "fault":
            self.post_message(FaultRaised(str(ev.get("reason"))))
        elif kind == "link":
            self.post_message(LinkChanged(bool(ev.get("up")), str(ev.get("reason") or "")))
        elif kind == "run_finished":
            self.post_message(RunFinished(int(ev["run_id"]), str(ev.get("state")), ev.get("results") or {}))

    async def _refresh_status(self) -> None:
        try:
            status = await self.request("status")
        except DaemonError:
            return
        self.live.apply_status(status)

    async def wait_connected(self) -> None:
        """Return once the link is up (screens that load data call this before asking)."""
        await self._connected.wait()

    async def request(self, op: str, **fields: Any) -> dict[str, Any]:
        """One request to the daemon; raises DaemonError with a message fit for the operator."""
        client = self.client
        if client is None:
            raise DaemonError(f"not connected to linerigd ({self.live.lost_reason or 'connecting'}); "
                              "is the daemon running?")
        try:
            return await asyncio.wait_for(client.request(op, **fields), REQUEST_TIMEOUT_S)
        except TimeoutError:
            raise DaemonError(f"linerigd did not answer {op!r} within {REQUEST_TIMEOUT_S:.0f} s") from None
        except OSError as exc:
            raise DaemonError(f"lost linerigd while sending {op!r}: {exc}") from exc

    async def start_run(self, plan: dict[str, Any], metadata: dict[str, Any]) -> int:
        """Start a run and show it on the live screen."""
        self.live.pending_plan = plan
        reply = await self.request("start", metadata=metadata, **plan)
        await self._refresh_status()
        self.switch_mode("live")
        return int(reply["run_id"])

    def open_new_run(self, preset: str, metadata: dict[str, Any] | None = None) -> None:
        """Show the new-run form filled from ``preset`` and ``metadata`` (picked up when the form shows)."""
        self.pending_preset = (preset, dict(metadata or {}))
        self.switch_mode("start")

    def action_request_quit(self) -> None:
        """Quit, but not without a word while a run is under way: say what happens to the heater, and ask."""
        live = self.live
        if not live.active or isinstance(self.screen, Confirm):
            self.exit()
            return
        heating = live.run_state == "heating"
        if self.owns_daemon:
            detail = (f"Run {live.run_id} is {live.run_state}. This demo stops its daemon and simulated rig when "
                      "you quit: the run ends and the simulated heater goes off.")
        elif heating:
            detail = (f"Run {live.run_id} is heating. The heater STAYS ON: linerigd carries on with the run and "
                      "ends it by its plan and limits. Open linerig again to follow it, or abort it first (a).")
        else:
            detail = (f"Run {live.run_id} is {live.run_state}. linerigd carries on with it; open linerig again to "
                      "follow it.")

        def answered(yes: bool | None) -> None:
            if yes:
                self.exit()

        self.push_screen(Confirm("Quit the operator's screen?", detail), answered)

    # -- reactions -------------------------------------------------------------------------------------------
    def on_daemon_connected(self, msg: DaemonConnected) -> None:
        if msg.reconnected:
            self.notify("Connected to linerigd again.", title="daemon")
        if self.autostart and not self._autostarted and not self.live.active:
            self._autostarted = True
            self.run_worker(self._autostart(), group="requests")

    async def _autostart(self) -> None:
        try:
            await self.start_run(dict(AUTOSTART_PLAN), dict(AUTOSTART_METADATA))
        except DaemonError as exc:
            self.notify(f"Could not start the demo run: {exc}", severity="error", timeout=10)

    def on_daemon_lost(self, msg: DaemonLost) -> None:
        if msg.first:
            self.notify(f"{msg.reason}. Retrying; any run carries on in the daemon.", title="daemon",
                        severity="warning", timeout=6)

    def on_fault_raised(self, msg: FaultRaised) -> None:
        from linerig.tui.screens.live import LiveScreen
        from linerig.tui.widgets.advice import fault_advice

        if isinstance(self.screen, LiveScreen):
            return  # the live screen's own banner says it, with what to do
        self.notify(f"{msg.reason}\n{fault_advice(msg.reason)}", title="Heater off: safety stop",
                    severity="error", timeout=15)

    def on_link_changed(self, msg: LinkChanged) -> None:
        self.notify(msg.reason, title="front end " + ("linked" if msg.up else "NOT linked"),
                    severity="information" if msg.up else "warning")

    def on_run_finished(self, msg: RunFinished) -> None:
        words = {"done": "finished", "aborted": "was aborted", "faulted": "stopped on a fault"}
        self.notify(f"Run {msg.run_id} {words.get(msg.state, msg.state)}.", title="run")


def _merge_samples(live: LiveState, arrays: dict[str, Any]) -> None:
    """Put a run's earlier samples (``time_s`` from heater on, ``temps_C`` by sensor) in front of the trace."""
    tr = live.trace
    times = list(arrays.get("device_s") or [])
    if not times and arrays.get("time_s") and tr is not None and tr.heat_start_device_s is not None:
        times = [t + tr.heat_start_device_s for t in arrays["time_s"]]
    temps = arrays.get("temps_C") or {}
    if tr is None or not times or not isinstance(temps, dict):
        return
    names = list(temps)
    first_live = tr.device_s[0] if tr.device_s else float("inf")
    rows = [(float(d), [temps[n][i] for n in names], float((arrays.get("q_W_per_m") or [0.0] * len(times))[i]))
            for i, d in enumerate(times) if float(d) < first_live]
    tr.device_s[:0] = [r[0] for r in rows]
    tr.temps[:0] = [[float("nan") if v is None else float(v) for v in r[1]] for r in rows]
    tr.q[:0] = [r[2] for r in rows]
    live.version += 1


def run_app(socket_path: Path | None = None, autostart: bool = False, owns_daemon: bool = False) -> int:
    """Run the UI until the operator quits; ``autostart`` starts a default run once the daemon answers."""
    result = LinerigApp(socket_path, autostart=autostart, owns_daemon=owns_daemon).run()
    return int(result or 0)
