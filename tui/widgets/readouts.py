"""The text readouts of the live screen: run bar, estimate, steadiness verdict, power, sensors, banners.

Each widget has ``show(live, …)`` that rebuilds its text from ``LiveState``; none of them holds state of its
own, so redrawing at any rate gives the same picture. Every colour is paired with a word or a symbol.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from rich.text import Text
from textual.widgets import Static

from linerig.daemon.reduction.stability import STRETCH_LN
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


def k_spread(estimates: list[tuple[float, float, float, bool]]) -> float | None:
    """Largest relative move of k over the latest stretch of ln t (the span the steadiness rule looks at)."""
    if not estimates:
        return None
    t_now, k_now = estimates[-1][0], estimates[-1][1]
    t_from = t_now * math.exp(-STRETCH_LN)
    if estimates[0][0] > t_from or not k_now:
        return None
    ks = [k for t, k, _, _ in estimates if t >= t_from]
    return max(max(ks) - k_now, k_now - min(ks)) / abs(k_now)


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


class VerdictReadout(Static):
    """Whether heating can stop yet, and why not."""

    DEFAULT_CSS = "VerdictReadout { height: auto; }"

    def show(self, live: LiveState) -> None:
        text = Text("STEADINESS", style=HEADING)
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
        stable_at = est.get("stable_at_s")
        if est.get("stable"):
            text.append(f"\n ● STEADY since {stable_at:.0f} s" if stable_at is not None else "\n ● STEADY",
                        style="bold green")
        elif stable_at is not None:
            text.append(f"\n ◑ steady at {stable_at:.0f} s, then moved", style="yellow")
        else:
            text.append("\n ◔ not yet steady", style="yellow")
        spread = k_spread(tr.estimates) if tr is not None else None
        text.append(f"\n k moved {100 * spread:.1f} %" if spread is not None else "\n k moved —")
        ku_stat = _f(est.get("k_u_stat_W_per_mK"))
        k = _f(est.get("k_W_per_mK"))
        if math.isfinite(ku_stat) and k:
            text.append(f" · scatter {100 * ku_stat / k:.1f} %")
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


def _moved_since(live: LiveState, at_s: float) -> float | None:
    """Relative change of k from the estimate at ``at_s`` to the latest one, from this client's record."""
    tr = live.trace
    if tr is None or not tr.estimates:
        return None
    then = min(tr.estimates, key=lambda e: abs(e[0] - at_s))
    now = tr.estimates[-1]
    return (now[1] - then[1]) / then[1] if then[1] else None


class StopPrompt(Static):
    """The 'heating can stop' prompt; shown only while it applies."""

    DEFAULT_CSS = "StopPrompt { height: auto; display: none; }"

    def show(self, live: LiveState, auto_stop: bool) -> None:
        visible = live.can_stop_heating
        self.display = visible
        if not visible:
            return
        est = live.estimate or {}
        at = live.stable_at_s
        text = Text(" ▶ HEATING CAN STOP ", style="bold reverse green")
        if est.get("stable"):
            text.append(f" the estimate has held steady since {at:.0f} s. ")
        else:
            since = _moved_since(live, at)
            moved = f" (k {100 * since:+.1f} % since)" if since is not None else ""
            text.append(f" the estimate was steady at {at:.0f} s and has moved since{moved}. ")
        if auto_stop:
            text.append("The run will stop heating by itself.")
        else:
            text.append("Press ")
            text.append(" s ", style="bold reverse")
            text.append(" to stop heating and log the cooling.")
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
