"""The live screen during a heat pulse: the radial sensor's rise and decay against time with the daemon's fit.

The model test feeds ``LiveState`` events by hand; the live test drives the real Textual app with its pilot against
``linerigd --simulate`` on the dual needle, starting the pulse through the socket as ``linerig start --pulse`` does.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from simulated_daemon import simulated_daemon
from test_tui_live import front_end_linked, until

from linerig.tui.app import LinerigApp
from linerig.tui.client import Client
from linerig.tui.screens.live import LiveScreen
from linerig.tui.screens.live_state import LiveState
from linerig.tui.widgets.readouts import VerdictReadout
from linerig.tui.widgets.run_plot import PlotView, RunPlot, auto_view, build_spec, next_choice

DUAL = Path(__file__).resolve().parent.parent / "hardware" / "probes" / "dual-needle.toml"


def _pulse_state() -> LiveState:
    live = LiveState()
    live.apply_status({"device_s": 0.0, "link_up": True, "probe": {"sensors": ["heater", "needle8"]},
                       "run": {"id": 7, "state": "settling", "plan": {"kind": "pulse", "sensor": "needle8",
                                                                        "heat_s": 54, "baseline_s": 120}}})
    for i in range(40):  # baseline
        live.apply_event({"event": "sample", "run_id": 7, "device_s": 60.0 + i, "temps_C": [20.0, 20.0],
                          "q_W_per_m": 0.0})
    live.apply_event({"event": "state", "run_id": 7, "state": "heating", "device_s": 100.0})
    for i in range(0, 200):
        t = float(i)
        rise = 0.7 * (t / 60.0) * np.exp(1 - t / 60.0)
        live.apply_event({"event": "sample", "run_id": 7, "device_s": 100.0 + t, "temps_C": [20.0 + 3 * rise,
                                                                                               20.0 + rise],
                          "q_W_per_m": 22.0 if t < 54 else 0.0})
        if i == 54:
            live.apply_event({"event": "state", "run_id": 7, "state": "recovering", "device_s": 154.0})
    live.apply_event({"event": "pulse_fit", "run_id": 7, "sensor": "needle8", "t_s": 199.0, "final": False,
                      "k_W_per_mK": 1.14, "k_u_W_per_mK": 0.03, "alpha_mm2_per_s": 0.42,
                      "alpha_u_mm2_per_s": 0.01, "rho_c_MJ_per_m3K": 2.71, "rho_c_u_MJ_per_m3K": 0.06,
                      "t_peak_s": 60.0, "curve": {"t_s": [0.0, 60.0, 200.0], "dT_K": [0.0, 0.7, 0.3]}})
    return live


def test_a_pulse_shows_its_radial_sensor_with_the_fit() -> None:
    live = _pulse_state()
    assert live.pulse and live.trace is not None and live.trace.pulse_fit is not None
    assert auto_view(live.run_state, live.pulse) is PlotView.PULSE
    assert auto_view("recovering") is PlotView.COOLING  # a heating run keeps its cooling view
    spec = build_spec(live.trace, PlotView.PULSE)
    assert [s.label for s in spec.series] == ["needle8", "pulse fit (live)"]
    assert "ρc 2.71 ± 0.06" in spec.title and ("peak", 60.0) in spec.labels
    assert [tag for _, tag in spec.vlines] == ["on", "off"]
    # the sensor's own rise, not the heater's: ΔT of the primary column over its baseline
    assert float(np.max(spec.series[0].y)) == pytest.approx(0.7, abs=0.01)
    views = [None]
    for _ in range(5):
        views.append(next_choice(views[-1], pulse=True))
    assert views == [None, PlotView.LOG, PlotView.LINEAR, PlotView.COOLING, PlotView.PULSE, None]


def test_before_the_heater_goes_on_the_pulse_view_says_so() -> None:
    live = LiveState()
    live.apply_status({"device_s": 0.0, "probe": {"sensors": ["heater", "needle8"]},
                       "run": {"id": 3, "state": "settling", "plan": {"kind": "pulse", "sensor": "needle8"}}})
    assert build_spec(live.trace, PlotView.PULSE).note == "pulse view: heater not on yet"


@pytest.fixture
def dual_daemon(tmp_path: Path) -> Iterator[Path]:
    with simulated_daemon(tmp_path, 30, "moist-clay", "--probe", str(DUAL)) as d:
        yield d["socket"]


@pytest.mark.timeout(180)
async def test_the_live_screen_follows_a_pulse_with_the_daemons_fit(dual_daemon: Path) -> None:
    app = LinerigApp(dual_daemon)
    async with app.run_test(size=(120, 36)) as pilot:
        live = app.live
        await until(pilot, lambda: live.connected and live.frontend_up, "the daemon and its front end")
        async with Client(dual_daemon) as client:
            await front_end_linked(client)
            await client.request("start", preset="pulse", metadata={"site": "bench"})
        await until(pilot, lambda: live.run_state == "heating" and live.pulse, "the pulse to start", timeout=60)
        screen = app.screen
        assert isinstance(screen, LiveScreen) and screen.view is PlotView.PULSE
        screen.redraw()
        assert "no stop verdict" in str(screen.query_one(VerdictReadout).render())
        await until(pilot, lambda: live.trace is not None and live.trace.pulse_fit is not None,
                    "a live pulse fit", timeout=120)
        assert live.estimate is None  # no live line fit on a pulse
        screen.redraw()
        spec = build_spec(live.trace, PlotView.PULSE)
        assert any(s.label.startswith("pulse fit") for s in spec.series) and "ρc" in spec.title
        assert screen.query_one(RunPlot).choice is None  # following the phase, on its own
