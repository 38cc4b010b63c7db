"""The read side across rigs: runs, sites, probes and calibrations from the central database, in the shapes the rig's
own readers give (``store.queries``, ``report.sources``), plus ``rig`` on every run and calibration.

Column names come back as the rig's own (the central ones are them in lower case: the local schema itself says which
were which), and a row's ``extra`` (local columns the central schema does not name yet) is folded back in.
"""

from __future__ import annotations

import functools
import json
import sqlite3
from typing import TYPE_CHECKING, Any

import psycopg
import sqlite_utils
from psycopg.rows import dict_row

from linerig.daemon.central.schema import READER_NEEDS, require
from linerig.daemon.store import schema as local_schema
from linerig.daemon.store.queries import arrays_from_samples, assemble_detail, heater_off_from_events

if TYPE_CHECKING:  # the report's readers pull in the reduction: imported where a run is loaded, not for a listing
    from linerig.daemon.probe import ProbeProfile
    from linerig.daemon.report.sources import RunRecord

LIST_COLUMNS = ("id", "created_utc", "ended_utc", "state", "end_reason", "site", "location", "depth_m", "sample",
                "material", "probe_serial", "series_id", "cycle")
# the latest result's figures ride along, as in the rig's own list (store.queries.list_runs)
_LATEST = ("(SELECT x.{col} FROM linerig.results x WHERE x.store = u.store AND x.run_id = u.id "
           "ORDER BY x.id DESC LIMIT 1)")
CENTRAL_ONLY = ("fingerprint", "pushed_at", "rev", "extra")


@functools.cache
def local_names() -> dict[str, str]:
    """Central column name → the rig's own (``q_w_per_m`` → ``q_W_per_m``), read off a fresh local schema."""
    conn = sqlite3.connect(":memory:")
    try:
        local_schema.migrate(sqlite_utils.Database(conn))
        tables = [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        return {c.lower(): c for t in tables for c in (r[1] for r in conn.execute(f"PRAGMA table_info({t})"))}
    finally:
        conn.close()


def as_local(row: dict[str, Any]) -> dict[str, Any]:
    """A central row under the rig's column names, its ``extra`` folded in, the central bookkeeping left out."""
    names = local_names()
    out = {names.get(k, k): v for k, v in row.items() if k not in CENTRAL_ONLY}
    extra = row.get("extra")
    if extra:  # local columns the central table lacks, and values its column could not take (stored null)
        for k, v in (json.loads(extra) if isinstance(extra, str) else extra).items():
            if out.get(k) is None:
                out[k] = v
    if "store" in out:
        out["store"] = str(out["store"])
    return out


def _fetch(conn: psycopg.Connection[Any], query: str, params: tuple[Any, ...] = ()) -> list[dict[str, Any]]:
    with conn.cursor(row_factory=dict_row) as cur:
        cur.execute(query, params)  # type: ignore[arg-type]
        return [as_local(r) for r in cur.fetchall()]


def list_runs(conn: psycopg.Connection[Any], limit: int = 200, rig: str | None = None) -> list[dict[str, Any]]:
    """The newest runs of every rig (of one with ``rig``), each once, with its rig."""
    require(conn, READER_NEEDS, "reading")
    cols = ", ".join(f"u.{c}" for c in LIST_COLUMNS)
    latest = ", ".join(f"{_LATEST.format(col=c)} AS {c}" for c in ("sensor", "k_w_per_mk", "k_u_w_per_mk"))
    where, params = ("WHERE u.rig = %s", (rig,)) if rig else ("", ())
    return _fetch(conn, f"SELECT u.rig, {cols}, {latest} FROM linerig.run_list u {where} "
                        "ORDER BY u.created_utc DESC NULLS LAST, u.rig, u.id DESC LIMIT %s", (*params, limit))


def rig_summary(conn: psycopg.Connection[Any]) -> list[dict[str, Any]]:
    """Each rig: its role, stores, runs, samples and last push (works on every central version)."""
    mine = "JOIN linerig.stores st ON st.store = x.store WHERE st.rig = rg.rig"
    return _fetch(conn, f"""
        SELECT rg.rig, rg.role::text AS role, rg.first_push,
               (SELECT count(*) FROM linerig.stores st WHERE st.rig = rg.rig) AS stores,
               (SELECT count(*) FROM linerig.runs x {mine}) AS runs,
               (SELECT count(*) FROM linerig.samples x {mine}) AS samples,
               (SELECT max(x.pushed_at) FROM linerig.runs x {mine}) AS last_push
        FROM linerig.rigs rg ORDER BY rg.rig""")


class CentralRuns:
    """A RunSource (``report.sources``) over the central database: every rig's runs."""

    def __init__(self, conn: psycopg.Connection[Any], where: str) -> None:
        self.conn = conn
        self.where = where
        require(conn, READER_NEEDS, "reading")

    def _details(self, where: str, params: tuple[Any, ...]) -> list[dict[str, Any]]:
        """Runs chosen by ``where`` (on run_list) with their events, newest results and sample counts."""
        runs = _fetch(self.conn, f"SELECT * FROM linerig.run_list u WHERE {where} "
                                 "ORDER BY u.created_utc NULLS LAST, u.rig, u.id", params)
        if not runs:
            return []
        chosen = f"JOIN linerig.run_list u ON u.store = x.store AND u.id = x.run_id WHERE {where}"
        events: dict[tuple[str, int], list[dict[str, Any]]] = {}
        for e in _fetch(self.conn, "SELECT x.store, x.run_id, x.wall_utc, x.device_s, x.kind, x.state, x.reason, "
                                   f"x.data FROM linerig.events x {chosen} ORDER BY x.id", params):
            events.setdefault((e.pop("store"), e.pop("run_id")), []).append(e)
        results: dict[tuple[str, int], list[dict[str, Any]]] = {}
        for r in _fetch(self.conn, "SELECT x.store, x.run_id, x.sensor, x.data, x.source FROM linerig.results x "
                                   f"{chosen} ORDER BY x.id", params):
            results.setdefault((r.pop("store"), r.pop("run_id")), []).append(r)
        counts = {(c["store"], c["run_id"]): c["n"] for c in _fetch(
            self.conn, f"SELECT x.store, x.run_id, count(*) AS n FROM linerig.samples x {chosen} "
                       "GROUP BY x.store, x.run_id", params)}
        return [assemble_detail(run, events.get((run["store"], run["id"]), []),
                                results.get((run["store"], run["id"]), []), counts.get((run["store"], run["id"]), 0))
                for run in runs]

    def site_runs(self, site: str, borehole: str | None = None) -> list[dict[str, Any]]:
        if borehole:
            return self._details("u.site = %s AND u.location = %s", (site, borehole))
        return self._details("u.site = %s", (site,))

    def run(self, rig: str, run_id: int) -> dict[str, Any]:
        found = self._details("u.rig = %s AND u.id = %s", (rig, run_id))
        if not found:
            from linerig.daemon.report.sources import SourceError

            raise SourceError(f"no run {run_id} of rig {rig!r} on the central server")
        return found[0]

    def rigs_with_run(self, run_id: int) -> list[str]:
        return [r["rig"] for r in _fetch(self.conn, "SELECT DISTINCT rig FROM linerig.run_list WHERE id = %s "
                                                    "ORDER BY rig", (run_id,))]

    def list_sites(self) -> list[dict[str, Any]]:
        return _fetch(self.conn, "SELECT site, count(*) AS runs, count(DISTINCT location) AS boreholes, "
                                 "count(DISTINCT rig) AS rigs FROM linerig.run_list "
                                 "WHERE site IS NOT NULL AND site <> '' GROUP BY site ORDER BY site")

    def probe_profiles(self) -> dict[str, ProbeProfile]:
        """Every rig's probes; a serial on several rigs takes the profile pushed last."""
        from linerig.daemon.report.sources import profiles_from_rows

        return profiles_from_rows(_fetch(self.conn, "SELECT serial, profile_toml FROM linerig.probe_list "
                                                    "ORDER BY pushed_at, rig"))

    def calibration_history(self, probe_serial: str) -> list[dict[str, Any]]:
        """A probe's calibrations from every rig it was calibrated on, oldest first."""
        if not probe_serial:
            return []
        return _fetch(self.conn, "SELECT st.rig, c.* FROM linerig.calibrations c JOIN linerig.stores st "
                                 "ON st.store = c.store WHERE c.probe_serial = %s ORDER BY c.created_utc, st.rig, c.id",
                      (probe_serial,))

    def load_run(self, run: dict[str, Any]) -> RunRecord:
        from linerig.daemon.report.sources import record_of

        detail = run if "results" in run else self.run(str(run["rig"]), int(run["id"]))
        arr = None
        if detail.get("n_samples"):
            with self.conn.cursor() as cur:
                cur.execute("SELECT device_s, q_w_per_m, temps_c, phase FROM linerig.samples "
                            "WHERE store = %s AND run_id = %s ORDER BY n", (detail["store"], detail["id"]))
                arr = arrays_from_samples(detail, cur.fetchall(), heater_off_from_events(detail.get("events", [])))
        serial = str(detail.get("probe_serial") or "")
        return record_of(detail, arr, self.probe_profiles().get(serial), self.calibration_history(serial))
