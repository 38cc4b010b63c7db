"""Push a rig's store to the central server: what the server lacks, never what it has.

The server is the record of what was pushed (no push log in the rig's file, which has one writer: the daemon): each
push starts by asking it which rows of this store it holds. Then, in this order:

1. probes and series: a row the server lacks, or whose content (its fingerprint) differs from the newest revision
   there, goes in as a new revision: a probe re-profiled or a series that ended is never an update;
2. each ended run the server lacks, in one transaction with its samples, events and results, so a cut at any point
   leaves the server with whole runs only (and a result can never arrive without its run: foreign keys say so too);
3. events and results that came after their run was pushed (the final reduction lands after the run ends; a run
   re-reduced later adds a result): a new row each, never a change to an old one;
4. calibrations, qualifications and spacing calibrations the server lacks (spacing calibrations from central
   version 4 on; an older server gets them after `linerig central migrate`);
5. a pushed run whose row changed on the rig since: a new revision in ``run_revisions``.

A run still in progress waits, with its events and results. A second push finds nothing missing and writes nothing.

Columns: each local column goes to the central column of the same name in lower case when the server's table has
one, otherwise into the row's ``extra`` (jsonb), so a column added to the local schema by a later linerig travels
before the central schema names it (the summary lists them); tables the push does not know are named, not sent.

Rows reach the server through COPY into a temporary table and one INSERT … SELECT per batch: PostgreSQL does not
take COPY FROM straight into a table under row-level security, and the INSERT is where the server checks that the
rows are this rig's own.
"""

from __future__ import annotations

import hashlib
import json
import struct
import time
import uuid
from collections.abc import Callable, Iterable
from dataclasses import asdict, dataclass, field
from typing import Any

import psycopg
from psycopg import sql
from psycopg.types.json import Jsonb

from linerig.daemon.central.errors import (
    CentralBusy,
    CentralError,
    CentralRefused,
    CentralSchemaError,
    CentralUnreachable,
    LocalStoreError,
)
from linerig.daemon.central.local import LocalStore, read_ahead
from linerig.daemon.central.schema import SCHEMA, WRITER_NEEDS, require
from linerig.daemon.store.schema import record_rig_name
from linerig.daemon.store.writer import OPEN_RUN_STATES

Progress = Callable[[dict[str, Any]], None]
RESERVED = frozenset({"store", "extra", "pushed_at", "fingerprint", "rev", "row"})
KEYS = {"probes": "serial", "series": "id", "runs": "id", "events": "id", "results": "id", "calibrations": "id",
        "qualifications": "id", "spacing_calibrations": "id"}
REVISED = ("probes", "series")
APPENDED = ("calibrations", "qualifications", "spacing_calibrations")
APPENDED_SINCE = {"spacing_calibrations": 4}  # the central version that has the table (older servers: not carried)
SAMPLE_CHUNK = 20_000


@dataclass
class PushSummary:
    rig: str
    store: str
    central_version: int
    pushed: dict[str, int] = field(default_factory=dict)
    waiting: dict[str, int] = field(default_factory=dict)
    in_extra: dict[str, list[str]] = field(default_factory=dict)
    not_carried: list[str] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def rows(self) -> int:
        return sum(self.pushed.values())

    @property
    def rows_per_s(self) -> float:
        return self.rows / self.seconds if self.seconds > 0 else 0.0

    def to_dict(self) -> dict[str, Any]:
        return {**asdict(self), "rows": self.rows, "rows_per_s": round(self.rows_per_s, 1)}


def fingerprint(row: dict[str, Any]) -> str:
    """Content hash of a local row; null columns left out, so a column added to the schema (null in every old row)
    does not make every old row look changed."""
    kept = {k: v for k, v in row.items() if v is not None}
    return hashlib.sha1(json.dumps(kept, sort_keys=True, default=_jsonable).encode()).hexdigest()


def _jsonable(value: Any) -> Any:
    if isinstance(value, bytes):  # a BLOB: hex, so it stays readable in jsonb
        return value.hex()
    return str(value)


@dataclass(frozen=True)
class TableMap:
    """How one local table's columns land in its central table."""

    table: str
    mapped: tuple[str, ...]    # local columns with a central column of the same name in lower case
    spare: tuple[str, ...]     # local columns the central table lacks: carried in ``extra``
    types: dict[str, str]      # central column → its type's name (int8, float8, text, uuid, jsonb …)

    @property
    def local(self) -> list[str]:
        return [*self.mapped, *self.spare]

    @property
    def central(self) -> list[str]:
        return [c.lower() for c in self.mapped]

    @property
    def names(self) -> dict[str, str]:
        """Central column → local one."""
        return {c.lower(): c for c in self.mapped}

    def extra_doc(self, values: tuple[Any, ...]) -> dict[str, Any] | None:
        """The spare columns of a row (read in ``local`` order), or None when all are null."""
        if not self.spare:
            return None
        got = {k: v for k, v in zip(self.spare, values[len(self.mapped):], strict=True) if v is not None}
        return {k: _jsonable(v) if isinstance(v, bytes) else v for k, v in got.items()} or None


def table_maps(local: LocalStore, conn: psycopg.Connection[Any]) -> dict[str, TableMap]:
    with conn.cursor() as cur:
        cur.execute("SELECT table_name, column_name, udt_name FROM information_schema.columns "
                    "WHERE table_schema = %s", (SCHEMA,))
        central: dict[str, dict[str, str]] = {}
        for table, column, udt in cur.fetchall():
            central.setdefault(table, {})[column] = udt
    conn.rollback()
    maps = {}
    for table in (*KEYS, "samples"):
        have = set(central.get(table, {})) - RESERVED
        cols = local.columns(table)
        mapped = tuple(c for c in cols if c.lower() in have)
        spare = tuple(c for c in cols if c.lower() not in have)
        maps[table] = TableMap(table, mapped, spare, central.get(table, {}))
    return maps


class Pusher:
    """One push session: a connection, the rig's store, what the server holds of it."""

    def __init__(self, local: LocalStore, conn: psycopg.Connection[Any], progress: Progress | None = None,
                 sample_chunk: int = SAMPLE_CHUNK) -> None:
        self.local = local
        self.conn = conn
        self.progress = progress or (lambda event: None)
        self.chunk = sample_chunk
        self.store = local.identity.store_uuid
        self._temp: set[str] = set()

    # -- the whole push ---------------------------------------------------------
    def run(self, rig: str | None = None) -> PushSummary:
        t0 = time.monotonic()
        version = require(self.conn, WRITER_NEEDS, "a push")
        self.appended = tuple(t for t in APPENDED if version >= APPENDED_SINCE.get(t, 1))
        self._lock()
        name = self._claim(rig)
        self.maps = table_maps(self.local, self.conn)
        summary = PushSummary(name, self.store, version, in_extra={t: list(m.spare) for t, m in self.maps.items()
                                                                    if m.spare and (t in self.appended
                                                                                    or t not in APPENDED)},
                              not_carried=self.local.not_carried()
                              + [t for t in APPENDED if t not in self.appended and t in self.local.tables()])
        pushed = dict.fromkeys(("probes", "series", "runs", "samples", "events", "results", *self.appended,
                                "run_revisions"), 0)
        held = self._held()
        for table in REVISED:
            pushed[table] += self._push_revised(table, held[table])
        runs = self._local_rows("runs")  # state and row from one read: a run that ends meanwhile waits for next time
        closed = {rid for rid, r in runs.items() if r.get("state") is None or r["state"] not in OPEN_RUN_STATES}
        todo = [rid for rid in sorted(closed) if rid not in held["runs"]]
        by_run = {t: self._missing_by_run(t, held[t]) for t in ("events", "results")}
        self._push_runs(name, todo, runs, by_run, pushed, t0)
        for rid in todo:
            held["runs"][rid] = (1, runs[rid]["_fp"])
        late = {t: [r for rid, rows in by_run[t].items() if rid is None or rid in held["runs"] for r in rows]
                for t in by_run}
        if late["events"] or late["results"]:
            with self._tx("events and results of runs already on the server"), self.conn.cursor() as cur:
                for table, rows in late.items():
                    pushed[table] += self._insert(cur, table, rows)
        for table in self.appended:
            rows = [r for r in self._local_rows(table).values() if r["id"] not in held[table]]
            if rows:
                with self._tx(table), self.conn.cursor() as cur:
                    pushed[table] += self._insert(cur, table, rows)
        pushed["run_revisions"] = self._push_run_revisions(runs, closed, held["runs"], set(todo))
        summary.pushed = pushed
        summary.waiting = {"open_runs": len(runs) - len(closed), **{
            t: sum(len(rows) for rid, rows in by_run[t].items() if rid is not None and rid not in held["runs"])
            for t in by_run}}
        summary.seconds = time.monotonic() - t0
        self.progress({"event": "done", **summary.to_dict()})
        return summary

    def _missing_by_run(self, table: str, held: dict[Any, tuple[int, str]]) -> dict[int | None, list[dict[str, Any]]]:
        """The rows of events or results the server lacks, by their run (None: an event of no run)."""
        out: dict[int | None, list[dict[str, Any]]] = {}
        for row in self._local_rows(table).values():
            if row["id"] not in held:
                out.setdefault(row["run_id"], []).append(row)
        return out

    def _push_runs(self, rig: str, todo: list[int], runs: dict[int, dict[str, Any]],
                   by_run: dict[str, dict[int | None, list[dict[str, Any]]]], pushed: dict[str, int],
                   t0: float) -> None:
        """Each run the server lacks in its own transaction, with its samples, events and results; progress after
        each (the rows of the runs pushed are taken out of ``by_run``)."""
        counts = self.local.sample_counts()
        total = sum(counts.get(r, 0) for r in todo)
        self.progress({"event": "start", "rig": rig, "store": self.store, "runs": len(todo), "samples": total})
        done_samples = 0
        for i, rid in enumerate(todo, start=1):
            n = self._push_run(runs[rid], by_run["events"].pop(rid, []), by_run["results"].pop(rid, []))
            done_samples += n["samples"]
            for k, v in n.items():
                pushed[k] += v
            self.progress({"event": "run", "run_id": rid, "done": i, "of": len(todo), "samples": done_samples,
                           "samples_total": total, "rows": sum(pushed.values()), "seconds": time.monotonic() - t0})

    # -- who we are ---------------------------------------------------------------
    def _lock(self) -> None:
        """One push per store at a time (the daemon's own and a manual one): a session lock, gone with the
        connection if the process is killed."""
        with self.conn.cursor() as cur:
            cur.execute("SELECT pg_try_advisory_lock(hashtext('linerig push'), hashtext(%s))", (self.store,))
            row = cur.fetchone()
        self.conn.rollback()
        if not row or not row[0]:
            raise CentralBusy(f"another push of this store ({self.store}) is running; try again when it ends")

    def _claim(self, rig: str | None) -> str:
        """The rig's name on the server and this store under it; refused when either belongs to someone else."""
        ident = self.local.identity
        name = rig or ident.rig
        if not name:
            raise LocalStoreError(f"{self.local.path}: the rig has no name; give one with --rig NAME")
        with self._tx("the rig's name"), self.conn.cursor() as cur:
            cur.execute("SELECT rig FROM linerig.stores WHERE store = %s", (self.store,))
            row = cur.fetchone()
            if row is not None and row[0] != name:
                raise CentralRefused(f"this database ({self.store}) was pushed as rig {row[0]!r}, and is now "
                                     f"called {name!r}: keep the name {row[0]!r} ([sync] rig in rig.toml, or "
                                     f"--rig {row[0]})")
            cur.execute("SELECT role, session_user FROM linerig.rigs WHERE rig = %s", (name,))
            owner = cur.fetchone()
            if owner is None:
                cur.execute("INSERT INTO linerig.rigs (rig) VALUES (%s)", (name,))
            elif owner[0] != owner[1]:
                raise CentralRefused(f"rig {name!r} belongs to database role {owner[0]!r} on this server and this "
                                     f"connection is role {owner[1]!r}: connect as {owner[0]!r}, or give this rig a "
                                     "name of its own ([sync] rig in rig.toml, or --rig NAME)")
            if row is None:
                cur.execute("INSERT INTO linerig.stores (store, rig, hostname, created_utc, local_schema) "
                            "VALUES (%s, %s, %s, %s, %s)", (self.store, name, ident.hostname, ident.created_utc,
                                                            self.local.schema_version()))
        if rig and rig != ident.rig:
            self._rename_locally(rig)
        return name

    def _rename_locally(self, name: str) -> None:
        import sqlite3

        conn = sqlite3.connect(str(self.local.path), isolation_level=None)
        try:
            conn.execute("PRAGMA busy_timeout=5000")
            record_rig_name(conn, name)
        except sqlite3.Error as exc:
            raise LocalStoreError(f"cannot record the rig's name in {self.local.path} ({exc}): run the sync as the "
                                  "file's owner") from None
        finally:
            conn.close()

    def _held(self) -> dict[str, dict[Any, tuple[int, str]]]:
        """What the server holds of this store: keys, with (newest revision, its fingerprint) where rows have one."""
        held: dict[str, dict[Any, tuple[int, str]]] = {}
        with self._tx("reading what the server holds"), self.conn.cursor() as cur:
            for table in REVISED:
                key = sql.Identifier(KEYS[table])
                cur.execute(sql.SQL("SELECT DISTINCT ON ({k}) {k}, rev, fingerprint FROM {t} WHERE store = %s "
                                    "ORDER BY {k}, rev DESC").format(k=key, t=sql.Identifier(SCHEMA, table)),
                            (self.store,))
                held[table] = {r[0]: (int(r[1]), r[2]) for r in cur.fetchall()}
            cur.execute("SELECT r.id, coalesce(v.rev, 1), coalesce(v.fingerprint, r.fingerprint) FROM linerig.runs r "
                        "LEFT JOIN LATERAL (SELECT rv.rev, rv.fingerprint FROM linerig.run_revisions rv "
                        "WHERE rv.store = r.store AND rv.id = r.id ORDER BY rv.rev DESC LIMIT 1) v ON true "
                        "WHERE r.store = %s", (self.store,))
            held["runs"] = {int(r[0]): (int(r[1]), r[2]) for r in cur.fetchall()}
            for table in ("events", "results", *self.appended):
                cur.execute(sql.SQL("SELECT id FROM {} WHERE store = %s").format(sql.Identifier(SCHEMA, table)),
                            (self.store,))
                held[table] = {int(r[0]): (1, "") for r in cur.fetchall()}
        return held

    # -- reading the rig's rows -------------------------------------------------------
    def _local_rows(self, table: str) -> dict[Any, dict[str, Any]]:
        """Every row of a small table by its key, with its values under their local names and ``_values`` in the
        map's order (runs, probes and series also carry ``_fp``)."""
        m = self.maps[table]
        out = {}
        for values in self.local.rows(table, m.local):
            row = dict(zip(m.local, values, strict=True))
            row["_values"] = values
            if table in (*REVISED, "runs"):
                row["_fp"] = fingerprint({k: v for k, v in row.items() if not k.startswith("_")})
            out[row[KEYS[table]]] = row
        return out

    # -- writing -----------------------------------------------------------------------
    def _tx(self, what: str) -> _Transaction:
        return _Transaction(self.conn, what)

    def _staging(self, cur: psycopg.Cursor[Any], table: str, columns: list[str]) -> sql.Identifier:
        """A session temporary table with the central table's columns (no constraints), for COPY."""
        name = f"incoming_{table}"
        if name not in self._temp:
            cols = sql.SQL(", ").join(sql.Identifier(c) for c in columns)
            cur.execute(sql.SQL("CREATE TEMP TABLE {} AS SELECT {} FROM {} WITH NO DATA")
                        .format(sql.Identifier(name), cols, sql.Identifier(SCHEMA, table)))
            self._temp.add(name)
        return sql.Identifier(name)

    def _copy_in(self, cur: psycopg.Cursor[Any], table: str, columns: list[str], rows: Iterable[tuple[Any, ...]]
                 ) -> int:
        """Many rows: binary COPY into the staging table (half the work of text for numbers, both ends), then one
        INSERT … SELECT (checked by the server's policies), then the staging table emptied (in the same
        transaction: a rollback leaves it empty as well). Values in the central columns' types (a uuid, a dict
        for jsonb)."""
        staging = self._staging(cur, table, columns)
        cols = sql.SQL(", ").join(sql.Identifier(c) for c in columns)
        types = self.maps[table].types
        n = 0
        with cur.copy(sql.SQL("COPY {} ({}) FROM STDIN (FORMAT BINARY)").format(staging, cols)) as copy:
            copy.set_types([types[c] for c in columns])
            kinds = [types[c] for c in columns]
            names = self.maps[table].names
            for row in rows:
                try:
                    copy.write_row(row)
                except (TypeError, ValueError, struct.error, psycopg.DataError):
                    copy.write_row(_coerced(columns, kinds, names, row))  # SQLite keeps any value in any column
                n += 1
        cur.execute(sql.SQL("INSERT INTO {} ({}) SELECT {} FROM {}").format(
            sql.Identifier(SCHEMA, table), cols, cols, staging))
        cur.execute(sql.SQL("TRUNCATE {}").format(staging))
        return n

    def _insert(self, cur: psycopg.Cursor[Any], table: str, rows: list[dict[str, Any]],
                tail: dict[str, Callable[[dict[str, Any]], Any]] | None = None) -> int:
        """A few rows read by ``_local_rows``, with the store, ``extra`` and any ``tail`` columns: one INSERT each,
        sent together (psycopg pipelines executemany)."""
        if not rows:
            return 0
        m = self.maps[table]
        tail = tail or {}
        columns = ["store", *m.central, "extra", *tail]
        kinds = [m.types.get(c, "") for c in columns]
        at = columns.index("extra")
        values = []
        for r in rows:
            row = _coerced(columns, kinds, m.names, (self.store, *r["_values"][:len(m.mapped)],
                                                     m.extra_doc(r["_values"]), *(f(r) for f in tail.values())))
            values.append(tuple(Jsonb(v) if i == at and v is not None else v for i, v in enumerate(row)))
        cur.executemany(sql.SQL("INSERT INTO {} ({}) VALUES ({})").format(
            sql.Identifier(SCHEMA, table), sql.SQL(", ").join(sql.Identifier(c) for c in columns),
            sql.SQL(", ").join(sql.Placeholder() * len(columns))), values)
        return len(rows)

    def _push_revised(self, table: str, held: dict[Any, tuple[int, str]]) -> int:
        rows = []
        for key, row in self._local_rows(table).items():
            rev, fp = held.get(key, (0, ""))
            if fp != row["_fp"]:
                row["_rev"] = rev + 1
                rows.append(row)
        if not rows:
            return 0
        with self._tx(table), self.conn.cursor() as cur:
            return self._insert(cur, table, rows, {"rev": lambda r: r["_rev"], "fingerprint": lambda r: r["_fp"]})

    def _push_run(self, run: dict[str, Any], events: list[dict[str, Any]], results: list[dict[str, Any]]
                  ) -> dict[str, int]:
        rid = run["id"]
        m = self.maps["samples"]
        columns = ["store", *m.central, "extra"]
        store = uuid.UUID(self.store)
        with self._tx(f"run {rid}"), self.conn.cursor() as cur:
            self._insert(cur, "runs", [run], {"fingerprint": lambda r: r["_fp"]})
            n = 0
            for chunk in read_ahead(self.local.sample_chunks(rid, m.local, self.chunk)):
                if m.spare:
                    rows: Iterable[tuple[Any, ...]] = ((store, *v[:len(m.mapped)], m.extra_doc(v)) for v in chunk)
                else:
                    rows = ((store, *v, None) for v in chunk)
                n += self._copy_in(cur, "samples", columns, rows)
                self.progress({"event": "samples", "run_id": rid, "samples": n})
            self.progress({"event": "run_samples_written", "run_id": rid, "samples": n})
            ne = self._insert(cur, "events", events)
            nr = self._insert(cur, "results", results)
        return {"runs": 1, "samples": n, "events": ne, "results": nr}

    def _push_run_revisions(self, runs: dict[int, dict[str, Any]], closed: set[int],
                            held: dict[int, tuple[int, str]], just_pushed: set[int]) -> int:
        changed = [(rid, held[rid][0] + 1, runs[rid]) for rid in sorted(closed)
                   if rid in held and rid not in just_pushed and held[rid][1] != runs[rid]["_fp"]]
        if not changed:
            return 0
        m = self.maps["runs"]
        with self._tx("changed runs"), self.conn.cursor() as cur:
            rows = []
            columns = [*m.central, "extra"]
            kinds = [m.types.get(c, "") for c in columns]
            for rid, rev, run in changed:  # the row as jsonb_populate_record (view run_list) will read it
                values = _coerced(columns, kinds, m.names, (*run["_values"][:len(m.mapped)],
                                                             m.extra_doc(run["_values"])))
                doc = dict(zip(columns, values, strict=True))
                rows.append((self.store, rid, rev, json.dumps(doc, default=_jsonable), run["_fp"]))
            cur.executemany("INSERT INTO linerig.run_revisions (store, id, rev, row, fingerprint) "
                            "VALUES (%s, %s, %s, %s, %s)", rows)
            return len(rows)


def _coerced(columns: list[str], kinds: list[str], names: dict[str, str], row: tuple[Any, ...]) -> tuple[Any, ...]:
    """A row whose values SQLite let stray from their column's type, in the central types: a number where text is
    kept goes as text, a whole number as an integer; a value that cannot be (text in a number column) goes as null
    with the value itself in the row's ``extra``, so the push goes on and nothing is lost."""
    out: list[Any] = []
    stray: dict[str, Any] = {}
    for column, kind, v in zip(columns, kinds, row, strict=True):
        ok, value = (True, None) if v is None else _as_kind(v, kind)
        out.append(value)
        if not ok:
            stray[names.get(column, column)] = _jsonable(v) if isinstance(v, bytes) else v
    if stray and "extra" in columns:
        at = columns.index("extra")
        out[at] = {**(out[at] or {}), **stray}
    return tuple(out)


def _as_kind(v: Any, kind: str) -> tuple[bool, Any]:
    if kind == "int8":
        if isinstance(v, int) or (isinstance(v, float) and v.is_integer()):
            return True, int(v)
    elif kind == "float8":
        if isinstance(v, int | float):
            return True, float(v)
    elif kind == "text":
        if isinstance(v, str | int | float):
            return True, str(v)
    else:
        return True, v
    return False, None


class _Transaction:
    """One server transaction; psycopg's errors come out as CentralError saying what happened and what to do."""

    def __init__(self, conn: psycopg.Connection[Any], what: str) -> None:
        self.conn = conn
        self.what = what
        self._tx: Any = None

    def __enter__(self) -> _Transaction:
        try:
            self._tx = self.conn.transaction()
            self._tx.__enter__()
        except psycopg.Error as exc:
            raise translate(exc, self.what) from None
        return self

    def __exit__(self, kind: Any, exc: BaseException | None, tb: Any) -> None:
        try:
            self._tx.__exit__(kind, exc, tb)
        except psycopg.Error as err:
            raise translate(err, self.what) from None
        if isinstance(exc, psycopg.Error):
            raise translate(exc, self.what) from None


def translate(exc: psycopg.Error, what: str) -> CentralError:
    msg = (exc.diag.message_primary if getattr(exc, "diag", None) and exc.diag.message_primary else str(exc)) or \
        type(exc).__name__
    if isinstance(exc, psycopg.errors.InsufficientPrivilege):
        return CentralRefused(f"the server refused {what}: {msg}. A rig writes only its own rows, as a member of "
                              "linerig_rig; ask the database owner to GRANT linerig_rig TO this role")
    if isinstance(exc, psycopg.errors.UniqueViolation):
        return CentralRefused(f"the server already holds rows of {what} ({msg}); another process pushed this "
                              "store at the same time or put rows there by hand: run the sync again")
    if isinstance(exc, psycopg.errors.UndefinedTable | psycopg.errors.UndefinedColumn):
        return CentralSchemaError(f"the central schema lacks what {what} needs ({msg}): the database owner runs "
                                  "`linerig central migrate URL`")
    if isinstance(exc, psycopg.OperationalError | psycopg.InterfaceError):
        return CentralUnreachable(f"the connection failed during {what} ({msg}); what was committed stays, the "
                                  "next sync goes on from there")
    return CentralError(f"{what}: {msg}")


def push(local: LocalStore, conn: psycopg.Connection[Any], rig: str | None = None,
         progress: Progress | None = None, sample_chunk: int = SAMPLE_CHUNK) -> PushSummary:
    """Push what the server lacks of ``local``; ``rig`` names the rig (and records the name in the file)."""
    try:
        return Pusher(local, conn, progress, sample_chunk).run(rig)
    except psycopg.Error as exc:
        raise translate(exc, "the push") from None
