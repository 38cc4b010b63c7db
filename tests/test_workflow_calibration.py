"""Calibration in reference media: water from the IAPWS 2011 formulation (iapws package), glycerol handbook value,
probe factor, acceptance limits and expiry."""

from __future__ import annotations

import datetime as dt

import pytest

from linerig.daemon.workflows.calibration import (
    MAX_REPEAT_CV,
    WATER_K_U_REL,
    CalibrationError,
    Measurement,
    calibration_status,
    evaluate_calibration,
    reference_value,
    water_conductivity,
)

NOW = dt.datetime(2025, 3, 1, 12, 0, tzinfo=dt.UTC)


def test_water_conductivity_from_iapws_2011() -> None:
    # IAPWS 2011 release, Table 4 check value: λ(298.15 K, ρ = 998 kg/m³) = 607.712868 mW/(m·K) — the package must
    # reproduce the release before we lean on it.
    from iapws._iapws import _ThCond
    assert _ThCond(998.0, 298.15) == pytest.approx(0.607712868, abs=1e-9)
    # liquid water at 0.1 MPa: 0.6065 W/(m·K) at 25 °C (IAPWS 2011 with IAPWS-95 density), 0.598 at 20 °C
    assert water_conductivity(25.0) == pytest.approx(0.6065, abs=1e-4)
    assert water_conductivity(20.0) == pytest.approx(0.598, abs=1e-3)


def test_reference_values_name_their_source() -> None:
    w = reference_value("water", 25.0)
    assert "IAPWS" in w.source and w.k_u_W_per_mK / w.k_W_per_mK == pytest.approx(WATER_K_U_REL)
    agar = reference_value("agar-water", 25.0)
    assert agar.k_W_per_mK == w.k_W_per_mK and agar.k_u_W_per_mK > w.k_u_W_per_mK
    g = reference_value("glycerol", 22.0)
    assert "from memory" in g.source
    # published glycerol values near room temperature (the project's check-value notes, §3.5): 0.285 to 0.292
    # W/(m·K), and Berger Bioucas, Koller & Fröba (2024, Int. J. Thermophys. 45) measured it with U(k = 2) = 2.3 %:
    # the reference's expanded uncertainty must hold the whole published span
    for published in (0.285, 0.292):
        assert abs(published - g.k_W_per_mK) <= 2 * g.k_u_W_per_mK
    assert g.k_u_W_per_mK / g.k_W_per_mK >= 0.023 / 2


def test_reference_refuses_missing_or_out_of_range_temperature() -> None:
    with pytest.raises(CalibrationError, match="bath temperature"):
        reference_value("water", None)
    with pytest.raises(CalibrationError, match="outside"):
        reference_value("water", 80.0)
    with pytest.raises(CalibrationError, match="unknown reference"):
        reference_value("honey", 20.0)


def test_factor_and_uncertainty_from_three_runs() -> None:
    ref = reference_value("agar-water", 20.0)
    runs = [Measurement(0.620, 0.004, 1), Measurement(0.626, 0.004, 2), Measurement(0.617, 0.004, 3)]
    out = evaluate_calibration("N-17", ref, runs, now=NOW)
    k_m = (0.620 + 0.626 + 0.617) / 3
    assert out.factor == pytest.approx(ref.k_W_per_mK / k_m)
    assert out.accepted and out.reasons == ()
    assert out.repeat_cv is not None and out.repeat_cv < MAX_REPEAT_CV
    rel = (out.factor_u / out.factor) ** 2
    assert rel == pytest.approx((ref.k_u_W_per_mK / ref.k_W_per_mK) ** 2 + (out.measured_k_u_W_per_mK / k_m) ** 2)
    assert out.expires_utc.startswith("2026-03-01")


def test_rejections_and_warnings() -> None:
    ref = reference_value("water", 20.0)
    far = evaluate_calibration("N-17", ref, [Measurement(0.50, 0.003, 4)], now=NOW)
    assert not far.accepted and "outside" in far.reasons[0]
    assert any("single run" in w for w in far.warnings)
    flagged = evaluate_calibration("N-17", ref, [Measurement(0.60, 0.003, 5, ("residual_trend",))], now=NOW)
    assert not flagged.accepted and "residual_trend" in flagged.reasons[0]
    scatter = evaluate_calibration("N-17", ref, [Measurement(0.57, 0.003), Measurement(0.63, 0.003)], now=NOW)
    assert not scatter.accepted and any("scatter" in r for r in scatter.reasons)
    moved = evaluate_calibration("N-17", ref, [Measurement(0.60, 0.003)], previous_factor=1.04, now=NOW)
    assert moved.accepted and any("moved" in w for w in moved.warnings)


def test_status_reminds_before_expiry_and_after() -> None:
    hist = [
        {"id": 1, "created_utc": "2024-01-10T09:00:00+00:00", "expires_utc": "2025-01-10T09:00:00+00:00",
         "factor": 1.02, "factor_u": 0.01, "accepted": 1},
        {"id": 2, "created_utc": "2024-03-20T09:00:00+00:00", "expires_utc": "2025-03-20T09:00:00+00:00",
         "factor": 1.03, "factor_u": 0.01, "accepted": 1},
        {"id": 3, "created_utc": "2024-04-01T09:00:00+00:00", "expires_utc": "2025-04-01T09:00:00+00:00",
         "factor": 1.30, "factor_u": 0.05, "accepted": 0},
    ]
    st = calibration_status(hist, NOW)
    assert st.state == "due-soon" and st.calibration_id == 2 and st.factor == 1.03
    assert calibration_status(hist, NOW + dt.timedelta(days=30)).state == "expired"
    assert calibration_status(hist, NOW - dt.timedelta(days=60)).state == "valid"
    assert calibration_status([], NOW).state == "none"
