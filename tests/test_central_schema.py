"""The central schema on a real PostgreSQL server: what each role may do (a rig inserts only its own rows and changes
none, a reader only reads), and an upgrade from the previous central version with rigs' rows already in it."""

from __future__ import annotations

import json
import sqlite3
import uuid
from pathlib import Path
from typing import Any

import psycopg
import pytest
from central_stores import (
    add_runs,
    as_other_rig,
    cli,
    closed_runs,
    identity,
    local_snapshot,
    server_snapshot,
    synced,
)
from central_stores import sync as sync_cli
from pg_server import CentralDb

from linerig.daemon.central.schema import CENTRAL_VERSION, READER_NEEDS

pytestmark = pytest.mark.timeout(300)


@pytest.fixture
def two_rigs(example_db: Path, tmp_path: Path) -> tuple[Path, Path]:
    north = as_other_rig(example_db, tmp_path / "north.db", "north")
    south = as_other_rig(example_db, tmp_path / "south.db", "south")
    return north, south


def _refused(url: str, sql: str, params: tuple[Any, ...] = ()) -> str:
    """Run one statement as the role of ``url``; it must be refused for want of privilege. Returns the reason."""
    with psycopg.connect(url) as conn, pytest.raises(psycopg.errors.InsufficientPrivilege) as err:
        conn.execute(sql, params)  # type: ignore[arg-type]
    return str(err.value)


def test_a_rig_writes_only_its_own_rows_and_changes_none(two_rigs: tuple[Path, Path], central: CentralDb) -> None:
    north, south = two_rigs
    url_n, url_s = central.role("north"), central.role("south")
    synced(north, url_n)
    synced(south, url_s)
    store_n, _ = identity(north)
    before = server_snapshot(central.admin_url, store_n)
    run = closed_runs(north)[0]

    # south overwriting, removing or adding to north's rows: refused by the server itself
    assert "permission denied" in _refused(url_s, "UPDATE linerig.runs SET notes = 'x' WHERE store = %s",
                                           (store_n,))
    assert "permission denied" in _refused(url_s, "DELETE FROM linerig.samples WHERE store = %s", (store_n,))
    assert "permission denied" in _refused(
        url_s, "INSERT INTO linerig.runs (store, id, fingerprint) VALUES (%s, %s, 'x') "
               "ON CONFLICT (store, id) DO UPDATE SET state = 'faked'", (store_n, run))
    assert "row-level security" in _refused(
        url_s, "INSERT INTO linerig.results (store, id, run_id, sensor, k_w_per_mk, source) "
               "VALUES (%s, 99999, %s, 'heater', 9.9, 'forged')", (store_n, run))
    assert "row-level security" in _refused(
        url_s, "INSERT INTO linerig.samples (store, run_id, n, device_s) VALUES (%s, %s, 999999, 1.0)",
        (store_n, run))
    assert "row-level security" in _refused(url_s, "INSERT INTO linerig.stores (store, rig) VALUES (%s, 'north')",
                                            (str(uuid.uuid4()),))
    north_role = central.query("SELECT role::text FROM linerig.rigs WHERE rig = 'north'")[0][0]
    assert "row-level security" in _refused(url_s, "INSERT INTO linerig.rigs (rig, role) VALUES ('east', %s)",
                                            (north_role,))
    # a rig changes none of its own rows either: a re-reduction or a new profile is a new row
    assert "permission denied" in _refused(url_n, "UPDATE linerig.results SET k_w_per_mk = 1 WHERE store = %s",
                                           (store_n,))
    assert "permission denied" in _refused(url_n, "TRUNCATE linerig.events")
    assert "permission denied" in _refused(url_n, "CREATE TABLE linerig.mine (x int)")
    assert server_snapshot(central.admin_url, store_n) == before

    # a reader reads everything and writes nothing; a role in neither group reads nothing
    reader = central.role("office", "linerig_reader")
    with psycopg.connect(reader) as conn:
        rigs = conn.execute("SELECT rig, count(*) FROM linerig.run_list GROUP BY rig ORDER BY rig").fetchall()
    assert rigs == [("north", len(closed_runs(north))), ("south", len(closed_runs(south)))]
    assert "permission denied" in _refused(reader, "INSERT INTO linerig.rigs (rig) VALUES ('office')")
    stranger = central.role("stranger", "")
    assert "permission denied" in _refused(stranger, "SELECT count(*) FROM linerig.runs")
    done = sync_cli(north, stranger)
    assert done.returncode == 2 and "GRANT linerig_rig" in done.stderr


def test_upgrade_from_an_earlier_central_version(two_rigs: tuple[Path, Path], pg_cluster: Any) -> None:
    north, south = two_rigs
    con = sqlite3.connect(north)
    with con:  # runs that know their front end (local schema 4): central version 2 has no columns for it
        con.execute("UPDATE runs SET frontend_model = 'LR-FE2', frontend_serial = 'FE-0042', "
                    "frontend_firmware = '1.4.0' WHERE id IN (4, 5)")
        # a dual needle's spacing calibration (local schema 7): central version 2 has no table for it
        con.execute("INSERT INTO spacing_calibrations (probe_serial, sensor, created_utc, reference, spacing_m, "
                    "accepted) VALUES ('PX8-40-0005', 'needle8', '2031-02-03T09:00:00.000+00:00', 'agar-water', "
                    "0.00806, 1)")
    con.close()
    old = CentralDb(pg_cluster, 2)  # as an earlier linerig left it
    url_n, url_s = old.role("north"), old.role("south")
    reader = old.role("office", "linerig_reader")
    first = synced(north, url_n)  # a push needs nothing newer than version 1
    assert first["central_version"] == 2
    assert first["in_extra"] == {"runs": ["frontend_model", "frontend_serial", "frontend_firmware",
                                          "sample_radius_m"]}  # and the sample's radius (local schema 8)
    assert first["not_carried"] == ["spacing_calibrations"]  # named, kept on the rig, carried after the upgrade
    store_n, _ = identity(north)

    # only the owner migrates: a rig may not
    done = cli("central", "migrate", url_n)
    assert done.returncode == 2 and "owner" in done.stderr
    done = cli("central", "migrate", old.admin_url)
    assert done.returncode == 0 and "upgraded from 2" in done.stdout, done.stderr
    done = cli("central", "migrate", old.admin_url)
    assert done.returncode == 0 and "already at version" in done.stdout

    assert synced(north, url_n)["pushed"]["spacing_calibrations"] == 1
    # what was carried in extra is in its columns now, and the rows are otherwise as they were
    assert old.query("SELECT id, frontend_serial, extra FROM linerig.runs WHERE store = %s AND "
                     "frontend_serial IS NOT NULL ORDER BY id", (store_n,)) == [(4, "FE-0042", None),
                                                                                 (5, "FE-0042", None)]
    assert server_snapshot(old.admin_url, store_n) == local_snapshot(north)
    detail = json.loads(cli("history", "--central", reader, "--rig", "north", "--json", "4").stdout)
    assert (detail["frontend_model"], detail["frontend_firmware"]) == ("LR-FE2", "1.4.0")
    add_runs(north, 1, seed=3)
    again = synced(north, url_n)
    assert again["pushed"]["runs"] == 1 and again["in_extra"] == {}
    assert synced(north, url_n)["rows"] == 0
    synced(south, url_s)
    done = cli("history", "--central", reader, "--json", "--limit", "1000")
    assert done.returncode == 0, done.stderr
    assert {(r["rig"]) for r in json.loads(done.stdout)} == {"north", "south"}
    status = json.loads(cli("central", "status", old.admin_url, "--json").stdout)
    assert status["version"] == CENTRAL_VERSION
    assert {r["rig"]: r["runs"] for r in status["rigs"]} == {"north": len(closed_runs(north)),
                                                            "south": len(closed_runs(south))}


def test_the_read_side_asks_for_the_schema_it_needs(two_rigs: tuple[Path, Path], pg_cluster: Any) -> None:
    north, _ = two_rigs
    first = CentralDb(pg_cluster, READER_NEEDS - 1)  # pushes go in; the views the readers use are not there yet
    synced(north, first.role("north"))
    done = cli("history", "--central", first.role("office", "linerig_reader"), "--json")
    assert done.returncode == 2 and f"needs {READER_NEEDS}" in done.stderr and "central migrate" in done.stderr


def test_a_server_newer_than_this_linerig_is_named(two_rigs: tuple[Path, Path], central: CentralDb) -> None:
    north, _ = two_rigs
    url = central.role("north")
    with psycopg.connect(central.admin_url) as conn:  # a later linerig's schema whose writers must be newer
        conn.execute("UPDATE linerig.schema_version SET version = %s, writer_min = %s",
                     (CENTRAL_VERSION + 1, CENTRAL_VERSION + 1))
    done = sync_cli(north, url)
    assert done.returncode == 2 and "upgrade linerig on this rig" in done.stderr
    done = cli("central", "migrate", central.admin_url)
    assert done.returncode == 2 and "newer than this linerig" in done.stderr
