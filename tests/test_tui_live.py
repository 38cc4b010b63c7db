"""The UI driven by Textual's pilot against a real linerigd on the simulator.

The daemon runs as its own process (``linerigd --simulate glycerol --speed 200``) on a temporary socket and
database; the test waits for its ready line. Every wait is on a condition with a deadline, never a sleep.
Glycerol is used because the live rule reaches a steady estimate in it within a few simulated minutes.
"""

from __future__ import annotations

import asyncio
import json
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from textual.pilot import Pilot

from linerig.tui.app import LinerigApp
from linerig.tui.client import Client
from linerig.tui.screens.confirm import Confirm
from linerig.tui.screens.live import LiveScreen
from linerig.tui.screens.start import StartScreen
from linerig.tui.widgets.readouts import EstimateReadout, RunBar, StopPrompt, VerdictReadout

pytestmark = pytest.mark.timeout(90)


class Daemon:
    def __init__(self, tmp: Path, speed: float = 200.0) -> None:
        self.socket = tmp / "d.sock"
        self.db = tmp / "runs.db"
        self.speed = speed
        self.proc: subprocess.Popen[str] | None = None

    def start(self) -> None:
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "linerig.daemon.main", "--simulate", "glycerol", "--speed", f"{self.speed:g}",
             "--socket", str(self.socket), "--db", str(self.db)],
            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        assert self.proc.stdout is not None
        ready = json.loads(self.proc.stdout.readline() or "{}")
        assert ready.get("ready"), "linerigd did not report ready"

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)


@pytest.fixture
def daemon(tmp_path: Path) -> Iterator[Daemon]:
    d = Daemon(tmp_path)
    d.start()
    yield d
    d.stop()


@pytest.fixture
def slower_daemon(tmp_path: Path) -> Iterator[Daemon]:
    """50× speed: time for an operator (the pilot) to read a prompt and act on it while the heater is on."""
    d = Daemon(tmp_path, speed=50.0)
    d.start()
    yield d
    d.stop()


async def until(pilot: Pilot, cond: Callable[[], bool], what: str, timeout: float = 30.0) -> None:
    """Let the app run until ``cond()`` holds; fail with ``what`` after ``timeout`` seconds."""
    deadline = time.monotonic() + timeout
    while not cond():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        await pilot.pause(0.02)


async def front_end_linked(client: Client) -> None:
    """Return once the daemon has its front end (a subscribed client hears the link event)."""
    if not (await client.request("status"))["link_up"]:
        async with asyncio.timeout(30):
            async for ev in client.events():
                if ev["event"] == "link" and ev["up"]:
                    return


def text_of(widget: object) -> str:
    return str(widget.render())  # type: ignore[attr-defined]


async def test_the_prompt_the_stop_the_logged_recovery_and_the_final_result(slower_daemon: Daemon) -> None:
    daemon = slower_daemon
    """A run started from the form with a 3 % stop tolerance: the prompt says when heating could stop and against
    what, the operator stops, the cooling is logged as long as the stop plan says (2 × the heating), and the
    final result replaces the live estimate."""
    app = LinerigApp(daemon.socket)
    async with app.run_test(size=(80, 24)) as pilot:
        live = app.live
        await until(pilot, lambda: live.connected and live.frontend_up, "the daemon and its front end")
        await pilot.press("f3")
        await until(pilot, lambda: isinstance(app.screen, StartScreen), "the new-run form")
        form = app.screen
        assert isinstance(form, StartScreen)
        form.query_one("#f-site").focus()
        await pilot.press(*"Pond edge")
        # 500 s planned at 50× speed: 10 s of wall time for the whole heating, well inside what the 100 mm needle
        # can use in glycerol even for the largest α the early data allow; a 300 s baseline bounds the ground's
        # drift well enough for an early verdict
        form.query_one("#f-heat_s").value = "500"
        form.query_one("#f-baseline_s").value = "300"
        form.query_one("#f-stop_tolerance_pct").value = "3"
        await until(pilot, lambda: "✓ READY" in text_of(form.query_one("#arm-line")), "the form to be ready")
        await pilot.press("ctrl+s")
        await until(pilot, lambda: isinstance(app.screen, Confirm), "the arming question")
        await pilot.press("y")
        await until(pilot, lambda: isinstance(app.screen, LiveScreen) and live.run_id is not None, "the live screen")
        run_id = live.run_id
        screen = app.screen
        assert isinstance(screen, LiveScreen)

        await until(pilot, lambda: live.estimate is not None, "a running estimate")
        screen.redraw()
        assert "W/(m·K)" in text_of(screen.query_one(EstimateReadout))

        await until(pilot, lambda: live.can_stop_heating or live.run_state != "heating",
                    "the 'heating can stop' verdict", timeout=60)
        assert live.can_stop_heating, f"no verdict while heating: {live.state_reason}; {live.verdict}"
        screen.redraw()
        prompt = screen.query_one(StopPrompt)
        words = text_of(prompt)
        assert prompt.display and "HEATING CAN STOP" in words and "within 3 %" in words
        v = live.verdict or {}
        assert f"since {v.get('at_s') or 0:.0f} s" in words and "Stopping now saves" in words and " Wh" in words
        assert "CAN HEATING STOP?" in text_of(screen.query_one(VerdictReadout))
        await pilot.press("s")  # the prompt itself is the confirmation
        await until(pilot, lambda: live.run_state == "recovering", "heating to stop")
        heated = live.trace.heat_off_t_s if live.trace is not None else None
        assert heated is not None and heated < 500
        # the stop plan: the cooling to 3·t_h (the screen counts the heating from when heat was asked for, the
        # daemon from time zero, the sample before the heater showed on: a few samples apart)
        assert live.recover_s == pytest.approx(2 * heated, abs=6.0)
        assert "logged for" in live.state_reason
        screen.redraw()
        assert not screen.query_one(StopPrompt).display
        assert "stopped at" in text_of(screen.query_one(VerdictReadout))

        await until(pilot, lambda: live.run_state == "done", "the recovery to be logged", timeout=60)
        await until(pilot, lambda: bool(live.finished and live.finished.get("results")), "the final result",
                    timeout=60)
        screen.redraw()
        assert "final" in text_of(screen.query_one(EstimateReadout))

    async with Client(daemon.socket) as client:
        detail = (await client.request("run", run_id=run_id))["run"]
    assert detail["state"] == "done" and detail["site"] == "Pond edge"
    assert detail["plan"]["stop_tolerance"] == pytest.approx(0.03)
    kinds = [(e["kind"], e["state"]) for e in detail["events"]]
    assert ("verdict", None) in kinds and ("state", "recovering") in kinds and ("state", "done") in kinds
    t_on = next(e["device_s"] for e in detail["events"] if e["kind"] == "state" and e["state"] == "recovering")
    t_done = next(e["device_s"] for e in detail["events"] if e["kind"] == "state" and e["state"] == "done")
    assert t_done - t_on == pytest.approx(live.recover_s, abs=2.0)  # the recovery really logged that long
    final = detail["results"]["heater"]
    assert final["stable_at_s"] is not None and abs(final["k_W_per_mK"] / 0.286 - 1) < 0.05  # glycerol


async def test_closing_and_reopening_the_ui_leaves_the_run_alone(daemon: Daemon) -> None:
    async with Client(daemon.socket) as client:
        await client.request("subscribe")
        await front_end_linked(client)
        run_id = (await client.request("start", heat_s=3000, baseline_s=20, metadata={"site": "bench"}))["run_id"]

    app = LinerigApp(daemon.socket)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.live.run_state == "heating" and app.live.estimate is not None,
                    "the heating run and an estimate")
    async with Client(daemon.socket) as client:
        run = (await client.request("status"))["run"]
    assert run["id"] == run_id and run["state"] == "heating"  # the UI went away, the run did not

    again = LinerigApp(daemon.socket)
    async with again.run_test(size=(160, 48)) as pilot:
        live = again.live
        await until(pilot, lambda: live.run_id == run_id and len(live.trace.device_s if live.trace else []) > 5,
                    "the reopened UI to follow the same run")
        assert live.run_state == "heating"
        assert live.trace is not None and live.trace.baseline_source in ("measured", "daemon", "fit")
        await pilot.press("a")
        await until(pilot, lambda: isinstance(again.screen, Confirm), "the abort question")
        await pilot.press("y")
        await until(pilot, lambda: live.run_state == "aborted", "the run to be aborted")


async def test_the_link_comes_back_after_the_daemon_restarts(daemon: Daemon) -> None:
    app = LinerigApp(daemon.socket)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.live.connected, "the first connection")
        daemon.stop()
        await until(pilot, lambda: not app.live.connected, "the UI to notice the daemon went away")
        screen = app.screen
        assert isinstance(screen, LiveScreen)
        screen.redraw()
        assert "NO DAEMON" in text_of(screen.query_one(RunBar))
        daemon.start()
        await until(pilot, lambda: app.live.connected and app.live.frontend_up, "the link to come back")


async def test_run_detail_gets_samples_and_probe_from_the_daemon(daemon: Daemon,
                                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    """The run detail over the socket alone (the UI may run on another machine than the database): the local
    file fallback is made to fail, so the samples can only come from the daemon's ``samples`` reply, and the
    probe's geometry from the profile the daemon stored."""
    from linerig.tui.screens import history
    from linerig.tui.screens.rereduce import SamplesUnavailable

    def no_local_file(*args: object) -> None:
        raise SamplesUnavailable("this UI has no access to the daemon's database")

    monkeypatch.setattr(history, "read_samples_from_db", no_local_file)
    async with Client(daemon.socket) as client:
        await client.request("subscribe")
        await front_end_linked(client)
        rid = (await client.request("start", heat_s=120, recover_s=60, baseline_s=20))["run_id"]
        async with asyncio.timeout(60):
            async for ev in client.events():
                if ev["event"] == "run_finished" and ev["run_id"] == rid:
                    break
        active = (await client.request("status"))["probe"]["serial"]
    app = LinerigApp(daemon.socket)
    async with app.run_test(size=(80, 24)) as pilot:
        await until(pilot, lambda: app.live.connected, "the daemon")
        screen = history.RunDetailScreen(rid)
        await app.push_screen(screen)
        await until(pilot, lambda: not screen.samples_note.startswith("loading"), "the samples")
        assert screen.data is not None, screen.samples_note
        assert screen.probe is not None and screen.probe.serial == active
        heating = screen.data.time_s > 0
        assert heating.sum() >= 100 and max(screen.data.q_W_per_m) == pytest.approx(5.0, rel=0.02)
