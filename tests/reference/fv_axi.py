"""Axisymmetric (r, z) finite volumes for a resolved probe in a layered medium.

The probe is a stack of concentric layers (heater core, filler, sheath …) with their own k and ρc; heat is made
in the core over the heated length only; a closed tip cap and an unheated length above the heater belong to the
probe; an optional contact layer (e.g. an air gap of given thickness) wraps the probe's side; the medium may have
horizontal layers; each outer boundary is a fixed-temperature bath or insulated. z is the height above the probe
tip. `infinite_length=True` makes a one-cell-high slice with insulated ends: the 1-D radial problem of an
infinitely long probe.

Why these discretisation choices: radial cells are logarithmic, and each half cell carries the exact steady
cylindrical resistance ln(r_face/r_node)/(2πk·dz) with the node at the geometric mean radius, so a thin contact
layer or a coarse cell near the probe still has the right thermal resistance; across a material interface the two
half resistances add in series (the harmonic mean). The axis cell's resistance to its face, 1/(8πk·dz), is the
mean-to-surface resistance of a solid cylinder heated uniformly. Axial faces sit on every interface (tip, cap,
heater ends, probe top, medium layers), and the cells shrink towards them geometrically.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .materials import Solid
from .stepper import LinearThermalSystem

__all__ = ["AxiGrid", "AxiModel", "AxiSensor", "Medium", "ProbeLayer", "ResolvedProbe", "build_axi"]

BOUNDARIES = ("fixed", "adiabatic")


@dataclass(frozen=True)
class ProbeLayer:
    """One concentric layer of the probe, out to radius r_out_m; the first layer is the heated core."""

    r_out_m: float
    material: Solid
    cells: int = 2


@dataclass(frozen=True)
class ResolvedProbe:
    layers: tuple[ProbeLayer, ...]
    heated_z_m: tuple[float, float] = (0.0, 0.1)
    top_m: float = 0.12  # probe (and its core) continue unheated up to here
    tip_cap_m: float = 0.0  # closed end: the last layer's material fills r < a for 0 ≤ z < tip_cap
    gap: ProbeLayer | None = None  # contact layer outside the sheath, on the probe's side

    @property
    def radius_m(self) -> float:
        return self.layers[-1].r_out_m

    @property
    def outer_m(self) -> float:
        return self.gap.r_out_m if self.gap else self.radius_m

    def heat_capacity_per_m(self) -> float:
        """S = Σ π(r_o² − r_i²)·ρc of the probe layers (contact layer excluded), J/(m·K)."""
        s, r_in = 0.0, 0.0
        for lay in self.layers:
            s += math.pi * (lay.r_out_m**2 - r_in**2) * lay.material.rho_c
            r_in = lay.r_out_m
        return s


@dataclass(frozen=True)
class Medium:
    """Horizontal layers: `layers[i]` holds from `tops[i - 1]` (−∞ for i = 0) up to `tops[i]` (+∞ for the last)."""

    layers: tuple[Solid, ...]
    tops_m: tuple[float, ...] = ()

    def at(self, z: np.ndarray) -> np.ndarray:
        return np.searchsorted(np.asarray(self.tops_m, dtype=float), z, side="right")


@dataclass(frozen=True)
class AxiSensor:
    name: str
    r_m: float
    z_m: float


@dataclass(frozen=True)
class AxiGrid:
    """Resolution. `scale` multiplies every cell count (and divides sizes) for convergence studies."""

    r_out_m: float = 1.0
    z_bottom_m: float = -1.0
    z_top_m: float = 0.12
    bc_outer: str = "fixed"
    bc_bottom: str = "fixed"
    bc_top: str = "adiabatic"
    medium_ratio: float = 1.12
    gap_cells: int = 1
    dz_fine_m: float = 2e-4
    dz_growth: float = 1.2
    dz_max_m: float = 5e-3
    infinite_length: bool = False
    scale: float = 1.0


@dataclass
class AxiModel:
    r_faces: np.ndarray
    z_faces: np.ndarray
    k: np.ndarray  # nz × nr
    rho_c: np.ndarray
    heated: np.ndarray  # bool nz × nr
    system: LinearThermalSystem
    sensors: tuple[AxiSensor, ...]

    @property
    def shape(self) -> tuple[int, int]:
        return self.k.shape  # type: ignore[return-value]


def _log_faces(r0: float, r1: float, n: int) -> np.ndarray:
    return np.exp(np.linspace(math.log(r0), math.log(r1), n + 1))


def radial_faces(probe: ResolvedProbe, grid: AxiGrid) -> np.ndarray:
    sc = grid.scale
    faces = [0.0]
    core = probe.layers[0]
    n_core = max(1, round(core.cells * sc))
    # equal areas in the core: the axis cell is not needlessly small
    faces += list(core.r_out_m * np.sqrt(np.arange(1, n_core + 1) / n_core))
    for lay in probe.layers[1:]:
        faces += list(_log_faces(faces[-1], lay.r_out_m, max(1, round(lay.cells * sc)))[1:])
    if probe.gap is not None:
        faces += list(_log_faces(faces[-1], probe.gap.r_out_m, max(1, round(grid.gap_cells * sc)))[1:])
    lr = math.log(grid.medium_ratio) / sc
    n_med = max(1, math.ceil(math.log(grid.r_out_m / faces[-1]) / lr))
    faces += list(_log_faces(faces[-1], grid.r_out_m, n_med)[1:])
    return np.asarray(faces)


def fill_segment(z0: float, z1: float, size) -> list[float]:
    """Faces strictly inside (z0, z1), spaced by the size function (equal steps of ∫dz/h)."""
    zz = np.linspace(z0, z1, 4001)
    inv = 1.0 / size(zz)
    cum = np.concatenate(([0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(zz))))
    n = max(1, math.ceil(cum[-1] - 1e-9))
    return list(np.interp(np.arange(1, n) * cum[-1] / n, cum, zz))


def axial_faces(probe: ResolvedProbe, medium: Medium, sensors: tuple[AxiSensor, ...], grid: AxiGrid) -> np.ndarray:
    if grid.infinite_length:
        return np.array([0.0, 1.0])
    sc = grid.scale
    h0 = grid.dz_fine_m / sc
    hmax = grid.dz_max_m / sc
    growth = grid.dz_growth ** (1.0 / sc)
    zb, zt = grid.z_bottom_m, grid.z_top_m
    interfaces = {0.0, probe.tip_cap_m, *probe.heated_z_m, min(probe.top_m, zt), *medium.tops_m}
    interfaces = {z for z in interfaces if zb < z < zt}
    feats = np.asarray(sorted(interfaces))

    z_probe = (0.0, min(probe.top_m, zt))

    def size(z: np.ndarray) -> np.ndarray:
        z = np.asarray(z, dtype=float)
        d = np.min(np.abs(z[..., None] - feats), axis=-1) if feats.size else np.full_like(z, np.inf)
        # capped at dz_max along the probe; beyond its ends the cells keep growing
        d_probe = np.maximum(0.0, np.maximum(z_probe[0] - z, z - z_probe[1]))
        return np.minimum(h0 + (growth - 1.0) * d, np.maximum(hmax, h0 + (growth - 1.0) * d_probe))

    required = sorted({zb, zt, *interfaces})
    # a cell centred on each sensor height, of the local size
    for s in sensors:
        h = float(size(np.array([s.z_m]))[0])
        lo, hi = s.z_m - h / 2, s.z_m + h / 2
        if any(lo < z < hi for z in required):
            raise ValueError(f"sensor {s.name} at z = {s.z_m} m sits on an interface; move it")
        required += [lo, hi]
    required = sorted(set(required))
    faces: list[float] = [required[0]]
    sensor_cells = {(s.z_m - float(size(np.array([s.z_m]))[0]) / 2) for s in sensors}
    for a, b in itertools.pairwise(required):
        if not any(abs(a - lo) < 1e-15 for lo in sensor_cells):
            faces += fill_segment(a, b, size)
        faces.append(b)
    return np.asarray(faces)


def _materials(probe: ResolvedProbe, medium: Medium, rc: np.ndarray, zc: np.ndarray,
               grid: AxiGrid) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    nz, nr = zc.size, rc.size
    R, Z = np.meshgrid(rc, zc)
    k = np.empty((nz, nr))
    c = np.empty((nz, nr))
    lay_idx = medium.at(Z)
    for i, m in enumerate(medium.layers):
        sel = lay_idx == i
        k[sel], c[sel] = m.k, m.rho_c
    if grid.infinite_length:
        on_probe = np.ones_like(Z, dtype=bool)
        above_cap = on_probe
    else:
        on_probe = (Z > 0.0) & (probe.top_m > Z)
        above_cap = probe.tip_cap_m < Z
    r_in = 0.0
    for j, lay in enumerate(probe.layers):
        sel = on_probe & (r_in < R) & (lay.r_out_m > R)
        if j < len(probe.layers) - 1:
            sel &= above_cap
        k[sel], c[sel] = lay.material.k, lay.material.rho_c
        r_in = lay.r_out_m
    cap = on_probe & ~above_cap & (probe.radius_m > R)
    sheath = probe.layers[-1].material
    k[cap], c[cap] = sheath.k, sheath.rho_c
    if probe.gap is not None:
        sel = on_probe & (probe.radius_m < R) & (probe.gap.r_out_m > R)
        k[sel], c[sel] = probe.gap.material.k, probe.gap.material.rho_c
    heated = (probe.layers[0].r_out_m > R) & on_probe & above_cap
    if not grid.infinite_length:
        heated &= (probe.heated_z_m[0] < Z) & (probe.heated_z_m[1] > Z)
    return k, c, heated


def build_axi(probe: ResolvedProbe, medium: Medium, sensors: tuple[AxiSensor, ...], grid: AxiGrid) -> AxiModel:
    for name in ("bc_outer", "bc_bottom", "bc_top"):
        if getattr(grid, name) not in BOUNDARIES:
            raise ValueError(f"{name} must be one of {BOUNDARIES}")
    rf = radial_faces(probe, grid)
    zf = axial_faces(probe, medium, sensors, grid)
    nr, nz = rf.size - 1, zf.size - 1
    rc = 0.5 * (rf[1:] + rf[:-1])
    zc = 0.5 * (zf[1:] + zf[:-1])
    dz = np.diff(zf)
    k, c, heated = _materials(probe, medium, rc, zc, grid)
    area = math.pi * (rf[1:] ** 2 - rf[:-1] ** 2)  # nr
    cap = (c * area[None, :] * dz[:, None]).ravel()
    # half-cell radial resistances per 2π·dz (inner and outer), axis cell: mean-to-surface 1/(4k)
    half_ln = 0.5 * np.log(rf[2:] / rf[1:-1])  # for i ≥ 1
    r_out = np.empty((nz, nr))
    r_inn = np.empty((nz, nr))
    r_out[:, 0] = 0.25 / k[:, 0]
    r_inn[:, 0] = np.inf
    r_out[:, 1:] = half_ln[None, :] / k[:, 1:]
    r_inn[:, 1:] = half_ln[None, :] / k[:, 1:]
    idx = np.arange(nz * nr).reshape(nz, nr)
    rows, cols, vals = [], [], []
    g_r = 2.0 * math.pi * dz[:, None] / (r_out[:, :-1] + r_inn[:, 1:])  # nz × (nr − 1)
    rows.append(idx[:, :-1].ravel())
    cols.append(idx[:, 1:].ravel())
    vals.append(g_r.ravel())
    if nz > 1:
        half_z = 0.5 * dz[:, None] / k  # per area
        g_z = area[None, :] / (half_z[:-1, :] + half_z[1:, :])
        rows.append(idx[:-1, :].ravel())
        cols.append(idx[1:, :].ravel())
        vals.append(g_z.ravel())
    r_ = np.concatenate(rows)
    c_ = np.concatenate(cols)
    v_ = np.concatenate(vals)
    n = nz * nr
    off = sp.coo_matrix((v_, (r_, c_)), shape=(n, n))
    off = off + off.T
    diag = np.asarray(off.sum(axis=1)).ravel()
    bnd = np.zeros((nz, nr))
    if grid.bc_outer == "fixed":
        bnd[:, -1] += 2.0 * math.pi * dz / r_out[:, -1]
    if not grid.infinite_length:
        if grid.bc_bottom == "fixed":
            bnd[0, :] += area / (0.5 * dz[0] / k[0, :])
        if grid.bc_top == "fixed":
            bnd[-1, :] += area / (0.5 * dz[-1] / k[-1, :])
    bnd = bnd.ravel()
    G = (sp.diags(diag + bnd) - off).tocsr()
    src = np.where(heated, (area[None, :] * dz[:, None]) / (math.pi * probe.layers[0].r_out_m**2), 0.0).ravel()
    readout = _readout(rf, zf, k, sensors, nz, nr)
    system = LinearThermalSystem(cap=cap, G=G, src=src, boundary_g=bnd, readout=readout)
    return AxiModel(rf, zf, k, c, heated, system, sensors)


def node_radii(rf: np.ndarray) -> np.ndarray:
    rho = np.sqrt(rf[1:] * np.maximum(rf[:-1], 1e-300))
    rho[0] = 0.0
    return rho


def _radial_weights(rf: np.ndarray, kr: np.ndarray, r: float) -> list[tuple[int, float]]:
    """Weights of the nodes for the temperature at radius r in one row (kr: the row's conductivities).

    Inside one material: quadratic in ln r through the three nearest nodes. Across an interface: log-linear
    within each half cell, through the face temperature that the series resistances give — exact for steady
    radial flux, so a junction near a sheath is read right although the slope jumps there.
    """
    rho = node_radii(rf)
    if r <= 0.0:
        return [(0, 1.0)]
    i = int(np.searchsorted(rho, r) - 1)  # rho[i] < r <= rho[i+1]
    if i == 0 or i + 1 >= rho.size:
        if i + 1 >= rho.size:
            raise ValueError(f"radius {r} m is beyond the last node")
        w = r / rho[1]
        return [(0, 1.0 - w), (1, w)]
    if kr[i] == kr[i + 1]:
        lo = int(np.clip(i - 1 if math.log(r / rho[i]) < math.log(rho[i + 1] / r) else i, 1, rho.size - 3))
        if kr[lo] == kr[lo + 1] == kr[lo + 2]:
            xs = np.log(rho[lo:lo + 3])
            x = math.log(r)
            out = []
            for m in range(3):
                w = 1.0
                for n_ in range(3):
                    if n_ != m:
                        w *= (x - xs[n_]) / (xs[m] - xs[n_])
                out.append((lo + m, w))
            return out
    rface = rf[i + 1]
    r_a = math.log(rface / rho[i]) / kr[i]  # half resistances (per 2π·dz)
    r_b = math.log(rho[i + 1] / rface) / kr[i + 1]
    f_face = r_a / (r_a + r_b)  # T_face = T_i + f_face·(T_{i+1} − T_i)
    if r <= rface:
        f = f_face * math.log(r / rho[i]) / math.log(rface / rho[i])
    else:
        f = f_face + (1.0 - f_face) * math.log(r / rface) / math.log(rho[i + 1] / rface)
    return [(i, 1.0 - f), (i + 1, f)]


def _readout(rf: np.ndarray, zf: np.ndarray, k: np.ndarray, sensors: tuple[AxiSensor, ...], nz: int,
             nr: int) -> sp.csr_matrix:
    zc = 0.5 * (zf[1:] + zf[:-1])
    rows, cols, vals = [], [], []
    for si, s in enumerate(sensors):
        if nz == 1:
            zw = [(0, 1.0)]
        else:
            j = int(np.clip(np.searchsorted(zc, s.z_m) - 1, 0, nz - 2))
            f = (s.z_m - zc[j]) / (zc[j + 1] - zc[j])
            zw = [(j, 1.0 - f), (j + 1, f)]
        for j, wz in zw:
            for i, wr in _radial_weights(rf, k[j], s.r_m):
                if wz * wr != 0.0:
                    rows.append(si)
                    cols.append(j * nr + i)
                    vals.append(wz * wr)
    return sp.csr_matrix((vals, (rows, cols)), shape=(len(sensors), nz * nr))
