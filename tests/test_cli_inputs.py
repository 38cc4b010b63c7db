"""The offline commands as a new user meets them: documented invocations work, and bad input gets exit 2 and a
message naming what is wrong, never a traceback or a changed file.

Input checking and plumbing only; the physics of each command is checked against its sources elsewhere.
"""

from __future__ import annotations

import json
import sqlite3
from dataclasses import asdict
from pathlib import Path

import numpy as np
import pytest

from linerig.daemon.probe import load_probe_profile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.report.sources import open_db, probe_profiles
from linerig.daemon.store.writer import Store
from linerig.daemon.workflows.cycles import CycleValue, summarise_cycles
from linerig.tui.cli import main
from tests.test_qualify import FAST_SETTINGS  # the short procedure the qualification tests run

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples" / "examplemoor"
RUN_CSV = EXAMPLES / "run_BH1_1.5m.csv"
NEEDLE = EXAMPLES / "FN-0412.toml"


def _cli(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    rc = main(list(argv))
    out = capsys.readouterr()
    return rc, out.out, out.err


def test_calibrate_media_as_documented_needs_no_probe(capsys: pytest.CaptureFixture[str]) -> None:
    rc, out, err = _cli(capsys, "calibrate", "--media")
    assert rc == 0, err
    assert "IAPWS" in out and "glycerol" in out
    rc, _, err = _cli(capsys, "calibrate", "--history")
    assert rc == 2 and "--probe SERIAL" in err


def test_a_file_that_is_not_a_database_is_refused_and_left_alone(tmp_path: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    not_db = tmp_path / "rig.toml"
    text = NEEDLE.read_text(encoding="utf-8")
    not_db.write_text(text, encoding="utf-8")
    for argv in (["report", "1"], ["export", "--list"], ["profile"], ["cycles", "1"],
                 ["calibrate", "--probe", "FN-0412", "--history"], ["dryout", "--material", "sand"],
                 ["qualify", "list"], ["qualify", "show", "1"], ["qualify", "report", "1", "--html", "q.html"]):
        rc, _, err = _cli(capsys, *argv, "--db", str(not_db))
        assert rc == 2, (argv, err)
        assert "is not a linerig database" in err, (argv, err)
    # nothing moved aside, nothing created in its place
    assert not_db.read_text(encoding="utf-8") == text
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rig.toml"]


def test_profiles_the_daemon_stores_are_read_back(tmp_path: Path) -> None:
    from linerig.daemon.service import _profile_dict

    needle = load_probe_profile(NEEDLE)
    rod = load_probe_profile(ROOT / "hardware" / "probes" / "field-rod.toml")
    store = Store(tmp_path / "d.db")
    try:
        # as linerigd writes the probes it loads, and as a TOML file would be kept
        store.upsert_probe(needle.serial, needle.name, needle.kind, json.dumps(_profile_dict(needle)))
        store.upsert_probe(rod.serial, rod.name, rod.kind, (ROOT / "hardware" / "probes" / "field-rod.toml")
                           .read_text(encoding="utf-8"))
    finally:
        store.close()
    got = probe_profiles(open_db(tmp_path / "d.db"))
    assert got[needle.serial] == needle
    assert got[rod.serial] == rod


BAD_REDUCE_OPTIONS = [
    (["--calibration-factor-u", "-0.1"], "--calibration-factor-u"),
    (["--max-rise", "-1"], "--max-rise"),
    (["--bulk-density", "-100", "--probe", str(NEEDLE)], "--bulk-density"),
    (["--calibration-factor", "nan"], "--calibration-factor"),
]


@pytest.mark.parametrize(("extra", "named"), BAD_REDUCE_OPTIONS)
def test_reduce_refuses_impossible_numbers(extra: list[str], named: str, capsys: pytest.CaptureFixture[str]) -> None:
    rc, out, err = _cli(capsys, "reduce", str(RUN_CSV), *extra)
    assert rc == 2 and named in err and out == ""


def test_plots_to_unwritable_places_are_errors(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    nowhere = tmp_path / "missing-folder" / "x.png"
    rc, _, err = _cli(capsys, "reduce", str(RUN_CSV), "--plot", str(tmp_path / "x.txt"))
    assert rc == 2 and "cannot write plot" in err and "txt" in err
    for argv in (["dryout", "--csv", str(EXAMPLES / "dryout_moor_sand.csv")],
                 ["cylinder", str(EXAMPLES / "cylinder_mould_FB3.csv"), "--radius-mm", "35", "--height-mm",
                  "90"]):
        rc, _, err = _cli(capsys, *argv, "--plot", str(nowhere))
        assert rc == 2 and "missing-folder" in err, (argv, err)


def test_report_refuses_a_negative_factor_uncertainty(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _cli(capsys, "report", "--csv", str(RUN_CSV), "--calibration-factor-u", "-1",
                      "-o", str(tmp_path / "r.html"))
    assert rc == 2 and "--calibration-factor-u" in err
    assert not (tmp_path / "r.html").exists()


@pytest.mark.parametrize(("extra", "named"), [
    (["--critical-moisture", "-3"], "--critical-moisture"),
    (["--design-density", "-3"], "--design-density"),
    (["--design-density", "3000"], "--design-density"),   # denser than the solids (2650 kg/m³ default)
])
def test_dryout_refuses_impossible_readings(extra: list[str], named: str, capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _cli(capsys, "dryout", "--csv", str(EXAMPLES / "dryout_moor_sand.csv"), *extra)
    assert rc == 2 and named in err


@pytest.mark.parametrize(("extra", "named"), [
    (["--k", "-1"], "--k"), (["--k", "0"], "--k"), (["--initial-C", "nan"], "--initial-C"),
    (["--height-mm", "-10"], "--height-mm"),
])
def test_cylinder_refuses_impossible_numbers(extra: list[str], named: str,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _cli(capsys, "cylinder", str(EXAMPLES / "cylinder_mould_FB3.csv"), "--radius-mm", "35", *extra)
    assert rc == 2 and named in err


def test_profile_refuses_a_negative_tolerance(capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _cli(capsys, "profile", "--site", "anywhere", "--tolerance-m", "-1")
    assert rc == 2 and "--tolerance-m" in err


def test_history_refuses_a_day_that_does_not_exist(capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _cli(capsys, "--socket", "/nonexistent/linerigd.sock", "history", "--since", "2026-13-45")
    assert rc == 2 and "2026-13-45" in err


def test_start_options_reach_the_request_and_bad_metadata_is_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    import argparse

    from linerig.tui.commands import start

    parser = argparse.ArgumentParser()
    start.add_parser(parser.add_subparsers())
    args = parser.parse_args(["start", "--cycles", "3", "--reequilibrate-s", "1800", "--max-drift", "0.005",
                              "--settle-timeout-s", "900", "--sensor", "far", "--preset", "lab",
                              "--meta", "depth_m=1.5"])
    assert start.start_request(args) == {"cycles": 3, "reequilibrate_s": 1800.0, "max_drift_K_per_min": 0.005,
                                         "settle_timeout_s": 900.0, "sensor": "far", "preset": "lab",
                                         "metadata": {"depth_m": 1.5}}
    rc, _, err = _cli(capsys, "--socket", "/nonexistent/linerigd.sock", "start", "--meta", "depth=1")
    assert rc == 2 and "--meta 'depth=1'" in err


def test_cycles_of_a_series_show_each_cycles_own_flags(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Three cycles stored as a series the way linerigd stores them; the third starts 0.5 K warm (the ground not
    cooled back) and the second drifts strongly, so its reduction flags it."""
    db = tmp_path / "s.db"
    store = Store(db)
    ids = []
    flags_of: dict[int, list[str]] = {}
    try:
        for cyc, (t0, drift) in enumerate(((12.0, 0.0), (12.0, 3.0), (12.5, 0.0)), start=1):
            d = make_run(Medium(1.2, 2.4e6), heat_s=120.0, recover_s=60.0, baseline_s=60.0, dt_s=1.0,
                         noise_K=0.002, drift_K_per_h=drift, t0_C=t0, rng=np.random.default_rng(cyc))
            rid = store.create_run({"kind": "lab", "sensor_names": json.dumps(["heater"]), "series_id": 1,
                                    "cycle": cyc, "state": "done", "heat_start_device_s": 1000.0})
            for i, t in enumerate(d.time_s):
                q = float(d.q_W_per_m[i])
                store.add_sample((rid, i, i, int((1000 + t) * 1000), 1000.0 + float(t),
                                  "settling" if t < 0 else "heating" if q > 0 else "recovering", int(q > 0),
                                  None, None, None, q, 20.0, json.dumps([float(d.temps_C["heater"][i])]), None))
            store.flush(wait=True)
            res = reduce_run(d, None).sensors["heater"].to_json()
            flags_of[cyc] = list(res["flags"])
            store.add_result(rid, "heater", res, source="final")
            ids.append(rid)
    finally:
        store.close()
    assert "drift" in flags_of[2]   # precondition: the reduction saw the 3 K/h drift
    rc, out, err = _cli(capsys, "cycles", str(ids[0]), "--db", str(db), "--json")
    assert rc == 0, err
    doc = json.loads(out)
    per = doc["flags_by_cycle"]
    for cyc, fl in flags_of.items():
        assert set(fl) <= set(per.get(str(cyc), [])), (cyc, fl, per)
    assert "not_reequilibrated" in per["3"]
    assert "cycle_result_flagged" in doc["flags"] and "not_reequilibrated" in doc["flags"]


def test_cycle_summary_keeps_result_flags_without_changing_the_statistics() -> None:
    plain = summarise_cycles([CycleValue(1, 0.61), CycleValue(2, 0.60), CycleValue(3, 0.62)])
    flagged = summarise_cycles([CycleValue(1, 0.61), CycleValue(2, 0.60, result_flags=("drift",)),
                                CycleValue(3, 0.62)])
    assert flagged.mean == plain.mean and flagged.sd == plain.sd
    assert flagged.flags_by_cycle == {2: ("drift",)} and plain.flags_by_cycle == {}
    assert "cycle_result_flagged" in flagged.flags and "cycle_result_flagged" not in plain.flags


def test_qualify_checks_where_results_go_first_and_reports_carry_cautions(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    crit = tmp_path / "fast.toml"
    crit.write_text(FAST_SETTINGS, encoding="utf-8")
    probe = str(ROOT / "hardware" / "probes" / "lab-needle.toml")
    common = ["qualify", "run", probe, "--simulate", "--criteria", str(crit), "--sim-interval", "1.6",
              "--sim-radial-only", "--insulation-MOhm", "5000", "--quiet"]
    # refused before the procedure runs: a report folder that is not there, a database folder that is not there
    rc, out, err = _cli(capsys, *common, "--no-save", "--html", str(tmp_path / "nowhere" / "q.html"))
    assert rc == 2 and "nowhere" in err and out == ""
    rc, out, err = _cli(capsys, *common, "--db", str(tmp_path / "nowhere" / "q.db"))
    assert rc == 2 and "nowhere" in err and out == ""
    assert not (tmp_path / "nowhere").exists()
    db = tmp_path / "q.db"
    rc, _, err = _cli(capsys, *common, "--db", str(db))
    assert rc in (0, 1), err
    html, pdf = tmp_path / "q.html", tmp_path / "q.pdf"
    rc, _, err = _cli(capsys, "qualify", "report", "1", "--db", str(db), "--html", str(html), "--pdf", str(pdf))
    assert rc == 0, err
    text = html.read_text(encoding="utf-8")
    assert "Cautions" in text and "500 V DC" in text and "Never power the heater in air" in text
    assert pdf.read_bytes()[:5] == b"%PDF-"
    rc, _, err = _cli(capsys, "qualify", "report", "1", "--db", str(db), "--pdf", str(tmp_path / "no" / "q.pdf"))
    assert rc == 2 and "cannot write the report" in err


def test_qualify_list_on_a_database_without_qualifications(tmp_path: Path,
                                                           capsys: pytest.CaptureFixture[str]) -> None:
    db = tmp_path / "old.db"
    Store(db).close()
    with sqlite3.connect(db) as con:   # a file from before qualifications were stored
        con.execute("DROP TABLE qualifications")
    rc, out, _ = _cli(capsys, "qualify", "list", "--db", str(db))
    assert rc == 0 and "no qualifications stored" in out
    rc, _, err = _cli(capsys, "qualify", "show", "1", "--db", str(db))
    assert rc == 2 and "no qualification 1" in err


def test_profile_dict_round_trip_keeps_every_field() -> None:
    """The daemon stores dataclass fields; every field of a profile must survive the reader."""
    prof = load_probe_profile(ROOT / "hardware" / "probes" / "dual-needle.toml")
    from linerig.daemon.probe import stored_profile

    assert stored_profile(json.dumps(asdict(prof)), "probe test") == prof


def test_calibrate_refuses_repeats_that_are_one_insertion_and_csvs_without_geometry(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    db = tmp_path / "c.db"
    store = Store(db)
    try:
        store.upsert_probe("FN-0412", "field needle", "single", NEEDLE.read_text(encoding="utf-8"))
    finally:
        store.close()
    common = ["calibrate", "--reference", "agar-water", "--db", str(db), "--dry-run"]
    # one file three times would pass the repeatability limit with a spread of 0 %
    rc, out, err = _cli(capsys, *common, "--probe", "FN-0412", "--csv", str(RUN_CSV), "--csv", str(RUN_CSV))
    assert rc == 2 and "more than once" in err and out == ""
    rc, out, err = _cli(capsys, *common, "--probe", "FN-0412", "--run", "1", "--run", "1")
    assert rc == 2 and "more than once" in err
    # a serial with no stored profile and no --probe-profile: the factor would come from another reduction
    rc, out, err = _cli(capsys, *common, "--probe", "FN-0413", "--csv", str(RUN_CSV))
    assert rc == 2 and "--probe-profile" in err and out == ""
    rc, out, err = _cli(capsys, *common, "--probe", "FN-0413", "--csv", str(RUN_CSV), "--probe-profile", str(NEEDLE))
    assert rc in (0, 1) and "factor F" in out, err
