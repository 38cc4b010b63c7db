"""Heat-pulse plans: the dual needle's [pulse] table, the design rule behind it, and the run plan it becomes."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from linerig.daemon.controller import PlanError, RunPlan
from linerig.daemon.probe import ProbeProfileError, load_probe_profile, profile_from_dict
from linerig.daemon.pulse_plan import design_pulse, heater_rise_per_W, probe_geometry, sensor_peak_per_W
from linerig.daemon.safety import Limits

DUAL = Path(__file__).resolve().parent.parent / "hardware" / "probes" / "dual-needle.toml"
# Typical moist soils and a backfill (k W/(m·K), ρc J/(m³·K)), the simulator's demo materials
SOILS = {"moist sand": (1.45, 1.57e6), "saturated sand": (2.5, 2.96e6), "moist clay": (1.15, 2.69e6),
         "cement-sand backfill": (1.8, 2.01e6), "weathered rock": (2.0, 2.2e6)}


def test_the_dual_needle_profile_carries_the_designed_pulse() -> None:
    probe = load_probe_profile(DUAL)
    assert probe.pulse is not None and probe.pulse.sensor == "needle8"
    lim = Limits()
    d = design_pulse(probe_geometry(probe, "needle8"), max_power_W_per_m=lim.max_power_W_per_m,
                     max_rise_K=lim.max_rise_K)
    assert (probe.pulse.power_W_per_m, probe.pulse.pulse_s, probe.pulse.record_s) == (
        d.power_W_per_m, d.pulse_s, d.record_s)
    assert 0.7 <= d.peak_rise_K <= 0.8 and d.heater_rise_K <= 0.75 * lim.max_rise_K + 1e-9
    assert d.record_s >= 4 * d.peak_s


@pytest.mark.parametrize("soil", sorted(SOILS))
def test_one_pulse_suits_typical_moist_soils(soil: str) -> None:
    # a peak of about 0.5–1 K at the sensing needle (the usual aim; Campbell, Calissendorff & Williams 1991 report
    # rises of about 1 K) with the heated needle inside the rise limit
    probe = load_probe_profile(DUAL)
    assert probe.pulse is not None
    k, rc = SOILS[soil]
    g = probe_geometry(probe, "needle8")
    t_peak, per_W = sensor_peak_per_W(g, k, rc, probe.pulse.pulse_s)
    assert 0.5 <= probe.pulse.power_W_per_m * per_W <= 1.1
    assert probe.pulse.power_W_per_m * heater_rise_per_W(g, k, rc, probe.pulse.pulse_s) < Limits().max_rise_K
    assert probe.pulse.record_s >= 3.5 * t_peak


def test_peak_rise_follows_the_instantaneous_pulse_relation() -> None:
    # ΔT_m = Q/(e·π·ρc·r²) for an instantaneous line pulse of Q J/m (Campbell, Calissendorff & Williams 1991): a
    # short pulse from thin needles must land on it
    from linerig.daemon.reduction.pulse_model import PulseGeometry

    k, rc, r = 1.5, 2.5e6, 8e-3
    _, per_W = sensor_peak_per_W(PulseGeometry(r), k, rc, 1.0)
    assert per_W * 1.0 == pytest.approx(1.0 / (math.e * math.pi * rc * r * r), rel=0.01)


def test_dry_media_get_a_longer_gentler_pulse() -> None:
    g = probe_geometry(load_probe_profile(DUAL), "needle8")
    wet = design_pulse(g, 1.45, 1.57e6, max_power_W_per_m=60, max_rise_K=12)
    dry = design_pulse(g, 0.30, 1.30e6, max_power_W_per_m=60, max_rise_K=12)
    assert dry.power_W_per_m < wet.power_W_per_m and dry.pulse_s > wet.pulse_s
    assert dry.heater_rise_K <= 9.0 + 1e-9


def test_a_pulse_plan_has_no_stop_verdict() -> None:
    plan = RunPlan().with_changes(load_probe_profile(DUAL).pulse.plan_changes())  # type: ignore[union-attr]
    assert plan.pulse and plan.heat_s == 54.0 and not plan.auto_stop
    with pytest.raises(PlanError, match="auto_stop"):
        plan.with_changes({"auto_stop": True})
    with pytest.raises(PlanError, match="kind"):
        RunPlan().with_changes({"kind": "burst"})


@pytest.mark.parametrize(("table", "words"), [
    ({"sensor": "heater", "power_W_per_m": 20, "pulse_s": 40, "record_s": 300}, "pulse.sensor"),
    ({"sensor": "needle8", "power_W_per_m": 20, "pulse_s": 40, "record_s": 30}, "pulse.record_s"),
    ({"sensor": "needle8", "power_W_per_m": -1, "pulse_s": 40, "record_s": 300}, "pulse.power_W_per_m"),
    ({"sensor": "needle8", "pulse_s": 40, "record_s": 300}, "pulse.power_W_per_m"),
    ({"sensor": "needle8", "power_W_per_m": 20, "pulse_s": 40, "record_s": 300, "peak_K": 1}, "pulse.peak_K"),
])
def test_a_bad_pulse_table_names_its_key(table: dict[str, object], words: str) -> None:
    doc = {"probe": {"name": "d", "kind": "dual", "radius_mm": 0.5, "heater_length_mm": 40},
           "sensor": [{"name": "heater", "radial_mm": 0}, {"name": "needle8", "radial_mm": 8}], "pulse": table}
    with pytest.raises(ProbeProfileError, match=words.replace(".", r"\.")):
        profile_from_dict(doc, "p.toml")
