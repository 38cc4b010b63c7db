"""The new-run form without the widgets: presets, field checks and the pre-check before arming.

Everything here is a pure function of strings and ``LiveState``, so it is tested without a terminal. The
daemon checks the plan again; these checks exist so the operator hears about a typo before walking away.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from linerig.daemon.run_keeper import METADATA_RANGES
from linerig.tui.screens.live_state import LiveState

# Presets: plain starting points, each editable after choosing it. The heating times follow the usual
# minutes-long needle-probe tests on soil; a lower power on dry soil keeps the needle from drying it
# (ASTM D5334-14 §1.2 warns that too much heat drives moisture away; the exact numbers are common practice).
PRESETS: dict[str, dict[str, Any]] = {
    "standard": {"label": "Standard soil: 10 min heat, 10 min cooling",
                 "heat_s": 600, "recover_s": 600, "power_W_per_m": 5.0, "baseline_s": 120, "cycles": 1},
    "quick": {"label": "Quick check: 3 min heat, 3 min cooling",
              "heat_s": 180, "recover_s": 180, "power_W_per_m": 5.0, "baseline_s": 30, "cycles": 1},
    "dry": {"label": "Dry soil, gentle: low power, 15 min heat",
            "heat_s": 900, "recover_s": 900, "power_W_per_m": 2.5, "baseline_s": 120, "cycles": 1},
    "repeat": {"label": "Repeat three times (cycles)",
               "heat_s": 600, "recover_s": 600, "power_W_per_m": 5.0, "baseline_s": 120, "cycles": 3},
    "calibration": {"label": "Calibration in a reference medium",
                    "heat_s": 300, "recover_s": 300, "power_W_per_m": 3.0, "baseline_s": 120, "cycles": 1},
}
DEFAULT_PRESET = "standard"

PLAN_FIELDS = ("heat_s", "recover_s", "power_W_per_m", "baseline_s", "cycles")
META_TEXT = ("site", "location", "sample", "material", "notes", "operator")
META_NUMBERS = METADATA_RANGES  # (lowest, highest, what is expected): the daemon's own limits
MAX_TEXT = 200


@dataclass(frozen=True)
class FormResult:
    plan: dict[str, Any]
    metadata: dict[str, Any]
    errors: dict[str, str]

    @property
    def ok(self) -> bool:
        return not self.errors


def _number(text: str) -> float | None:
    try:
        v = float(text.strip().replace(",", "."))
    except ValueError:
        return None
    return v if math.isfinite(v) else None


def check_form(values: dict[str, str], limits: dict[str, Any], auto_stop: bool = False,
               sensor: str | None = None) -> FormResult:
    """Turn the form's strings into a plan and metadata, with one message per bad field."""
    errors: dict[str, str] = {}
    plan: dict[str, Any] = {}
    max_q = float(limits.get("max_power_W_per_m", math.inf))
    max_heat = float(limits.get("max_heating_s", math.inf))
    for name, hi, what in (("heat_s", max_heat, "heating time"), ("recover_s", 86400.0, "cooling time"),
                           ("power_W_per_m", max_q, "power per metre"), ("baseline_s", 3600.0, "baseline")):
        v = _number(values.get(name, ""))
        if v is None or v <= 0:
            errors[name] = f"{what} must be a number above 0"
        elif v > hi:
            errors[name] = f"{what} {v:g} is above the limit {hi:g}"
        else:
            plan[name] = v
    cyc = values.get("cycles", "1").strip() or "1"
    if not cyc.isdigit() or not 1 <= int(cyc) <= 20:
        errors["cycles"] = "cycles must be a whole number from 1 to 20"
    else:
        plan["cycles"] = int(cyc)
    if auto_stop:
        plan["auto_stop"] = True
    if sensor:
        plan["sensor"] = sensor
    meta: dict[str, Any] = {}
    for name in META_TEXT:
        text = values.get(name, "").strip()
        if len(text) > MAX_TEXT:
            errors[name] = f"{name} is longer than {MAX_TEXT} characters"
        elif text:
            meta[name] = text
    if not meta.get("site"):
        errors["site"] = "site is needed: runs are found by site in the history"
    for name, (lo, hi, what) in META_NUMBERS.items():
        text = values.get(name, "").strip()
        if not text:
            continue
        v = _number(text)
        if v is None or not lo <= v <= hi:
            errors[name] = f"{name} must be {what}"
        else:
            meta[name] = v
    return FormResult(plan, meta, errors)


@dataclass(frozen=True)
class Check:
    """One line of the pre-check: True passes, False blocks arming, None is worth knowing but not blocking."""

    ok: bool | None
    text: str

    @property
    def symbol(self) -> str:
        return {True: "✓", False: "✗", None: "!"}[self.ok]


def precheck(live: LiveState, plan: dict[str, Any]) -> list[Check]:
    """What must hold before the heater may be armed, from the latest status and readings."""
    lim = live.limits
    out: list[Check] = []
    if not live.connected:
        return [Check(False, f"daemon not reachable: {live.lost_reason or 'connecting'}")]
    out.append(Check(True, "daemon connected"))
    ident = live.status.get("identity") or {}
    if live.frontend_up:
        out.append(Check(True, f"front end {ident.get('model', '?')} {ident.get('serial', '')} linked".strip()))
    else:
        out.append(Check(False, "front end not linked: check the USB cable and its power"))
    if live.active:
        out.append(Check(False, f"run {live.run_id} is {live.run_state}: wait for it or abort it"))
    else:
        out.append(Check(True, "no other run active"))
    if live.status.get("store_failed"):
        out.append(Check(False, f"database cannot take writes: {live.status['store_failed']}"))
    s = live.last_sample or {}
    names = s.get("sensors") or []
    temps = s.get("temps_C") or []
    faults = s.get("faults") or []
    bad = [n for i, n in enumerate(names)
           if (i < len(faults) and faults[i]) or i >= len(temps) or not isinstance(temps[i], int | float)]
    if not names:
        out.append(Check(None, "no readings seen yet"))
    elif bad:
        out.append(Check(False, f"sensor {', '.join(bad)} reads a fault: check the probe plug"))
    else:
        out.append(Check(True, f"{len(names)} sensor{'s' if len(names) > 1 else ''} reading"))
    volts = live.supply_V()
    if volts is not None and "min_supply_V" in lim:
        ok = volts >= lim["min_supply_V"]
        out.append(Check(ok, f"supply {volts:.2f} V ({'above' if ok else 'BELOW'} {lim['min_supply_V']:.1f} V)"))
    hot = live.hottest_C()
    if hot is not None and "max_probe_C" in lim:
        ok = hot <= lim["max_probe_C"] - 5
        out.append(Check(ok, f"probe at {hot:.1f} °C" + ("" if ok else ": let it cool first")))
    q = plan.get("power_W_per_m")
    if isinstance(q, int | float) and "max_power_W_per_m" in lim:
        out.append(Check(q <= lim["max_power_W_per_m"], f"power {q:g} W/m (limit {lim['max_power_W_per_m']:g})"))
    if live.fault:
        out.append(Check(None, f"last safety stop: {live.fault}"))
    return out


def can_arm(checks: list[Check], form: FormResult) -> bool:
    return form.ok and all(c.ok is not False for c in checks)
