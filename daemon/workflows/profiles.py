"""Field depth profiles: resistivity against depth per site and borehole.

Two ways of getting depth, both from ordinary runs:
- a rod with sensors along its length, pushed to a depth: each sensor reads the ground at its own depth;
- repeated insertions in one hole, deepened between runs: each run is one depth.

Conventions: ``runs.location`` names the borehole; ``runs.depth_m`` is the depth of the probe tip below the
ground surface; a sensor sits ``axial_mm`` above the tip (probe profile). A sensor without an axial position is
taken at mid-heater, where a line-source reading is centred.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Iterable
from dataclasses import asdict, dataclass

from linerig.daemon.probe import ProbeProfile

NEAR_SURFACE_M = 0.3   # the daily temperature wave and a loosened surface layer (common practice, no source)


class ProfileError(ValueError):
    """Runs that cannot be placed on a profile; the message says which field is missing."""


@dataclass(frozen=True)
class ProfilePoint:
    site: str
    borehole: str
    depth_m: float
    sensor: str
    run_id: int
    k_W_per_mK: float
    k_u_W_per_mK: float | None
    flags: tuple[str, ...] = ()
    created_utc: str = ""
    moisture_pct: float | None = None
    rig: str = ""          # the rig the run came from, when read from the central store (run ids repeat across rigs)

    @property
    def run_label(self) -> str:
        return row_label({"id": self.run_id, "rig": self.rig})

    @property
    def resistivity_mK_per_W(self) -> float:
        return 1.0 / self.k_W_per_mK

    @property
    def resistivity_u_mK_per_W(self) -> float | None:
        return None if self.k_u_W_per_mK is None else self.k_u_W_per_mK / self.k_W_per_mK**2

    def to_dict(self) -> dict[str, object]:
        d = asdict(self)
        d["flags"] = list(self.flags)
        d["sensor_depth_m"] = self.depth_m   # depth_m is the sensor's depth (not the tip's): said by name too
        d["resistivity_mK_per_W"] = self.resistivity_mK_per_W
        d["resistivity_Ccm_per_W"] = 100.0 * self.resistivity_mK_per_W
        d["resistivity_u_mK_per_W"] = self.resistivity_u_mK_per_W
        return d


def row_label(row: dict[str, object]) -> str:
    """A row's id (a run's, a calibration's), as ``rig/id`` when it names its rig: read from the central store, ids
    repeat across rigs."""
    return f"{row['rig']}/{row['id']}" if row.get("rig") else str(row.get("id"))


def sensor_depth_m(tip_depth_m: float, probe: ProbeProfile | None, sensor: str) -> float:
    """Depth of a sensor below ground: the tip depth minus its distance from the tip. The one definition of a
    sensor's depth: reports, tables, exports and the UI all show this one, labelled "sensor depth"."""
    if probe is None:
        return tip_depth_m
    axial_mm: float | None = None
    if probe.has_sensor(sensor):
        axial_mm = probe.sensor(sensor).axial_mm
    if axial_mm is None and probe.heater_length_mm is not None:
        axial_mm = probe.heater_length_mm / 2.0
    return round(tip_depth_m - (axial_mm or 0.0) / 1000.0, 6)   # to the micrometre: 0.5, not 0.49999999999999994


def points_from_runs(runs: Iterable[dict[str, object]], probes: dict[str, ProbeProfile]) -> list[ProfilePoint]:
    """One point per run and sensor with a result. ``runs`` rows carry id, site, location, depth_m, probe_serial,
    created_utc, moisture_pct and ``results`` {sensor: SensorResult JSON}."""
    out: list[ProfilePoint] = []
    for run in runs:
        depth = run.get("depth_m")
        if depth is None or not math.isfinite(float(depth)):  # type: ignore[arg-type]
            continue
        probe = probes.get(str(run.get("probe_serial") or ""))
        results = run.get("results") or {}
        for sensor, res in results.items():  # type: ignore[union-attr]
            k = res.get("k_W_per_mK")
            if not k or not math.isfinite(k) or k <= 0:
                continue
            d = sensor_depth_m(float(depth), probe, sensor)  # type: ignore[arg-type]
            flags = list(res.get("flags") or [])
            if d < NEAR_SURFACE_M:
                flags.append("near_surface")
            out.append(ProfilePoint(
                site=str(run.get("site") or ""), borehole=str(run.get("location") or "—"), depth_m=d,
                sensor=sensor, run_id=int(run["id"]),  # type: ignore[call-overload]
                k_W_per_mK=float(k), k_u_W_per_mK=res.get("k_u_W_per_mK"), flags=tuple(flags),
                created_utc=str(run.get("created_utc") or ""),
                moisture_pct=run.get("moisture_pct"), rig=str(run.get("rig") or "")))  # type: ignore[arg-type]
    return out


def group_profiles(points: Iterable[ProfilePoint]) -> dict[tuple[str, str], list[ProfilePoint]]:
    """Points per (site, borehole), shallowest first."""
    groups: dict[tuple[str, str], list[ProfilePoint]] = defaultdict(list)
    for p in points:
        groups[(p.site, p.borehole)].append(p)
    return {key: sorted(v, key=lambda p: (p.depth_m, p.rig, p.run_id, p.sensor)) for key, v in sorted(groups.items())}


@dataclass(frozen=True)
class DepthSummary:
    """Several readings at one depth (repeat insertions, or a rod sensor in repeated runs) combined."""

    depth_m: float
    n: int
    resistivity_mK_per_W: float
    spread_mK_per_W: float
    worst_mK_per_W: float


def summarise_depths(points: list[ProfilePoint], tolerance_m: float = 0.05) -> list[DepthSummary]:
    """Readings within ``tolerance_m`` of each other pooled; mean, spread (sample SD) and the highest resistivity
    (the thermally worst reading, which a rating would look at)."""
    if tolerance_m < 0:
        raise ProfileError("depth tolerance must be ≥ 0")
    pts = sorted(points, key=lambda p: p.depth_m)
    out: list[DepthSummary] = []
    group: list[ProfilePoint] = []

    def flush() -> None:
        if not group:
            return
        rho = [p.resistivity_mK_per_W for p in group]
        mean = sum(rho) / len(rho)
        sd = math.sqrt(sum((x - mean) ** 2 for x in rho) / (len(rho) - 1)) if len(rho) > 1 else 0.0
        out.append(DepthSummary(sum(p.depth_m for p in group) / len(group), len(group), mean, sd, max(rho)))

    for p in pts:
        if group and p.depth_m - group[0].depth_m > tolerance_m:
            flush()
            group = []
        group.append(p)
    flush()
    return out
