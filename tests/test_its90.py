"""ITS-90 thermocouple reference functions against NIST Monograph 175 and its own error bands.

Sources:
- [M175] Burns, Scroger, Strouse, Croarkin & Guthrie (1993), NIST Monograph 175, "Temperature-Electromotive
  Force Reference Functions and Tables for the Letter-Designated Thermocouple Types Based on the ITS-90"
  (the same coefficients are served as NIST SRD 60). Table values are quoted to the printed 0.001 mV.
- [M175-inv] the same Monograph's inverse-polynomial tables, which state the error of each inverse fit
  against the reference function (e.g. type K 0..500 °C: -0.05..+0.04 °C).
"""

from __future__ import annotations

import numpy as np
import pytest

from linerig.daemon.rig import its90

# (type, °C, mV as printed in the M175 tables). 100 °C values are well-known table entries (from memory,
# and they agree with the coefficients to the printed digit); the others are further M175 table entries
# (from memory, each consistent with the SRD 60 coefficients to 0.001 mV).
M175_TABLE = [
    ("K", 100.0, 4.096),
    ("T", 100.0, 4.279),
    ("J", 100.0, 5.269),
    ("E", 100.0, 6.319),
    ("N", 100.0, 2.774),
    ("K", -100.0, -3.554),
    ("T", -100.0, -3.379),
    ("J", -100.0, -4.633),
    ("E", -100.0, -5.237),
    ("K", 500.0, 20.644),  # also the boundary of the K inverse pieces in M175-inv (20.644 mV)
    ("J", 500.0, 27.393),
    ("E", 500.0, 37.005),
    ("T", 400.0, 20.872),  # top of type T; also the end of its inverse range (20.872 mV)
    ("J", 760.0, 42.919),  # J piece boundary; also the J inverse boundary (42.919 mV)
    ("N", 1000.0, 36.256),
    ("K", 25.0, 1.000),
    ("T", 25.0, 0.992),
]


@pytest.mark.parametrize(("tc_type", "t_C", "mV"), M175_TABLE)
def test_reference_function_matches_printed_table(tc_type: str, t_C: float, mV: float) -> None:
    assert its90.emf_uV(t_C, tc_type) == pytest.approx(mV * 1000.0, abs=0.5)  # printed to 1 µV, ±0.5 rounding


@pytest.mark.parametrize(("tc_type", "t_C", "mV"), M175_TABLE)
def test_inverse_recovers_table_temperature(tc_type: str, t_C: float, mV: float) -> None:
    # ±0.5 µV of table rounding is ≤ 0.02 K at these Seebeck coefficients; inverse fits add ≤ 0.06 K
    assert its90.temperature_C(mV * 1000.0, tc_type) == pytest.approx(t_C, abs=0.1)  # [M175-inv]


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_inverse_polynomials_stay_inside_nist_error_bands(tc_type: str) -> None:
    # [M175-inv] each inverse polynomial's error against the reference function lies in the stated band; we
    # allow 0.005 K for NIST's rounding of the band to 0.01 K. A mistyped coefficient would break this.
    data = its90._DATA[tc_type]
    for piece, (lo, hi) in zip(data.inverse, its90.INVERSE_ERROR_C[tc_type], strict=True):
        e_mV = np.linspace(piece.lo, piece.hi, 4001)
        approx = its90.temperature_C(e_mV * 1000.0, tc_type)
        exact = its90.temperature_C(e_mV * 1000.0, tc_type, refine=True)
        err = approx - exact
        assert err.min() >= lo - 0.005, (tc_type, piece.lo, err.min())
        assert err.max() <= hi + 0.005, (tc_type, piece.lo, err.max())


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_refined_inverse_round_trips(tc_type: str) -> None:
    lo, hi = its90.reference_range_C(tc_type)
    t = np.linspace(max(lo, -199.0), hi - 1.0, 997)
    back = its90.temperature_C(its90.emf_uV(t, tc_type), tc_type, refine=True)
    assert np.max(np.abs(back - t)) < 1e-6


@pytest.mark.parametrize("tc_type", its90.TYPES)
def test_reference_function_is_continuous_and_increasing(tc_type: str) -> None:
    # Monotonic and continuous across piece boundaries (NIST fitted the pieces to join; common sense check).
    lo, hi = its90.reference_range_C(tc_type)
    t = np.linspace(max(lo, -200.0), hi, 20001)
    e = its90.emf_uV(t, tc_type)
    assert np.all(np.diff(e) > 0)
    for piece in its90._DATA[tc_type].reference[1:]:
        below = its90.emf_uV(piece.lo - 1e-9, tc_type)
        above = its90.emf_uV(piece.lo, tc_type)
        assert above == pytest.approx(below, abs=0.05)  # µV


def test_seebeck_coefficients_near_room_temperature() -> None:
    # Type K Seebeck coefficient at 0 °C is 39.45 µV/K and type E's 58.67 µV/K (slope of the M175 reference
    # function; from memory, and the finite difference below is an independent check of the derivative).
    assert its90.seebeck_uV_per_K(0.0, "K") == pytest.approx(39.45, abs=0.01)
    assert its90.seebeck_uV_per_K(0.0, "E") == pytest.approx(58.67, abs=0.01)
    for tc_type in its90.TYPES:
        for t in (-50.0, 25.0, 90.0):
            fd = (its90.emf_uV(t + 1e-3, tc_type) - its90.emf_uV(t - 1e-3, tc_type)) / 2e-3
            assert its90.seebeck_uV_per_K(t, tc_type) == pytest.approx(fd, rel=1e-6)


def test_cold_junction_compensation() -> None:
    # Type K, hot junction 100 °C, cold junction 25 °C: the meter sees E(100) - E(25) = 4.096 - 1.000
    # = 3.096 mV [M175 table values above]. Compensation must add E(25), not 25 K.
    assert its90.temperature_from_emf(3096.0, 25.0, "K", refine=True) == pytest.approx(100.0, abs=0.03)
    shown = its90.emf_for_temperature(100.0, 25.0, "K")
    assert its90.temperature_from_emf(shown, 25.0, "K", refine=True) == pytest.approx(100.0, abs=1e-6)
    # Naively adding temperatures is off by about 0.7 K here (nonlinearity), so the helper must not do that.
    naive = 25.0 + its90.temperature_C(shown, "K", refine=True)
    assert abs(naive - 100.0) > 0.3


def test_cold_junction_compensation_vectorised_and_below_zero() -> None:
    hot = np.array([-10.0, 5.0, 20.0, 80.0])
    cj = np.array([-15.0, 0.0, 22.5, 30.0])
    for tc_type in its90.TYPES:
        shown = its90.emf_for_temperature(hot, cj, tc_type)
        got = its90.temperature_from_emf(shown, cj, tc_type, refine=True)
        assert np.allclose(got, hot, atol=1e-6)


def test_scalars_stay_scalars() -> None:
    assert isinstance(its90.emf_uV(20.0, "T"), float)
    assert isinstance(its90.temperature_C(800.0, "t"), float)  # lower-case type letters are accepted
    assert isinstance(its90.temperature_from_emf(100.0, 20.0, "K"), float)


def test_range_errors_are_clear() -> None:
    with pytest.raises(its90.Its90RangeError, match=r"type T temperature 450\.000 °C is outside"):
        its90.emf_uV(450.0, "T")
    with pytest.raises(its90.Its90RangeError, match="emf"):
        its90.temperature_C(60_000.0, "K")  # 60 mV is above K's 54.886 mV
    with pytest.raises(its90.Its90RangeError):
        its90.temperature_C(np.array([100.0, -7000.0]), "K")  # below -5.891 mV
    with pytest.raises(its90.Its90RangeError):
        its90.emf_uV(float("nan"), "K")
    with pytest.raises(its90.Its90TypeError, match="use one of"):
        its90.emf_uV(20.0, "X")
