"""How close the run is to each of the daemon's limits, worked out from ``LiveState`` and shown as bars.

Each row carries a word and a symbol as well as a colour, so the verdict reads on a monochrome terminal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rich.text import Text
from textual.widgets import Static

from linerig.tui.screens.live_state import LiveState

NEAR_FRACTION = 0.8  # a limit counts as "near" at 80 % of the way there (common practice, no source)
VERDICT = {"ok": ("✓", "ok", "green"), "near": ("!", "near", "yellow"), "over": ("✗", "OVER", "bold red"),
           "n/a": ("·", "n/a", "dim")}


@dataclass(frozen=True)
class Headroom:
    """One limit: where the run is, where the limit is, and how much of the way it has used."""

    name: str
    now: str
    limit: str
    used: float  # 0 … 1+ of the way from the start to the limit; NaN when unknown

    @property
    def verdict(self) -> str:
        if not math.isfinite(self.used):
            return "n/a"
        if self.used >= 1.0:
            return "over"
        return "near" if self.used >= NEAR_FRACTION else "ok"


def headroom_rows(live: LiveState) -> list[Headroom]:
    """Rise, probe temperature, battery, heating time and power against the limits in ``status()``."""
    lim = live.limits
    tr = live.trace
    rows: list[Headroom] = []
    if "max_rise_K" in lim:
        rise = tr.max_rise_K() if tr is not None else math.nan
        est = live.estimate
        if not math.isfinite(rise) and est and isinstance(est.get("rise_K"), int | float):
            rise = float(est["rise_K"])
        heating_seen = tr is not None and tr.heat_start_device_s is not None
        rows.append(Headroom("rise", f"{rise:.2f} K" if math.isfinite(rise) else "—", f"{lim['max_rise_K']:.1f} K",
                             max(rise, 0.0) / lim["max_rise_K"] if heating_seen and math.isfinite(rise)
                             else math.nan))
    hot = live.hottest_C()
    if "max_probe_C" in lim and hot is not None:
        start = math.nan
        if tr is not None and tr.temps:
            base = tr.baseline_C()
            finite = base[np.isfinite(base)]
            start = float(finite.max()) if finite.size else math.nan
        span = lim["max_probe_C"] - (start if math.isfinite(start) else 0.0)
        used = (hot - (start if math.isfinite(start) else 0.0)) / span if span > 0 else 1.0
        rows.append(Headroom("probe", f"{hot:.1f} °C", f"{lim['max_probe_C']:.0f} °C", max(used, 0.0)))
    volts = live.supply_V()
    if "min_supply_V" in lim and volts is not None:
        margin = volts - lim["min_supply_V"]
        # a 12 V pack has about 2 V between full and its cut-off (common practice, no source)
        used = 1.0 - margin / 2.0 if margin > 0 else 1.0
        rows.append(Headroom("battery", f"{volts:.2f} V", f"≥{lim['min_supply_V']:.1f} V", max(used, 0.0)))
    heat_el = live.heating_elapsed_s
    if "max_heating_s" in lim:
        used = heat_el / lim["max_heating_s"] if heat_el is not None else math.nan
        rows.append(Headroom("heating", f"{heat_el:.0f} s" if heat_el is not None else "—",
                             f"{lim['max_heating_s']:.0f} s", used))
    return rows


def bar(used: float, width: int = 8) -> str:
    if not math.isfinite(used):
        return "·" * width
    filled = min(width, max(0, round(used * width)))
    return "█" * filled + "░" * (width - filled)


class HeadroomReadout(Static):
    """Headroom to each limit, one line per limit."""

    DEFAULT_CSS = "HeadroomReadout { height: auto; }"

    def show(self, live: LiveState, wide: bool = False) -> None:
        text = Text("HEADROOM TO LIMITS", style="bold underline")
        for row in headroom_rows(live):
            sym, word, style = VERDICT[row.verdict]
            text.append("\n")
            text.append(f"{sym} {row.name:<7}", style=style)
            text.append(f" {row.now:>7}/{row.limit:<7}")
            if wide:
                text.append(f" {bar(row.used)}", style=style)
            text.append(f" {word}", style=style)
        self.update(text)
