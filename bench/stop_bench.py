"""The "heating can stop" verdict against its targets: how early it comes, how far k moves, what it saves.

For every record: the verdict (``live.record_verdict``, the same rule as the live screen and the automatic stop)
against the planned heating T; then the run heated only to the verdict, with the cooling the stop plan asks for,
reduced offline exactly like the full run. Reported per record: the verdict as a fraction of T, Δk between the
stopped and the full run's final k (and between their late-time lines), the energy a stop at the verdict saves
at the planned power, and why there was no verdict where there was none.

Record sets:
- the reference records of the reduction work (``tests/reference/``: an independent solver of a *resolved*
  probe, heater core, filler and sheath, finite heated length, finite samples, layered ground), their own
  instrument layer (noise, AR(1) noise, quantisation, a 120 s baseline, the rod's 300 s) at seed 1; the sensor
  on the heater (the lab needle's and the dual needle's ``heater``, the field rod's ``j600``). A stopped run
  cannot be re-solved here, so "Δk final" compares the reduction of the heating cut at the verdict (no recovery)
  with that of the full record. Whether a record bends is the truth's: axial loss as below, or the record's own
  ``t_departure_1pct_s`` (a bath boundary, a layer). The dual needle's heat pulses (``dn-pulse-*`` and the
  8 s pulses of ``dn-length-*``) have no stop verdict by design (a pulse heats for its planned time): they are
  left out of the statistics and named as left out;
- the simulator's materials (``daemon/sim/materials.py``) with the simulator's own (r, z) finite-volume model of
  the three probe kinds: the lab needle (T half the time axial loss takes to bend its line by 1 %, within
  60–600 s: what a careful operator plans without knowing α), the field rod (30 min, with a 10 min baseline),
  and deliberately bending records (a heating longer than the needle can use, finite samples with a bath
  boundary, the short heater of a dual needle) where a verdict is a false stop by definition. Whether a record
  bends is decided from the truth: the finite-line factor (``window.axial_end_s``) with the material's α, and
  the bath boundary's local slope from the cylinder solution with an outer boundary
  (``probe_model.response_stehfest``).

Targets (issue 12): median verdict ≤ 40 % of T; |Δk| ≤ tolerance in ≥ 95 % of verdicts and never beyond twice it;
no verdict in a bending record; the live verdict (``live.replay``, sample by sample as the daemon feeds it) and
the offline one (``live.record_verdict``, whole arrays, as ``reduce_run``'s ``stable_at_s``) at the same time
within one sample on every record. The bench ends with a table of the targets per set.

``--hindsight``: for the reference records, the earliest tenth of T from which every cut of the record (reduced
offline as it stands, no recovery) reports a k within the tolerance of the full record's: what a rule that knew
the answer could do, so how far the median target is reachable at all on these records.

Also, for long records (``--rows N``): the verdict over one heating of N samples (an ideal line source at 10 Hz
with noise), time and peak memory of ``live.record_verdict``; its cost grows with the decades of time, not the
samples.

Run: .venv/bin/python bench/stop_bench.py [--quick] [--tolerance PCT] [--rows N]
"""

from __future__ import annotations

import argparse
import math
import resource
import statistics
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from linerig.daemon.probe import ProbeProfile, SensorPosition, load_probe_profile
from linerig.daemon.reduction import window as win
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.daemon.reduction.live import record_verdict, replay
from linerig.daemon.reduction.probe_model import response_stehfest
from linerig.daemon.reduction.stop_rule import StopSettings, recovery_after_stop_s
from linerig.daemon.sim.materials import MATERIALS, get_material
from linerig.daemon.sim.records import recorded_run
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

ROOT = Path(__file__).resolve().parents[1]
NEEDLE = load_probe_profile(ROOT / "daemon" / "profiles" / "default-needle.toml")
ROD = load_probe_profile(ROOT / "hardware" / "probes" / "field-rod.toml")
DUAL = load_probe_profile(ROOT / "hardware" / "probes" / "dual-needle.toml")
BASELINE_S = 120.0
DRY = {"dry-sand", "dry-clay", "moist-peat", "glycerol"}


@dataclass
class Case:
    name: str
    material: str
    profile: ProbeProfile
    spec: ProbeSpec
    sensor: str
    heat_s: float
    q_W_per_m: float
    rig: dict[str, Any] = field(default_factory=dict)
    seed: int = 1
    baseline_s: float = BASELINE_S

    @property
    def axial(self) -> bool:
        return bool(self.rig.get("axial_loss", True))

    @property
    def k_true(self) -> float:
        return get_material(self.material).k_W_per_mK

    def full_record(self) -> RunData:
        return self.record(self.heat_s, self.heat_s)  # the presets cool as long as they heat

    def stopped_record(self, t_v: float) -> RunData:
        """Heated to the verdict, then the cooling the stop plan asks for."""
        return self.record(t_v, recovery_after_stop_s(t_v, self.heat_s, self.heat_s))

    def record(self, heat_s: float, recover_s: float) -> RunData:
        kw = {"axial_loss": True, **self.rig}
        rig = SimulatedRig(get_material(self.material), self.spec, seed=self.seed, **kw)
        return recorded_run(rig, baseline_s=self.baseline_s, heat_s=heat_s, recover_s=recover_s,
                            q_W_per_m=self.q_W_per_m, sensor=self.sensor)

    def bends_at_s(self) -> float:
        """When the truth bends the line by 1 %: axial loss at the sensor, or a bath boundary."""
        m = get_material(self.material)
        alpha = m.diffusivity_m2_per_s
        t_bend = math.inf
        if self.axial:
            s = self.profile.sensor(self.sensor)
            t_bend = win.axial_end_s(self.profile.length_m or math.inf, alpha, 0.01,
                                     s.axial_mm * 1e-3 if s.axial_mm is not None else None)
        R = self.rig.get("sample_radius_m")
        if R:
            a = self.spec.radius_m
            aj = 2.0 * m.rho_c_J_per_m3K / self.spec.probe_rho_c
            h = m.k_W_per_mK / (a * self.spec.contact_conductance) if self.spec.contact_conductance else 0.0
            tau = np.geomspace(1.0, 1e7, 800)
            lt = np.log(tau)
            free = np.gradient(response_stehfest(tau, aj, h), lt)
            bath = np.gradient(response_stehfest(tau, aj, h, outer_rho=R / a), lt)
            off = np.nonzero(np.abs(bath / free - 1.0) > 0.01)[0]
            late = off[tau[off] * a * a / alpha > 1.0]
            if late.size:
                t_bend = min(t_bend, float(tau[late[0]] * a * a / alpha))
        return t_bend


def needle_heat_s(material: str) -> float:
    """The lab needle's standard heating: half the time axial loss takes to bend its line by 1 %, 60–600 s."""
    alpha = get_material(material).diffusivity_m2_per_s
    t_ax = win.axial_end_s(NEEDLE.length_m or math.inf, alpha, 0.01, 0.05)
    return float(min(600.0, max(60.0, 10 * math.floor(0.05 * t_ax))))


def sim_cases(quick: bool) -> list[Case]:
    needle = ProbeSpec.from_profile(NEEDLE)
    rod = ProbeSpec.from_profile(ROD)
    dual = ProbeSpec.from_profile(DUAL)
    mats = list(MATERIALS) if not quick else ["moist-sand", "dry-sand", "agar-gel", "moist-clay"]
    out = [Case(f"needle {m}", m, NEEDLE, needle, "heater", needle_heat_s(m), 2.5 if m in DRY else 5.0)
           for m in mats]
    out += [Case(f"needle {m} 10 W/m", m, NEEDLE, needle, "heater", needle_heat_s(m), 10.0)
            for m in (["moist-sand", "saturated-sand", "moist-clay", "thermal-backfill"] if not quick else
                      ["moist-clay"])]
    out += [Case("needle moist-clay drift 0.5 K/h", "moist-clay", NEEDLE, needle, "heater",
                 needle_heat_s("moist-clay"), 5.0, {"drift_K_per_h": 0.5}),
            Case("needle moist-sand 3 mK", "moist-sand", NEEDLE, needle, "heater", needle_heat_s("moist-sand"),
                 5.0, {"noise_K_rms": 0.003})]
    rod_mats = ["moist-sand", "moist-clay", "weathered-rock", "dry-sand"] if not quick else ["moist-clay"]
    out += [Case(f"rod tip600 {m}", m, ROD, rod, "tip600", 1800.0, 30.0, baseline_s=600.0) for m in rod_mats]
    # records meant to bend (the truth decides: the "bend" column)
    out += [Case(f"needle {m} 600 s", m, NEEDLE, needle, "heater", 600.0, 5.0)
            for m in (["moist-sand", "weathered-rock"] if not quick else ["moist-sand"])]
    # the lab knows its container: the reduction and the rule are told the sample's radius
    out += [Case("needle agar-gel in a 30 mm bath", "agar-gel", NEEDLE.in_sample(0.030), needle, "heater", 600.0,
                 5.0, {"axial_loss": False, "sample_radius_m": 0.030}),
            Case("needle moist-sand in a 25 mm bath", "moist-sand", NEEDLE.in_sample(0.025), needle, "heater",
                 300.0, 5.0,
                 {"axial_loss": False, "sample_radius_m": 0.025}),
            Case("dual needle heater moist-sand", "moist-sand", DUAL, dual, "heater", 90.0, 20.0)]
    return out


@dataclass
class RefCase:
    """A reference record with its planned heating (the record's own) and probe profile."""

    name: str
    rec: Any
    profile: ProbeProfile
    sensor: str = "heater"
    seed: int = 1

    @property
    def heat_s(self) -> float:
        return float(self.rec.true["t_heat_s"])

    @property
    def q_W_per_m(self) -> float:
        return float(self.rec.true["power"]["q_W_per_m"][0])

    @property
    def k_true(self) -> float:
        return float(self.rec.true["k_W_per_mK"])

    def full_record(self) -> RunData:
        return self.record()

    def stopped_record(self, t_v: float) -> RunData:
        """The solver cannot be rerun here: the record cut at the verdict, no recovery."""
        return self.record(end_s=t_v)

    def record(self, end_s: float | None = None) -> RunData:
        a = self.rec.arrays(seed=self.seed, end_s=end_s)
        return RunData(a.time_s, a.q_W_per_m, a.temps_C)

    def bends_at_s(self) -> float:
        """When the truth bends the line by 1 %: axial loss (the record's medium α, the profile's heater), or
        the solver's own departure from an infinite homogeneous medium (a bath boundary, a layer)."""
        s = self.profile.sensor(self.sensor)
        alpha = float(self.rec.true["alpha_m2_per_s"])
        t_ax = win.axial_end_s(self.profile.length_m or math.inf, alpha, 0.01,
                               s.axial_mm * 1e-3 if s.axial_mm is not None else None)
        dep = self.rec.true["sensors"][self.sensor].get("t_departure_1pct_s")
        return min(t_ax, float(dep)) if dep is not None else t_ax


QUICK_REFS = {"ln-dry-sand-600s", "ln-dry-clay-150s", "ln-agar-gel-bath-r25.4mm", "dn-heat-moist-clay-120s",
              "rod-moist-clay-1800s", "rod-layered-near-boundary"}
PULSES = ("dn-pulse-", "dn-length-")   # heat pulses: heated for their planned time, no stop verdict


def reference_cases(seeds: int = 1) -> tuple[list[RefCase], list[str]]:
    """The records with a stop verdict, and the names of the pulses left out."""
    try:
        from tests.reference import load, records
    except ImportError:
        return [], []
    out, pulses = [], []
    for name in records():
        if name.startswith(PULSES):
            pulses.append(name)
            continue
        rec = load(name)
        sensor = "heater" if "heater" in rec.true["sensors"] else "j600"
        profile = load_probe_profile(rec.profile_path)
        if rec.family == "lab-needle-finite-sample":  # the lab knows its container
            profile = profile.in_sample(rec.params["grid"]["r_out_m"])
        out += [RefCase(name if seed == 1 else f"{name} #{seed}", rec, profile, sensor, seed)
                for seed in range(1, seeds + 1)]
    return out, pulses


@dataclass
class Row:
    case: Any
    bends: bool
    at_s: float | None
    reason: str
    dk: float | None = None
    dk_line: float | None = None
    dk_rule: float | None = None
    err_full: float | None = None
    saved_Wh: float | None = None
    note: str = ""
    live_at_s: float | None = None
    dt_s: float = 1.0

    @property
    def agree(self) -> bool:
        """Live and offline verdicts at the same time within one sample (or neither given)."""
        if self.at_s is None or self.live_at_s is None:
            return self.at_s is None and self.live_at_s is None
        return abs(self.at_s - self.live_at_s) <= self.dt_s * 1.000001

    @property
    def frac(self) -> float:
        return 1.0 if self.at_s is None else self.at_s / self.case.heat_s


def hindsight(c: RefCase, tol: float) -> float | None:
    """The earliest tenth of T from which every cut reports k within ``tol`` of the full record's (None: the
    full record is not reduced)."""
    def k_of(end_s: float | None) -> float:
        try:
            r = reduce_run(c.record(end_s), c.profile, sensors=[c.sensor], stable_rule=False).sensors[c.sensor]
        except ReductionError:
            return math.nan
        return r.k_W_per_mK or math.nan
    k_full = k_of(None)
    if not math.isfinite(k_full):
        return None
    earliest = 1.0
    for f in (0.9, 0.8, 0.7, 0.6, 0.5, 0.4, 0.3, 0.2, 0.1):
        if not abs(k_of(f * c.heat_s) / k_full - 1.0) <= tol:
            break
        earliest = f
    return earliest


def run_case(c: Case | RefCase, tol: float) -> Row:
    """The verdict on the full record, then the stopped run reduced like the full one."""
    T = c.heat_s
    full = c.full_record()
    v = record_verdict(full.time_s, full.temps_C[c.sensor], full.q_W_per_m, c.profile, c.sensor,
                       StopSettings(tol, T))
    bends = c.bends_at_s() < T
    red, _ = replay(full.time_s, full.temps_C[c.sensor], full.q_W_per_m, c.profile, c.sensor,
                    StopSettings(tol, T))
    live_at = red.verdict.first_at_s if red.verdict else None
    heat = full.time_s[(full.time_s > 0) & (full.q_W_per_m > 0)]
    dt = float(np.median(np.diff(heat))) if heat.size > 1 else 1.0
    try:
        rf = reduce_run(full, c.profile, sensors=[c.sensor], stable_rule=False).sensors[c.sensor]
    except ReductionError as e:
        return Row(c, bends, v.first_at_s if v else None, f"full run not reduced: {e}", live_at_s=live_at,
                   dt_s=dt)
    row = Row(c, bends, v.first_at_s if v else None, v.reason if v else "no verdict",
              err_full=(rf.k_W_per_mK or math.nan) / c.k_true - 1, live_at_s=live_at, dt_s=dt)
    if v is None or v.first_at_s is None:
        return row
    t_v = v.first_at_s
    row.saved_Wh = c.q_W_per_m * (c.profile.length_m or 1.0) * (T - t_v) / 3600.0
    try:
        rs = reduce_run(c.stopped_record(t_v), c.profile, sensors=[c.sensor],
                        stable_rule=False).sensors[c.sensor]
    except ReductionError as e:
        row.note = f"stopped run not reduced: {e}"
        return row
    row.dk = (rs.k_W_per_mK or math.nan) / (rf.k_W_per_mK or math.nan) - 1
    if rs.line and rf.line:
        row.dk_line = rs.line.k_W_per_mK / rf.line.k_W_per_mK - 1
    if v.k_at_W_per_mK and rf.k_W_per_mK:
        row.dk_rule = v.k_at_W_per_mK / rf.k_W_per_mK - 1
    row.note = f"{rs.method}/{rf.method}"
    return row


def pct(x: float | None) -> str:
    return "    —  " if x is None or not math.isfinite(x) else f"{100 * x:+6.2f}%"


def long_record(rows: int) -> None:
    """One heating of ``rows`` samples at 10 Hz (E1 line source, k 1.5, α 0.7 mm²/s, 5 W/m, 5 mK noise)."""
    from scipy.special import exp1

    dt = 0.1
    base = min(3000, rows // 10)
    t = (np.arange(rows, dtype=float) - base) * dt
    rng = np.random.default_rng(1)
    temp = 15.0 + 0.005 * rng.standard_normal(rows)
    on = t > 0
    temp[on] += 5.0 / (4 * math.pi * 1.5) * exp1(0.635e-3**2 / (4 * 0.7e-6 * t[on]))
    q = np.where(t >= 0, 5.0, 0.0)
    probe = ProbeProfile(name="ideal", radius_mm=0.635, heater_length_mm=None, sensors=(SensorPosition("heater"),))
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    s = time.perf_counter()
    v = record_verdict(t, temp, q, probe, "heater")
    el = time.perf_counter() - s
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(f"long record: {rows:,} samples ({t[-1]:.0f} s of heating at 10 Hz): record_verdict {el:.2f} s, "
          f"peak RSS {peak / 1024:.0f} MB ({(peak - before) / 1024:.0f} MB above the record itself); verdict at "
          f"{v.first_at_s if v else None} s")


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="a few records per set")
    p.add_argument("--seeds", type=int, default=1,
                   help="realisations of each reference record's instrument layer (default 1; more: a steadier "
                        "|Δk| fraction)")
    p.add_argument("--tolerance", type=float, default=2.0, help="stop tolerance, %% (default 2)")
    p.add_argument("--rows", type=int, default=0, help="only time the verdict on one heating of this many samples")
    p.add_argument("--hindsight", action="store_true",
                   help="only: from which tenth of T every cut of a reference record stays within the tolerance")
    args = p.parse_args(argv)
    if args.rows:
        long_record(args.rows)
        return 0
    tol = args.tolerance / 100.0
    refs, pulses = reference_cases(args.seeds)
    if args.hindsight:
        hindsight_table([r for r in refs if r.name in QUICK_REFS] if args.quick else refs, tol)
        return 0
    sets: list[tuple[str, list[Any]]] = [("reference records (resolved probe, tests/reference/)",
                                          [r for r in refs if r.name in QUICK_REFS] if args.quick else refs),
                                         ("simulator materials", sim_cases(args.quick))]
    if not refs:
        print("reference records (tests/reference/): not on this branch; the simulator set only")
    if pulses:
        print(f"left out of the reference set: {len(pulses)} heat pulses of the dual needle (a pulse heats for "
              f"its planned time, no stop verdict by design): {', '.join(pulses)}")
    all_rows: list[Row] = []
    tables: list[tuple[str, list[tuple[str, str, bool]]]] = []
    for set_name, cases in sets:
        if not cases:
            continue
        print(f"\n{set_name}: tolerance {100 * tol:g} %, baseline {BASELINE_S:.0f} s (field rods: the record's)")
        hdr = (f"{'record':42} {'T s':>6} {'bend':>4} {'verdict':>8} {'live':>8} {'of T':>5} {'k full':>8} "
               f"{'Δk final':>8} {'Δk line':>8} {'Δk rule':>8} {'saved Wh':>8} {'s':>5}  methods / why not")
        print(hdr)
        print("-" * len(hdr))
        rows = []
        for c in cases:
            s = time.perf_counter()
            r = run_case(c, tol)
            el = time.perf_counter() - s
            rows.append(r)
            at = f"{r.at_s:8.0f}" if r.at_s is not None else f"{'never':>8}"
            live = (f"{r.live_at_s:8.0f}" if r.live_at_s is not None else f"{'never':>8}") + ("" if r.agree else "!")
            why = r.note if r.at_s is not None else r.reason
            print(f"{c.name[:42]:42} {c.heat_s:6.0f} {'yes' if r.bends else '':>4} {at} {live:>8} {r.frac:5.2f} "
                  f"{pct(r.err_full):>8} {pct(r.dk):>8} {pct(r.dk_line):>8} {pct(r.dk_rule):>8} "
                  f"{(r.saved_Wh if r.saved_Wh is not None else 0):8.3f} {el:5.1f}  {why[:70]}")
        tables.append((set_name.split(" (")[0], summary(rows, tol)))
        all_rows += rows
    if len(sets) > 1 and refs:
        print("\nboth sets together")
        tables.append(("both sets", summary(all_rows, tol)))
    targets_table(tables)
    return 0 if all(ok for _, marks in tables for _, _, ok in marks) else 1


def hindsight_table(cases: list[RefCase], tol: float) -> None:
    """Per reference record: from which tenth of T on the cuts stay within the tolerance; their median."""
    print(f"hindsight: the earliest tenth of T from which every cut's k is within {100 * tol:g} % of the full "
          "record's (reduced offline, no recovery)")
    fr = []
    for c in cases:
        bends = c.bends_at_s() < c.heat_s
        f = hindsight(c, tol)
        print(f"{c.name:42} {c.heat_s:6.0f} {'bends' if bends else '':>5} "
              f"{'not reduced' if f is None else f'{f:.1f}':>12}")
        if not bends:
            fr.append(1.0 if f is None else f)
    if fr:
        print(f"median over the {len(fr)} straight records: {statistics.median(fr):.2f} of T "
              f"(≤ 0.40 in {sum(f <= 0.4 for f in fr)})")


def targets_table(tables: list[tuple[str, list[tuple[str, str, bool]]]]) -> None:
    """Each target, its measured value and pass/fail, a column per set."""
    if not tables:
        return
    names = [t for t, _, _ in tables[0][1]]
    width = max(len(n) for n in names) + 2
    cols = [max(24, len(s) + 2) for s, _ in tables]
    print("\ntargets (issue 12)")
    print(f"{'target':{width}}" + "".join(f"{s:>{w}}" for (s, _), w in zip(tables, cols, strict=True)))
    for i, name in enumerate(names):
        cells = [f"{m[i][1]} {'pass' if m[i][2] else 'FAIL'}" for _, m in tables]
        print(f"{name:{width}}" + "".join(f"{c:>{w}}" for c, w in zip(cells, cols, strict=True)))


def summary(rows: list[Row], tol: float) -> list[tuple[str, str, bool]]:
    straight = [r for r in rows if not r.bends]
    bending = [r for r in rows if r.bends]
    given = [r for r in straight if r.dk is not None]
    med = statistics.median(r.frac for r in straight) if straight else math.nan
    within = sum(abs(r.dk) <= tol for r in given if r.dk is not None)
    worst = max((abs(r.dk) for r in given if r.dk is not None), default=0.0)
    false_bend = sum(r.at_s is not None for r in bending)
    saved = [r.saved_Wh or 0.0 for r in straight]
    print("-" * 60)
    print(f"records: {len(straight)} straight, {len(bending)} bending; verdicts in {len(given)} straight")
    print(f"median verdict (never = 1.0) {med:.2f} of T        target ≤ 0.40  {'ok' if med <= 0.40 else 'MISSED'}")
    if given:
        share = within / len(given)
        print(f"|Δk final| ≤ {100 * tol:g} % in {within}/{len(given)} = {100 * share:.0f} % of verdicts     "
              f"target ≥ 95 %  {'ok' if share >= 0.95 else 'MISSED'}")
        print(f"largest |Δk final| {100 * worst:.2f} %                  target ≤ {200 * tol:g} %   "
              f"{'ok' if worst <= 2 * tol else 'MISSED'}")
        print(f"false stops (|Δk| > tolerance): {len(given) - within}/{len(given)}")
    print(f"verdicts in bending records: {false_bend}/{len(bending)}           target 0      "
          f"{'ok' if false_bend == 0 else 'MISSED'}")
    print(f"energy saved per run at the planned power: median {statistics.median(saved) if saved else 0:.3f} Wh, "
          f"largest {max(saved, default=0):.3f} Wh")
    apart = [r for r in rows if not r.agree]
    print(f"live and offline verdicts within one sample: {len(rows) - len(apart)}/{len(rows)}"
          + "".join(f"; {r.case.name}: offline {r.at_s}, live {r.live_at_s}" for r in apart))
    share = within / len(given) if given else 1.0
    return [("median verdict ≤ 0.40 of T (never = 1)", f"{med:.2f}", med <= 0.40),
            (f"|Δk| ≤ {100 * tol:g} % in ≥ 95 % of verdicts", f"{within}/{len(given)} = {100 * share:.0f} %",
             share >= 0.95),
            (f"largest |Δk| ≤ {200 * tol:g} %", f"{100 * worst:.2f} %", worst <= 2 * tol),
            ("verdicts in bending records = 0", f"{false_bend}/{len(bending)}", false_bend == 0),
            ("live = offline (within a sample)", f"{len(rows) - len(apart)}/{len(rows)}", not apart),
            ("energy saved, Wh per run (median)",
             f"{statistics.median(saved) if saved else 0:.3f}", True)]


if __name__ == "__main__":
    raise SystemExit(main())
