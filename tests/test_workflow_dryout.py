"""Dry-out models against the worked example computed from Johansen (1975), Côté & Konrad (2005), Lu et al. (2007)
and Kersten (1949). The model parameters are from memory of those papers (likely, not re-read), so these are
regression checks of the equations, not physical truth."""

from __future__ import annotations

import numpy as np
import pytest

from linerig.daemon.workflows.dryout import (
    DESIGN_CAUTION,
    DryoutError,
    DryoutPoint,
    Material,
    ModelParams,
    conductivity,
    critical_moisture,
    design_value,
    fit_dryout,
    kersten_1949,
    lambda_dry_cote_konrad,
    lambda_dry_johansen,
    lambda_dry_johansen_crushed,
    lambda_dry_lu,
    lambda_saturated,
    lambda_solids,
    moisture_from_saturation,
    porosity,
)

# Worked example: ρ_s = 2650 kg/m³, n = 0.40 (ρ_d = 1590), quartz q = 0.8, λ_w = 0.6.
MAT = Material(rho_s=2650.0, quartz=0.8, coarse=True, ck_soil="gravel-coarse-sand", ck_dry="natural-mineral")
RHO_D = 1590.0
# Sr, w %, Johansen coarse, C–K κ = 4.6, C–K κ = 3.55, Lu α = 0.96, Kersten sand, ρ_th Johansen °C·cm/W
TABLE = [
    (0.05, 1.26, 0.4237, 0.6599, 0.5808, 0.5802, 0.6660, 236.0),
    (0.10, 2.52, 0.8717, 0.9626, 0.8456, 0.8540, 0.9647, 114.7),
    (0.20, 5.03, 1.3197, 1.3778, 1.2412, 1.2311, 1.2635, 75.8),
    (0.30, 7.55, 1.5818, 1.6493, 1.5225, 1.4905, 1.4382, 63.2),
    (0.50, 12.58, 1.9119, 1.9829, 1.8958, 1.8453, 1.6584, 52.3),
    (0.80, 20.13, 2.2157, 2.2511, 2.2210, 2.1867, 1.8610, 45.1),
    (1.00, 25.16, 2.3599, 2.3599, 2.3599, 2.3505, 1.9572, 42.4),
]


def test_end_members_of_the_worked_example() -> None:
    # Johansen (1975) λ_s, λ_sat and λ_dry; Côté & Konrad (2005) λ_dry; Lu et al. (2007) λ_dry and λ_sat.
    assert porosity(RHO_D, 2650.0) == pytest.approx(0.40)
    ls = lambda_solids(0.8)
    assert ls == pytest.approx(5.8803, abs=1e-4)
    assert lambda_saturated(ls, 0.4) == pytest.approx(2.3599, abs=1e-4)
    assert lambda_dry_johansen(RHO_D) == pytest.approx(0.2339, abs=1e-4)
    assert lambda_dry_cote_konrad(0.4, "natural-mineral") == pytest.approx(0.2483, abs=1e-4)
    assert lambda_dry_lu(0.4) == pytest.approx(0.2860, abs=1e-4)
    assert lambda_saturated(ls, 0.4, 0.594) == pytest.approx(2.3505, abs=1e-4)
    assert lambda_dry_johansen_crushed(0.4) == pytest.approx(0.2928, abs=1e-4)


@pytest.mark.parametrize("row", TABLE, ids=[f"Sr={r[0]}" for r in TABLE])
def test_models_reproduce_worked_example_row(row: tuple[float, ...]) -> None:
    sr, w_pct, joh, ck46, ck355, lu, kers, rho_joh = row
    w = float(moisture_from_saturation(sr, RHO_D, 2650.0))
    assert w * 100 == pytest.approx(w_pct, abs=0.01)
    # Johansen (1975), coarse soil
    k_j = float(conductivity("johansen", w, RHO_D, MAT))
    assert k_j == pytest.approx(joh, abs=2e-4)
    assert 100.0 / k_j == pytest.approx(rho_joh, abs=0.1)
    # Côté & Konrad (2005), κ = 4.60 (gravel and coarse sand) and 3.55 (medium and fine sand)
    assert float(conductivity("cote-konrad", w, RHO_D, MAT)) == pytest.approx(ck46, abs=2e-4)
    assert float(conductivity("cote-konrad", w, RHO_D, MAT, ModelParams(lambda_solids(0.8), 3.55))) == \
        pytest.approx(ck355, abs=2e-4)
    # Lu, Ren, Gong & Horton (2007), α = 0.96 (coarse)
    assert float(conductivity("lu", w, RHO_D, MAT)) == pytest.approx(lu, abs=2e-4)
    # Kersten (1949), sandy soils, SI form of Farouki (1981)
    assert float(kersten_1949(w * 100, RHO_D / 1000)) == pytest.approx(kers, abs=2e-4)


def test_kersten_silt_clay_values() -> None:
    # Kersten (1949) silt–clay via Farouki (1981): computed check values.
    assert float(kersten_1949(10, 1.6, sandy=False)) == pytest.approx(1.0068, abs=2e-4)
    assert float(kersten_1949(20, 1.6, sandy=False)) == pytest.approx(1.3965, abs=2e-4)
    assert float(kersten_1949(20, 1.4, sandy=False)) == pytest.approx(1.0475, abs=2e-4)


def test_fit_recovers_model_parameters_across_two_densities() -> None:
    truth = ModelParams(lambda_s=4.2, shape=2.8, dry_scale=1.15)
    mat = Material(quartz=0.5)
    w = np.array([0.5, 1.5, 3, 5, 8, 12, 16]) / 100
    pts = []
    wiggle = [1.01, 0.99, 1.0, 1.01, 0.99, 1.0, 1.005]  # ±1 % scatter, fixed so the test is deterministic
    for rho_d in (1500.0, 1700.0):
        k = conductivity("cote-konrad", w, rho_d, mat, truth)
        pts += [DryoutPoint(float(wi * 100), rho_d, float(ki * e), 0.01 * float(ki))
                for wi, ki, e in zip(w, k, wiggle, strict=True)]
    fit = fit_dryout(pts, "cote-konrad", mat)
    assert fit.free == ("lambda_s", "shape", "dry_scale")
    assert fit.params.lambda_s == pytest.approx(4.2, rel=0.05)
    assert fit.params.shape == pytest.approx(2.8, rel=0.15)
    assert fit.params.dry_scale == pytest.approx(1.15, rel=0.05)
    assert fit.rms_rel < 0.012
    assert fit.params_u["lambda_s"] > 0


def test_fit_with_two_points_frees_only_solids_conductivity() -> None:
    pts = [DryoutPoint(5.0, 1600.0, 1.3), DryoutPoint(15.0, 1600.0, 2.0)]
    fit = fit_dryout(pts, "johansen")
    assert fit.free == ("lambda_s",)


def test_fit_refuses_missing_density() -> None:
    with pytest.raises(DryoutError, match="dry density"):
        fit_dryout([DryoutPoint(5.0, float("nan"), 1.3), DryoutPoint(15.0, 1600.0, 2.0)], "lu")


def test_critical_moisture_is_the_intersection_of_the_two_tangents() -> None:
    # IEEE 442-2017 Annex F construction on exact straight segments: dry ρ = 3.0 − 0.5·w, moist ρ = 0.8 − 0.02·w;
    # they meet at w = 2.2/0.48 = 4.5833 %.
    w = np.array([0.5, 1.0, 2.0, 3.0, 7.0, 10.0, 14.0, 18.0])
    rho = np.where(w < 4.5, 3.0 - 0.5 * w, 0.8 - 0.02 * w)
    cm = critical_moisture(w, rho)
    assert cm.moisture_pct == pytest.approx(2.2 / 0.48, rel=1e-9)
    assert cm.dry.n == 4 and cm.moist.n == 4
    assert cm.flags == ()


def test_critical_moisture_on_model_curve_lies_in_the_knee() -> None:
    w = np.array([0.3, 0.6, 1.0, 2.0, 4.0, 8.0, 12.0, 16.0, 20.0])
    rho = 1.0 / conductivity("johansen", w / 100, RHO_D, MAT)
    cm = critical_moisture(w, rho)
    assert 1.0 < cm.moisture_pct < 6.0
    assert cm.dry.slope < cm.moist.slope < 0


def test_design_value_carries_the_caution() -> None:
    pts = [DryoutPoint(w, RHO_D, float(conductivity("johansen", w / 100, RHO_D, MAT))) for w in (2, 5, 10, 20)]
    fit = fit_dryout(pts, "johansen", MAT)
    dv = design_value(fit, 5.03, RHO_D)
    assert dv.resistivity_mK_per_W == pytest.approx(1 / 1.3197, rel=2e-3)
    assert "licensed engineer" in dv.caution and dv.caution == DESIGN_CAUTION
