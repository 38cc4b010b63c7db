"""Numerical heat conduction around a heated probe, for the simulator.

Two models share one time integrator:

* `RadialModel`: 1-D radial conduction from a lumped, perfectly conducting probe (radius a, heat capacity
  S = π a² (ρc)_probe per metre) through an optional contact conductance H into a medium (k, ρc). This is the
  physical model of Blackwell (1954) and Jaeger (1956), solved by finite volumes so that power may change
  every step, the sample may be finite and several radii can be read.
* `AxialRadialModel`: the same probe of finite heated length in an axisymmetric (r, z) medium, for axial loss
  (short probes) and finite cylindrical samples, optionally with horizontal layers.

Both use finite volumes with logarithmic radial conductances (exact for steady radial flow, so coarse cells
near the probe still carry the right thermal resistance) and TR-BDF2 time stepping (Bank et al. 1985): second
order and L-stable, so large steps after a power change neither oscillate nor smear, and the stored energy
grows by exactly q·dt per step. Factorisations are cached per step length, so a step is two triangular
solves.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import scipy.sparse as sp
from scipy.linalg import lapack
from scipy.sparse.linalg import splu

__all__ = ["AxialRadialModel", "ModelConfigError", "RadialModel"]

# TR-BDF2 constants (gamma = 2 - sqrt 2 makes both stages share one Jacobian scaling family).
_G = 2.0 - math.sqrt(2.0)
_C1 = _G / 2.0  # trapezoidal stage: dt factor
_C2 = (1.0 - _G) / (2.0 - _G)  # BDF2 stage: dt factor
_W1 = 1.0 / (_G * (2.0 - _G))
_W0 = (1.0 - _G) ** 2 / (_G * (2.0 - _G))

DEFAULT_OUTER_RADIUS_M = 2.0
"""'Infinite' medium: heat needs ~R²/(16κ) to reach 2 m, i.e. > 17 h even in wet soil (κ ≈ 1e-6 m²/s)."""

_BOUNDARIES = ("fixed", "adiabatic")


class ModelConfigError(ValueError):
    """A physics model was given impossible parameters; the message names the parameter and the fix."""


def _positive(name: str, value: float) -> float:
    v = float(value)
    if not (v > 0.0 and math.isfinite(v)):
        raise ModelConfigError(f"{name} must be a finite number > 0, got {value!r}")
    return v


def _check_boundary(boundary: str) -> str:
    if boundary not in _BOUNDARIES:
        raise ModelConfigError(f"boundary must be one of {', '.join(_BOUNDARIES)}, got {boundary!r}")
    return boundary


def _stretched_faces(start: float, stop: float, n: int, first: float) -> np.ndarray:
    """n cells from start to stop whose widths grow geometrically from `first` (uniform if that fits)."""
    span = stop - start
    if first * n >= span:
        return np.linspace(start, stop, n + 1)
    # solve first * (g^n - 1)/(g - 1) = span for g > 1 by bisection on log g (monotone)
    lo, hi = 1e-12, 1.0
    while first * math.expm1(n * hi) / math.expm1(hi) < span:
        hi *= 2.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if first * math.expm1(n * mid) / math.expm1(mid) < span:
            lo = mid
        else:
            hi = mid
    g = math.exp(0.5 * (lo + hi))
    widths = first * g ** np.arange(n)
    faces = start + np.concatenate(([0.0], np.cumsum(widths)))
    faces[-1] = stop
    return faces


def _radial_faces(a: float, outer: float, n: int) -> np.ndarray:
    """Cell faces from a to outer: a fine first shell, then near-logarithmic growth.

    The first shell is a/50 thick so the early (τ < 1) transient next to the probe is resolved; beyond that
    the cells grow in proportion to r, which suits a field that varies with ln r.
    """
    return _stretched_faces(a, outer, n, first=min(a / 50.0, (outer - a) / n))


class RadialModel:
    """Temperature rise of a probe and the medium around it, radial conduction only.

    State is the rise above the initial (uniform) temperature. The probe is lumped: one temperature, heat
    capacity S = π a² probe_rho_c per metre. `contact_conductance` H in W/(m²·K) couples it to the medium
    (None: perfect contact). The medium extends to `outer_radius_m` where the boundary is held at zero rise
    ("fixed") or insulated ("adiabatic"); by default it is large enough to act as infinite for many hours.
    """

    def __init__(
        self,
        k: float,
        rho_c: float,
        probe_radius_m: float,
        probe_rho_c: float,
        contact_conductance: float | None = None,
        outer_radius_m: float | None = None,
        boundary: str = "fixed",
        n_cells: int = 200,
    ) -> None:
        self.k = _positive("k", k)
        self.rho_c = _positive("rho_c", rho_c)
        self.a = _positive("probe_radius_m", probe_radius_m)
        if not (probe_rho_c >= 0.0 and math.isfinite(probe_rho_c)):
            raise ModelConfigError(f"probe_rho_c must be >= 0 J/(m^3 K), got {probe_rho_c!r}")
        self.probe_rho_c = float(probe_rho_c)
        if contact_conductance is not None:
            _positive("contact_conductance", contact_conductance)
        self.boundary = _check_boundary(boundary)
        outer = DEFAULT_OUTER_RADIUS_M if outer_radius_m is None else float(outer_radius_m)
        if not outer > 1.01 * self.a:
            raise ModelConfigError(
                f"outer_radius_m ({outer}) must exceed the probe radius ({self.a}) by more than 1 %"
            )
        self.outer_radius_m = outer
        if int(n_cells) < 10:
            raise ModelConfigError(f"n_cells must be >= 10, got {n_cells}")
        self.n = int(n_cells)

        f = _radial_faces(self.a, outer, self.n)
        self._faces = f
        self._rc = np.sqrt(f[:-1] * f[1:])  # node radii: geometric mean of faces
        # heat capacities per metre: probe then shells
        probe_S = math.pi * self.a**2 * self.probe_rho_c
        shells = math.pi * (f[1:] ** 2 - f[:-1] ** 2) * self.rho_c
        # a probe without heat capacity is an algebraic constraint; a vanishing one keeps the system an ODE
        self._cap = np.concatenate(([max(probe_S, 1e-9 * shells[0])], shells))
        self._H: float | None = contact_conductance
        self._factors: dict[float, tuple] = {}
        self._set_cell_conductivity(np.full(self.n, self.k))
        self._u = np.zeros(self.n + 1)
        self._t = 0.0

    # ---- configuration that may change during a run (a probe losing contact, soil drying next to it) ----
    def _set_cell_conductivity(self, k_cells: np.ndarray) -> None:
        """Conductances from per-shell k: half-shell log resistances in series (exact for steady flow)."""
        f, rc = self._faces, self._rc
        two_pi = 2.0 * math.pi
        self._g_inner = two_pi * k_cells[0] / math.log(rc[0] / self.a)  # surface -> first node
        res = np.log(f[1:-1] / rc[:-1]) / (two_pi * k_cells[:-1]) + np.log(rc[1:] / f[1:-1]) / (two_pi * k_cells[1:])
        self._g_links = 1.0 / res
        self._g_outer = (
            two_pi * k_cells[-1] / math.log(self.outer_radius_m / rc[-1]) if self.boundary == "fixed" else 0.0
        )
        self.set_contact_conductance(self._H)

    def set_conductivity_within(self, r_m: float, k: float | None) -> None:
        """Give the shells whose centres lie inside radius r_m conductivity k (None: back to uniform).

        Models a zone next to the probe that changes during a run, e.g. soil drying as the heat drives its
        water outward. Keeps the current temperatures.
        """
        k_cells = np.full(self.n, self.k)
        if k is not None:
            k_cells[self._rc < float(r_m)] = _positive("k", k)
        self._set_cell_conductivity(k_cells)

    def set_contact_conductance(self, contact_conductance: float | None) -> None:
        """Change H (W/(m²·K)); None means perfect contact. Keeps the current temperatures."""
        if contact_conductance is not None:
            _positive("contact_conductance", contact_conductance)
        self._H = None if contact_conductance is None else float(contact_conductance)
        self._g_contact = math.inf if self._H is None else 2.0 * math.pi * self.a * self._H
        self._g_probe = 1.0 / (1.0 / self._g_contact + 1.0 / self._g_inner)
        # conductances between consecutive unknowns: probe-node0, node0-node1, ...
        self._links = np.concatenate(([self._g_probe], self._g_links))
        self._factors.clear()

    @property
    def contact_conductance(self) -> float | None:
        return self._H

    # ---- time stepping ----
    def _operator_bands(self, c: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Sub-, main and super-diagonal of (C - c·A), A the conductance operator."""
        g = self._links
        diag = self._cap.copy()
        diag[:-1] += c * g
        diag[1:] += c * g
        diag[-1] += c * self._g_outer
        off = -c * g
        return off.copy(), diag, off.copy()

    def _factor(self, dt: float) -> tuple:
        fac = self._factors.get(dt)
        if fac is None:
            if len(self._factors) > 8:
                self._factors.clear()
            out = []
            for c in (_C1 * dt, _C2 * dt):
                dl, d, du = self._operator_bands(c)
                dl, d, du, du2, ipiv, info = lapack.dgttrf(dl, d, du)
                if info != 0:
                    raise FloatingPointError(f"tridiagonal factorisation failed (info={info})")
                out.append((dl, d, du, du2, ipiv))
            fac = self._factors[dt] = tuple(out)
        return fac

    def _apply_A(self, u: np.ndarray) -> np.ndarray:
        flux = self._links * (u[:-1] - u[1:])  # heat flow outward across each link
        au = np.zeros_like(u)
        au[:-1] -= flux
        au[1:] += flux
        au[-1] -= self._g_outer * u[-1]
        return au

    def step(self, q_W_per_m: float, dt_s: float) -> None:
        """Advance dt_s seconds with q_W_per_m released in the probe, constant over the step."""
        dt = float(dt_s)
        if not (dt > 0.0 and math.isfinite(dt)):
            raise ModelConfigError(f"dt_s must be a finite number > 0, got {dt_s!r}")
        q = float(q_W_per_m)
        (f1, f2) = self._factor(dt)
        u0 = self._u
        cu0 = self._cap * u0
        # stage 1, trapezoidal over G*dt: (C - c1 A) u* = C u0 + c1 A u0 + G dt b
        rhs = cu0 + (_C1 * dt) * self._apply_A(u0)
        rhs[0] += _G * dt * q
        ustar = _solve_tri(f1, rhs)
        # stage 2, BDF2 through u0, u*, u1: (C - c2 A) u1 = W1 C u* - W0 C u0 + c2 b
        rhs = _W1 * self._cap * ustar - _W0 * cu0
        rhs[0] += _C2 * dt * q
        self._u = _solve_tri(f2, rhs)
        self._t += dt

    # ---- read-out ----
    @property
    def t_s(self) -> float:
        return self._t

    def probe_rise_K(self) -> float:
        return float(self._u[0])

    def surface_rise_K(self) -> float:
        """Medium temperature rise just outside the contact layer (r = a+)."""
        tp, t0 = self._u[0], self._u[1]
        if self._H is None:
            return float(tp)
        gc, gi = self._g_contact, self._g_inner
        return float((gc * tp + gi * t0) / (gc + gi))

    def rise_at_K(self, r_m: float) -> float:
        """Rise at radius r (linear in ln r between nodes: exact for a steady radial field)."""
        r = float(r_m)
        if r <= self.a:
            return self.probe_rise_K()
        if r > self.outer_radius_m * (1.0 + 1e-12):
            raise ModelConfigError(
                f"r_m = {r} lies outside the modelled medium (outer radius {self.outer_radius_m} m)"
            )
        u = self._u[1:]
        edge = 0.0 if self.boundary == "fixed" else float(u[-1])
        xs = np.concatenate(([math.log(self.a)], np.log(self._rc), [math.log(self.outer_radius_m)]))
        ys = np.concatenate(([self.surface_rise_K()], u, [edge]))
        return float(np.interp(math.log(r), xs, ys))

    def energy_J_per_m(self) -> float:
        """Heat stored in probe and medium per metre (equals ∫q dt when no heat leaves the domain)."""
        return float(np.dot(self._cap, self._u))

    @property
    def node_radii_m(self) -> np.ndarray:
        return self._rc.copy()

    def reset(self, rise_K: float = 0.0) -> None:
        """Back to t = 0 with probe and medium at a uniform rise (0: the start of a heating run)."""
        self._u[:] = float(rise_K)
        self._t = 0.0

    def shift_rise(self, delta_K: float) -> None:
        """Add delta_K everywhere: how the field looks from a new reference when the surroundings step."""
        self._u += float(delta_K)


def _solve_tri(fac: tuple, rhs: np.ndarray) -> np.ndarray:
    dl, d, du, du2, ipiv = fac
    x, info = lapack.dgttrs(dl, d, du, du2, ipiv, rhs)
    if info != 0:
        raise FloatingPointError(f"tridiagonal solve failed (info={info})")
    return x


class AxialRadialModel:
    """Axisymmetric (r, z) conduction around a heater of finite length.

    The heated length L is centred on z = 0 and only z ≥ 0 is solved (mirror symmetry). Inside r < a the
    column is the probe (heat capacity, source, contact conductance H, optional axial conductivity
    `probe_axial_k` along it) for z < L/2 and plain medium beyond the tip. Each probe slice is lumped
    radially, as in `RadialModel`. The medium ends at `outer_radius_m` and `outer_half_height_m` with the
    same boundary kind on both (a finite cylindrical sample, or far enough away to act as infinite).
    `layers` is an optional list of (z_from_m, k, rho_c) giving the medium beyond |z| ≥ z_from (mirrored),
    for a probe crossing a horizontal interface symmetric about its mid-length (use a `RadialModel` per
    layer for rods in layered ground).
    """

    def __init__(
        self,
        k: float,
        rho_c: float,
        probe_radius_m: float,
        probe_rho_c: float,
        heater_length_m: float,
        contact_conductance: float | None = None,
        outer_radius_m: float | None = None,
        outer_half_height_m: float | None = None,
        boundary: str = "fixed",
        probe_axial_k: float = 0.0,
        n_radial: int = 48,
        n_axial_heater: int = 16,
        n_axial_beyond: int = 24,
        layers: Sequence[tuple[float, float, float]] = (),
    ) -> None:
        self.k = _positive("k", k)
        self.rho_c = _positive("rho_c", rho_c)
        self.a = _positive("probe_radius_m", probe_radius_m)
        self.L = _positive("heater_length_m", heater_length_m)
        if not (probe_rho_c >= 0.0 and math.isfinite(probe_rho_c)):
            raise ModelConfigError(f"probe_rho_c must be >= 0 J/(m^3 K), got {probe_rho_c!r}")
        if contact_conductance is not None:
            _positive("contact_conductance", contact_conductance)
        if probe_axial_k < 0.0:
            raise ModelConfigError(f"probe_axial_k must be >= 0 W/(m K), got {probe_axial_k!r}")
        self.boundary = _check_boundary(boundary)
        R = DEFAULT_OUTER_RADIUS_M if outer_radius_m is None else float(outer_radius_m)
        Z = 0.5 * self.L + DEFAULT_OUTER_RADIUS_M
        if outer_half_height_m is not None:
            Z = float(outer_half_height_m)
        if not 1.01 * self.a < R:
            raise ModelConfigError(f"outer_radius_m ({R}) must exceed the probe radius ({self.a}) by > 1 %")
        if not Z > 0.5 * self.L:
            raise ModelConfigError(
                f"outer_half_height_m ({Z}) must exceed half the heater length ({0.5 * self.L}); "
                "a heater reaching the sample end is not modelled"
            )
        if min(n_radial, n_axial_heater, n_axial_beyond) < 4:
            raise ModelConfigError("n_radial, n_axial_heater and n_axial_beyond must each be >= 4")
        self.outer_radius_m, self.outer_half_height_m = R, Z
        self._H = None if contact_conductance is None else float(contact_conductance)

        # ---- grid ----
        rf = _radial_faces(self.a, R, n_radial)
        self._rf = rf
        rc = np.sqrt(rf[:-1] * rf[1:])
        self._rc = rc
        hz = 0.5 * self.L
        zf_heat = np.linspace(0.0, hz, n_axial_heater + 1)
        dz0 = hz / n_axial_heater
        zf_out = _stretched_faces(hz, Z, n_axial_beyond, first=min(dz0, (Z - hz) / n_axial_beyond))
        zf = np.concatenate((zf_heat, zf_out[1:]))
        self._zf = zf
        zc = 0.5 * (zf[:-1] + zf[1:])
        self._zc = zc
        dz = np.diff(zf)
        nz, nr = len(zc), n_radial + 1  # column 0 is r < a
        self._nz, self._nr = nz, nr
        self._n_heat = n_axial_heater
        heated = np.arange(nz) < n_axial_heater

        # medium properties per axial slice
        k_z = np.full(nz, self.k)
        c_z = np.full(nz, self.rho_c)
        for z_from, lk, lc in sorted(layers):
            sel = zc >= float(z_from)
            k_z[sel] = _positive("layer k", lk)
            c_z[sel] = _positive("layer rho_c", lc)

        # ---- capacities ----
        cap = np.empty((nz, nr))
        area_core = math.pi * self.a**2
        ring_area = math.pi * (rf[1:] ** 2 - rf[:-1] ** 2)
        core_c = np.where(heated, float(probe_rho_c), c_z)
        cap[:, 0] = area_core * core_c * dz
        cap[:, 1:] = ring_area[None, :] * c_z[:, None] * dz[:, None]
        cap[:, 0] = np.maximum(cap[:, 0], 1e-9 * cap[:, 1])
        self._cap = cap.ravel()

        # ---- conductances ----
        idx = np.arange(nz * nr).reshape(nz, nr)
        rows: list[np.ndarray] = []
        cols: list[np.ndarray] = []
        vals: list[np.ndarray] = []

        def link(i1: np.ndarray, i2: np.ndarray, g: np.ndarray) -> None:
            rows.extend((i1, i2, i1, i2))
            cols.extend((i1, i2, i2, i1))
            vals.extend((-g, -g, g, g))

        # radial core -> first ring links: see set_contact_conductance
        self._core_i, self._ring_i = idx[:, 0], idx[:, 1]
        self._half_shell = np.log(rc[0] / self.a) / (2.0 * math.pi * k_z)
        self._core_res_medium = 1.0 / (8.0 * math.pi * k_z)
        self._dz, self._heated = dz, heated
        # radial, ring -> ring
        g_rr = 2.0 * math.pi * k_z[:, None] * dz[:, None] / np.log(rc[1:] / rc[:-1])[None, :]
        link(idx[:, 1:-1].ravel(), idx[:, 2:].ravel(), g_rr.ravel())
        # axial, slice -> slice (harmonic mean across layer interfaces)
        k_core = np.where(heated, float(probe_axial_k), k_z)
        areas = np.concatenate(([area_core], ring_area))
        kk = np.column_stack((k_core, np.repeat(k_z[:, None], nr - 1, axis=1)))
        res = 0.5 * dz[:, None] / np.maximum(kk, 1e-300)
        g_ax = areas[None, :] / (res[:-1] + res[1:])
        g_ax[kk[:-1] == 0.0] = 0.0
        g_ax[kk[1:] == 0.0] = 0.0
        link(idx[:-1].ravel(), idx[1:].ravel(), g_ax.ravel())
        A = sp.coo_matrix(
            (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(nz * nr, nz * nr)
        ).tocsc()
        # boundaries held at zero rise
        sink = np.zeros((nz, nr))
        if self.boundary == "fixed":
            sink[:, -1] += 2.0 * math.pi * k_z * dz / math.log(R / rc[-1])
            sink[-1, :] += areas * kk[-1] / (0.5 * dz[-1])
        self._A_rest = (A - sp.diags(sink.ravel())).tocsc()
        self._factors: dict[float, tuple] = {}
        self.set_contact_conductance(self._H)
        self._source = np.zeros(nz * nr)
        self._source[idx[heated, 0]] = dz[heated]  # q per metre × slice length, half heater modelled
        self._heated_idx = idx[heated, 0]
        self._heated_dz = dz[heated]
        self._u = np.zeros(nz * nr)
        self._t = 0.0
        self._read_weights: dict[tuple[float, float], np.ndarray] = {}

    def set_contact_conductance(self, contact_conductance: float | None) -> None:
        """Change H (W/(m²·K)) along the heated length; None means perfect contact. Keeps the temperatures."""
        if contact_conductance is not None:
            _positive("contact_conductance", contact_conductance)
        self._H = None if contact_conductance is None else float(contact_conductance)
        contact_res = 0.0 if self._H is None else 1.0 / (2.0 * math.pi * self.a * self._H)
        # core -> first ring: contact (heated part) or the core's own mean-to-surface resistance 1/(8πk)
        # (medium beyond the tip), in series with the inner half of the first shell
        core_res = np.where(self._heated, contact_res, self._core_res_medium)
        g = self._dz / (self._half_shell + core_res)
        # conductance from the core node to the medium surface, for reading temperatures just outside r = a
        self._g_core_surface = np.where(core_res > 0.0, self._dz / np.maximum(core_res, 1e-300), 1e300)
        i1, i2 = self._core_i, self._ring_i
        n = self._A_rest.shape[0]
        rows, cols = np.concatenate((i1, i2, i1, i2)), np.concatenate((i1, i2, i2, i1))
        links = sp.coo_matrix((np.concatenate((-g, -g, g, g)), (rows, cols)), shape=(n, n))
        self._A = (self._A_rest + links).tocsc()
        self._factors.clear()
        self._read_weights = {}  # the surface reading depends on the contact

    @property
    def contact_conductance(self) -> float | None:
        return self._H

    def _factor(self, dt: float) -> tuple:
        fac = self._factors.get(dt)
        if fac is None:
            if len(self._factors) > 4:
                self._factors.clear()
            C = sp.diags(self._cap)
            fac = self._factors[dt] = (
                splu((C - (_C1 * dt) * self._A).tocsc()),
                splu((C - (_C2 * dt) * self._A).tocsc()),
            )
        return fac

    def step(self, q_W_per_m: float, dt_s: float) -> None:
        """Advance dt_s seconds with q_W_per_m along the heated length, constant over the step."""
        dt = float(dt_s)
        if not (dt > 0.0 and math.isfinite(dt)):
            raise ModelConfigError(f"dt_s must be a finite number > 0, got {dt_s!r}")
        f1, f2 = self._factor(dt)
        b = float(q_W_per_m) * self._source
        u0 = self._u
        cu0 = self._cap * u0
        ustar = f1.solve(cu0 + (_C1 * dt) * (self._A @ u0) + (_G * dt) * b)
        self._u = f2.solve(_W1 * self._cap * ustar - _W0 * cu0 + (_C2 * dt) * b)
        self._t += dt

    @property
    def t_s(self) -> float:
        return self._t

    def probe_rise_K(self) -> float:
        """Length-averaged rise of the heated probe (what a heater's resistance responds to)."""
        return float(np.dot(self._u[self._heated_idx], self._heated_dz) / (0.5 * self.L))

    def rise_at_K(self, r_m: float, z_m: float = 0.0) -> float:
        """Rise at radius r and axial distance z from the heater's mid-length (bilinear in ln r and z).

        The reading is linear in the node temperatures, so its weights are worked out once per (r, z) and kept
        (a simulated sensor is read every physics step).
        """
        key = (float(r_m), abs(float(z_m)))
        w = self._read_weights.get(key)
        if w is None:
            w = self._read_weights[key] = self._weights(*key)
        return float(w @ self._u)

    def _weights(self, r: float, z: float) -> np.ndarray:
        """Weights on the node temperatures of the bilinear reading at (r, z)."""
        if r > self.outer_radius_m or z > self.outer_half_height_m:
            raise ModelConfigError(
                f"(r, z) = ({r}, {z}) lies outside the modelled medium "
                f"(r <= {self.outer_radius_m} m, |z| <= {self.outer_half_height_m} m)"
            )
        nz, nr = self._nz, self._nr
        col = np.zeros((nz, nz * nr))  # row i: the weights of the value at radius r in slice i
        rows = np.arange(nz)
        idx = np.arange(nz * nr).reshape(nz, nr)
        if r <= self.a:
            col[rows, idx[:, 0]] = 1.0
        else:
            # columns: medium surface at r = a+, the ring nodes, the outer boundary
            g_in = self._dz / self._half_shell
            g_core = self._g_core_surface
            xs = np.concatenate(([math.log(self.a)], np.log(self._rc), [math.log(self.outer_radius_m)]))
            lr = math.log(r)
            j = int(np.clip(np.searchsorted(xs, lr) - 1, 0, len(xs) - 2))
            frac = min(max((lr - xs[j]) / (xs[j + 1] - xs[j]), 0.0), 1.0)
            for jj, wt in ((j, 1.0 - frac), (j + 1, frac)):
                if wt == 0.0:
                    continue
                if jj == 0:  # the surface: a conductance-weighted mean of the core and the first ring
                    col[rows, idx[:, 0]] += wt * g_core / (g_core + g_in)
                    col[rows, idx[:, 1]] += wt * g_in / (g_core + g_in)
                elif jj <= nr - 1:
                    col[rows, idx[:, jj]] += wt
                elif self.boundary != "fixed":  # the outer edge: zero rise, or the last ring when insulated
                    col[rows, idx[:, -1]] += wt
        zs = np.concatenate(([0.0], self._zc))
        vals = np.vstack((col[:1], col))
        k = int(np.clip(np.searchsorted(zs, z) - 1, 0, len(zs) - 2))
        fz = min(max((z - zs[k]) / (zs[k + 1] - zs[k]), 0.0), 1.0)
        return (1.0 - fz) * vals[k] + fz * vals[k + 1]

    def energy_J_per_m(self) -> float:
        """Stored heat per metre of heater (the whole symmetric domain / L)."""
        return float(np.dot(self._cap, self._u)) / (0.5 * self.L)

    def reset(self, rise_K: float = 0.0) -> None:
        """Back to t = 0 with probe and medium at a uniform rise (0: the start of a heating run)."""
        self._u[:] = float(rise_K)
        self._t = 0.0

    def shift_rise(self, delta_K: float) -> None:
        """Add delta_K everywhere: how the field looks from a new reference when the surroundings step."""
        self._u += float(delta_K)
