"""Probe factor from reference media, and unit conversions at the edges."""

import math

import numpy as np
import pytest
from iapws import IAPWS95

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction import units
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.calibration import apply_factor, calibrate, probe_factor
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.synthetic import line_source_run
from linerig.daemon.workflows.calibration import reference_value


def _water_k(temp_C: float) -> tuple[float, float]:
    # IAPWS-95 / IAPWS 2011 thermal conductivity (Huber et al. 2012, J. Phys. Chem. Ref. Data 41:033102), 0.1 MPa
    w = IAPWS95(T=273.15 + temp_C, P=0.101325)
    return w.k, w.rho * w.cp * 1e3


def test_iapws_water_value() -> None:
    k, rho_c = _water_k(25.0)
    assert k == pytest.approx(0.60652, abs=5e-5)   # IAPWS 2011 at 25 °C, 0.1 MPa
    assert rho_c == pytest.approx(4.1690e6, rel=1e-3)


def _run(k: float, rho_c: float, power_bias: float) -> RunData:
    # the rig reads power 3 % high: every k comes out 3 % high until calibrated
    t = np.arange(-120.0, 600.5, 1.0)
    dT = line_source_run(k, rho_c, 4.0, 0.635e-3, t)
    q_read = np.where(t >= 0, 4.0 * (1 + power_bias), 0.0)
    return RunData(t, q_read, {"heater": 25.0 + dT + 0.002 * np.random.default_rng(0).standard_normal(t.size)})


def test_factor_from_water_corrects_a_glycerol_run() -> None:
    probe = ProbeProfile(name="lab needle", radius_mm=0.635)
    k_w, rc_w = _water_k(25.0)
    water = reduce_run(_run(k_w, rc_w, 0.03), probe, method="line").sensors["heater"]
    ref_u = reference_value("water", 25.0).k_u_W_per_mK  # the one place the water reference's u is stated
    f, f_u = probe_factor(water, k_w, ref_u)
    assert f == pytest.approx(1 / 1.03, rel=0.005)
    # u(F)/F = √[(u_ref/k_ref)² + (u_meas/k_meas)²] (calibration.py, JCGM 100 §5.1.2 for a quotient)
    assert f_u / f == pytest.approx(math.hypot(ref_u / k_w, water.k_raw_u_W_per_mK / water.k_raw_W_per_mK))
    # glycerol ≈ 0.286 W/(m·K), ρc ≈ 3.06 MJ/(m³·K) near 25 °C: handbook value [from memory, ±2 %]
    gly = reduce_run(_run(0.286, 3.06e6, 0.03), probe, method="line", calibration_factor=f,
                     calibration_factor_u=f_u).sensors["heater"]
    assert gly.k_W_per_mK == pytest.approx(0.286, rel=0.02)
    assert gly.u_budget_rel["calibration"] == pytest.approx(f_u / f)
    assert gly.k_u_W_per_mK > gly.k_W_per_mK * f_u / f


def test_calibration_record_and_apply() -> None:
    cal = calibrate(0.62, 0.6065, 0.009, probe_serial="LN-7", reference="water 25 °C (IAPWS 2011)",
                    measured_k_u=0.003, date="2024-05-01")
    assert cal.factor == pytest.approx(0.6065 / 0.62)
    assert cal.to_dict()["date"] == "2024-05-01"
    k, u = apply_factor(1.0, 0.01, cal.factor, cal.factor_u)
    assert k == pytest.approx(cal.factor)
    assert u > 0.01 * cal.factor
    with pytest.raises(ValueError):
        probe_factor(0.0, 0.6, 0.01)


def test_unit_conversions() -> None:
    # 1 K·m/W = 100 °C·cm/W (IEEE 442; a kelvin equals a degree Celsius in size, 1 m = 100 cm)
    assert units.mK_per_W_to_Ccm_per_W(1.0) == pytest.approx(100.0)
    assert units.resistivity_Ccm_per_W(0.6065) == pytest.approx(164.88, abs=0.01)  # water 25 °C ≈ 164.9 °C·cm/W
    assert units.Ccm_per_W_to_mK_per_W(90.0) == pytest.approx(0.9)
    assert units.m2_per_s_to_mm2_per_s(1.4548e-7) == pytest.approx(0.14548)
    assert units.J_per_m3K_to_MJ_per_m3K(4.169e6) == pytest.approx(4.169)
    # water 25 °C: c = ρc/ρ = 4.169e6/997.05 = 4181 J/(kg·K) (IAPWS-95)
    assert units.specific_heat_J_per_kgK(4.169e6, 997.05) == pytest.approx(4181.3, abs=0.5)
    with pytest.raises(ValueError):
        units.specific_heat_J_per_kgK(1e6, 0.0)
