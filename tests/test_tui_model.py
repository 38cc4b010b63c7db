"""The UI's model without a terminal: folding events, what the plot draws, headroom, advice, the run form,
re-reduction and export.

Physics checks use the ideal line source, ΔT = q/(4πk)·E1(r²/4αt) (Carslaw & Jaeger 1959, Conduction of
Heat in Solids, §10.4), with E1 from scipy.special.exp1, and its superposition for the cooling after heater
off, ΔT = q/(4πk)·[E1(r²/4αt) − E1(r²/4α(t − t_off))] → q/(4πk)·ln(t/(t − t_off)) late in the cooling.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.special import exp1

from linerig.daemon.reduction.data import RunData
from linerig.daemon.safety import (
    DeviceClockWatch,
    Limits,
    SampleView,
    ShortfallWatch,
    check_heater_response,
    check_sample,
)
from linerig.tui.screens.history import filter_runs, trace_from_data
from linerig.tui.screens.live_state import LiveState, RunTrace
from linerig.tui.screens.rereduce import export_run, rereduce, run_data_from_arrays
from linerig.tui.screens.run_form import PRESETS, can_arm, check_form, precheck
from linerig.tui.units import DisplayUnit
from linerig.tui.widgets.advice import fault_advice, flag_words
from linerig.tui.widgets.headroom import headroom_rows
from linerig.tui.widgets.readouts import stop_prompt, verdict_lines
from linerig.tui.widgets.run_plot import PlotView, auto_view, build_spec, log_ticks, next_choice

REPLAY = json.loads((Path(__file__).parent / "snapshots" / "replay_rod.json").read_text())
# the fixture's invented medium and rod (see tests/snapshots/make_replay.py)
K, ALPHA, Q, R_HEATER = 1.20, 1.20 / 2.0e6, 5.0, 0.635e-3


def line_source_rise(t: np.ndarray | float, r: float = R_HEATER, k: float = K, alpha: float = ALPHA,
                     q: float = Q) -> np.ndarray:
    return q / (4 * math.pi * k) * exp1(r * r / (4 * alpha * np.asarray(t, dtype=float)))


def replayed() -> LiveState:
    live = LiveState()
    live.apply_status(REPLAY["status"])
    live.pending_plan = {"heat_s": 600.0, "recover_s": 600.0, "power_W_per_m": 5.0, "baseline_s": 120.0,
                         "cycles": 1, "sensor": "heater"}
    for ev in REPLAY["events"]:
        live.apply_event(ev)
    return live


# -- folding events -------------------------------------------------------------------------------------------
def test_replayed_run_is_heating_with_every_sensor() -> None:
    live = replayed()
    tr = live.trace
    assert tr is not None
    assert (live.run_id, live.run_state) == (17, "heating")
    assert tr.sensors == ["heater", "r6", "r12"]
    assert tr.heat_start_device_s == pytest.approx(1061.0)
    assert live.heating_elapsed_s == pytest.approx(240.0)
    left, at_least = live.remaining_s()
    assert left == pytest.approx(600 - 240 + 600) and not at_least
    assert live.can_stop_heating
    assert live.events_seen == len(REPLAY["events"])


def test_the_stop_verdict_stays_when_one_estimate_falls_outside_the_tolerance() -> None:
    """The daemon latches ``stable_at_s``; the prompt follows that, not each estimate's own ``stable`` flag."""
    live = replayed()
    est = live.estimate
    assert est is not None and est["stable_at_s"] is not None
    wobble = {**est, "event": "estimate", "run_id": 17, "t_s": est["t_s"] + 1.0, "stable": False,
              "k_W_per_mK": est["k_W_per_mK"] * 1.006}
    live.apply_event(wobble)
    assert live.can_stop_heating and live.stable_at_s == est["stable_at_s"]
    live.apply_event({"event": "state", "run_id": 17, "state": "recovering", "reason": "x", "device_s": 1302.0})
    assert not live.can_stop_heating  # the heater is off: nothing left to stop


def _plain(text: object) -> str:
    return str(getattr(text, "plain", text))


def test_the_prompt_says_when_against_what_and_what_a_stop_saves() -> None:
    live = replayed()
    v = live.verdict
    assert v is not None and v["at_s"] == live.stable_at_s
    words = _plain(stop_prompt(live, False, DisplayUnit.CONDUCTIVITY))
    assert "HEATING CAN STOP" in words and f"since {v['at_s']:.0f} s" in words
    assert "within 2 %" in words and "Press" in words
    assert "Stopping now saves 6:00" in words  # 600 s planned, 240 s heated (tui.units.duration)
    assert "cooling is then logged for 8:00" in words  # the stop plan: 2 × 240 s
    assert "Wh" not in words  # the replayed rod has no heater length on record: no energy guessed
    side = " ".join(text for text, _ in verdict_lines(live))
    assert f"can stop since {v['at_s']:.0f} s" in side and "tolerance 2 %" in side


def test_a_withdrawn_verdict_is_hard_to_miss_and_names_how_far_k_moved() -> None:
    live = replayed()
    est = live.estimate
    assert est is not None
    moved = {**est["verdict"], "withdrawn": True, "moved_rel": -0.031}
    live.apply_event({**est, "event": "estimate", "t_s": est["t_s"] + 1.0, "stable": False, "verdict": moved})
    assert live.verdict_withdrawn and not live.can_stop_heating
    text = stop_prompt(live, False, DisplayUnit.CONDUCTIVITY)
    assert text is not None
    assert "VERDICT WITHDRAWN" in _plain(text) and "-3.1 %" in _plain(text) and "2 % tolerance" in _plain(text)
    assert "red" in str(text.style) or any("red" in str(span.style) for span in text.spans)
    assert any("WITHDRAWN" in t and "red" in style for t, style in verdict_lines(live))
    assert "+0.0 %" not in _plain(text)


def test_no_stop_verdict_before_the_daemon_gives_one() -> None:
    live2 = LiveState()
    live2.apply_status(REPLAY["status"])
    for ev in REPLAY["events"]:
        if ev.get("event") == "estimate":
            ev = {**ev, "stable": False, "stable_at_s": None}
        live2.apply_event(ev)
    assert live2.run_state == "heating" and live2.estimate is not None and not live2.can_stop_heating


def test_baseline_and_rise_match_the_line_source() -> None:
    tr = replayed().trace
    assert tr is not None and tr.baseline_source == "measured"
    assert tr.baseline_C() == pytest.approx([11.80] * 3, abs=0.002)  # fixture's ground temperature, 3 mK noise
    t, dT = tr.heating()
    for i, r in enumerate((0.635e-3, 6e-3, 12e-3)):
        late = t > 100
        assert dT[late, i] == pytest.approx(line_source_rise(t[late], r), abs=0.015)
    assert tr.max_rise_K() == pytest.approx(float(line_source_rise(240.0)), abs=0.015)


def test_a_new_run_and_a_new_cycle_start_fresh_traces() -> None:
    live = replayed()
    live.apply_event({"event": "state", "run_id": 17, "state": "recovering", "reason": "x", "device_s": 1301.0})
    assert live.trace is not None and live.trace.heat_off_t_s == pytest.approx(240.0)
    live.apply_event({"event": "state", "run_id": 17, "state": "settling", "reason": "cycle 2", "device_s": 1901.0})
    assert live.cycle == 2 and live.trace.device_s == []
    live.apply_event({"event": "state", "run_id": 18, "state": "checking", "reason": "run requested"})
    assert live.run_id == 18 and live.trace.run_id == 18 and live.estimate is None


def test_joining_mid_run_extrapolates_the_baseline_from_the_fit() -> None:
    full = replayed()
    est = full.estimate
    late = LiveState()
    late.apply_status({**REPLAY["status"], "run": {"id": 17, "state": "heating", "plan": full.plan, "cycle": 1,
                                                   "heat_start_device_s": 1061.0, "estimate": est,
                                                   "phase_start_device_s": 1061.0}})
    for ev in REPLAY["events"][-40:]:
        late.apply_event(ev)
    tr = late.trace
    assert tr is not None and tr.baseline_source == "fit"
    t, dT = tr.heating()
    # only as good as the live fit's line: within 2 % of the rise here
    assert dT[-1, 0] == pytest.approx(float(line_source_rise(t[-1])), rel=0.02)


# -- the plot -------------------------------------------------------------------------------------------------
def test_log_view_draws_data_fit_and_window() -> None:
    tr = replayed().trace
    spec = build_spec(tr, PlotView.LOG)
    labels = [s.label for s in spec.series]
    assert labels == ["heater", "r6", "r12", "fit"]
    heater, fit = spec.series[0], spec.series[-1]
    assert heater.x[-1] == pytest.approx(math.log(240.0))
    # the drawn line is the live estimate's line ...
    est = tr.last_estimate
    assert fit.y == pytest.approx(est["slope_K"] * fit.x + est["intercept_K"])
    # ... and the drawn points have the ideal late-time slope q/(4πk) per unit of ln t
    late = heater.x > math.log(60.0)
    assert np.polyfit(heater.x[late], heater.y[late], 1)[0] == pytest.approx(Q / (4 * math.pi * K), rel=0.02)
    t0, t1 = est["window_s"]
    assert [x for x, _ in spec.vlines] == pytest.approx([math.log(t0), math.log(t1)])
    assert "ΔT" in spec.ylabel and "log" in spec.xlabel


def test_cooling_view_is_a_line_through_the_origin() -> None:
    # Build a heat-then-cool record from the line source and check the transformed points against q/(4πk)·x.
    t_off = 300.0
    t = np.arange(-30.0, 900.0, 1.0)
    rise = np.where(t > 0, line_source_rise(np.clip(t, 1e-9, None)), 0.0)
    rise -= np.where(t > t_off, line_source_rise(np.clip(t - t_off, 1e-9, None)), 0.0)
    tr = RunTrace(1, ["heater"], 0, baseline_s=30.0, heat_start_device_s=0.0, heat_end_device_s=t_off)
    tr.device_s = t.tolist()
    tr.temps = [[10.0 + v] for v in rise]
    tr.last_estimate = {"slope_K": Q / (4 * math.pi * K), "intercept_K": 0.0, "window_s": [30.0, 300.0]}
    spec = build_spec(tr, PlotView.COOLING)
    data, line = spec.series[0], spec.series[-1]
    late = data.x < math.log(900.0 / 500.0)  # t − t_off > 200 s: late cooling
    assert data.y[late] == pytest.approx(Q / (4 * math.pi * K) * data.x[late], rel=0.01)
    assert line.y[0] == 0.0 and line.x[0] == 0.0
    assert build_spec(replayed().trace, PlotView.COOLING).note == "cooling view: heater still on"


def test_linear_view_marks_heater_on_and_the_views_cycle() -> None:
    spec = build_spec(replayed().trace, PlotView.LINEAR)
    assert (0.0, "on") in spec.vlines
    assert spec.series[0].x.min() < 0  # the baseline is shown
    assert [auto_view(s) for s in ("settling", "heating", "recovering", "done")] == \
        [PlotView.LINEAR, PlotView.LOG, PlotView.COOLING, PlotView.LOG]
    seq = [None]
    for _ in range(4):
        seq.append(next_choice(seq[-1]))
    assert seq == [None, PlotView.LOG, PlotView.LINEAR, PlotView.COOLING, None]
    assert build_spec(None, PlotView.LOG).note


def test_log_ticks_are_in_seconds() -> None:
    ticks, labels = log_ticks(1.0, 600.0)
    assert labels == ["1", "10", "100"] and ticks == pytest.approx([0.0, math.log(10), math.log(100)])
    assert log_ticks(216.0, 357.0)[1] == ["220", "360"]  # no 1-2-5 value inside: the rounded ends


# -- readouts -------------------------------------------------------------------------------------------------
def test_headroom_rows_and_verdicts() -> None:
    live = replayed()
    rows = {r.name: r for r in headroom_rows(live)}
    assert set(rows) == {"rise", "probe", "battery", "heating"}
    assert rows["rise"].used == pytest.approx(float(line_source_rise(240.0)) / 12.0, rel=0.02)
    assert rows["rise"].verdict == "ok"
    assert rows["heating"].used == pytest.approx(240.0 / 3600.0)
    live.last_sample = {**live.last_sample, "supply_V": 10.4}
    assert {r.name: r.verdict for r in headroom_rows(live)}["battery"] == "over"


def test_advice_for_the_daemons_own_trip_reasons() -> None:
    lim = Limits()
    base = dict(heating=True, heater_on=True, power_set_W_per_m=5.0, power_W_per_m=5.0, heater_ohm=40.0,
                supply_V=12.5, temps_C=(14.0,), faults=(0,), rise_K=2.0, heating_elapsed_s=10.0)
    if "heater_confirmed" in {f.name for f in dataclasses.fields(SampleView)}:
        base["heater_confirmed"] = True
    low = check_sample(SampleView(**{**base, "supply_V": 10.0}), lim, 40.0)
    hot = check_sample(SampleView(**{**base, "rise_K": 13.0}), lim, 40.0)
    open_tc = check_sample(SampleView(**{**base, "faults": (1,)}), lim, 40.0)
    assert low is not None and "battery" in fault_advice(low).lower()
    assert hot is not None and "less power" in fault_advice(hot)
    assert open_tc is not None and "thermocouple" in fault_advice(open_tc)
    assert "History" in fault_advice("something nobody planned for")
    stray = check_sample(SampleView(**{**base, "heating": False}), lim, 40.0)
    assert stray is not None and "Something else is writing" in fault_advice(stray)
    clock = DeviceClockWatch()
    stuck = [clock.add(3.0, 1.0) for _ in range(5)][-1]
    assert stuck is not None and "clock" in fault_advice(stuck)
    short = ShortfallWatch()
    weak = [short.add(True, 10.0, 6.0, lim) for _ in range(3)][-1]
    assert weak is not None and "less power than asked" in fault_advice(weak)
    shorted = check_heater_response({"heater": 0.0}, 60.0, 5.0)
    assert shorted is not None and "thermocouple" in fault_advice(shorted)
    assert flag_words(["window_short", "odd_flag"]) == ["fit window still short", "odd flag"]


# -- the run form ---------------------------------------------------------------------------------------------
def test_form_turns_strings_into_a_plan_and_names_each_bad_field() -> None:
    lim = REPLAY["status"]["limits"]
    good = {"heat_s": "600", "recover_s": "600", "power_W_per_m": "4,5", "baseline_s": "60", "cycles": "2",
            "stop_tolerance_pct": "1,5", "site": " Kestrel Lane ", "depth_m": "1.5", "moisture_pct": "",
            "dry_density_kg_per_m3": "1650"}
    form = check_form(good, lim, auto_stop=True, sensor="heater")
    assert form.ok
    assert form.plan == {"heat_s": 600.0, "recover_s": 600.0, "power_W_per_m": 4.5, "baseline_s": 60.0,
                         "cycles": 2, "stop_tolerance": 0.015, "auto_stop": True, "sensor": "heater"}
    assert form.metadata == {"site": "Kestrel Lane", "depth_m": 1.5, "dry_density_kg_per_m3": 1650.0}
    bad = check_form({**good, "power_W_per_m": "75", "heat_s": "x", "cycles": "0", "site": "",
                      "dry_density_kg_per_m3": "16500", "stop_tolerance_pct": "25"}, lim)
    assert set(bad.errors) == {"power_W_per_m", "heat_s", "cycles", "site", "dry_density_kg_per_m3",
                               "stop_tolerance_pct"}
    assert "at most 20" in bad.errors["stop_tolerance_pct"]
    assert "above the limit 60" in bad.errors["power_W_per_m"]
    assert all(check_form({**good, **{k: f"{v:g}" for k, v in p.items() if k != "label"}}, lim).ok
               for p in PRESETS.values())


def test_precheck_blocks_arming_until_the_rig_is_ready() -> None:
    live = LiveState()
    form = check_form({"heat_s": "600", "recover_s": "600", "power_W_per_m": "5", "baseline_s": "60",
                       "cycles": "1", "site": "x"}, REPLAY["status"]["limits"])
    assert not can_arm(precheck(live, form.plan), form)  # not connected
    live.apply_status(REPLAY["status"])
    checks = precheck(live, form.plan)
    assert can_arm(checks, form), [c.text for c in checks]
    live.last_sample = {**live.last_sample, "faults": [0, 4, 0], "supply_V": 10.2}
    texts = [c.text for c in precheck(live, form.plan) if c.ok is False]
    assert any("r6" in t for t in texts) and any("BELOW" in t for t in texts)
    busy = replayed()
    assert not can_arm(precheck(busy, form.plan), form)


# -- history: filters, re-reduction, export -------------------------------------------------------------------
def test_runs_filter_by_site_and_date() -> None:
    runs = REPLAY["replies"]["runs"]["runs"]
    assert [r["id"] for r in filter_runs(runs, "kestrel", "", "")] == [17, 16]
    assert [r["id"] for r in filter_runs(runs, "", "2031-05-13", "2031-05-13")] == [15]
    assert [r["id"] for r in filter_runs(runs, "", "2031-05-13", "")] == [17, 16, 15]


def synthetic_run(noise_K: float = 0.0) -> RunData:
    rng = np.random.default_rng(7)
    t = np.arange(-60.0, 601.0, 1.0)
    rise = np.where(t > 0, line_source_rise(np.clip(t, 1e-9, None)), 0.0)
    q = np.where(t >= 0, Q, 0.0)
    return RunData(t, q, {"heater": 12.0 + rise + rng.normal(0, noise_K, t.size)})


@pytest.mark.parametrize(("method", "window"), [("auto", None), ("line", (60.0, 600.0)), ("auto", (60.0, 600.0)),
                                               ("live", None)])
def test_rereduce_recovers_the_line_source_conductivity(method: str, window: tuple[float, float] | None) -> None:
    # noise-free: the late-time line's own error at t ≥ 60 s is r²/4αt < 0.3 %
    res = rereduce(synthetic_run(), "heater", method, window)
    assert res["k_W_per_mK"] == pytest.approx(K, rel=0.005)
    assert res["resistivity_mK_per_W"] == pytest.approx(1 / res["k_W_per_mK"])
    if window:
        assert res["window_s"] == pytest.approx(list(window))


def test_rereduce_refuses_a_bad_window_and_an_unknown_sensor() -> None:
    data = synthetic_run()
    with pytest.raises(ValueError, match="start < end"):
        rereduce(data, "heater", "line", (300.0, 100.0))
    with pytest.raises(ValueError, match="unknown method"):
        rereduce(data, "heater", "window")
    with pytest.raises(ValueError, match="no sensor"):
        rereduce(data, "r99", "auto")


def test_rereduce_gives_the_numbers_of_reduce_json(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """The screen's re-reduction and `linerig reduce --json` on the exported CSV agree, method and window too."""
    from linerig.tui.cli import main

    data = synthetic_run(noise_K=0.002)
    paths = export_run(REPLAY["replies"]["run"]["run"], data, tmp_path)
    for method, window in (("auto", None), ("line", (30.0, 300.0))):
        res = rereduce(data, "heater", method, window)
        argv = ["reduce", str(paths[1]), "--json", "--method", method, *(["--window", "30", "300"] if window else [])]
        assert main(argv) == 0
        cli = json.loads(capsys.readouterr().out)["sensors"]["heater"]
        # the CSV keeps temperatures to 10 µK, so the two agree to the digits any screen shows, not to the bit
        assert res["k_W_per_mK"] == pytest.approx(cli["k_W_per_mK"], rel=1e-4)
        assert res["window_s"] == pytest.approx(cli["window_s"]) and res["method"] == cli["method"]
        if window:
            assert res["window_s"] == pytest.approx(list(window))


def test_export_writes_the_reduce_csv_format(tmp_path: Path) -> None:
    data = synthetic_run()
    detail = REPLAY["replies"]["run"]["run"]
    paths = export_run(detail, data, tmp_path, {"rereduced": {"heater": {"k_W_per_mK": 1.2}}})
    assert [p.name for p in paths] == ["run-17.json", "run-17.csv"]
    doc = json.loads(paths[0].read_text())
    assert doc["site"] == "Kestrel Lane test pit" and doc["rereduced"]["heater"]["k_W_per_mK"] == 1.2
    rows = [r for r in csv.reader(line for line in paths[1].read_text().splitlines() if not line.startswith("#"))]
    assert rows[0] == ["time_s", "q_W_per_m", "T_heater_C"]
    cols = list(zip(*rows[1:], strict=True))
    back = run_data_from_arrays({"time_s": [float(v) for v in cols[0]], "q_W_per_m": [float(v) for v in cols[1]],
                                 "temps_C": {"heater": [float(v) for v in cols[2]]}})
    assert back.temps_C["heater"] == pytest.approx(data.temps_C["heater"], abs=1e-5)
    assert rereduce(back, "heater", "auto")["k_W_per_mK"] == pytest.approx(K, rel=0.005)


def test_stored_run_becomes_a_plottable_trace() -> None:
    data = synthetic_run()
    tr = trace_from_data(17, data, {"k_W_per_mK": K, "window_s": [60.0, 600.0], "method": "line",
                                    "q_mean_W_per_m": Q}, "heater")
    spec = build_spec(tr, PlotView.LOG)
    fit = spec.series[-1]
    assert fit.label == "fit"
    assert (fit.y[-1] - fit.y[0]) / (fit.x[-1] - fit.x[0]) == pytest.approx(Q / (4 * math.pi * K), rel=0.01)


@pytest.mark.parametrize("factor", [1.0, 0.95])
def test_the_drawn_line_is_the_reported_k_not_a_fit_to_the_picture(factor: float) -> None:
    """A model result 8 % above what the data's own line says is drawn with the model's slope (q/4πk, k before the
    probe factor), so the screen shows the number that is reported."""
    data = synthetic_run()
    reported = 1.08 * K * factor
    tr = trace_from_data(17, data, {"k_W_per_mK": reported, "window_s": [2.0, 600.0], "method": "model",
                                    "q_mean_W_per_m": Q, "calibration_factor": factor}, "heater")
    assert tr.last_estimate is not None
    assert tr.last_estimate["slope_K"] == pytest.approx(Q / (4 * math.pi * reported / factor), rel=1e-12)
    assert trace_from_data(17, data, {"k_W_per_mK": K, "window_s": [60.0, 600.0]}, "heater").last_estimate is None


def test_settling_drift_is_the_slope_over_the_baseline_span() -> None:
    from linerig.tui.widgets.readouts import baseline_drift_K_per_min

    tr = RunTrace(3, ["heater"], 0, baseline_s=60.0)
    tr.device_s = [float(i) for i in range(200)]
    tr.temps = [[15.0 + (0.5 if i < 100 else 0.0) + 0.03 * i / 60.0] for i in range(200)]  # step then 0.03 K/min
    assert baseline_drift_K_per_min(tr) == pytest.approx(0.03, rel=1e-9)
    assert baseline_drift_K_per_min(RunTrace(3, ["heater"])) is None


def test_joining_while_cooling_uses_the_late_cooling_line() -> None:
    t_off = 300.0
    t = np.arange(700.0, 900.0, 1.0)  # the UI saw only late cooling
    rise = line_source_rise(t) - line_source_rise(t - t_off)
    tr = RunTrace(1, ["heater"], 0, heat_start_device_s=0.0, heat_end_device_s=t_off)
    tr.device_s = t.tolist()
    tr.temps = [[10.0 + v] for v in rise]
    tr.last_estimate = {"slope_K": Q / (4 * math.pi * K), "intercept_K": 5.0, "window_s": [30.0, 300.0]}
    assert tr.baseline_source == "fit"
    assert tr.baseline_C()[0] == pytest.approx(10.0, abs=0.005)
