"""SVG snapshots of the main screens at 80×24 (an SSH session) and 160×48, fed by a recorded daemon conversation.

A small socket server replays tests/snapshots/replay_rod.json (an invented three-sensor rod heating in an
invented test pit, see make_replay.py) over a real Unix socket, so the app runs exactly as against linerigd
but sees the same bytes every time. The snapshot plugin runs the app in its own event loop, so the server
needs a loop of its own: that is the one thread here.

Update after an intended change with ``pytest tests/test_tui_snapshots.py --snapshot-update`` and read the
diff report first.
"""

from __future__ import annotations

import asyncio
import json
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from textual.pilot import Pilot
from textual.widgets import DataTable, Static

from linerig.tui.app import LinerigApp
from linerig.tui.screens.history import HistoryScreen, RunDetailScreen
from linerig.tui.screens.live import LiveScreen
from linerig.tui.screens.probes import ProbesScreen
from linerig.tui.screens.start import StartScreen
from linerig.tui.units import DisplayUnit

DOC = json.loads((Path(__file__).parent / "snapshots" / "replay_rod.json").read_text())
SIZES = [(80, 24), (160, 48)]


def _strip(ev: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in ev.items() if k not in ("event", "run_id", "phase", "t_s")}


def status_after(events: list[dict[str, Any]]) -> dict[str, Any]:
    """What linerigd's status() would say at the end of ``events``."""
    st = dict(DOC["status"])
    samples = [e for e in events if e["event"] == "sample"]
    states = [e for e in events if e["event"] == "state"]
    ests = [e for e in events if e["event"] == "estimate"]
    heat = next((e["device_s"] for e in states if e["state"] == "heating"), None)
    st.update(device_s=samples[-1]["device_s"], last_sample=_strip(samples[-1]))
    st["run"] = {"id": 17, "state": states[-1]["state"], "plan": DOC["replies"]["run"]["run"]["plan"], "cycle": 1,
                 "heat_start_device_s": heat, "estimate": _strip(ests[-1]) if ests else None,
                 "phase_start_device_s": states[-1].get("device_s")}
    faults = [e for e in events if e["event"] == "fault"]
    st["fault"] = faults[-1]["reason"] if faults else None
    return st


class ReplayServer:
    """Answers the daemon's requests from the fixture and streams its events after ``subscribe``."""

    def __init__(self, path: Path, events: list[dict[str, Any]]) -> None:
        self.path = path
        self.events = events
        self.status = status_after(events)
        self._loop = asyncio.new_event_loop()
        self._ready = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        asyncio.set_event_loop(self._loop)
        server = self._loop.run_until_complete(asyncio.start_unix_server(self._client, path=str(self.path)))
        self._ready.set()
        self._loop.run_forever()
        server.close()
        self._loop.run_until_complete(server.wait_closed())
        self._loop.close()

    async def _client(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        while line := await reader.readline():
            req = json.loads(line)
            op, rid = req["op"], req.get("id")
            if op == "status":
                reply = {"id": rid, "ok": True, **self.status}
            elif op == "subscribe":
                reply = {"id": rid, "ok": True, "subscribed": True}
            elif op in DOC["replies"]:
                reply = {"id": rid, "ok": True, **DOC["replies"][op]}
            else:
                reply = {"id": rid, "ok": False, "error": f"unknown op {op!r}"}
            writer.write((json.dumps(reply) + "\n").encode())
            if op == "subscribe":
                writer.writelines((json.dumps(ev) + "\n").encode() for ev in self.events)
            await writer.drain()

    def __enter__(self) -> ReplayServer:
        self._thread.start()
        assert self._ready.wait(5), "replay server did not start"
        return self

    def __exit__(self, *exc: object) -> None:
        self._loop.call_soon_threadsafe(self._loop.stop)
        self._thread.join(5)


@pytest.fixture
def replay(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[Callable[..., LinerigApp]]:
    # no local database (and a path that does not vary between runs): the detail says samples are unavailable
    monkeypatch.setenv("LINERIG_DB", "/nonexistent/linerig-snapshots.db")
    servers: list[ReplayServer] = []

    def make(extra: list[dict[str, Any]] | None = None) -> LinerigApp:
        srv = ReplayServer(tmp_path / f"replay{len(servers)}.sock", DOC["events"] + (extra or []))
        servers.append(srv.__enter__())
        return LinerigApp(srv.path, unit=DisplayUnit.CONDUCTIVITY)

    yield make
    for srv in servers:
        srv.__exit__()


async def settle(pilot: Pilot, cond: Callable[[], bool], what: str, timeout: float = 15.0) -> None:
    deadline = time.monotonic() + timeout
    while not cond():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        await pilot.pause(0.02)


def replayed(app: LinerigApp) -> Callable[[], bool]:
    n = len(DOC["events"])
    return lambda: app.live.events_seen >= n


async def _live_ready(pilot: Pilot) -> None:
    app = pilot.app
    assert isinstance(app, LinerigApp)
    await settle(pilot, replayed(app), "the replayed events")
    screen = app.screen
    assert isinstance(screen, LiveScreen)
    screen.redraw()
    await pilot.pause()


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_live_screen(replay: Callable[..., LinerigApp], snap_compare: Any, size: tuple[int, int]) -> None:
    """Heating, steady estimate, the stop prompt, headroom and all three sensors."""
    assert snap_compare(replay(), terminal_size=size, run_before=_live_ready)


def test_live_screen_linear_view_in_trade_units(replay: Callable[..., LinerigApp], snap_compare: Any) -> None:
    async def run_before(pilot: Pilot) -> None:
        await _live_ready(pilot)
        await pilot.press("v", "v", "u", "u")

    assert snap_compare(replay(), terminal_size=(80, 24), run_before=run_before)


def test_live_screen_after_a_safety_stop(replay: Callable[..., LinerigApp], snap_compare: Any) -> None:
    reason = "supply voltage 10.41 V is below 10.50 V (battery low)"
    extra = [{"event": "fault", "reason": reason},
             {"event": "state", "run_id": 17, "state": "faulted", "reason": reason, "device_s": 1301.5}]

    async def run_before(pilot: Pilot) -> None:
        app = pilot.app
        assert isinstance(app, LinerigApp)
        await settle(pilot, lambda: app.live.run_state == "faulted", "the fault")
        app.screen.redraw()  # type: ignore[attr-defined]
        await pilot.pause()

    assert snap_compare(replay(extra), terminal_size=(80, 24), run_before=run_before)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_start_screen(replay: Callable[..., LinerigApp], snap_compare: Any, size: tuple[int, int]) -> None:
    """The new-run form: preset, plan, metadata, and a pre-check that blocks arming while run 17 heats."""

    async def run_before(pilot: Pilot) -> None:
        app = pilot.app
        assert isinstance(app, LinerigApp)
        await settle(pilot, replayed(app), "the replayed events")
        await pilot.press("f3")
        await settle(pilot, lambda: isinstance(app.screen, StartScreen), "the form")
        app.screen.refresh_checks()  # type: ignore[attr-defined]
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=size, run_before=run_before)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_history_screen(replay: Callable[..., LinerigApp], snap_compare: Any, size: tuple[int, int]) -> None:
    async def run_before(pilot: Pilot) -> None:
        app = pilot.app
        await pilot.press("f4")
        await settle(pilot, lambda: isinstance(app.screen, HistoryScreen)
                     and app.screen.query_one("#runs", DataTable).row_count == 4, "the run list")
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=size, run_before=run_before)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_run_detail_screen(replay: Callable[..., LinerigApp], snap_compare: Any, size: tuple[int, int]) -> None:
    async def run_before(pilot: Pilot) -> None:
        await _open_detail(pilot)
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=size, run_before=run_before)


@pytest.mark.parametrize("size", SIZES, ids=lambda s: f"{s[0]}x{s[1]}")
def test_probes_screen(replay: Callable[..., LinerigApp], snap_compare: Any, size: tuple[int, int]) -> None:
    async def run_before(pilot: Pilot) -> None:
        app = pilot.app
        await pilot.press("f5")
        await settle(pilot, lambda: isinstance(app.screen, ProbesScreen) and app.screen.shown_serial == "ROD-0003"
                     and app.screen.cals_loaded, "the calibrations")
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=size, run_before=run_before)


# -- the CLI twins of the history and probes screens, against the same replayed daemon -------------------------
def test_history_and_probes_commands(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from linerig.tui.cli import main

    with ReplayServer(tmp_path / "cli.sock", DOC["events"]) as srv:
        assert main(["--socket", str(srv.path), "history", "--site", "KESTREL", "--json"]) == 0
        assert [r["id"] for r in json.loads(capsys.readouterr().out)] == [17, 16]
        assert main(["--socket", str(srv.path), "history", "--since", "2031-05-13", "--until", "2031-05-13"]) == 0
        out = capsys.readouterr().out
        assert "Heron Farm verge" in out and "Kestrel" not in out
        assert main(["--socket", str(srv.path), "history", "--since", "13/05/2031"]) == 2
        assert "YYYY-MM-DD" in capsys.readouterr().err
        assert main(["--socket", str(srv.path), "history", "17"]) == 0
        assert "heater: k = 1.197 ± 0.028 W/(m·K) (± U, k = 2)" in capsys.readouterr().out
        assert main(["--socket", str(srv.path), "probes"]) == 0
        out = capsys.readouterr().out
        assert "ROD-0003  three-sensor rod  (rod)  in use" in out and "factor 0.9828 ± 0.0122 (± U, k = 2)" in out


# -- the screens issue 14 fixed ------------------------------------------------------------------------------
async def _open_detail(pilot: Pilot) -> RunDetailScreen:
    app = pilot.app
    await pilot.press("f4")
    await settle(pilot, lambda: isinstance(app.screen, HistoryScreen)
                 and app.screen.query_one("#runs", DataTable).row_count == 4, "the run list")
    await pilot.press("enter")
    await settle(pilot, lambda: isinstance(app.screen, RunDetailScreen) and not app.screen.samples_note
                 .startswith("loading"), "the run detail")
    screen = app.screen
    assert isinstance(screen, RunDetailScreen)
    return screen


def test_rereduce_tab_offers_the_stored_method_in_a_readable_box(replay: Callable[..., LinerigApp],
                                                                 snap_compare: Any) -> None:
    async def run_before(pilot: Pilot) -> None:
        from textual.widgets import TabbedContent

        screen = await _open_detail(pilot)
        screen.query_one("#detail-tabs", TabbedContent).active = "tab-rereduce"
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=(100, 30), run_before=run_before)


def test_export_asks_where_to_write(replay: Callable[..., LinerigApp], snap_compare: Any,
                                   monkeypatch: pytest.MonkeyPatch) -> None:
    from linerig.tui.screens.confirm import TextPrompt

    monkeypatch.setenv("LINERIG_EXPORT_DIR", "/srv/field-data/exports")

    async def run_before(pilot: Pilot) -> None:
        await _open_detail(pilot)
        await pilot.press("e")
        await settle(pilot, lambda: isinstance(pilot.app.screen, TextPrompt), "the folder question")
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=(80, 24), run_before=run_before)


def test_calibration_question_is_not_cut(replay: Callable[..., LinerigApp], snap_compare: Any) -> None:
    from linerig.tui.screens.confirm import TextPrompt

    async def run_before(pilot: Pilot) -> None:
        app = pilot.app
        await pilot.press("f5")
        await settle(pilot, lambda: isinstance(app.screen, ProbesScreen) and app.screen.cals_loaded, "the probes")
        await pilot.press("c")
        await settle(pilot, lambda: isinstance(app.screen, TextPrompt), "the reference question")
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=(80, 24), run_before=run_before)


def test_quit_while_heating_says_the_heater_stays_on(replay: Callable[..., LinerigApp], snap_compare: Any) -> None:
    from linerig.tui.screens.confirm import Confirm

    async def run_before(pilot: Pilot) -> None:
        app = pilot.app
        assert isinstance(app, LinerigApp)
        await _live_ready(pilot)
        assert app.live.run_state == "heating"
        await pilot.press("ctrl+q")
        await settle(pilot, lambda: isinstance(app.screen, Confirm), "the quit question")
        await pilot.pause()

    assert snap_compare(replay(), terminal_size=(80, 24), run_before=run_before)


async def test_quit_question_keeps_the_app_on_no_and_function_keys_mean_one_thing(
        replay: Callable[..., LinerigApp]) -> None:
    from linerig.tui.screens.confirm import Confirm
    from linerig.tui.screens.qualify import QualifyScreen

    app = replay()
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot, replayed(app), "the replayed events")
        await pilot.press("ctrl+q")
        await settle(pilot, lambda: isinstance(app.screen, Confirm), "the quit question")
        assert "STAYS ON" in str(app.screen.query_one("#detail", Static).content)
        await pilot.press("n")
        await settle(pilot, lambda: isinstance(app.screen, LiveScreen), "back on the live screen")
        assert app.is_running
        for key, screen_type in (("f4", HistoryScreen), ("f5", ProbesScreen), ("f6", QualifyScreen)):
            await pilot.press(key)
            await settle(pilot, lambda t=screen_type: isinstance(app.screen, t), f"{key} → {screen_type.__name__}")
        for screen_type in (HistoryScreen, ProbesScreen):  # Reload is r there; F6 stays Qualify
            keys = {b.key: b.action for b in screen_type.BINDINGS}  # type: ignore[union-attr]
            assert keys.get("r") == "reload" and "f6" not in keys


async def test_a_calibration_form_does_not_carry_the_last_sample_over(replay: Callable[..., LinerigApp]) -> None:
    from textual.widgets import Input

    app = replay()
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot, replayed(app), "the replayed events")
        await pilot.press("f3")
        await settle(pilot, lambda: isinstance(app.screen, StartScreen), "the form")
        form = app.screen
        for name, value in (("moisture_pct", "14.5"), ("dry_density_kg_per_m3", "1640"), ("location", "TP-2"),
                            ("depth_m", "1.1"), ("operator", "field crew B")):
            form.query_one(f"#f-{name}", Input).value = value
        app.open_new_run("calibration", {"site": "lab", "sample": "calibration", "material": "glycerol"})
        await pilot.press("f2", "f3")
        await settle(pilot, lambda: form.query_one("#f-material", Input).value == "glycerol", "the calibration")
        values = {n: form.query_one(f"#f-{n}", Input).value for n in ("moisture_pct", "dry_density_kg_per_m3",
                                                                       "location", "depth_m", "operator")}
        assert values == {"moisture_pct": "", "dry_density_kg_per_m3": "", "location": "", "depth_m": "",
                          "operator": "field crew B"}
