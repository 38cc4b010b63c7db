"""Load reference records and turn them into realistic run CSVs (the project's run-CSV format).

    from tests.reference import records, load
    for name in records("lab-needle-long"):
        rec = load(name)
        rec.true["k_W_per_mK"]                     # the answer
        rec.to_run_csv(tmp / f"{name}.csv", seed=3, noise_K=0.005, drift_K_per_h=0.05)
        rec.profile_path                           # probe profile for `linerig reduce --probe`

A record holds the clean physics: the temperature rise ΔT(t) of each sensor from heater-on (t = 0) on a fine time
grid, and the heater power as piecewise-constant steps. The instrument layer adds what a logger does, seeded and
repeatable (see `Instrument`). Numpy and scipy only; nothing here imports the project's daemon code.
"""

from __future__ import annotations

import itertools
import json
import math
from collections.abc import Iterable
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Any, TextIO

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.signal import lfilter

__all__ = ["RECORDS_DIR", "Instrument", "RefRecord", "RunArrays", "families", "load", "records"]

HERE = Path(__file__).resolve().parent
RECORDS_DIR = HERE / "records"
PROBES_DIR = HERE / "probes"


@dataclass(frozen=True)
class Instrument:
    """What the logger adds to the clean physics. Every record carries its own defaults (`rec.instrument`).

    dt_s            sample interval (s); rows at multiples of it from heater-on
    baseline_s      length of the baseline before heater-on (rows with negative time_s)
    noise_K         standard deviation of white noise on each temperature
    ar_K, ar_phi    AR(1) noise: stationary standard deviation and lag-1 coefficient (slow wander)
    quantum_K       ADC step the temperatures are rounded to (0: none)
    drift_K_per_h   linear ambient drift, the same for every sensor, over the whole record
    T0_C            temperature of the undisturbed medium at heater-on
    t0_offset_samples  the logger artefact: the power column shows the heater on this many rows late, and
                    time_s counts from that row, while the temperatures already rise before it
    q_noise_rel     relative standard deviation of the power readings while heating (0: exact means)
    end_s           stop the CSV here (default: the end of the record)
    """

    dt_s: float = 1.0
    baseline_s: float = 120.0
    noise_K: float = 0.003
    ar_K: float = 0.002
    ar_phi: float = 0.9
    quantum_K: float = 0.001
    drift_K_per_h: float = 0.0
    T0_C: float = 20.0
    t0_offset_samples: int = 0
    q_noise_rel: float = 0.0
    end_s: float | None = None

    def clean(self) -> Instrument:
        """The same sampling without noise, quantisation, drift or time-zero artefact."""
        return replace(self, noise_K=0.0, ar_K=0.0, quantum_K=0.0, drift_K_per_h=0.0, t0_offset_samples=0,
                       q_noise_rel=0.0)


@dataclass
class RunArrays:
    """One run as the CSV holds it: time_s from (logged) heater-on, q_W_per_m held from each row to the next."""

    time_s: np.ndarray
    q_W_per_m: np.ndarray
    temps_C: dict[str, np.ndarray]
    comments: list[str]


class RefRecord:
    """One reference record: `params` (all inputs), `true` (the answers), clean ΔT and the power steps."""

    def __init__(self, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> None:
        self.params: dict[str, Any] = meta["params"]
        self.true: dict[str, Any] = meta["true"]
        self.stats: dict[str, Any] = meta.get("stats", {})
        self.name: str = self.params["name"]
        self.family: str = self.params["family"]
        self.description: str = self.params["description"]
        self.t_s: np.ndarray = np.asarray(arrays["t_s"], dtype=float)
        self.sensors: tuple[str, ...] = tuple(meta["sensors"])
        self.dT: dict[str, np.ndarray] = {s: np.asarray(arrays[f"dT_{s}"], dtype=float) for s in self.sensors}
        self.power_t_s = np.asarray(self.params["power"]["t_s"], dtype=float)
        self.power_q = np.asarray(self.params["power"]["q_W_per_m"], dtype=float)
        self.instrument = Instrument(**self.params["instrument"])

    def __repr__(self) -> str:
        return f"RefRecord({self.name!r}, family={self.family!r}, sensors={self.sensors})"

    @property
    def t_end_s(self) -> float:
        return float(self.t_s[-1])

    @property
    def t_heat_s(self) -> float:
        return float(self.params["t_heat_s"])

    @property
    def profile_path(self) -> Path:
        """The probe profile (project TOML format) with the values a user of this probe would have."""
        return PROBES_DIR / self.params["profile"]

    # ---- clean physics ---------------------------------------------------------------------------------------
    def power_energy(self, t: np.ndarray) -> np.ndarray:
        """∫_0^t q dt' (J/m) of the power steps."""
        t = np.asarray(t, dtype=float)
        ts, qs = self.power_t_s, self.power_q
        cum = np.concatenate(([0.0], np.cumsum(qs[:-1] * np.diff(ts))))
        idx = np.clip(np.searchsorted(ts, t, side="right") - 1, 0, None)
        return np.where(t <= 0.0, 0.0, cum[idx] + qs[idx] * (np.maximum(t, 0.0) - ts[idx]))

    def power_mean(self, t0: np.ndarray, t1: np.ndarray) -> np.ndarray:
        """Mean power over [t0, t1]: what a logger averaging over each interval records."""
        return (self.power_energy(t1) - self.power_energy(t0)) / (np.asarray(t1) - np.asarray(t0))

    def clean(self, t: np.ndarray | Iterable[float]) -> dict[str, np.ndarray]:
        """ΔT of every sensor at times t: 0 before heater-on, exact at stored times, and between them a monotone
        cubic in ln(t − t_change) within each stretch of constant power."""
        t = np.asarray(t, dtype=float)
        if np.any(t > self.t_end_s * (1 + 1e-12)):
            raise ValueError(f"{self.name}: asked for t up to {t.max():g} s, the record ends at {self.t_end_s:g} s")
        out = {s: np.zeros_like(t) for s in self.sensors}
        edges = np.unique(np.concatenate((self.power_t_s, [self.t_end_s])))
        edges = edges[edges <= self.t_end_s]
        for a, b in itertools.pairwise(edges):
            sel = (t >= a) & (t <= b) if b == edges[-1] else (t >= a) & (t < b)
            if not sel.any():
                continue
            i0, i1 = np.searchsorted(self.t_s, [a, b])
            i1 = min(i1 + 1, self.t_s.size)
            ts = self.t_s[i0:i1]
            tq = t[sel]
            # in x = ln(t − a) the response to the step at a is smooth and nearly straight
            late = tq > ts[1] if ts.size > 1 else np.zeros(tq.shape, dtype=bool)
            for s in self.sensors:
                ys = self.dT[s][i0:i1]
                y = np.interp(tq, ts, ys)  # before the first step after a: linear in t (≤ a few ms)
                if ts.size > 2 and late.any():
                    y[late] = PchipInterpolator(np.log(ts[1:] - a), ys[1:])(np.log(tq[late] - a))
                out[s][sel] = y
        return out

    # ---- the instrument layer -------------------------------------------------------------------------------
    def arrays(self, seed: int = 0, **instrument: Any) -> RunArrays:
        """A run as a logger would record it. Keyword arguments override fields of `Instrument`."""
        ins = replace(self.instrument, **instrument)
        dt = float(ins.dt_s)
        if not dt > 0:
            raise ValueError("dt_s must be > 0")
        end = self.t_end_s if ins.end_s is None else min(float(ins.end_s), self.t_end_s)
        nb = round(ins.baseline_s / dt)
        ne = math.floor(end / dt + 1e-9)
        t_true = dt * np.arange(-nb, ne + 1)
        rng = np.random.default_rng(seed)
        clean = self.clean(np.clip(t_true, 0.0, None))
        temps: dict[str, np.ndarray] = {}
        for s in self.sensors:
            y = ins.T0_C + ins.drift_K_per_h * t_true / 3600.0 + clean[s]
            if ins.noise_K > 0:
                y = y + ins.noise_K * rng.standard_normal(t_true.size)
            if ins.ar_K > 0:
                phi = float(ins.ar_phi)
                e = rng.standard_normal(t_true.size) * ins.ar_K * math.sqrt(1.0 - phi * phi)
                e[0] = rng.standard_normal() * ins.ar_K
                y = y + lfilter([1.0], [1.0, -phi], e)
            if ins.quantum_K > 0:
                y = np.round(y / ins.quantum_K) * ins.quantum_K
            temps[s] = y
        q_rows = np.where(t_true >= 0.0, self.power_mean(t_true, t_true + dt), 0.0)
        if ins.q_noise_rel > 0:
            q_rows = np.where(q_rows > 0, q_rows * (1.0 + ins.q_noise_rel * rng.standard_normal(q_rows.size)), 0.0)
            q_rows = np.maximum(q_rows, 0.0)
        n_off = int(ins.t0_offset_samples)
        if n_off < 0:
            raise ValueError("t0_offset_samples must be >= 0")
        if n_off:
            q_rows = np.concatenate((np.zeros(n_off), q_rows[:-n_off]))
        time_s = t_true - n_off * dt
        comments = [f"reference record {self.name} (tests/reference): {self.description}",
                    f"instrument seed={seed} " + " ".join(f"{k}={v}" for k, v in asdict(ins).items()),
                    f"probe profile: tests/reference/probes/{self.params['profile']}"]
        return RunArrays(time_s=time_s, q_W_per_m=q_rows, temps_C=temps, comments=comments)

    def to_run_csv(self, path: str | Path | TextIO, seed: int = 0, **instrument: Any) -> Path | None:
        """Write the run CSV (time_s, q_W_per_m, T_<sensor>_C; `#` comments first). Returns the path."""
        run = self.arrays(seed=seed, **instrument)
        lines = [f"# {c}" for c in run.comments]
        lines.append(",".join(["time_s", "q_W_per_m", *[f"T_{s}_C" for s in self.sensors]]))
        cols = [run.time_s, run.q_W_per_m, *[run.temps_C[s] for s in self.sensors]]
        fmt = ["{:.10g}", "{:.8g}", *["{:.6f}"] * len(self.sensors)]
        for i in range(run.time_s.size):
            lines.append(",".join(f.format(float(c[i])) for f, c in zip(fmt, cols, strict=True)))
        text = "\n".join(lines) + "\n"
        if isinstance(path, str | Path):
            Path(path).write_text(text, encoding="utf-8")
            return Path(path)
        path.write(text)
        return None


_INDEX: dict[str, Any] | None = None


def _index() -> dict[str, Any]:
    global _INDEX
    if _INDEX is None:
        f = RECORDS_DIR / "index.json"
        if not f.exists():
            raise FileNotFoundError(f"{f} is missing: run `python -m tests.reference.generate`")
        _INDEX = json.loads(f.read_text(encoding="utf-8"))
    return _INDEX


def records(family: str | None = None) -> list[str]:
    """Names of the stored records (all, or one family), in catalogue order."""
    idx = _index()["records"]
    return [r["name"] for r in idx if family is None or r["family"] == family]


def families() -> dict[str, int]:
    """Record families and how many records each holds."""
    out: dict[str, int] = {}
    for r in _index()["records"]:
        out[r["family"]] = out.get(r["family"], 0) + 1
    return out


def load(name: str) -> RefRecord:
    """One record by name."""
    meta_f = RECORDS_DIR / f"{name}.json"
    if not meta_f.exists():
        raise KeyError(f"no reference record {name!r}; records() lists them")
    meta = json.loads(meta_f.read_text(encoding="utf-8"))
    with np.load(RECORDS_DIR / f"{name}.npz") as z:
        arrays = {k: z[k] for k in z.files}
    return RefRecord(meta, arrays)

