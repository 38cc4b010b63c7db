"""Display units of the UI: conductivity and the two resistivity units, with uncertainty carried across."""

from __future__ import annotations

import math

import mpmath
import pytest

from linerig.tui.units import DisplayUnit, convert, duration, parse_unit, show


def test_trade_unit_is_one_hundred_times_si() -> None:
    # 1 cm = 0.01 m (SI Brochure, 9th ed., BIPM 2019, Table 7) and a kelvin step equals a °C step, so
    # 1 K·m/W = 100 °C·cm/W. Check value from memory: IEC 60287-3-1 takes 1.0 K·m/W as a reference soil
    # resistivity, which cable engineers quote as 100 °C·cm/W.
    rho, _ = convert(1.0, None, DisplayUnit.RESISTIVITY)
    trade, _ = convert(1.0, None, DisplayUnit.RESISTIVITY_TRADE)
    assert rho == pytest.approx(1.0)
    assert trade == pytest.approx(100.0)
    assert convert(2.5, None, DisplayUnit.RESISTIVITY_TRADE)[0] == pytest.approx(40.0)


@pytest.mark.parametrize("unit", [DisplayUnit.RESISTIVITY, DisplayUnit.RESISTIVITY_TRADE])
def test_resistivity_uncertainty_is_first_order_propagation(unit: DisplayUnit) -> None:
    # GUM (JCGM 100:2008) §5.1.2: u(ρ) = |dρ/dk|·u(k); the derivative is taken numerically by mpmath,
    # independently of the closed form in tui.units.
    k, u_k = 1.37, 0.041
    scale = 100.0 if unit is DisplayUnit.RESISTIVITY_TRADE else 1.0
    expected = abs(float(mpmath.diff(lambda x: scale / x, k))) * u_k
    _, u = convert(k, u_k, unit)
    assert u == pytest.approx(expected, rel=1e-9)


def test_conductivity_passes_through_and_bad_k_gives_no_resistivity() -> None:
    assert convert(0.8, 0.02, DisplayUnit.CONDUCTIVITY) == (0.8, 0.02)
    rho, u = convert(0.0, 0.1, DisplayUnit.RESISTIVITY)
    assert math.isnan(rho) and u is None


def test_shown_text_is_the_expanded_uncertainty_rounded_to_two_figures() -> None:
    # every ± on a screen is U = 2u (coverage factor 2, JCGM 100:2008 §6.2); u = 0.0312 gives U = 0.0624
    assert show(1.4523, 0.0312, DisplayUnit.CONDUCTIVITY).text() == "1.452 ± 0.062 W/(m·K)"
    assert show(1.4523, 0.0312, DisplayUnit.RESISTIVITY_TRADE).text() == "68.9 ± 3.0 °C·cm/W"
    assert show(None, None, DisplayUnit.CONDUCTIVITY).text() == "— W/(m·K)"
    assert show(1.0, 0.05, DisplayUnit.CONDUCTIVITY).rel_u == pytest.approx(0.10)


def test_unit_names_and_cycle() -> None:
    assert parse_unit("trade") is DisplayUnit.RESISTIVITY_TRADE
    assert parse_unit("m·K/W") is DisplayUnit.RESISTIVITY
    assert parse_unit(None) is DisplayUnit.CONDUCTIVITY
    with pytest.raises(ValueError, match="use k, rho or trade"):
        parse_unit("furlongs")
    seen = {DisplayUnit.CONDUCTIVITY}
    u = DisplayUnit.CONDUCTIVITY
    for _ in range(3):
        u = u.next()
        seen.add(u)
    assert u is DisplayUnit.CONDUCTIVITY and len(seen) == 3


def test_duration() -> None:
    assert duration(59.6) == "1:00"
    assert duration(3725) == "1:02:05"
    assert duration(None) == "—"
