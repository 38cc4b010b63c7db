"""The text readouts of the live screen: run bar, estimate, the stop verdict, power, sensors, banners.

Each widget has ``show(live, …)`` that rebuilds its text from ``LiveState``; none of them holds state of its
own, so redrawing at any rate gives the same picture. Every colour is paired with a word or a symbol.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from rich.text import Text
from textual.widgets import Static

from linerig.daemon.reduction.stop_rule import recovery_after_stop_s
from linerig.tui.screens.live_state import STATE_SYMBOLS, STATE_WORDS, LiveState, RunTrace
from linerig.tui.units import DisplayUnit, companion, duration, show
from linerig.tui.widgets.advice import fault_advice, flag_words

HEADING = "bold underline"
STALE_FIT_S = 10.0  # heating seconds without a new estimate before the readout says so
STATE_STYLE = {"checking": "cyan", "settling": "cyan", "heating": "bold yellow", "recovering": "bold blue",
               "done": "bold green", "aborted": "bold magenta", "faulted": "bold red"}


def _f(x: Any) -> float:
    return float(x) if isinstance(x, int | float) else math.nan


class RunBar(Static):
    """One line: run, state, time in phase, time left, and the two links (daemon, front end)."""

    DEFAULT_CSS = "RunBar { height: 1; background: $boost; }"

    def show(self, live: LiveState) -> None:
        t = Text(no_wrap=True, overflow="ellipsis")
        if not live.connected:
            t.append(" ✗ NO DAEMON ", style="bold reverse red")
            t.append(f" {live.lost_reason or 'connecting…'}")
            self.update(t)
            return
        if live.run_id is None:
            t.append(" no run ", style="reverse")
        else:
            st = live.run_state or "?"
            t.append(f" run {live.run_id} ", style="reverse")
            t.append(f" {STATE_SYMBOLS.get(st, '?')} {STATE_WORDS.get(st, st.upper())} ", style=STATE_STYLE.get(st, ""))
            cycles = int(live.plan.get("cycles", 1) or 1)
            if cycles > 1:
                t.append(f"cycle {live.cycle}/{cycles} ")
            if st == "heating":
                t.append(f"{duration(live.heating_elapsed_s)} of {duration(_f(live.plan.get('heat_s')))} ")
            elif live.active:
                t.append(f"{duration(live.phase_elapsed_s)} in phase ")
            left, at_least = live.remaining_s()
            if left is not None:
                t.append(f"│ left {'≥' if at_least else '≈'}{duration(left)} ")
        t.append("│ rig ")
        t.append("✓ linked" if live.frontend_up else "✗ NOT LINKED", style="green" if live.frontend_up else "bold red")
        self.update(t)


class EstimateReadout(Static):
    """The running estimate in the operator's unit, its companion, the window and the fit quality."""

    DEFAULT_CSS = "EstimateReadout { height: auto; }"

    def show(self, live: LiveState, unit: DisplayUnit, wide: bool = False) -> None:
        est = live.estimate
        if live.pulse and live.trace is not None and live.trace.pulse_fit:
            est = live.trace.pulse_fit  # a heat pulse: the daemon's pulse fit (the plot's title has α and ρc)
        finished = live.finished if live.finished and live.finished.get("run_id") == live.run_id else None
        text = Text(f"{unit.quantity.upper()} ± U (k = 2)", style=HEADING)
        if est is None and not finished:
            text.append("\n  waiting for a fit", style="dim")
            if live.run_state in ("checking", "settling"):
                text.append("\n  (after heater on)", style="dim")
            self.update(text)
            return
        src = est or {}
        if finished and finished.get("results"):
            name = _primary_name(live)
            src = finished["results"].get(name) or next(iter(finished["results"].values()))
            text.append("  final", style="bold green")
        k, ku = _f(src.get("k_W_per_mK")), _f(src.get("k_u_W_per_mK"))
        main = show(k, ku if math.isfinite(ku) else None, unit)
        other = show(k, ku if math.isfinite(ku) else None, companion(unit))
        text.append(f"\n {main.text()}", style="bold")
        if main.rel_u is not None:
            text.append(f" ({100 * main.rel_u:.1f} %)")
        text.append(f"\n {other.text()}")
        win = src.get("window_s") or [None, None]
        if win[0] is not None and win[1] is not None:
            text.append(f"\n window {win[0]:.0f}–{win[1]:.0f} s")
            if src.get("n_used"):
                text.append(f" · n {src['n_used']}")
        t_fit, t_now = _f(src.get("t_s")), live.heating_elapsed_s
        if est is src and live.run_state == "heating" and t_now is not None and t_now - t_fit > STALE_FIT_S:
            text.append(f"\n ⚠ no new fit since {t_fit:.0f} s", style="yellow")
        alpha = alpha_identified(_f(src.get("alpha_m2_per_s")))
        rms = _f(src.get("residual_rms_K"))
        extra = ([f"α {alpha * 1e6:.2f} mm²/s"] if alpha is not None else []) + \
            ([f"fit rms {1000 * rms:.1f} mK"] if math.isfinite(rms) else [])
        if wide and extra:
            text.append("\n " + " · ".join(extra))
        self.update(text)


def alpha_identified(alpha: float) -> float | None:
    """α, or None where the fit holds it at a bound of its search (the live fit clips to ALPHA_AXIAL_MAX): a
    bound says nothing about the ground, so nothing is shown."""
    from linerig.daemon.reduction.linesource import ALPHA_MAX, ALPHA_MIN
    from linerig.daemon.reduction.live import ALPHA_AXIAL_MAX

    if not math.isfinite(alpha) or alpha <= 0:
        return None
    if any(abs(alpha / bound - 1) < 1e-3 for bound in (ALPHA_MIN, ALPHA_MAX, ALPHA_AXIAL_MAX)):
        return None
    return alpha


def _primary_name(live: LiveState) -> str:
    tr = live.trace
    if tr is not None and tr.sensors:
        return tr.sensors[min(tr.primary, len(tr.sensors) - 1)]
    return str(live.plan.get("sensor") or "heater")


def baseline_drift_K_per_min(tr: RunTrace | None) -> float | None:
    """Slope of the fit sensor over the latest baseline span, as the daemon judges settling (K/min)."""
    if tr is None or len(tr.device_s) < 3:
        return None
    dev = np.asarray(tr.device_s, dtype=float)
    sel = dev >= dev[-1] - tr.baseline_s
    y = np.asarray([row[tr.primary] if tr.primary < len(row) else math.nan for row in tr.temps], dtype=float)[sel]
    x = dev[sel]
    ok = np.isfinite(y)
    if np.count_nonzero(ok) < 3 or np.ptp(x[ok]) <= 0:
        return None
    return float(np.polyfit(x[ok] - x[ok][0], y[ok], 1)[0] * 60.0)


def _pct(x: Any) -> str:
    return f"{100 * _f(x):.1f} %"


def _tol(v: dict[str, Any]) -> str:
    return f"{100 * _f(v.get('tolerance')):g} %"


def verdict_lines(live: LiveState) -> list[tuple[str, str]]:
    """The verdict in plain words, a (text, style) pair per line, for the side readout."""
    v = live.verdict
    if v is None:
        return [("○ not judged: the daemon has no plan to judge against", "dim")]
    at, tol = v.get("at_s"), _tol(v)
    out: list[tuple[str, str]] = []
    heating = live.run_state == "heating"
    if v.get("withdrawn"):
        out.append((f"✗ WITHDRAWN: k moved {100 * _f(v.get('moved_rel')):+.1f} % since {_f(at):.0f} s", "bold red"))
        out.append((f"  more than the {tol} tolerance", "red"))
    elif at is not None:
        out.append((f"● can stop since {_f(at):.0f} s", "bold green"))
        out.append((f"  k {_f(v.get('k_at_W_per_mK')):.3f} within {_pct(v.get('bound_rel'))} of a full heating",
                    ""))
    elif heating:
        out.append(("◔ not yet", "yellow"))
        out.append((f"  {v.get('reason') or ''}", ""))
    else:
        out.append(("○ no verdict in this heating", "dim"))
        out.append((f"  {v.get('reason') or ''}", "dim"))
    out.append((f"  tolerance {tol}", "dim"))
    terms = {k: _f(x) for k, x in (v.get("terms") or {}).items()}
    if heating and terms:
        words = {"model": "model", "statistical": "noise", "drift": "drift"}
        out.append(("  " + " · ".join(f"{words.get(k, k)} {100 * x:.1f}" for k, x in terms.items()
                                      if math.isfinite(x)) + " %", "dim"))
    off = live.trace.heat_off_t_s if live.trace is not None else None
    heat = _f(live.plan.get("heat_s"))
    if off is not None and math.isfinite(heat) and off < heat - 1.0:
        saved = heat - off
        power = _f(v.get("power_W"))
        energy = f", {power * saved / 3600:.2f} Wh" if math.isfinite(power) else ""
        out.append((f"■ stopped at {off:.0f} s: saved {duration(saved)}{energy}", "bold"))
    return out


class VerdictReadout(Static):
    """Whether heating can stop, against which tolerance, and why not yet."""

    DEFAULT_CSS = "VerdictReadout { height: auto; }"

    def show(self, live: LiveState) -> None:
        text = Text("CAN HEATING STOP?", style=HEADING)
        est = live.estimate
        tr = live.trace
        if est is None and live.pulse and live.run_state in ("heating", "recovering"):
            text.append(f"\n ○ a pulse has no stop verdict: it heats for {_f(live.plan.get('heat_s')):.0f} s, then "
                        "records the decay", style="dim")
            self.update(text)
            return
        if est is None:
            drift = baseline_drift_K_per_min(tr) if live.run_state == "settling" else None
            if drift is not None:
                limit = _f(live.plan.get("max_drift_K_per_min"))
                ok = math.isfinite(limit) and abs(drift) <= limit
                text.append(f"\n {'✓' if ok else '~'} ground drift {drift:+.3f} K/min", style="green" if ok else "")
                if math.isfinite(limit):
                    text.append(f"\n   heater goes on at ≤ {limit:.3f}")
            else:
                text.append("\n ○ no estimate yet", style="dim")
            self.update(text)
            return
        for line, style in verdict_lines(live):
            text.append("\n " + line, style=style)
        words = flag_words(est.get("flags"))
        if words:
            text.append("\n ⚑ " + "; ".join(words), style="yellow")
        self.update(text)


class PowerReadout(Static):
    """Power per metre asked for and measured, heater volts and amps."""

    DEFAULT_CSS = "PowerReadout { height: auto; }"

    def show(self, live: LiveState) -> None:
        text = Text("POWER", style=HEADING)
        s = live.last_sample or {}
        set_q = _f(live.plan.get("power_W_per_m")) if live.plan else math.nan
        on = bool(s.get("heater_on"))
        q = _f(s.get("q_W_per_m"))
        text.append(f"\n set {set_q:.2f}" if math.isfinite(set_q) else "\n set —")
        text.append(f" meas {q:.2f} W/m" if math.isfinite(q) else " meas —")
        if on and math.isfinite(set_q) and set_q and math.isfinite(q):
            text.append(f" {100 * (q / set_q - 1):+.1f}%")
        text.append("\n heater ")
        text.append("ON" if on else "off", style="bold yellow" if on else "dim")
        if on:
            text.append(f" · {_f(s.get('heater_V')):.2f} V · {_f(s.get('heater_A')):.3f} A")
        self.update(text)


class SensorReadout(Static):
    """Every sensor on the rod: temperature now, rise over its baseline, and any channel fault."""

    DEFAULT_CSS = "SensorReadout { height: auto; }"

    def show(self, live: LiveState) -> None:
        text = Text("SENSORS", style=HEADING)
        s = live.last_sample or {}
        names = list(s.get("sensors") or (live.status.get("probe") or {}).get("sensors") or [])
        temps = list(s.get("temps_C") or [])
        faults = list(s.get("faults") or [])
        tr = live.trace
        base = tr.baseline_C() if tr is not None and tr.run_id == s.get("run_id") else None
        primary = _primary_name(live)
        for i, name in enumerate(names):
            t = _f(temps[i]) if i < len(temps) else math.nan
            mark = "*" if name == primary else " "
            text.append(f"\n{mark}{name[:9]:<9}")
            if (i < len(faults) and faults[i]) or not math.isfinite(t):
                text.append(" ✗ FAULT (open?)", style="bold red")
                continue
            text.append(f" {t:7.3f} °C")
            if base is not None and i < base.size and math.isfinite(base[i]):
                text.append(f" Δ{t - base[i]:+6.3f} K")
        self.update(text)


def stop_prompt(live: LiveState, auto_stop: bool, unit: DisplayUnit) -> Text | None:
    """The prompt over the plots while heating: the verdict and what a stop now saves, or its withdrawal."""
    v = live.verdict or {}
    if live.run_state != "heating" or live.stable_at_s is None:
        return None
    at, tol = _f(v.get("at_s")), _tol(v)
    if v.get("withdrawn"):
        text = Text(" ✗ VERDICT WITHDRAWN ", style="bold reverse red")
        text.append(f" k has moved {100 * _f(v.get('moved_rel')):+.1f} % since heating could stop at {at:.0f} s, "
                    f"more than the {tol} tolerance. Keep heating: the verdict comes back if k settles again.",
                    style="bold")
        return text
    text = Text(" ▶ HEATING CAN STOP ", style="bold reverse green")
    k = show(_f(v.get("k_at_W_per_mK")), None, unit).text()
    text.append(f" since {at:.0f} s: {k} will stay within {tol} of what the full heating would give "
                f"(predicted ≤ {_pct(v.get('bound_rel'))}). ")
    saves = live.stop_now_saves()
    if saves is not None:
        secs, wh = saves
        text.append(f"Stopping now saves {duration(secs)}" + (f" and {wh:.2f} Wh" if wh is not None else "") + "; ")
        el, heat = live.heating_elapsed_s or 0.0, _f(live.plan.get("heat_s"))
        rec = recovery_after_stop_s(el, heat, _f(live.plan.get("recover_s")))
        text.append(f"the cooling is then logged for {duration(rec)} for the heat–cool cross-check. ")
    if auto_stop:
        text.append("The run will stop heating by itself.")
    else:
        text.append("Press ")
        text.append(" s ", style="bold reverse")
        text.append(" to stop heating.")
    return text


class StopPrompt(Static):
    """The 'heating can stop' prompt, or its withdrawal; shown only while the heater is on and it applies."""

    DEFAULT_CSS = "StopPrompt { height: auto; display: none; }"

    def show(self, live: LiveState, auto_stop: bool, unit: DisplayUnit = DisplayUnit.CONDUCTIVITY) -> None:
        text = stop_prompt(live, auto_stop, unit)
        self.display = text is not None
        self.set_class(live.verdict_withdrawn, "-withdrawn")
        if text is not None:
            self.update(text)


class FaultBanner(Static):
    """The last safety trip in plain words, with what to do next."""

    DEFAULT_CSS = "FaultBanner { height: auto; display: none; }"

    def show(self, live: LiveState) -> None:
        reason = live.fault
        if live.run_state == "faulted" and live.state_reason:
            reason = live.state_reason
        visible = bool(reason) and (live.run_state in (None, "faulted") or live.active)
        self.display = visible
        if not visible or reason is None:
            return
        text = Text(" ! HEATER OFF — SAFETY STOP ", style="bold reverse red")
        text.append(f" {reason}\n")
        text.append(" What to do: ", style="bold")
        text.append(fault_advice(reason))
        self.update(text)
