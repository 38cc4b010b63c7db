"""The simulator as a qualification rig, in process and faster than real time.

Each placement builds a fresh `SimulatedRig` (a probe cannot be carried between simulated media): a bath is a
gelled-water "medium" held at the set point, a reference medium is the simulator's material of that name. The
simulated probe is built from the profile, with what the builder actually made (heat capacity, contact, faults)
overridable in `SimSetup`, so a bad design or a bad unit can be qualified like a real one.

Recordings are sampled at `interval_s` but, in accelerated mode, early heating samples come closer together
(0.2, 0.4, 0.8 s ...) so the probe model sees the first seconds, and later ones never closer than `interval_s`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.sim.materials import get_material
from linerig.daemon.sim.rig_model import ProbeSpec, SimulatedRig

from .requests import PlaceInBath, PlaceInMedium, Record, Recording


@dataclass(frozen=True)
class SimSetup:
    """How the simulated unit differs from its profile, and how the simulation runs."""

    seed: int = 1
    noise_K_rms: float = 0.010
    faults: tuple[str, ...] = ()
    """Simulator fault names (e.g. "noisy_tc:heater", "heater_drift"), active in every placement."""
    axial_loss: bool = True
    """Finite heater in an (r, z) model, so a short probe loses heat from its ends as a real one would."""
    contact_conductance_W_per_m2K: float = 3000.0
    probe_rho_c_MJ_per_m3K: float | None = None
    """As built; None: as the profile says."""
    heater_tcr_per_K: float | None = None
    """As built; None: the profile's value (5e-5 /K when the profile gives 0, a constantan heater)."""
    bath_material: str = "agar-gel"
    interval_s: float | None = None
    """Sample spacing; None: the procedure's. 1.6 s keeps a physics step per sample."""
    fine_start: bool = True
    baseline_interval_s: float | None = None
    """Spacing of heater-off samples before a reference run; None: as while heating (baths always are)."""


@dataclass
class SimulatedQualificationRig:
    """Answers PlaceInBath / PlaceInMedium / Record with the in-process simulator."""

    profile: ProbeProfile
    setup: SimSetup = field(default_factory=SimSetup)
    blocking = True
    """Record() is CPU-bound; async drivers run it off their loop."""

    def __post_init__(self) -> None:
        spec = ProbeSpec.from_profile(self.profile)
        tcr = self.setup.heater_tcr_per_K
        if tcr is None:
            tcr = self.profile.heater_tcr_per_K or 5e-5
        rc = spec.probe_rho_c if self.setup.probe_rho_c_MJ_per_m3K is None else self.setup.probe_rho_c_MJ_per_m3K * 1e6
        self.spec = replace(spec, heater_tcr_per_K=tcr, probe_rho_c=rc,
                            contact_conductance=self.setup.contact_conductance_W_per_m2K)
        self._rig: SimulatedRig | None = None
        self._in_bath = False
        self._baths = 0
        self._session_s = 0.0
        self._placements = 0

    @property
    def session_s(self) -> float:
        return self._session_s

    def _new_rig(self, material_key: str, ground_C: float, seed: int, axial: bool) -> None:
        if self._rig is not None:
            self._session_s += self._rig.t_s
        self._rig = SimulatedRig(get_material(material_key), self.spec, seed=seed, faults=self.setup.faults,
                                 initial_ground_C=ground_C, noise_K_rms=self.setup.noise_K_rms, axial_loss=axial)

    def place_in_bath(self, request: PlaceInBath) -> float:
        # The same seed in every bath: a thermocouple's offset is a property of the unit, not of the bath. The
        # readings taken while the bath settles differ in number from bath to bath, so each bath's noise is its own.
        self._new_rig(self.setup.bath_material, request.setpoint_C, self.setup.seed, axial=False)
        self._in_bath = True
        self._baths += 1
        rig = self._rig
        assert rig is not None
        for _ in range(7 + 11 * self._baths):
            rig.advance(1.0)
            rig.sample()
        return float(request.setpoint_C)  # the simulated reference thermometer reads the truth

    def place_in_medium(self, request: PlaceInMedium) -> None:
        self._placements += 1
        key = request.medium.sim_material or request.medium.name
        self._new_rig(key, 20.0, self.setup.seed + 1000 * self._placements, axial=self.setup.axial_loss)
        self._in_bath = False

    def _times(self, total: float, interval: float, fine: bool) -> list[float]:
        out: list[float] = []
        t, d = 0.0, (min(0.2, interval) if fine else interval)
        while t < total - 1e-9:
            d = min(d, interval, total - t)
            t += d
            out.append(t)
            d = min(2.0 * d, interval)
        return out

    def record(self, request: Record) -> Recording:
        rig = self._rig
        if rig is None:
            raise RuntimeError("place the probe in a bath or a medium before recording")
        interval = self.setup.interval_s or request.interval_s
        base_interval = interval if self._in_bath else (self.setup.baseline_interval_s or interval)
        names = rig.channel_names
        rows: list[tuple[float, float, float, float, float, list[float]]] = []
        faults = dict.fromkeys(names, 0)
        length = self.spec.heater_length_m

        def take(t_rel: float) -> None:
            s = rig.sample()
            q = s.heater_V * s.heater_A / length if s.heater_on else 0.0
            rows.append((t_rel, self._session_s + s.t_s, s.heater_V, s.heater_A, q,
                         [c.temp_C for c in s.channels]))
            for c in s.channels:
                faults[c.name] |= c.fault_bits

        n_log = max((math.ceil(request.log_s / base_interval)), 1 if request.heat_s <= 0 else 0)
        for i in range(n_log):
            rig.advance(base_interval)
            take(-(n_log - 1 - i) * base_interval)
        if request.heat_s > 0:
            rig.set_heater(True, request.power_W_per_m)
            if rows:  # the last logged row is the heater-on instant: its power is what is now held
                t_rel, ss, *_ = rows[-1]
                s = rig.sample()
                rows[-1] = (t_rel, ss, s.heater_V, s.heater_A, s.heater_V * s.heater_A / length, rows[-1][5])
            prev = 0.0
            for t in self._times(request.heat_s, interval, self.setup.fine_start):
                rig.advance(t - prev)
                prev = t
                take(t)
            rig.set_heater(False)
        t_rel = np.array([r[0] for r in rows])
        temps = np.array([r[5] for r in rows], dtype=float).reshape(len(rows), len(names))
        return Recording(t_s=t_rel, session_s=np.array([r[1] for r in rows]),
                         heater_V=np.array([r[2] for r in rows]), heater_A=np.array([r[3] for r in rows]),
                         q_W_per_m=np.array([r[4] for r in rows]),
                         temps_C={n: temps[:, i] for i, n in enumerate(names)},
                         faults={n: b for n, b in faults.items()})
