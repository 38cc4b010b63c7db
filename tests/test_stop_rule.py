"""The "heating can stop" verdict: one rule, live and offline alike, bounded in cost, honest about what it promises.

Outside references: the infinite line source ΔT = q/(4πk)·E1(r²/4αt) (Carslaw & Jaeger 1959, Conduction of Heat
in Solids, §10.4) with E1 from scipy.special.exp1, and its superposition after switch-off. Records of a probe in a
bath-bounded sample come from the simulator's finite-volume model, an independent solver of the conduction
problem (not the Laplace-domain model the rule predicts with).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import exp1

from linerig.daemon.probe import ProbeProfile, SensorPosition, load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.live import record_verdict, replay
from linerig.daemon.reduction.stop_rule import (
    GRID_PER_DECADE,
    Judgement,
    ProbeFacts,
    StopRule,
    StopSettings,
    Verdict,
    _update,
    recovery_after_stop_s,
)
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.records import recorded_run
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

IDEAL = ProbeProfile(name="ideal line", radius_mm=0.635, heater_length_mm=None, sensors=(SensorPosition("heater"),))
K, ALPHA, R, Q = 1.5, 0.7e-6, 0.635e-3, 5.0


def line_source_record(heat_s: float = 600.0, noise_K: float = 0.005, seed: int = 0, baseline_s: float = 120.0,
                       drift_K_per_s: float = 0.0) -> RunData:
    """Baseline, heating at Q, recovery of an ideal line source at r = 0.635 mm, 1 Hz, with white noise."""
    t = np.arange(-baseline_s, 2 * heat_s + 1.0, 1.0)
    rise = np.zeros_like(t)
    on = t > 0
    rise[on] = Q / (4 * math.pi * K) * exp1(R * R / (4 * ALPHA * t[on]))
    off = t > heat_s
    rise[off] -= Q / (4 * math.pi * K) * exp1(R * R / (4 * ALPHA * (t[off] - heat_s)))
    rng = np.random.default_rng(seed)
    temp = 15.0 + rise + drift_K_per_s * t + noise_K * rng.standard_normal(t.size)
    q = np.where((t >= 0) & (t < heat_s), Q, 0.0)
    return RunData(t, q, {"heater": temp})


def test_live_and_offline_reach_the_same_verdict_at_the_same_sample() -> None:
    for seed, kw in enumerate(({}, {"noise_K": 0.002}, {"drift_K_per_s": 2e-5}, {"baseline_s": 300.0})):
        d = line_source_record(seed=seed, **kw)
        red, ests = replay(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL)
        offline = record_verdict(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL)
        assert offline is not None and red.verdict is not None
        assert offline.first_at_s == red.stable_at_s == ests[-1].stable_at_s
        assert offline.first_at_s is not None, kw  # each of these records gets a verdict
        assert reduce_run(d, IDEAL).sensors["heater"].stable_at_s == offline.first_at_s
        first = next(e for e in ests if e.stable)
        assert first.t_s == offline.first_at_s  # the live screen said so at that very sample


def test_a_sample_by_sample_feed_and_one_array_judge_alike() -> None:
    d = line_source_record(seed=7)
    t, T = d.time_s, d.temps_C["heater"]
    heat = (t > 0) & (t < 600)
    u, y, w = np.log(t[heat]), (T[heat] - 15.0) / Q, t[heat] / Q

    def rule() -> StopRule:
        return StopRule(ProbeFacts.of(IDEAL, "heater"), StopSettings(0.02, 600.0), 1e-5, Q, 600.0,
                        noise=(2.5e-5, 100.0))

    whole, chunks, one = rule(), rule(), rule()
    whole.feed(t[heat], u, y, w)
    chunks.feed(t[heat], u, y, w, chunk=37)
    for i in range(int(np.count_nonzero(heat))):
        one.feed_one(float(t[heat][i]), float(u[i]), float(y[i]), float(w[i]))
    assert whole.judgements == chunks.judgements == one.judgements
    assert whole.verdict == chunks.verdict == one.verdict
    assert np.array_equal(whole._total, one._total)  # the same sums to the last bit


def test_judged_at_a_bounded_number_of_checkpoints_whatever_the_sample_rate() -> None:
    t = np.arange(0.01, 2000.0, 0.01)  # 200 000 samples over five decades
    r = StopRule(ProbeFacts.of(IDEAL, "heater"), StopSettings(0.02, 2000.0), 1e-5, Q, 2000.0, noise=(1e-5, 100.0))
    r.feed(t, np.log(t), np.log(t) / (4 * math.pi * K), t / Q, chunk=30_000)
    decades = math.log10(t[-1] / t[0])
    assert len(r.judgements) <= len(r._cp_t) <= GRID_PER_DECADE * (decades + 1)  # prefix sums only there


def test_the_verdict_on_a_line_source_comes_early_and_its_k_holds() -> None:
    d = line_source_record(seed=3, baseline_s=300.0)
    v = record_verdict(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL)
    assert v is not None and v.first_at_s is not None
    assert v.first_at_s <= 0.4 * 600
    assert v.k_at_W_per_mK == pytest.approx(K, rel=0.02)  # within the tolerance of the published k
    assert v.saved_s() == pytest.approx(600 - v.first_at_s)
    assert v.power_W is None and v.saved_Wh() is None  # no heater length, no energy


def test_a_short_baseline_holds_the_verdict_back_for_the_drift_it_cannot_rule_out() -> None:
    # the same heating after 120 s and after 300 s of baseline: a slope error of the baseline tilts a longer
    # window more, so the change from stopping early grows with what the baseline leaves unknown
    short, long = (record_verdict(*(lambda d: (d.time_s, d.temps_C["heater"], d.q_W_per_m))(
        line_source_record(seed=3, baseline_s=b)), IDEAL) for b in (120.0, 300.0))
    assert short is not None and long is not None and long.first_at_s is not None
    assert short.first_at_s is None or short.first_at_s > long.first_at_s


def test_noise_holds_the_verdict_back_and_says_so() -> None:
    d = line_source_record(heat_s=300.0, noise_K=0.08, seed=4)
    red, ests = replay(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL)
    assert red.stable_at_s is None or red.stable_at_s > 0.9 * 300  # only when little heating is left to change k
    halfway = next(e for e in ests if e.t_s >= 150)
    assert halfway.verdict is not None and "noise" in halfway.verdict["reason"]


def test_a_tighter_tolerance_waits_longer() -> None:
    d = line_source_record(seed=5)
    loose = record_verdict(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL, stop=StopSettings(0.05))
    tight = record_verdict(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL, stop=StopSettings(0.005))
    assert loose is not None and tight is not None and loose.first_at_s is not None
    assert tight.first_at_s is None or tight.first_at_s > loose.first_at_s


def test_no_baseline_no_verdict() -> None:
    d = line_source_record(baseline_s=0.0)
    keep = d.time_s >= 0
    d = RunData(d.time_s[keep], d.q_W_per_m[keep], {"heater": d.temps_C["heater"][keep]})
    v = record_verdict(d.time_s, d.temps_C["heater"], d.q_W_per_m, IDEAL)
    assert v is not None and v.first_at_s is None and "baseline" in v.reason


def test_no_verdict_where_a_bath_boundary_bends_the_line() -> None:
    # the default needle in moist sand inside a 25 mm bath (the simulator's finite-volume model): the bath's
    # cold wall bends ΔT against ln t from about 50 s, well before the planned 300 s
    needle = load_probe_profile("daemon/profiles/default-needle.toml")
    rig = SimulatedRig(get_material("moist-sand"), ProbeSpec.from_profile(needle), seed=2,
                       sample_radius_m=0.025)
    d = recorded_run(rig, baseline_s=120.0, heat_s=300.0, recover_s=0.0, q_W_per_m=5.0)
    v = record_verdict(d.time_s, d.temps_C["heater"], d.q_W_per_m, needle)
    assert v is not None and v.first_at_s is None


def _j(t: float, ok: bool, k: float) -> Judgement:
    return Judgement(t, ok, k, 0.01 if ok else 0.05, {}, "x", recover_s=2 * t if ok else None)


def test_the_first_verdict_is_latched_and_withdrawn_only_beyond_the_tolerance() -> None:
    v = Verdict(0.02, 600.0)
    v = _update(v, _j(100.0, True, 1.000))
    assert v.stands and v.first_at_s == v.at_s == 100.0 and v.recover_s == 200.0
    v = _update(v, _j(110.0, False, 1.015))  # judged "not now", but k is within the tolerance: it stands
    assert v.stands and v.moved_rel == pytest.approx(0.015)
    v = _update(v, _j(150.0, False, 1.025))
    assert v.withdrawn and not v.stands and v.moved_rel == pytest.approx(0.025)
    v = _update(v, _j(200.0, True, 1.030))  # given again later: a new verdict, the first one remembered
    assert v.stands and v.at_s == 200.0 and v.first_at_s == 100.0 and v.moved_rel == 0.0
    assert v.to_dict()["saved_s"] == 400.0


def test_the_stop_plan_logs_the_recovery_the_cross_check_uses() -> None:
    # the recovery window ends at 3·t_h (cooling.RECOVERY_END_FACTOR): 2·t_h after the switch-off
    assert recovery_after_stop_s(100.0, 600.0, 600.0) == 200.0
    assert recovery_after_stop_s(100.0, 600.0, 3600.0) == 600.0  # a plan asking for more keeps its ratio
    assert recovery_after_stop_s(600.0, 600.0, 300.0) == 300.0  # the full heating: as planned
    with pytest.raises(ValueError, match="tolerance"):
        StopSettings(0.0)
