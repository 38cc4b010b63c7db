"""Planar (r, θ) finite volumes: a cross-section through two parallel, infinitely long, resolved needles.

For dual-needle records: a heater needle and a sensing needle at spacing s, each a set of concentric layers (heater
core, filler, sheath, optional contact layer) with their own k and ρc. The grid is polar about the heater axis, so
the heater's layers are exact coordinate circles and carry the same exact cylindrical conductances as the
axisymmetric model; the problem is symmetric about the line through both axes, so only 0 ≤ θ ≤ π is meshed
(insulated at θ = 0 and π; the half plane carries q/2 per metre). The sensing needle is a circle centred at
(r = s, θ = 0) that the polar grid does not follow: it sits in a band of fine cells (uniform in r and in arc
length), and the properties of cells that straddle its interfaces are sampled, not taken from the cell centre —
ρc is the area average over 6×6 points, a face conductance is the parallel sum over 4 strips of the series
resistance sampled at 4 points in each half between the two nodes (halves split at the face, so an interface that
lies on a face is exact). Convergence with the band's cell size is shown in the tests.
The centre of the heater is one half-disc cell (resistance 1/(8πk) to its rim for a full disc, as in fv_axi).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .fv_axi import fill_segment
from .materials import Solid
from .stepper import LinearThermalSystem

__all__ = ["DualNeedle", "NeedleLayers", "PlanarGrid", "PlanarModel", "build_planar"]


@dataclass(frozen=True)
class NeedleLayers:
    """Concentric layers from the axis outwards as (r_out_m, material, radial cells in the heater's grid)."""

    layers: tuple[tuple[float, Solid, int], ...]

    @property
    def outer_m(self) -> float:
        return self.layers[-1][0]

    def heat_capacity_per_m(self, exclude_last: bool = False) -> float:
        s, r_in = 0.0, 0.0
        lays = self.layers[:-1] if exclude_last else self.layers
        for r_out, mat, _ in lays:
            s += math.pi * (r_out**2 - r_in**2) * mat.rho_c
            r_in = r_out
        return s


@dataclass(frozen=True)
class DualNeedle:
    """Heater needle at the origin (its first layer is the heated core) and an optional sensing needle at s."""

    heater: NeedleLayers
    sensor: NeedleLayers | None
    spacing_m: float


@dataclass(frozen=True)
class PlanarGrid:
    h_fine_m: float = 5e-5  # cell size (radial and arc) in the band around the sensing needle
    band_m: float = 7e-4  # half-width of that band
    medium_ratio: float = 1.08  # radial growth in the medium outside the band
    dtheta_max: float = 0.08  # largest angular cell (rad)
    theta_growth: float = 1.15
    extent_m: float = 0.3  # outer radius, fixed temperature
    bc_outer: str = "fixed"
    scale: float = 1.0


@dataclass
class PlanarModel:
    r_faces: np.ndarray
    theta_faces: np.ndarray
    system: LinearThermalSystem
    sensors: tuple[str, ...]

    @property
    def shape(self) -> tuple[int, int]:
        return (self.theta_faces.size - 1, self.r_faces.size - 1)


def _log_faces(r0: float, r1: float, ratio: float) -> list[float]:
    n = max(1, math.ceil(math.log(r1 / r0) / math.log(ratio) - 1e-9))
    return list(np.exp(np.linspace(math.log(r0), math.log(r1), n + 1))[1:])


def _r_faces(dual: DualNeedle, g: PlanarGrid) -> np.ndarray:
    sc = g.scale
    lays = dual.heater.layers
    n0 = max(1, round(lays[0][2] * sc))
    faces = [0.0, *(lays[0][0] * np.sqrt(np.arange(1, n0 + 1) / n0))]
    for r_out, _, cells in lays[1:]:
        n = max(1, round(cells * sc))
        faces += list(np.exp(np.linspace(math.log(faces[-1]), math.log(r_out), n + 1))[1:])
    ratio = g.medium_ratio ** (1.0 / sc)
    h = g.h_fine_m / sc
    if dual.sensor is None:
        faces += _log_faces(faces[-1], g.extent_m, ratio)
        return np.asarray(faces)
    s = dual.spacing_m
    m = math.ceil(g.band_m / h - 0.5)
    band = s + (np.arange(-m - 1, m + 1) + 0.5) * h
    if band[0] <= faces[-1]:
        raise ValueError("the sensing needle's band reaches the heater; reduce band_m")
    # grow from the heater towards the band, but never larger than the band's cells times the growth allows
    r0 = faces[-1]
    size = lambda r: np.minimum(r * (ratio - 1.0), h + (ratio - 1.0) * (band[0] - r))  # noqa: E731
    faces += fill_segment(r0, band[0], size)
    faces += list(band)
    size_out = lambda r: np.minimum(r * (ratio - 1.0), h + (ratio - 1.0) * (r - band[-1]))  # noqa: E731
    faces += [*fill_segment(band[-1], g.extent_m, size_out), g.extent_m]
    return np.asarray(faces)


def _theta_faces(dual: DualNeedle, g: PlanarGrid) -> np.ndarray:
    sc = g.scale
    dmax = g.dtheta_max / sc
    growth = g.theta_growth ** (1.0 / sc)
    if dual.sensor is None:
        n = math.ceil(math.pi / dmax)
        return np.linspace(0.0, math.pi, n + 1)
    s = dual.spacing_m
    dth = g.h_fine_m / sc / s
    m = math.ceil(g.band_m / s / dth)
    faces = list(np.arange(m + 1) * dth)
    top = faces[-1]
    size = lambda th: np.minimum(dmax, dth + (growth - 1.0) * (th - top))  # noqa: E731
    faces += [*fill_segment(top, math.pi, size), math.pi]
    return np.asarray(faces)


def _props(dual: DualNeedle, medium: Solid, r: np.ndarray, th: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    r, th = np.broadcast_arrays(r, th)
    k = np.full(r.shape, medium.k)
    c = np.full(r.shape, medium.rho_c)
    if dual.sensor is not None:
        d = np.sqrt(r * r + dual.spacing_m**2 - 2.0 * r * dual.spacing_m * np.cos(th))
        for r_out, mat, _ in reversed(dual.sensor.layers):
            sel = d < r_out
            k[sel], c[sel] = mat.k, mat.rho_c
    r_in = 0.0
    for r_out, mat, _ in dual.heater.layers:
        sel = (r > r_in) & (r < r_out)
        k[sel], c[sel] = mat.k, mat.rho_c
        r_in = r_out
    return k, c


def build_planar(dual: DualNeedle, medium: Solid, grid: PlanarGrid) -> PlanarModel:
    """Assemble the half-plane model; the readout is the heater axis ("heater") and the sensing needle's axis."""
    rf = _r_faces(dual, grid)
    tf = _theta_faces(dual, grid)
    nr, nt = rf.size - 1, tf.size - 1
    rc = np.sqrt(rf[1:] * np.maximum(rf[:-1], 1e-300))
    rc[0] = 0.0
    dth = np.diff(tf)
    tc = 0.5 * (tf[1:] + tf[:-1])
    ns, sy = 6, 4
    f6 = (np.arange(ns) + 0.5) / ns
    f4 = (np.arange(sy) + 0.5) / sy
    # capacities: area-weighted ρc over 6×6 points in (r², θ) so every point stands for the same area
    R2 = (rf[:-1] ** 2)[None, :, None, None] + np.diff(rf**2)[None, :, None, None] * f6[None, None, None, :]
    TH = tf[:-1][:, None, None, None] + dth[:, None, None, None] * f6[None, None, :, None]
    _, csub = _props(dual, medium, np.sqrt(R2), TH)
    area = 0.5 * np.diff(rf**2)[None, :] * dth[:, None]
    cap = csub.mean(axis=(2, 3)) * area  # nt × nr
    # radial faces between ring i and i+1 (i ≥ 1): conductance = Σ strips (Δθ/4) / ∫ dr/(k r)
    # each half (node to face, face to node) sampled on its own, so an interface on a face is exact
    TH = tf[:-1][:, None, None, None] + dth[:, None, None, None] * f4[None, None, :, None]
    res = np.zeros((nt, nr - 2, sy))
    for lo, hi in ((np.log(rc[1:-1]), np.log(rf[2:-1])), (np.log(rf[2:-1]), np.log(rc[2:]))):
        LR = lo[None, :, None, None] + (hi - lo)[None, :, None, None] * f4[None, None, None, :]
        kr, _ = _props(dual, medium, np.exp(LR), TH)
        res += ((hi - lo)[None, :, None] / sy) * (1.0 / kr).sum(axis=3)  # ∫ d ln r / k
    g_r = ((dth[:, None, None] / sy) / res).sum(axis=2)  # nt × (nr − 2)
    # centre half-disc to ring 1: wedge Δθ sees 1/(4kΔθ) (mean-to-rim of a uniformly heated disc) + ring-1 half
    k0 = dual.heater.layers[0][1].k
    k1, _ = _props(dual, medium, np.full(nt, rc[1]), tc)
    g_c = 1.0 / (1.0 / (4.0 * k0 * dth) + np.log(rc[1] / rf[1]) / (k1 * dth))
    # angular faces between θ-cells j and j+1 in ring i (i ≥ 1): Σ strips dr / (r·∫dθ/k)
    RS = rf[1:-1][None, :, None, None] + np.diff(rf[1:])[None, :, None, None] * f4[None, None, :, None]
    res_t = np.zeros((nt - 1, nr - 1, sy))
    for lo, hi in ((tc[:-1], tf[1:-1]), (tf[1:-1], tc[1:])):
        TS = lo[:, None, None, None] + (hi - lo)[:, None, None, None] * f4[None, None, None, :]
        kt, _ = _props(dual, medium, RS, TS)
        res_t += RS[..., 0] * ((hi - lo)[:, None, None] / sy) * (1.0 / kt).sum(axis=3)
    g_t = ((np.diff(rf[1:])[None, :, None] / sy) / res_t).sum(axis=2)  # (nt − 1) × (nr − 1)
    # unknowns: 0 = centre, then (j, i) for i ≥ 1 at 1 + j·(nr − 1) + (i − 1)
    n = 1 + nt * (nr - 1)
    idx = 1 + np.arange(nt * (nr - 1)).reshape(nt, nr - 1)
    rows = [np.zeros(nt, dtype=int), idx[:, :-1].ravel(), idx[:-1, :].ravel()]
    cols = [idx[:, 0], idx[:, 1:].ravel(), idx[1:, :].ravel()]
    vals = [g_c, g_r.ravel(), g_t.ravel()]
    off = sp.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    off = off + off.T
    diag = np.asarray(off.sum(axis=1)).ravel()
    bnd = np.zeros(n)
    if grid.bc_outer == "fixed":
        k_last, _ = _props(dual, medium, np.full(nt, rc[-1]), tc)
        bnd[idx[:, -1]] = dth * k_last / np.log(rf[-1] / rc[-1])
    elif grid.bc_outer != "adiabatic":
        raise ValueError("bc_outer must be 'fixed' or 'adiabatic'")
    G = (sp.diags(diag + bnd) - off).tocsr()
    capv = np.concatenate(([cap[:, 0].sum()], cap[:, 1:].ravel()))
    # heat: the core ring(s) of the heater, by area; Σ src = 0.5 (half of each metre)
    r_core = dual.heater.layers[0][0]
    heated_rings = np.nonzero(rf[1:] <= r_core * (1 + 1e-12))[0]
    src = np.zeros(n)
    src[0] = 0.5 * rf[1] ** 2 / r_core**2
    for i in heated_rings[heated_rings >= 1]:
        src[idx[:, i - 1]] = 0.5 * (rf[i + 1] ** 2 - rf[i] ** 2) * dth / math.pi / r_core**2
    rows_, cols_, vals_ = [0], [0], [1.0]
    names = ["heater"]
    if dual.sensor is not None:
        i = int(np.argmin(np.abs(rc - dual.spacing_m)))
        if abs(rc[i] - dual.spacing_m) > 0.01 * (rf[i + 1] - rf[i]):
            raise ValueError("no ring centred on the sensing needle")
        # T(θ = 0) from the two cells next to the symmetry line: T(0) = (9·T0 − T1)/8 for equal cells
        rows_ += [1, 1]
        cols_ += [idx[0, i - 1], idx[1, i - 1]]
        vals_ += [9.0 / 8.0, -1.0 / 8.0]
        names.append("needle")
    readout = sp.csr_matrix((vals_, (rows_, cols_)), shape=(len(names), n))
    system = LinearThermalSystem(cap=capv, G=G, src=src, boundary_g=bnd, readout=readout)
    return PlanarModel(rf, tf, system, tuple(names))
