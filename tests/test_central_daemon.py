"""Two rigs, one server: a simulated rig's linerigd pushes by itself after its run ([sync] in rig.toml), a second rig's
store is pushed by hand, and the site report drawn from the server matches the reports drawn from each rig.

Also the daemon's sync when the server cannot be reached: it fails in its own process, says so in its status and
backs off, and the run is not touched."""

from __future__ import annotations

import asyncio
import html.parser
import json
import re
from pathlib import Path
from typing import Any

import pytest
from central_stores import SITE, as_other_rig, cli, closed_runs, identity, local_snapshot, server_snapshot, synced
from daemon_harness import FAST_PLAN, Daemon, Sim, reap, write_config  # noqa: F401  (reap: an autouse fixture)
from pg_server import CentralDb

from linerig.daemon.central.scheduler import SyncScheduler
from linerig.daemon.config import SyncConfig

pytestmark = pytest.mark.timeout(240)


class _Tables(html.parser.HTMLParser):
    """Each table of a report under the heading above it: {heading: [row cells, ...]}."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: dict[str, list[tuple[str, ...]]] = {}
        self._heading = ""
        self._in: str | None = None
        self._text = ""
        self._row: list[str] = []

    def handle_starttag(self, tag: str, attrs: Any) -> None:
        if tag in ("h2", "h3", "td", "th"):
            self._in, self._text = tag, ""
        elif tag == "tr":
            self._row = []

    def handle_data(self, data: str) -> None:
        if self._in:
            self._text += data

    def handle_endtag(self, tag: str) -> None:
        if tag in ("h2", "h3"):
            self._heading = self._text.strip()
        elif tag == "td":
            self._row.append(self._text.strip())
        elif tag == "tr" and self._row:
            self.tables.setdefault(self._heading, []).append(tuple(self._row))
        if tag == self._in:
            self._in = None


def _site_tables(tmp: Path, name: str, *source: str) -> dict[str, list[tuple[str, ...]]]:
    out = tmp / f"{name}.html"
    done = cli("report", "--site", SITE, *source, "-o", str(out))
    assert done.returncode == 0, done.stderr
    parser = _Tables()
    parser.feed(out.read_text(encoding="utf-8"))
    return parser.tables


def _labelled(rows: list[tuple[str, ...]], rig: str, column: int) -> set[tuple[str, ...]]:
    """A rig's own report rows with their id written as the central report writes it (rig/id)."""
    return {(*r[:column], f"{rig}/{r[column]}", *r[column + 1:]) for r in rows}


def test_a_rig_pushes_by_itself_and_the_site_report_from_the_server_matches(
        example_db: Path, tmp_path: Path, central: CentralDb) -> None:
    url_b = central.role("field_b")
    cfg = write_config(tmp_path / "rig.toml", f'[sync]\nto = "{url_b}"\nrig = "field-b"\ninterval_s = 3600\n')
    sim = Sim(tmp_path, speed=50)
    d = Daemon(tmp_path, sim.frontend, config=cfg)
    events = d.subscribe()
    d.wait_link()
    meta = {"site": SITE, "location": "BH3", "depth_m": 1.2, "sample": "in situ, 1.2 m", "operator": "test"}
    rid = d.request("start", **FAST_PLAN, metadata=meta)["run_id"]
    events.next(lambda e: e.get("event") == "run_finished" and e.get("run_id") == rid, 60)
    # the daemon's own push after the run: a sync event with the run in it
    ev = events.next(lambda e: e.get("event") == "sync" and (e.get("last_pushed") or {}).get("runs") == 1, 60)
    assert ev["state"] == "idle" and ev["rig"] == "field-b" and ev["failures"] == 0
    assert ev["waiting"] == {"open_runs": 0, "events": 0, "results": 0}
    assert ev["pushed_since_start"]["runs"] == 1 and ev["pushed_since_start"]["samples"] > 80
    status = cli("--socket", str(d.socket), "status")
    # idle, or pushing again if the end of the run came during the push that took it (a later one finds nothing)
    assert re.search(r"^sync: (idle|pushing) to .* as rig field-b; in step at .* \(1 run\(s\), \d+ samples pushed "
                     r"since start\)$", status.stdout, re.M), status.stdout
    events.close()
    assert d.stop() == 0
    sim.stop()
    rig_b = d.db
    assert identity(rig_b)[1] == "field-b"  # [sync] rig recorded in the rig's file
    after = synced(rig_b, url_b)  # what came after the daemon's last push: its own "stopping" event
    assert {k: v for k, v in after["pushed"].items() if v} == {"events": 1}
    assert server_snapshot(central.admin_url, identity(rig_b)[0]) == local_snapshot(rig_b)

    # the second rig: the example site's store, pushed by hand
    rig_a = as_other_rig(example_db, tmp_path / "north.db", "north")
    synced(rig_a, central.role("north"))
    reader = central.role("office", "linerig_reader")
    central_tables = _site_tables(tmp_path, "central", "--central", reader)
    a_tables = _site_tables(tmp_path, "north", "--db", str(rig_a))
    b_tables = _site_tables(tmp_path, "field-b", "--db", str(rig_b))

    runs = set(central_tables["Runs"])
    assert runs == _labelled(a_tables["Runs"], "north", 0) | _labelled(b_tables["Runs"], "field-b", 0)
    assert len(runs) == len(central_tables["Runs"])  # each row once
    assert {r[0] for r in b_tables["Runs"]} == {str(rid)}
    holes = {h for h in central_tables if h.startswith("Borehole")}
    assert holes == {"Borehole BH1", "Borehole BH2", "Borehole BH3"}
    for hole in holes:  # the depth summaries of each borehole, as its rig's own report has them
        own = a_tables if hole in a_tables else b_tables
        assert central_tables[hole] == own[hole], hole
    cal = "Calibrations of the probes used"
    assert set(central_tables[cal]) == _labelled(a_tables[cal], "north", 1)
    listed = cli("history", "--central", reader, "--json", "--limit", "1000")
    assert len(json.loads(listed.stdout)) == len(closed_runs(rig_a)) + 1

    # profile across rigs: every borehole's points, each labelled with its rig
    done = cli("profile", "--central", reader, "--site", SITE, "--json")
    assert done.returncode == 0, done.stderr
    prof = json.loads(done.stdout)["boreholes"]
    assert {p["rig"] for p in prof["BH3"]} == {"field-b"} and {p["rig"] for p in prof["BH1"]} == {"north"}
    local = cli("profile", "--db", str(rig_a), "--site", SITE, "--json")
    mine = json.loads(local.stdout)["boreholes"]["BH1"]
    assert [{**p, "rig": "north"} for p in mine] == prof["BH1"]


def test_when_the_server_is_away_the_sync_fails_in_its_own_process_and_backs_off(example_db: Path,
                                                                                 tmp_path: Path) -> None:
    db = as_other_rig(example_db, tmp_path / "rig.db", "away")
    cfg = SyncConfig(to=f"host={tmp_path / 'no-server'} dbname=linerig connect_timeout=2", retry_s=30,
                     max_backoff_s=100)
    seen: list[dict[str, Any]] = []
    sched = SyncScheduler(cfg, db, seen.append)

    async def twice() -> list[bool]:
        return [await sched.attempt(), await sched.attempt()]

    assert asyncio.run(twice()) == [False, False]
    st = sched.status()
    assert st["state"] == "failing" and st["failures"] == 2 and "cannot reach the server" in st["last_error"]
    assert sched.next_delay() == 60.0  # 30 s, then twice that …
    sched.failures = 5
    assert sched.next_delay() == 100.0  # … up to the longest wait
    assert [e["event"] for e in seen] == ["sync", "sync"] and seen[-1]["failures"] == 2
