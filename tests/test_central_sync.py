"""`linerig sync` against a real PostgreSQL server: two rigs the same day, a second push that changes nothing, a push
killed mid-run and resumed, results added after a run was pushed, runs still in progress, and columns a later local
schema adds. Every push is a real `linerig sync` process reading the daemon's own SQLite file."""

from __future__ import annotations

import json
import signal
import sqlite3
import subprocess
from pathlib import Path
from typing import Any

import psycopg
import pytest
from central_stores import (
    CLI,
    ROOT,
    add_runs,
    as_other_rig,
    cli,
    closed_runs,
    end_orphaned_pushes,
    identity,
    local_snapshot,
    server_snapshot,
    sync,
    synced,
    whole_runs_only,
)
from pg_server import CentralDb

pytestmark = pytest.mark.timeout(300)


@pytest.fixture
def rig_a(example_db: Path, tmp_path: Path) -> Path:
    return as_other_rig(example_db, tmp_path / "north.db", "north")


def _server_state(central: CentralDb) -> dict[str, Any]:
    """Row counts and the newest push time of every central table."""
    out: dict[str, Any] = {}
    for table in ("rigs", "stores", "probes", "series", "runs", "run_revisions", "samples", "events", "results",
                  "calibrations", "qualifications", "spacing_calibrations"):
        out[table] = central.query(f"SELECT count(*) FROM linerig.{table}")[0][0]
    out["last_push"] = central.query("SELECT max(pushed_at) FROM linerig.runs")[0][0]
    return out


def test_two_rigs_push_the_same_day_and_history_lists_each_run_once(rig_a: Path, tmp_path: Path,
                                                                     central: CentralDb) -> None:
    rig_b = as_other_rig(rig_a, tmp_path / "south.db", "south")
    add_runs(rig_b, 2, seed=5)
    url_a, url_b = central.role("north"), central.role("south")
    # both at once, as two rigs coming back into coverage would
    procs = [subprocess.Popen([*CLI, "sync", "--db", str(db), "--to", url, "--json"], stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True, cwd=ROOT) for db, url in ((rig_a, url_a),
                                                                                            (rig_b, url_b))]
    outs = [p.communicate(timeout=240) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], [o[1] for o in outs]
    summaries = [json.loads(o[0]) for o in outs]
    assert [s["rig"] for s in summaries] == ["north", "south"]
    assert summaries[0]["pushed"]["runs"] == len(closed_runs(rig_a))
    assert summaries[1]["pushed"]["runs"] == len(closed_runs(rig_b)) == len(closed_runs(rig_a)) + 2

    for db in (rig_a, rig_b):  # the server holds exactly what each file holds, under that file's store
        store, _ = identity(db)
        assert server_snapshot(central.admin_url, store) == local_snapshot(db)

    reader = central.role("office", "linerig_reader")
    done = cli("history", "--central", reader, "--json", "--limit", "1000")
    assert done.returncode == 0, done.stderr
    listed = json.loads(done.stdout)
    keys = [(r["rig"], r["id"]) for r in listed]
    assert len(keys) == len(set(keys)) == len(closed_runs(rig_a)) + len(closed_runs(rig_b))
    assert {k for k in keys if k[0] == "north"} == {("north", i) for i in closed_runs(rig_a)}
    assert {k for k in keys if k[0] == "south"} == {("south", i) for i in closed_runs(rig_b)}
    # one run in detail: the rig must be named when both rigs have a run with that id
    done = cli("history", "--central", reader, "3")
    assert done.returncode == 2 and "north, south" in done.stderr and "--rig" in done.stderr
    done = cli("history", "--central", reader, "--rig", "south", "--json", str(max(keys)[1]))
    assert done.returncode == 0, done.stderr
    detail = json.loads(done.stdout)
    assert detail["rig"] == "south" and detail["location"] == "BH9" and detail["results"]["heater"]["k_W_per_mK"]


def test_a_second_push_changes_nothing(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    first = synced(rig_a, url)
    assert first["rows"] > 8000
    before = _server_state(central)
    second = synced(rig_a, url)
    assert second["rows"] == 0 and not any(second["pushed"].values())
    assert _server_state(central) == before
    done = sync(rig_a, url)  # what a person reads
    assert done.returncode == 0 and "nothing to push" in done.stdout


def test_a_push_killed_inside_a_run_leaves_whole_runs_and_resumes(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    synced(rig_a, url)
    new = add_runs(rig_a, 2, seed=11)
    store, _ = identity(rig_a)
    held_before = whole_runs_only(central.admin_url, store, rig_a)
    # Hold the results table, so the push stops inside the first new run's transaction, after its samples went in
    # and before its results: then kill it there, as a power cut or `kill -9` would.
    blocker = psycopg.connect(central.admin_url)
    blocker.execute("LOCK TABLE linerig.results IN EXCLUSIVE MODE")
    proc = subprocess.Popen([*CLI, "sync", "--db", str(rig_a), "--to", url, "--json-lines"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert proc.stdout is not None
        for line in proc.stdout:
            ev = json.loads(line)
            if ev.get("event") == "run_samples_written":
                assert ev["run_id"] == new[0] and ev["samples"] > 100
                break
        else:
            raise AssertionError(f"the push ended without writing run {new[0]}")
        proc.send_signal(signal.SIGKILL)
        proc.wait(30)
        end_orphaned_pushes(central.admin_url)
    finally:
        blocker.rollback()
        blocker.close()
        if proc.poll() is None:
            proc.kill()
    assert whole_runs_only(central.admin_url, store, rig_a) == held_before  # nothing of the cut run
    resumed = synced(rig_a, url)
    assert resumed["pushed"]["runs"] == 2 and resumed["pushed"]["results"] == 2
    assert server_snapshot(central.admin_url, store) == local_snapshot(rig_a)
    assert synced(rig_a, url)["rows"] == 0


def test_one_push_of_a_store_at_a_time(rig_a: Path, central: CentralDb) -> None:
    """The daemon's own push and one by hand at the same moment: the second is told to try later (exit 3)."""
    url = central.role("north")
    store, _ = identity(rig_a)
    with psycopg.connect(central.admin_url) as holder:  # holds the store's push lock as a running push would
        holder.execute("SELECT pg_advisory_lock(hashtext('linerig push'), hashtext(%s))", (store,))
        busy = sync(rig_a, url)
    assert busy.returncode == 3 and "another push of this store" in busy.stderr
    assert synced(rig_a, url)["pushed"]["runs"] == len(closed_runs(rig_a))


def test_a_push_killed_at_any_moment_resumes_to_the_same_copy(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    store, _ = identity(rig_a)
    cuts = 0
    for _ in range(30):
        proc = subprocess.Popen([*CLI, "sync", "--db", str(rig_a), "--to", url, "--json-lines"],
                                stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, cwd=ROOT)
        assert proc.stdout is not None
        for lines, _line in enumerate(proc.stdout, start=1):  # the push runs ahead of this reader: the kill
            if lines == 12:                                   # lands wherever it has got to
                proc.send_signal(signal.SIGKILL)
                break
        code = proc.wait(60)
        proc.stdout.close()
        if code == 0:
            break
        assert code == -signal.SIGKILL
        cuts += 1
        end_orphaned_pushes(central.admin_url)
        whole_runs_only(central.admin_url, store, rig_a)
    else:
        raise AssertionError("the push never finished")
    assert cuts >= 1
    assert server_snapshot(central.admin_url, store) == local_snapshot(rig_a)


def test_results_after_the_push_are_new_rows_and_the_newest_is_read(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    synced(rig_a, url)
    store, _ = identity(rig_a)
    run = closed_runs(rig_a)[3]
    old = central.query("SELECT id, k_w_per_mk FROM linerig.results WHERE store = %s AND run_id = %s",
                        (store, run))
    # the run reduced again later (another window): a new result row in the rig's file
    from linerig.daemon.store.writer import Store

    st = Store(rig_a)
    try:
        st.add_result(run, "heater", {"method": "line", "k_W_per_mK": 0.777, "k_u_W_per_mK": 0.01, "flags": [],
                                      "window_s": [20.0, 250.0]}, source="rereduced")
    finally:
        st.close()
    again = synced(rig_a, url)
    assert again["pushed"]["results"] == 1 and again["pushed"]["runs"] == 0
    rows = central.query("SELECT id, k_w_per_mk, source FROM linerig.results WHERE store = %s AND run_id = %s "
                         "ORDER BY id", (store, run))
    assert [r[:2] for r in rows[:-1]] == old and rows[-1][1:] == (0.777, "rereduced")  # the old one untouched
    done = cli("history", "--central", url, "--rig", "north", "--json", str(run))
    assert json.loads(done.stdout)["results"]["heater"]["k_W_per_mK"] == 0.777


def test_calibrations_qualifications_and_spacings_made_later_go_once(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    synced(rig_a, url)
    con = sqlite3.connect(rig_a)
    with con:  # what `linerig calibrate` and `linerig qualify` write in the rig's file, one row each
        con.execute("INSERT INTO calibrations (probe_serial, run_id, created_utc, reference, factor, factor_u, "
                    "accepted) VALUES ('FN-0412', 1, '2031-02-01T09:00:00.000+00:00', 'agar-water', 0.97, 0.004, 1)")
        con.execute("INSERT INTO qualifications (probe_serial, created_utc, criteria_toml, results, passed, notes) "
                    "VALUES ('FN-0412', '2031-02-02T09:00:00.000+00:00', '[criteria]', '{\"steps\": []}', 1, "
                    "'bench check')")
        con.execute("INSERT INTO spacing_calibrations (probe_serial, sensor, created_utc, run_id, reference, "
                    "reference_rho_c_J_per_m3K, nominal_spacing_m, spacing_m, spacing_u_m, accepted) VALUES "
                    "('PX8-40-0005', 'needle8', '2031-02-03T09:00:00.000+00:00', 2, 'agar-water', 4.18e6, 0.008, "
                    "0.00806, 0.00003, 1)")
    con.close()
    out = synced(rig_a, url)
    assert {k: v for k, v in out["pushed"].items() if v} == {"calibrations": 1, "qualifications": 1,
                                                             "spacing_calibrations": 1}
    assert central.query("SELECT sensor, spacing_m FROM linerig.spacing_calibrations") == [("needle8", 0.00806)]
    store, _ = identity(rig_a)
    assert central.query("SELECT probe_serial, passed, notes FROM linerig.qualifications WHERE store = %s",
                         (store,)) == [("FN-0412", 1, "bench check")]
    assert synced(rig_a, url)["rows"] == 0


def test_a_run_in_progress_waits_with_its_events_then_goes(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    from linerig.daemon.store.writer import Store

    st = Store(rig_a)
    try:
        rid = st.create_run({"kind": "single", "probe_serial": "FN-0412", "sensor_names": '["heater"]',
                             "state": "heating", "site": "Examplemoor substation", "location": "BH1"})
        for n in range(1, 41):
            st.add_sample((rid, n, n, n * 1000, float(n), "heating", 1, 4.0, 0.1, 12.5, 4.0, 19.0, "[15.5]",
                           "[null]"))
        st.event(rid, "state", "heating", "heater on")
    finally:
        st.close()
    first = synced(rig_a, url)
    assert first["waiting"]["open_runs"] == 1 and first["waiting"]["events"] == 1
    store, _ = identity(rig_a)
    assert central.query("SELECT count(*) FROM linerig.runs WHERE store = %s AND id = %s", (store, rid)) == [(0,)]
    assert central.query("SELECT count(*) FROM linerig.samples WHERE store = %s AND run_id = %s",
                         (store, rid)) == [(0,)]
    st = Store(rig_a)
    try:
        st.update_run(rid, {"state": "aborted", "end_reason": "operator abort"})
        st.event(rid, "state", "aborted", "operator abort")
    finally:
        st.close()
    second = synced(rig_a, url)
    assert second["pushed"]["runs"] == 1 and second["pushed"]["samples"] == 40 and second["pushed"]["events"] == 2
    assert second["waiting"] == {"open_runs": 0, "events": 0, "results": 0}


def test_columns_and_tables_of_a_later_local_schema(rig_a: Path, central: CentralDb) -> None:
    """A column a later linerig adds to runs goes in the row's extra (and reads back under its own name); a table
    this linerig does not know is named in the summary and left alone."""
    con = sqlite3.connect(rig_a)
    with con:
        con.execute("ALTER TABLE runs ADD COLUMN ground_cover TEXT")
        con.execute("UPDATE runs SET ground_cover = 'rough grass' WHERE id = 4")
        con.execute("CREATE TABLE spacing_checks (id INTEGER PRIMARY KEY, probe_serial TEXT, spacing_mm REAL)")
        con.execute("INSERT INTO spacing_checks (probe_serial, spacing_mm) VALUES ('FN-0412', 8.02)")
    con.close()
    url = central.role("north")
    out = synced(rig_a, url)
    assert out["in_extra"] == {"runs": ["ground_cover"]}
    assert out["not_carried"] == ["spacing_checks"]
    store, _ = identity(rig_a)
    assert central.query("SELECT extra FROM linerig.runs WHERE store = %s AND id = 4", (store,)) == \
        [({"ground_cover": "rough grass"},)]
    assert central.query("SELECT count(*) FROM linerig.runs WHERE store = %s AND extra IS NOT NULL", (store,)) == \
        [(1,)]  # a column null in the other runs adds nothing to them
    done = cli("history", "--central", url, "--rig", "north", "--json", "4")
    assert json.loads(done.stdout)["ground_cover"] == "rough grass"
    assert synced(rig_a, url)["rows"] == 0  # and the new column did not make every run look changed


def test_values_sqlite_let_stray_from_their_column_type_are_kept(rig_a: Path, central: CentralDb) -> None:
    """SQLite keeps text in a number column; the server's column cannot: the value goes in the row's extra, the
    column is null, the push goes on, and the readers give the value back under its own name."""
    con = sqlite3.connect(rig_a)
    with con:
        con.execute("UPDATE runs SET depth_m = 'about 2 m' WHERE id = 6")
        con.execute("UPDATE samples SET heater_V = 'n/a' WHERE run_id = 6 AND n = 3")
    con.close()
    url = central.role("north")
    assert synced(rig_a, url)["pushed"]["runs"] == len(closed_runs(rig_a))
    store, _ = identity(rig_a)
    assert central.query("SELECT depth_m, extra FROM linerig.runs WHERE store = %s AND id = 6", (store,)) == \
        [(None, {"depth_m": "about 2 m"})]
    assert central.query("SELECT heater_v, extra FROM linerig.samples WHERE store = %s AND run_id = 6 AND n = 3",
                         (store,)) == [(None, {"heater_V": "n/a"})]
    assert central.query("SELECT count(*) FROM linerig.samples WHERE store = %s AND extra IS NOT NULL",
                         (store,)) == [(1,)]
    done = cli("history", "--central", url, "--rig", "north", "--json", "6")
    assert json.loads(done.stdout)["depth_m"] == "about 2 m"


def test_changed_probe_series_and_run_rows_become_revisions(rig_a: Path, central: CentralDb) -> None:
    url = central.role("north")
    from linerig.daemon.store.writer import Store

    st = Store(rig_a)
    try:
        sid = st.create_series({"kind": "cycles", "name": "FB-3", "cycles": 3, "plan_json": "{}"})
    finally:
        st.close()
    synced(rig_a, url)
    con = sqlite3.connect(rig_a)
    with con:  # the probe re-profiled, the series ended, and (by hand) a note on an ended run
        con.execute("UPDATE probes SET profile_toml = profile_toml || '# re-measured' WHERE serial = 'FN-0412'")
        con.execute("UPDATE series SET state = 'done', ended_utc = '2031-05-01T00:00:00+00:00' WHERE id = ?", [sid])
        con.execute("UPDATE runs SET notes = 'tip bent on extraction' WHERE id = 5")
    con.close()
    out = synced(rig_a, url)
    assert {k: v for k, v in out["pushed"].items() if v} == {"probes": 1, "series": 1, "run_revisions": 1}
    store, _ = identity(rig_a)
    assert central.query("SELECT rev, state FROM linerig.series WHERE store = %s ORDER BY rev", (store,)) == \
        [(1, "running"), (2, "done")]
    assert central.query("SELECT notes, rev FROM linerig.run_list WHERE store = %s AND id = 5", (store,)) == \
        [("tip bent on extraction", 2)]
    assert central.query("SELECT notes FROM linerig.runs WHERE store = %s AND id = 5", (store,)) == [(None,)]
    assert synced(rig_a, url)["rows"] == 0


def test_a_rig_keeps_its_name_and_its_file(rig_a: Path, tmp_path: Path, central: CentralDb) -> None:
    url_a, url_b = central.role("north"), central.role("south")
    synced(rig_a, url_a)
    other = as_other_rig(rig_a, tmp_path / "other.db", "north")  # another file calling itself north
    done = sync(other, url_b)
    assert done.returncode == 2 and "rig 'north' belongs to database role" in done.stderr
    done = sync(rig_a, url_a, "--rig", "north-2")  # the same file under a new name
    assert done.returncode == 2 and "was pushed as rig 'north'" in done.stderr
    assert identity(rig_a)[1] == "north"  # and the file keeps its name
    renamed = synced(other, url_b, "--rig", "south")  # naming a file before its first push is what --rig is for
    assert renamed["rig"] == "south" and identity(other)[1] == "south"


def test_the_connection_by_libpq_service_and_password_files(rig_a: Path, central: CentralDb, tmp_path: Path,
                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    """No password in rig.toml or on the command line: the service file names the server and the role, the password
    file holds the password, as on a rig (PGSERVICEFILE, PGPASSFILE); the server asks for it (scram-sha-256)."""
    central.role("keyed", password="k3y-in-a-file")
    user = f"{central.name}_keyed"
    services = tmp_path / "pg_service.conf"
    services.write_text(f"[linerig-central]\nhost={central.srv.socket_dir}\ndbname={central.name}\nuser={user}\n")
    monkeypatch.setenv("PGSERVICEFILE", str(services))
    monkeypatch.setenv("PGPASSFILE", str(tmp_path / "no-pgpass-yet"))
    done = sync(rig_a, "service=linerig-central")
    assert done.returncode == 2 and "refused the connection" in done.stderr and "password" in done.stderr
    passfile = tmp_path / "pgpass"
    passfile.write_text(f"*:*:{central.name}:{user}:k3y-in-a-file\n")
    passfile.chmod(0o600)
    monkeypatch.setenv("PGPASSFILE", str(passfile))
    assert synced(rig_a, "service=linerig-central")["pushed"]["runs"] == len(closed_runs(rig_a))
    # written on the command line it works too, with a word about who can see it, and is never printed back
    monkeypatch.delenv("PGSERVICEFILE")
    done = sync(rig_a, f"postgresql://{user}:k3y-in-a-file@/{central.name}?host={central.srv.socket_dir}", "--json")
    assert done.returncode == 0 and "visible to other users" in done.stderr
    assert "k3y" not in done.stdout and json.loads(done.stdout)["rows"] == 0


@pytest.mark.parametrize(("argv", "code", "words"), [
    (["--to", "postgresql://[bad"], 2, "not a PostgreSQL connection string"),
    (["--to", "host=/nonexistent/socket/dir dbname=x connect_timeout=2"], 3, "cannot reach the server"),
    (["--to", "dbname=x", "--nice", "30"], 2, "--nice must be from 0 to 19"),
])
def test_bad_input_and_no_server_say_what_to_do(rig_a: Path, argv: list[str], code: int, words: str) -> None:
    done = cli("sync", "--db", str(rig_a), *argv)
    assert done.returncode == code and words in done.stderr, done.stderr


def test_a_missing_file_or_schema_is_named(tmp_path: Path, rig_a: Path, pg_cluster: Any) -> None:
    bare = CentralDb(pg_cluster, None)
    done = sync(tmp_path / "nowhere.db", bare.admin_url)
    assert done.returncode == 2 and "no database at" in done.stderr
    done = sync(rig_a, bare.admin_url)
    assert done.returncode == 2 and "linerig central migrate" in done.stderr
