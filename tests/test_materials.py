"""Demo materials carry properties inside the published ranges for what they stand for."""

from __future__ import annotations

import itertools
import re

import iapws
import pytest

from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, MATERIALS, Material, get_material, soil_at_moisture


def test_keys_are_kebab_case_and_match_their_entries() -> None:
    for key, m in MATERIALS.items():
        assert re.fullmatch(r"[a-z]+(-[a-z]+)*", key), key
        assert m.key == key
        assert m.name and m.note


def test_default_is_moist_sand() -> None:
    assert DEFAULT_MATERIAL_KEY == "moist-sand"
    assert get_material(DEFAULT_MATERIAL_KEY) is MATERIALS["moist-sand"]


def test_unknown_key_lists_the_valid_ones() -> None:
    with pytest.raises(KeyError) as info:
        get_material("lunar-regolith")
    for key in MATERIALS:
        assert key in str(info.value)


def test_issue_media_are_all_present() -> None:
    for key in ("dry-sand", "moist-sand", "moist-clay", "thermal-backfill", "agar-gel", "glycerol"):
        assert isinstance(get_material(key), Material)


def test_every_medium_is_physically_plausible() -> None:
    # soils and rocks: k between dry peat (0.04) and quartz (8.8 W/(m K)); C between dry soil (~1.2) and water
    # (4.18 MJ/(m3 K)); de Vries (1963) constituent values
    for m in MATERIALS.values():
        assert 0.04 < m.k_W_per_mK < 8.8, m.key
        assert 1.0e6 < m.rho_c_J_per_m3K <= 4.2e6, m.key
        assert 5e-8 < m.diffusivity_m2_per_s < 2e-6, m.key


def test_soils_follow_de_vries_table() -> None:
    # de Vries (1963), as tabulated by Moene & van Dam (2014) Table 2.2: dry sand 0.24-0.29 W/(m K) with
    # C 1.28-1.42; saturated sand (n = 0.4) 2.5 and 2.96; clay between theta 0.2 (0.9, 2.27) and 0.4 (1.4, 3.10)
    dry = get_material("dry-sand")
    assert 0.24 <= dry.k_W_per_mK <= 0.35 and 1.28e6 <= dry.rho_c_J_per_m3K <= 1.42e6
    sat = get_material("saturated-sand")
    assert sat.k_W_per_mK == pytest.approx(2.5, rel=0.05)
    assert sat.rho_c_J_per_m3K == pytest.approx(2.96e6, rel=0.05)
    clay = get_material("moist-clay")
    assert 0.9 <= clay.k_W_per_mK <= 1.4 and 2.27e6 <= clay.rho_c_J_per_m3K <= 3.10e6
    # moist sand between dry and theta = 0.2 (2.1 W/(m K), C 2.12)
    moist = get_material("moist-sand")
    assert dry.k_W_per_mK < moist.k_W_per_mK < 2.1 and dry.rho_c_J_per_m3K < moist.rho_c_J_per_m3K < 2.12e6


def test_gelled_water_is_water_by_iapws() -> None:
    # IAPWS 2011 conductivity and IAPWS-95 heat capacity at 20 C, 0.1 MPa (iapws package)
    w = iapws.IAPWS95(T=293.15, P=0.101325)
    gel = get_material("agar-gel")
    assert gel.k_W_per_mK == pytest.approx(w.k, rel=0.01)
    assert gel.rho_c_J_per_m3K == pytest.approx(w.rho * w.cp * 1e3, rel=0.01)


def test_glycerol_reference_liquid() -> None:
    # handbook glycerol near room temperature: 0.285-0.292 W/(m K) (bath-fluid property tables, from memory);
    # density 1261 kg/m3 and cp about 2.43 kJ/(kg K) give rho c about 3.06 MJ/(m3 K)
    g = get_material("glycerol")
    assert 0.285 <= g.k_W_per_mK <= 0.292
    assert g.rho_c_J_per_m3K == pytest.approx(1261 * 2430, rel=0.02)


def test_backfill_resistivity_in_trade_range() -> None:
    # engineered thermal backfills: about 50-75 C cm/W moist (from memory, unconfirmed); 1 K m/W = 100 C cm/W
    rho_th_Ccm_per_W = 100.0 * get_material("thermal-backfill").resistivity_mK_per_W
    assert 50.0 <= rho_th_Ccm_per_W <= 75.0


# Kersten-number soil models: Johansen (1975) as summarised by Farouki (1981), CRREL Monograph 81-1, and Côté &
# Konrad (2005), Can. Geotech. J. 42:443-458. Worked example for rho_s 2650 kg/m3, n = 0.40, quartz 0.8,
# k_water 0.6 computed from those equations; the model constants are recalled, not checked against the
# primary texts, so these are regression values for the formulas rather than physical truth.
SR = (0.05, 0.10, 0.20, 0.30, 0.50, 0.80, 1.00)
JOHANSEN_COARSE = (0.4237, 0.8717, 1.3197, 1.5818, 1.9119, 2.2157, 2.3599)
COTE_KONRAD_46 = (0.6599, 0.9626, 1.3778, 1.6493, 1.9829, 2.2511, 2.3599)
COTE_KONRAD_355 = (0.5808, 0.8456, 1.2412, 1.5225, 1.8958, 2.2210, 2.3599)


@pytest.mark.parametrize(
    ("model", "texture", "expected"),
    [("johansen", "coarse", JOHANSEN_COARSE), ("cote-konrad", "coarse", COTE_KONRAD_46),
     ("cote-konrad", "sand", COTE_KONRAD_355)],
)
def test_soil_at_moisture_reproduces_the_kersten_number_models(model: str, texture: str,
                                                               expected: tuple[float, ...]) -> None:
    for sr, k in zip(SR, expected, strict=True):
        m = soil_at_moisture(0.40 * sr, porosity=0.40, quartz_fraction=0.8, texture=texture, model=model)
        assert m.k_W_per_mK == pytest.approx(k, abs=1e-4), sr


def test_dry_soil_conductivity_of_each_model() -> None:
    # k_dry: Johansen 0.2339 at rho_d 1590 kg/m3; Côté-Konrad natural mineral soil 0.75*10^(-1.2 n) = 0.2483
    assert soil_at_moisture(0.0, dry_density_kg_per_m3=1590.0, model="johansen").k_W_per_mK == pytest.approx(
        0.2339, abs=1e-4)
    assert soil_at_moisture(0.0, porosity=0.4).k_W_per_mK == pytest.approx(0.2483, abs=1e-4)


def test_soil_heat_capacity_is_the_de_vries_mix() -> None:
    # de Vries (1963): C = 1.92 x_mineral + 4.18 theta MJ/(m3 K)
    m = soil_at_moisture(0.15, porosity=0.35)
    assert m.rho_c_J_per_m3K == pytest.approx((1.92 * 0.65 + 4.18 * 0.15) * 1e6)
    assert m.bulk_density_kg_per_m3 == pytest.approx(0.65 * 2650.0)


def test_dry_out_curve_rises_monotonically_as_the_soil_dries() -> None:
    ks = [soil_at_moisture(th, texture="fine").k_W_per_mK for th in (0.40, 0.3, 0.2, 0.1, 0.05, 0.0)]
    assert all(a > b for a, b in itertools.pairwise(ks))


def test_soil_at_moisture_refuses_impossible_soils() -> None:
    with pytest.raises(ValueError, match="porosity"):
        soil_at_moisture(0.5, porosity=0.4)
    with pytest.raises(ValueError, match="texture"):
        soil_at_moisture(0.1, texture="gravelly")
    with pytest.raises(ValueError, match="dry density"):
        soil_at_moisture(0.1, dry_density_kg_per_m3=2640.0)
