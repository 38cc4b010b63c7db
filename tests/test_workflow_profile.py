"""Depth profiles: sensor depths along a rod, repeated insertions, pooling per depth."""

from __future__ import annotations

import pytest

from linerig.daemon.probe import ProbeProfile, SensorPosition
from linerig.daemon.workflows.profiles import group_profiles, points_from_runs, sensor_depth_m, summarise_depths

ROD = ProbeProfile(name="rod", radius_mm=4.0, heater_length_mm=1500.0, kind="rod", serial="ROD-1",
                   sensors=(SensorPosition("s1", 0.0, 250.0), SensorPosition("s2", 0.0, 750.0),
                            SensorPosition("s3", 0.0, 1250.0)))
NEEDLE = ProbeProfile(name="needle", radius_mm=1.2, heater_length_mm=200.0, serial="FN-3")


def _res(k: float) -> dict[str, object]:
    return {"k_W_per_mK": k, "k_u_W_per_mK": 0.02 * k, "flags": []}


def test_rod_sensors_sit_above_the_tip() -> None:
    assert sensor_depth_m(2.0, ROD, "s1") == pytest.approx(1.75)
    assert sensor_depth_m(2.0, ROD, "s3") == pytest.approx(0.75)
    # a sensor without an axial position is taken at mid-heater
    assert sensor_depth_m(1.0, NEEDLE, "heater") == pytest.approx(0.9)
    assert sensor_depth_m(1.0, None, "heater") == pytest.approx(1.0)


def test_points_grouped_per_site_and_borehole() -> None:
    runs = [
        {"id": 1, "site": "A", "location": "BH1", "depth_m": 2.0, "probe_serial": "ROD-1",
         "results": {"s1": _res(1.2), "s2": _res(1.0), "s3": _res(0.8)}},
        {"id": 2, "site": "A", "location": "BH2", "depth_m": 0.6, "probe_serial": "FN-3",
         "results": {"heater": _res(0.9)}},
        {"id": 3, "site": "A", "location": "BH2", "depth_m": 1.2, "probe_serial": "FN-3",
         "results": {"heater": _res(1.1)}},
        {"id": 4, "site": "A", "location": "BH2", "depth_m": None, "probe_serial": "FN-3",
         "results": {"heater": _res(1.1)}},
        {"id": 5, "site": "A", "location": "BH2", "depth_m": 1.8, "probe_serial": "FN-3",
         "results": {"heater": {"k_W_per_mK": None, "flags": ["no_fit"]}}},
    ]
    pts = points_from_runs(runs, {"ROD-1": ROD, "FN-3": NEEDLE})
    groups = group_profiles(pts)
    assert list(groups) == [("A", "BH1"), ("A", "BH2")]
    assert [p.depth_m for p in groups[("A", "BH1")]] == pytest.approx([0.75, 1.25, 1.75])
    assert [p.run_id for p in groups[("A", "BH2")]] == [2, 3]
    assert "near_surface" not in groups[("A", "BH2")][0].flags
    # 1 m·K/W = 100 °C·cm/W (IEEE Std 442 reporting unit)
    d = groups[("A", "BH1")][0].to_dict()
    assert d["resistivity_Ccm_per_W"] == pytest.approx(100 * d["resistivity_mK_per_W"])
    assert d["resistivity_mK_per_W"] == pytest.approx(1 / 0.8)


def test_repeat_readings_pool_per_depth() -> None:
    runs = [{"id": i, "site": "A", "location": "BH", "depth_m": dep, "probe_serial": "", "results": {"heater": _res(k)}}
            for i, (dep, k) in enumerate([(1.0, 1.0), (1.02, 0.8), (2.0, 1.25)])]
    s = summarise_depths(points_from_runs(runs, {}))
    assert [x.n for x in s] == [2, 1]
    assert s[0].resistivity_mK_per_W == pytest.approx((1.0 + 1.25) / 2)
    assert s[0].worst_mK_per_W == pytest.approx(1.25)
    assert s[1].spread_mK_per_W == 0.0
