"""Method choice with consequences: which result stands, what α and ρc say, and the flag when methods disagree.

Records: the resolved-probe reference set (tests/reference: heater core, filler and sheath with their own k and ρc,
the thermocouple on the axis; an independent solver that shares no code with the reduction) and the simulator's
lumped needle in moist sand (its own finite-volume solver; the lumped model is the physics the probe model
assumes, so there the model may stand, and the reference set is where it must not).
"""

from __future__ import annotations

import numpy as np
import pytest

from linerig.daemon.probe import load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.live import replay
from linerig.daemon.reduction.methods import Estimate, Found, MethodResult, Options
from linerig.daemon.reduction.select import line_disagreement
from linerig.daemon.resources import default_probe_path
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.records import recorded_run
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig
from tests.reference import load

NEEDLE = load_probe_profile(default_probe_path())


@pytest.fixture(scope="module")
def resolved() -> tuple[object, object]:
    rec = load("ln-moist-sand-600s")
    arr = rec.arrays(seed=0)
    red = reduce_run(RunData(arr.time_s, arr.q_W_per_m, arr.temps_C), load_probe_profile(rec.profile_path),
                     stable_rule=False)
    return rec, red.sensors["heater"]


def test_on_a_resolved_needle_the_line_stands_and_alpha_is_not_made_up(resolved: tuple[object, object]) -> None:
    rec, r = resolved
    true = rec.true  # type: ignore[attr-defined]
    assert r.method == "line"  # type: ignore[attr-defined]
    assert not r.methods["model"]["credible"]  # type: ignore[attr-defined]
    assert any("does not describe this record" in n for n in r.notes)  # type: ignore[attr-defined]
    # the lumped model's α here is far off (the probe's own resistance read as contact): none is reported
    assert abs(r.methods["model"]["alpha_m2_per_s"] / true["alpha_m2_per_s"] - 1) > 0.5  # type: ignore[attr-defined]
    assert r.alpha_m2_per_s is None and r.rho_c_J_per_m3K is None and r.contact_m2K_per_W is None  # type: ignore[attr-defined]
    assert any("α·e^(2h)" in n for n in r.notes)  # type: ignore[attr-defined]
    assert abs(r.k_W_per_mK - true["k_W_per_mK"]) <= r.k_U_W_per_mK  # type: ignore[attr-defined]


def test_on_the_lumped_needle_the_model_may_stand_with_its_model_error() -> None:
    mat = get_material("moist-sand")
    rig = SimulatedRig(mat, ProbeSpec.default_needle(), seed=2, axial_loss=True)
    r = reduce_run(recorded_run(rig, baseline_s=120.0, heat_s=600.0, recover_s=600.0, q_W_per_m=5.0), NEEDLE,
                   stable_rule=False).sensors["heater"]
    assert r.methods["model"]["credible"]
    assert r.alpha_source == "probe model" and r.alpha_m2_per_s is not None and r.rho_c_J_per_m3K is not None
    assert {"statistical", "radius", "model"} <= set(r.u_budget_alpha_rel)
    # the simulator's medium (its input), inside the reported expanded uncertainties
    assert abs(r.k_W_per_mK - mat.k_W_per_mK) <= r.k_U_W_per_mK
    assert abs(r.alpha_m2_per_s - mat.diffusivity_m2_per_s) <= 2 * r.alpha_u_m2_per_s
    assert abs(r.rho_c_J_per_m3K - mat.rho_c_J_per_m3K) <= 2 * r.rho_c_u_J_per_m3K


def test_a_result_that_disagrees_with_the_line_is_flagged_with_both_values() -> None:
    line = MethodResult("line", Estimate(1.40, {"statistical": 0.005, "window": 0.004, "power": 0.005}, "line"))
    model = MethodResult("model", Estimate(1.50, {"statistical": 0.004, "model": 0.003}, "model"))
    found = Found(line=line, model=model)
    note = line_disagreement(model, found, Options(calibration_factor=0.98))
    assert note is not None and "1.47" in note and "1.372" in note  # both values, with the probe factor
    assert line_disagreement(line, found, Options()) is None  # the line itself
    close = MethodResult("model", Estimate(1.41, {"statistical": 0.004}, "model"))
    assert line_disagreement(close, Found(line=line, model=close), Options()) is None


def test_the_live_estimate_reports_no_diffusivity() -> None:
    # the live window's α is the intercept's α·e^{2h}, capped at 2 mm²/s for its own use: not a diffusivity
    rig = SimulatedRig(get_material("moist-sand"), ProbeSpec.default_needle(), seed=1, axial_loss=True)
    data = recorded_run(rig, baseline_s=120.0, heat_s=300.0, recover_s=0.0, q_W_per_m=5.0)
    _, ests = replay(data.time_s, data.temps_C["heater"], data.q_W_per_m, NEEDLE)
    assert ests and all(e.alpha_m2_per_s is None for e in ests)
    assert np.isfinite(ests[-1].k_W_per_mK)


def test_a_heat_pulse_read_at_its_own_heater_gives_no_line() -> None:
    """8 s at 50 W/m, logged every 0.5 s: the heating's last decade holds 15 samples, all inside the needle's own
    transient (before this rule, the heater's line read k from −5 % to +22 % of the record's medium with U up to
    ±160 %). The heater has no result and says why; the sensing needle's pulse stands and covers the medium."""
    rec = load("dn-pulse-moist-clay")
    arr = rec.arrays(seed=2)
    red = reduce_run(RunData(arr.time_s, arr.q_W_per_m, arr.temps_C), load_probe_profile(rec.profile_path),
                     stable_rule=False)
    heater, needle = red.sensors["heater"], red.sensors["needle"]
    assert heater.k_W_per_mK is None and "no_result" in heater.flags
    assert "line" not in heater.methods
    assert any("samples in the heating's last decade" in n for n in heater.notes)
    assert needle.method == "pulse"
    assert abs(needle.k_W_per_mK - rec.true["k_W_per_mK"]) <= needle.k_U_W_per_mK


def test_a_heating_whose_last_decade_holds_enough_samples_keeps_its_line() -> None:
    """The shortest lab heating of the reference set (60 s at 1 s): the window is short, the line is still read
    and its U covers the record's medium."""
    rec = load("ln-moist-sand-60s")
    arr = rec.arrays(seed=0)
    r = reduce_run(RunData(arr.time_s, arr.q_W_per_m, arr.temps_C), load_probe_profile(rec.profile_path),
                   stable_rule=False).sensors["heater"]
    assert r.method == "line"
    assert abs(r.k_W_per_mK - rec.true["k_W_per_mK"]) <= r.k_U_W_per_mK


def test_a_long_heating_logged_sparsely_keeps_its_line() -> None:
    """600 s logged every 30 s (a field logger's rate): 19 samples in the last decade. That is a line, and it
    lands on the exact line source it was made from (Carslaw & Jaeger 1959, §10.4: ΔT = q/(4πk)·E1(r²/4αt)).
    A logger that fell to one sample in 100 s after its first minute leaves seven in the decade: no line, and
    the note says why."""
    from scipy.special import exp1

    k, alpha, q, r = 1.5, 1.5 / 2.5e6, 10.0, 0.635e-3

    def run(heat_t: np.ndarray) -> RunData:
        t = np.concatenate([np.arange(-120.0, 0.0, 10.0), heat_t, [600.0]])
        dT = np.where(t > 0, q / (4 * np.pi * k) * exp1(r * r / (4 * alpha * np.maximum(t, 1e-9))), 0.0)
        qs = np.where((t >= 0) & (t < 600.0), q, 0.0)
        return RunData(t, qs, {"needle": 20.0 + dT})

    sparse = reduce_run(run(np.arange(0.0, 600.0, 30.0)), NEEDLE, stable_rule=False).sensors["needle"]
    line = sparse.methods["line"]
    assert line["credible"] and line["k_W_per_mK"] == pytest.approx(k, rel=0.01)
    assert sparse.k_W_per_mK == pytest.approx(k, rel=0.01)
    bare = reduce_run(run(np.r_[np.arange(0.0, 60.0, 5.0), np.arange(100.0, 600.0, 100.0)]), NEEDLE,
                      stable_rule=False).sensors["needle"]
    assert "line" not in bare.methods
    assert any("only 7 samples in the heating's last decade" in n for n in bare.notes)
