"""Dry-out curves: thermal resistivity against moisture for one material, fitted with published soil models.

All models share Johansen's normalised form λ = λ_dry + Ke·(λ_sat − λ_dry), Ke the Kersten number, a function of
the degree of saturation Sr (Johansen 1975, "Thermal conductivity of soils", PhD thesis, Trondheim; CRREL Draft
Translation 637, 1977; as summarised by Farouki 1981, CRREL Monograph 81-1):

- λ_sat = λ_s^(1−n)·λ_w^n (geometric mean), λ_s = λ_q^q·λ_o^(1−q), λ_q = 7.7, λ_o = 2.0 (q > 0.2) or 3.0.
- Johansen (1975): Ke = 0.7·log10 Sr + 1 (coarse, Sr > 0.05), log10 Sr + 1 (fine, Sr > 0.1);
  λ_dry = (0.135·ρ_d + 64.7)/(2700 − 0.947·ρ_d) for natural soils, 0.039·n^(−2.2) for crushed rock.
- Côté & Konrad (2005), Can. Geotech. J. 42:443–458: Ke = κ·Sr/[1 + (κ−1)·Sr]; λ_dry = χ·10^(−η·n).
- Lu, Ren, Gong & Horton (2007), SSSAJ 71:8–14: Ke = exp{α·[1 − Sr^(α−1.33)]}; λ_dry = −0.56·n + 0.51; λ_w = 0.594.
- Kersten (1949), Univ. Minnesota Eng. Exp. Station Bull. 28, SI form of Farouki (1981), for comparison.

The model parameters are quoted from memory of those papers (widely reproduced, not re-read from the originals):
treat them as likely, not normative. Fitting frees λ_s (hence λ_sat), the Kersten shape (κ or α) and a scale on
λ_dry, so the measured curve, not the textbook constants, decides the result.

Critical moisture content, IEEE Std 442-2017 Annex F: the moisture at which the tangents to the "moist" and "dry"
straight segments of the resistivity–moisture curve intersect.

Design values taken from these curves feed cable and pipeline ratings; that decision belongs to a licensed
engineer working to the local codes (see DESIGN_CAUTION).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

RHO_WATER = 1000.0           # kg/m³
LAMBDA_WATER = 0.6           # W/(m·K), Johansen's λ_w (0.57–0.60 in the literature)
LAMBDA_WATER_LU = 0.594      # Lu et al. (2007)
LAMBDA_QUARTZ = 7.7          # Johansen (1975)
RHO_SOLIDS_DEFAULT = 2650.0  # kg/m³, quartz-rich mineral soil (common value, no single source)

# Côté & Konrad (2005) Table: κ for unfrozen soils, and (χ, η) for λ_dry. From memory of the paper.
CK_KAPPA_UNFROZEN = {"gravel-coarse-sand": 4.60, "medium-fine-sand": 3.55, "silt-clay": 1.90, "organic": 0.60}
CK_DRY = {"crushed-rock": (1.70, 1.80), "natural-mineral": (0.75, 1.20), "organic": (0.30, 0.87)}
LU_ALPHA = {"coarse": 0.96, "fine": 0.27}

MODELS = ("johansen", "cote-konrad", "lu")

DESIGN_CAUTION = (
    "Values read from a dry-out curve are measurements, not a design. Thermal design of cables or pipelines "
    "(ratings, backfill selection, critical moisture) is a decision for a licensed engineer working to the "
    "applicable local codes and standards.")


class DryoutError(ValueError):
    """The points cannot support the requested fit; the message says what is missing."""


# --- soil state --------------------------------------------------------------------------------------------
def porosity(rho_d: float | np.ndarray, rho_s: float = RHO_SOLIDS_DEFAULT) -> np.ndarray:
    """n = 1 − ρ_d/ρ_s."""
    return 1.0 - np.asarray(rho_d, dtype=float) / rho_s


def saturation(w: float | np.ndarray, rho_d: float | np.ndarray, rho_s: float = RHO_SOLIDS_DEFAULT) -> np.ndarray:
    """Degree of saturation from gravimetric moisture w (kg water per kg dry solids): Sr = w·ρ_d/(ρ_w·n)."""
    return np.asarray(w, dtype=float) * np.asarray(rho_d, dtype=float) / (RHO_WATER * porosity(rho_d, rho_s))


def moisture_from_saturation(sr: float | np.ndarray, rho_d: float | np.ndarray,
                             rho_s: float = RHO_SOLIDS_DEFAULT) -> np.ndarray:
    """Gravimetric moisture w (fraction) for a degree of saturation."""
    return np.asarray(sr, dtype=float) * RHO_WATER * porosity(rho_d, rho_s) / np.asarray(rho_d, dtype=float)


# --- model pieces ------------------------------------------------------------------------------------------
def lambda_solids(quartz: float, lambda_other: float | None = None) -> float:
    """Johansen: λ_s = λ_q^q·λ_o^(1−q), λ_o = 2.0 if q > 0.2 else 3.0."""
    if not 0.0 <= quartz <= 1.0:
        raise DryoutError(f"quartz fraction must be between 0 and 1, got {quartz}")
    lo = lambda_other if lambda_other is not None else (2.0 if quartz > 0.2 else 3.0)
    return LAMBDA_QUARTZ**quartz * lo ** (1.0 - quartz)


def lambda_saturated(lambda_s: float, n: float | np.ndarray, lambda_w: float = LAMBDA_WATER) -> np.ndarray:
    n = np.asarray(n, dtype=float)
    return lambda_s ** (1.0 - n) * lambda_w**n


def lambda_dry_johansen(rho_d: float | np.ndarray) -> np.ndarray:
    """Natural soils, ρ_d in kg/m³ (±20 % per Johansen)."""
    rho_d = np.asarray(rho_d, dtype=float)
    return (0.135 * rho_d + 64.7) / (2700.0 - 0.947 * rho_d)


def lambda_dry_johansen_crushed(n: float | np.ndarray) -> np.ndarray:
    return 0.039 * np.asarray(n, dtype=float) ** -2.2


def lambda_dry_cote_konrad(n: float | np.ndarray, material: str = "natural-mineral") -> np.ndarray:
    chi, eta = CK_DRY[material]
    return chi * 10.0 ** (-eta * np.asarray(n, dtype=float))


def lambda_dry_lu(n: float | np.ndarray) -> np.ndarray:
    return -0.56 * np.asarray(n, dtype=float) + 0.51


def kersten_johansen(sr: float | np.ndarray, coarse: bool = True) -> np.ndarray:
    """Johansen's Ke; clipped at 0 below the stated validity (Sr ≤ 0.05 coarse, 0.1 fine), where the log fails."""
    sr = np.clip(np.asarray(sr, dtype=float), 1e-12, 1.0)
    ke = (0.7 * np.log10(sr) + 1.0) if coarse else (np.log10(sr) + 1.0)
    return np.clip(ke, 0.0, 1.0)


def kersten_cote_konrad(sr: float | np.ndarray, kappa: float) -> np.ndarray:
    sr = np.clip(np.asarray(sr, dtype=float), 0.0, 1.0)
    return kappa * sr / (1.0 + (kappa - 1.0) * sr)


def kersten_lu(sr: float | np.ndarray, alpha: float) -> np.ndarray:
    sr = np.clip(np.asarray(sr, dtype=float), 1e-12, 1.0)
    return np.exp(alpha * (1.0 - sr ** (alpha - 1.33)))


def kersten_1949(w_pct: float | np.ndarray, rho_d_g_per_cm3: float | np.ndarray, sandy: bool = True) -> np.ndarray:
    """Kersten (1949) unfrozen, SI form (Farouki 1981); w in %, ρ_d in g/cm³. Sandy valid w ≥ 1 %, silt–clay ≥ 7 %."""
    w = np.asarray(w_pct, dtype=float)
    a, b = (0.7, 0.4) if sandy else (0.9, -0.2)
    return 0.1442 * (a * np.log10(w) + b) * 10.0 ** (0.6243 * np.asarray(rho_d_g_per_cm3, dtype=float))


# --- the three models with their free parameters -----------------------------------------------------------
@dataclass(frozen=True)
class Material:
    """What is known about the material before fitting (the fit can free λ_s, the shape and the dry scale)."""

    rho_s: float = RHO_SOLIDS_DEFAULT
    quartz: float = 0.6
    coarse: bool = True
    ck_soil: str = "medium-fine-sand"
    ck_dry: str = "natural-mineral"


@dataclass(frozen=True)
class ModelParams:
    lambda_s: float
    shape: float | None      # κ (Côté–Konrad) or α (Lu); None for Johansen
    dry_scale: float = 1.0


def default_params(model: str, mat: Material) -> ModelParams:
    ls = lambda_solids(mat.quartz)
    if model == "johansen":
        return ModelParams(ls, None)
    if model == "cote-konrad":
        return ModelParams(ls, CK_KAPPA_UNFROZEN[mat.ck_soil])
    if model == "lu":
        return ModelParams(ls, LU_ALPHA["coarse" if mat.coarse else "fine"])
    raise DryoutError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")


def conductivity(model: str, w: float | np.ndarray, rho_d: float | np.ndarray, mat: Material,
                 p: ModelParams | None = None) -> np.ndarray:
    """λ (W/(m·K)) at gravimetric moisture w (fraction) and dry density ρ_d (kg/m³)."""
    p = p or default_params(model, mat)
    n = porosity(rho_d, mat.rho_s)
    sr = saturation(w, rho_d, mat.rho_s)
    if model == "johansen":
        dry = lambda_dry_johansen(rho_d) if mat.ck_dry != "crushed-rock" else lambda_dry_johansen_crushed(n)
        sat = lambda_saturated(p.lambda_s, n)
        ke = kersten_johansen(sr, mat.coarse)
    elif model == "cote-konrad":
        dry = lambda_dry_cote_konrad(n, mat.ck_dry)
        sat = lambda_saturated(p.lambda_s, n)
        ke = kersten_cote_konrad(sr, float(p.shape))  # type: ignore[arg-type]
    elif model == "lu":
        dry = lambda_dry_lu(n)
        sat = lambda_saturated(p.lambda_s, n, LAMBDA_WATER_LU)
        ke = kersten_lu(sr, float(p.shape))  # type: ignore[arg-type]
    else:
        raise DryoutError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")
    dry = dry * p.dry_scale
    return dry + ke * (sat - dry)


# --- fitting -----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DryoutPoint:
    """One measurement: gravimetric moisture in %, dry density kg/m³, conductivity and its standard uncertainty."""

    moisture_pct: float
    dry_density_kg_per_m3: float
    k_W_per_mK: float
    k_u_W_per_mK: float | None = None
    run_id: int | None = None

    @property
    def resistivity_mK_per_W(self) -> float:
        return 1.0 / self.k_W_per_mK


@dataclass(frozen=True)
class DryoutFit:
    model: str
    material: Material
    params: ModelParams
    params_u: dict[str, float]
    free: tuple[str, ...]
    rms_rel: float
    n_points: int
    notes: tuple[str, ...] = field(default_factory=tuple)

    def k(self, moisture_pct: float | np.ndarray, dry_density_kg_per_m3: float | np.ndarray) -> np.ndarray:
        return conductivity(self.model, np.asarray(moisture_pct, dtype=float) / 100.0, dry_density_kg_per_m3,
                            self.material, self.params)

    def resistivity_mK_per_W(self, moisture_pct: float | np.ndarray,
                             dry_density_kg_per_m3: float | np.ndarray) -> np.ndarray:
        return 1.0 / self.k(moisture_pct, dry_density_kg_per_m3)

    @property
    def lambda_sat_at(self) -> float:
        return self.params.lambda_s

    def to_dict(self) -> dict[str, object]:
        return {"model": self.model, "lambda_s_W_per_mK": self.params.lambda_s, "shape": self.params.shape,
                "dry_scale": self.params.dry_scale, "params_u": self.params_u, "free": list(self.free),
                "rms_rel": self.rms_rel, "n_points": self.n_points, "notes": list(self.notes),
                "material": self.material.__dict__}


def fit_dryout(points: list[DryoutPoint], model: str, mat: Material | None = None) -> DryoutFit:
    """Least squares on ln λ (relative errors). Frees λ_s always; the Kersten shape from 3 points; dry scale from 4
    points with at least one below Sr = 0.25 (without dry points it is not identifiable)."""
    mat = mat or Material()
    if model not in MODELS:
        raise DryoutError(f"unknown model {model!r}; choose one of {', '.join(MODELS)}")
    pts = [p for p in points if p.k_W_per_mK > 0 and math.isfinite(p.k_W_per_mK)]
    if len(pts) < 2:
        raise DryoutError(f"{len(pts)} usable point(s): a dry-out fit needs at least 2 (several moisture contents)")
    w = np.array([p.moisture_pct for p in pts]) / 100.0
    rd = np.array([p.dry_density_kg_per_m3 for p in pts], dtype=float)
    if np.any(~np.isfinite(rd)) or np.any(rd <= 0) or np.any(rd >= mat.rho_s):
        raise DryoutError("every point needs a dry density between 0 and the particle density "
                          f"({mat.rho_s:g} kg/m³)")
    if np.any(w < 0):
        raise DryoutError("moisture contents must be ≥ 0 %")
    k = np.array([p.k_W_per_mK for p in pts])
    rel_u = np.array([(p.k_u_W_per_mK or 0.02 * p.k_W_per_mK) / p.k_W_per_mK for p in pts])
    rel_u = np.maximum(rel_u, 1e-3)
    p0 = default_params(model, mat)
    sr = saturation(w, rd, mat.rho_s)
    free = ["lambda_s"]
    if model != "johansen" and len(pts) >= 3:
        free.append("shape")
    if len(pts) >= 4 and np.any(sr < 0.25):
        free.append("dry_scale")
    notes = []
    if np.any(sr > 1.02):
        notes.append("some points are above full saturation for the stated densities: check ρ_d and ρ_s")

    def unpack(x: np.ndarray) -> ModelParams:
        d = dict(zip(free, np.exp(x), strict=True))
        return ModelParams(d.get("lambda_s", p0.lambda_s), d.get("shape", p0.shape), d.get("dry_scale", 1.0))

    def resid(x: np.ndarray) -> np.ndarray:
        model_k = conductivity(model, w, rd, mat, unpack(x))
        return (np.log(np.maximum(model_k, 1e-9)) - np.log(k)) / rel_u

    x0 = np.log([p0.lambda_s if f == "lambda_s" else (p0.shape if f == "shape" else 1.0) for f in free])
    sol = least_squares(resid, x0, method="trf")
    params = unpack(sol.x)
    dof = len(pts) - len(free)
    chi2 = float(sol.fun @ sol.fun)
    scale = chi2 / dof if dof > 0 else 1.0
    u: dict[str, float] = {}
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac) * max(scale, 1.0)
        for i, f in enumerate(free):
            val = math.exp(sol.x[i])
            u[f] = val * math.sqrt(max(cov[i, i], 0.0))  # ln-parameter → absolute
    except np.linalg.LinAlgError:
        notes.append("parameters not separately identifiable from these points")
    model_k = conductivity(model, w, rd, mat, params)
    rms = float(np.sqrt(np.mean((model_k / k - 1.0) ** 2)))
    return DryoutFit(model, mat, params, u, tuple(free), rms, len(pts), tuple(notes))


# --- IEEE 442-2017 Annex F critical moisture ----------------------------------------------------------------
@dataclass(frozen=True)
class Segment:
    slope: float
    intercept: float
    moisture_range_pct: tuple[float, float]
    n: int

    def at(self, w_pct: float | np.ndarray) -> np.ndarray:
        return self.slope * np.asarray(w_pct, dtype=float) + self.intercept


@dataclass(frozen=True)
class CriticalMoisture:
    """Intersection of the tangents to the dry and moist straight segments of ρ_th(w) (IEEE 442-2017 Annex F)."""

    moisture_pct: float
    resistivity_mK_per_W: float
    dry: Segment
    moist: Segment
    flags: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, object]:
        return {"moisture_pct": self.moisture_pct, "resistivity_mK_per_W": self.resistivity_mK_per_W,
                "dry_segment": self.dry.__dict__, "moist_segment": self.moist.__dict__, "flags": list(self.flags)}


def _line(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    a, b = np.polyfit(x, y, 1)
    sse = float(np.sum((y - (a * x + b)) ** 2))
    return float(a), float(b), sse


def critical_moisture(moisture_pct: np.ndarray, resistivity: np.ndarray,
                      split_pct: float | None = None) -> CriticalMoisture:
    """Split the points into a dry and a moist straight segment (at ``split_pct``, or where two lines fit best),
    fit each, and intersect the lines. Each segment needs at least 2 points."""
    w = np.asarray(moisture_pct, dtype=float)
    r = np.asarray(resistivity, dtype=float)
    order = np.argsort(w)
    w, r = w[order], r[order]
    if w.size < 4:
        raise DryoutError(f"{w.size} points: the tangent construction needs at least 4 "
                          "(two on the dry segment, two on the moist one)")
    if split_pct is not None:
        m = int(np.searchsorted(w, split_pct, side="right"))
        if m < 2 or w.size - m < 2:
            raise DryoutError(f"split at {split_pct} % leaves fewer than 2 points on one side")
        splits = [m]
    else:
        splits = list(range(2, w.size - 1))
    best: tuple[float, int, tuple[float, float, float], tuple[float, float, float]] | None = None
    for m in splits:
        if np.ptp(w[:m]) == 0 or np.ptp(w[m:]) == 0:
            continue
        d = _line(w[:m], r[:m])
        mo = _line(w[m:], r[m:])
        total = d[2] + mo[2]
        if best is None or total < best[0]:
            best = (total, m, d, mo)
    if best is None:
        raise DryoutError("points need at least two distinct moisture contents on each side of the split")
    _, m, d, mo = best
    flags = []
    if d[0] >= mo[0]:
        flags.append("dry_segment_not_steeper")
    if d[0] == mo[0]:
        raise DryoutError("the two segments are parallel: no critical moisture")
    wc = (mo[1] - d[1]) / (d[0] - mo[0])
    if not (w[0] <= wc <= w[-1]):
        flags.append("intersection_outside_data")
    dry = Segment(d[0], d[1], (float(w[0]), float(w[m - 1])), m)
    moist = Segment(mo[0], mo[1], (float(w[m]), float(w[-1])), int(w.size - m))
    return CriticalMoisture(float(wc), float(dry.at(wc)), dry, moist, tuple(flags))


@dataclass(frozen=True)
class DesignValue:
    """Resistivity read off the fitted curve at a chosen critical moisture, with the caution attached."""

    moisture_pct: float
    dry_density_kg_per_m3: float
    resistivity_mK_per_W: float
    model: str
    caution: str = DESIGN_CAUTION


def design_value(fit: DryoutFit, moisture_pct: float, dry_density_kg_per_m3: float) -> DesignValue:
    rho = float(fit.resistivity_mK_per_W(moisture_pct, dry_density_kg_per_m3))
    return DesignValue(moisture_pct, dry_density_kg_per_m3, rho, fit.model)
