"""The central schema (PostgreSQL schema ``linerig``), as numbered migrations that linerig applies itself.

``linerig central migrate URL`` brings a database up to CENTRAL_VERSION, run by its owner (a role that may create
tables in it, and roles in the cluster for the first run). A rig never changes the schema: it pushes when the server's
version is at least WRITER_NEEDS and the server does not say its writers must be newer (``writer_min``); the read
side needs READER_NEEDS.

How rows are keyed: every pushed row carries ``store``, the uuid of the SQLite file it came from (the file's
``store_identity``), and its local key (``id``; ``serial`` for probes; ``run_id, n`` for samples). A store belongs to
one rig, a rig to the login role that first pushed it (``rigs.role``). Columns are the rig's own, lower-cased, with the
values as SQLite held them (times as the ISO text the rig wrote, JSON as text): the central copy is the rig's record,
not a reinterpretation of it. A local column that a central table lacks goes to that row's ``extra`` (jsonb).

Roles (cluster-wide, NOLOGIN, made once): ``linerig_rig`` may insert, and only rows of its own stores (row-level
security on session_user), and read everything; ``linerig_reader`` reads everything. Neither may update or delete:
a rig that re-reduces a run or changes a probe pushes a new row (a new revision), never an update.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import psycopg
from psycopg import sql

from linerig.daemon.central.errors import CentralRefused, CentralSchemaError

SCHEMA = "linerig"
RIG_ROLE = "linerig_rig"
READER_ROLE = "linerig_reader"
WRITER_NEEDS = 1   # the tables a push writes were all there in version 1
READER_NEEDS = 2   # the read side uses the views of version 2
# tables a rig inserts into, keyed by store; the row-level check on each is the same (later tables: _insert_policy)
DATA_TABLES = ("probes", "series", "runs", "run_revisions", "samples", "events", "results", "calibrations",
               "qualifications")

_V1 = """
CREATE SCHEMA IF NOT EXISTS linerig;
CREATE TABLE linerig.schema_version (version integer NOT NULL, writer_min integer NOT NULL);
INSERT INTO linerig.schema_version VALUES (0, 1);
CREATE TABLE linerig.rigs (
    rig text PRIMARY KEY CHECK (rig <> ''),
    role name NOT NULL DEFAULT session_user,
    first_push timestamptz NOT NULL DEFAULT now());
CREATE TABLE linerig.stores (
    store uuid PRIMARY KEY,
    rig text NOT NULL REFERENCES linerig.rigs,
    hostname text, created_utc text, local_schema integer,
    first_push timestamptz NOT NULL DEFAULT now());
CREATE TABLE linerig.probes (
    store uuid NOT NULL REFERENCES linerig.stores, serial text NOT NULL, rev integer NOT NULL CHECK (rev >= 1),
    name text, kind text, profile_toml text, added_utc text,
    extra jsonb, fingerprint text NOT NULL, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, serial, rev));
CREATE TABLE linerig.series (
    store uuid NOT NULL REFERENCES linerig.stores, id bigint NOT NULL, rev integer NOT NULL CHECK (rev >= 1),
    kind text, name text, site text, created_utc text, data text, state text, cycles bigint, plan_json text,
    probe_serial text, ended_utc text, end_reason text,
    extra jsonb, fingerprint text NOT NULL, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id, rev));
CREATE TABLE linerig.runs (
    store uuid NOT NULL REFERENCES linerig.stores, id bigint NOT NULL,
    created_utc text, ended_utc text, state text, end_reason text, kind text, probe_serial text,
    sensor_names text, heater_length_m double precision, site text, location text, depth_m double precision,
    sample text, material text, moisture_pct double precision, dry_density_kg_per_m3 double precision,
    notes text, operator text, plan_json text, heat_start_device_s double precision,
    heat_end_device_s double precision, frontend_boot_id text, series_id bigint, cycle bigint, q_timing text,
    extra jsonb, fingerprint text NOT NULL, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id));
CREATE TABLE linerig.run_revisions (
    store uuid NOT NULL, id bigint NOT NULL, rev integer NOT NULL CHECK (rev >= 2),
    row jsonb NOT NULL, fingerprint text NOT NULL, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id, rev), FOREIGN KEY (store, id) REFERENCES linerig.runs);
CREATE TABLE linerig.samples (
    store uuid NOT NULL, run_id bigint NOT NULL, n bigint NOT NULL,
    seq bigint, device_ms bigint, device_s double precision, phase text, heater_on bigint,
    heater_v double precision, heater_a double precision, supply_v double precision, q_w_per_m double precision,
    cj_c double precision, temps_c text, faults text, extra jsonb,
    PRIMARY KEY (store, run_id, n));
-- no foreign key from samples to runs: a push writes a run's samples in the transaction that writes the run, and
-- the per-row check would halve the rate at which a year of samples goes in (bench/sync_bench.py)
CREATE TABLE linerig.events (
    store uuid NOT NULL REFERENCES linerig.stores, id bigint NOT NULL, run_id bigint,
    wall_utc text, device_s double precision, kind text, state text, reason text, data text,
    extra jsonb, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id), FOREIGN KEY (store, run_id) REFERENCES linerig.runs);
CREATE TABLE linerig.results (
    store uuid NOT NULL, id bigint NOT NULL, run_id bigint NOT NULL,
    created_utc text, sensor text, method text, k_w_per_mk double precision, k_u_w_per_mk double precision,
    flags text, data text, source text,
    extra jsonb, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id), FOREIGN KEY (store, run_id) REFERENCES linerig.runs);
CREATE TABLE linerig.calibrations (
    store uuid NOT NULL REFERENCES linerig.stores, id bigint NOT NULL,
    probe_serial text, run_id bigint, created_utc text, reference text,
    reference_k_w_per_mk double precision, measured_k_w_per_mk double precision, factor double precision,
    factor_u double precision, accepted bigint, notes text, expires_utc text,
    extra jsonb, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id));
CREATE TABLE linerig.qualifications (
    store uuid NOT NULL REFERENCES linerig.stores, id bigint NOT NULL,
    probe_serial text, created_utc text, criteria_toml text, results text, passed bigint, notes text,
    extra jsonb, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id));
"""

# each run once, as the rig holds it now (its latest revision over the row first pushed), with its rig; made again
# whenever runs gains columns (a view keeps the columns it was made with)
_RUN_LIST = """
CREATE VIEW linerig.run_list AS
SELECT st.rig, (CASE WHEN v.row IS NULL THEN r ELSE jsonb_populate_record(r, v.row) END).*,
       coalesce(v.rev, 1) AS rev
FROM linerig.runs r
JOIN linerig.stores st ON st.store = r.store
LEFT JOIN LATERAL (SELECT rv.row, rv.rev FROM linerig.run_revisions rv
                   WHERE rv.store = r.store AND rv.id = r.id ORDER BY rv.rev DESC LIMIT 1) v ON true;
"""

_V2 = _RUN_LIST + """
CREATE INDEX runs_site ON linerig.runs (site, location);
CREATE INDEX calibrations_probe ON linerig.calibrations (probe_serial);
CREATE VIEW linerig.probe_list AS
SELECT DISTINCT ON (p.store, p.serial) st.rig, p.*
FROM linerig.probes p JOIN linerig.stores st ON st.store = p.store
ORDER BY p.store, p.serial, p.rev DESC;
CREATE VIEW linerig.series_list AS
SELECT DISTINCT ON (s.store, s.id) st.rig, s.*
FROM linerig.series s JOIN linerig.stores st ON st.store = s.store
ORDER BY s.store, s.id, s.rev DESC;
-- one row per result and sensor with the main figures as columns, for people querying with SQL
CREATE VIEW linerig.result_figures AS
SELECT st.rig, r.store, r.run_id, r.id AS result_id, r.created_utc, r.sensor, r.method, r.source,
       r.k_w_per_mk, r.k_u_w_per_mk,
       (r.data::jsonb ->> 'resistivity_mK_per_W')::double precision AS resistivity_mk_per_w,
       (r.data::jsonb ->> 'alpha_mm2_per_s')::double precision AS alpha_mm2_per_s,
       (r.data::jsonb ->> 'rho_c_MJ_per_m3K')::double precision AS rho_c_mj_per_m3k,
       (r.data::jsonb -> 'window_s' ->> 0)::double precision AS window_start_s,
       (r.data::jsonb -> 'window_s' ->> 1)::double precision AS window_end_s,
       (r.data::jsonb ->> 'stable_at_s')::double precision AS stable_at_s,
       r.flags
FROM linerig.results r JOIN linerig.stores st ON st.store = r.store;
"""


def _roles_and_policies(cur: psycopg.Cursor[Any]) -> None:
    """The two group roles (made once per cluster), privileges and row-level security on every table."""
    for role in (RIG_ROLE, READER_ROLE):
        cur.execute(sql.SQL("SELECT 1 FROM pg_roles WHERE rolname = {}").format(sql.Literal(role)))
        if cur.fetchone() is None:
            try:
                cur.execute(sql.SQL("CREATE ROLE {} NOLOGIN").format(sql.Identifier(role)))
            except psycopg.errors.InsufficientPrivilege:
                raise CentralRefused(f"role {role} does not exist and this role may not create it: run "
                                     "`linerig central migrate` once as a role with CREATEROLE, or have an "
                                     f"administrator run CREATE ROLE {role} NOLOGIN") from None
    s, rig, reader = sql.Identifier(SCHEMA), sql.Identifier(RIG_ROLE), sql.Identifier(READER_ROLE)
    cur.execute(sql.SQL("GRANT USAGE ON SCHEMA {} TO {}, {}").format(s, rig, reader))
    cur.execute(sql.SQL("GRANT SELECT ON ALL TABLES IN SCHEMA {} TO {}, {}").format(s, rig, reader))
    checks = {"rigs": "role = session_user",
              "stores": "rig IN (SELECT rg.rig FROM linerig.rigs rg WHERE rg.role = session_user)",
              **{t: _MINE for t in DATA_TABLES}}
    for table, check in checks.items():
        _insert_policy(cur, table, check)


_MINE = ("store IN (SELECT st.store FROM linerig.stores st JOIN linerig.rigs rg ON rg.rig = st.rig "
         "WHERE rg.role = session_user)")


def _insert_policy(cur: psycopg.Cursor[Any], table: str, check: str = _MINE) -> None:
    """Rigs insert their own rows (``check``) and everyone reads every row; nobody updates or deletes."""
    t, rig = sql.Identifier(SCHEMA, table), sql.Identifier(RIG_ROLE)
    cur.execute(sql.SQL("GRANT INSERT ON {} TO {}").format(t, rig))
    cur.execute(sql.SQL("ALTER TABLE {} ENABLE ROW LEVEL SECURITY").format(t))
    cur.execute(sql.SQL("CREATE POLICY read_all ON {} FOR SELECT USING (true)").format(t))
    cur.execute(sql.SQL("CREATE POLICY insert_own ON {} FOR INSERT TO {} WITH CHECK (" + check + ")")
                .format(t, rig))


def _v1(cur: psycopg.Cursor[Any]) -> None:
    cur.execute(_V1)
    _roles_and_policies(cur)


def _v2(cur: psycopg.Cursor[Any]) -> None:
    """Views for the read side (each run once with its rig; latest probes and series; result figures)."""
    cur.execute(_V2)
    views = sql.SQL(", ").join(sql.Identifier(SCHEMA, v) for v in ("run_list", "probe_list", "series_list",
                                                                    "result_figures"))
    cur.execute(sql.SQL("GRANT SELECT ON {} TO {}, {}").format(views, sql.Identifier(RIG_ROLE),
                                                                 sql.Identifier(READER_ROLE)))


_FRONTEND = ("frontend_model", "frontend_serial", "frontend_firmware")


def _v3(cur: psycopg.Cursor[Any]) -> None:
    """The front end that made a run (local schema 4) as columns of runs; what rigs pushed before, in each row's
    extra, moved into them."""
    cur.execute("ALTER TABLE linerig.runs " + ", ".join(f"ADD COLUMN {c} text" for c in _FRONTEND))
    cur.execute("UPDATE linerig.runs SET " + ", ".join(f"{c} = extra ->> '{c}'" for c in _FRONTEND)
                + ", extra = nullif(extra" + "".join(f" - '{c}'" for c in _FRONTEND) + ", '{}'::jsonb) "
                "WHERE extra ?| array[" + ", ".join(f"'{c}'" for c in _FRONTEND) + "]")
    cur.execute("DROP VIEW linerig.run_list")
    cur.execute(_RUN_LIST)
    cur.execute(sql.SQL("GRANT SELECT ON linerig.run_list TO {}, {}").format(sql.Identifier(RIG_ROLE),
                                                                             sql.Identifier(READER_ROLE)))


def _v4(cur: psycopg.Cursor[Any]) -> None:
    """Spacing calibrations of dual needles (local schema 7), appended like the probe factors."""
    cur.execute("""
CREATE TABLE linerig.spacing_calibrations (
    store uuid NOT NULL REFERENCES linerig.stores, id bigint NOT NULL,
    probe_serial text, sensor text, created_utc text, run_id bigint, reference text,
    reference_rho_c_j_per_m3k double precision, nominal_spacing_m double precision, spacing_m double precision,
    spacing_u_m double precision, accepted bigint, notes text, expires_utc text,
    extra jsonb, pushed_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (store, id));
CREATE INDEX spacing_calibrations_probe ON linerig.spacing_calibrations (probe_serial);
""")
    cur.execute(sql.SQL("GRANT SELECT ON linerig.spacing_calibrations TO {}, {}").format(
        sql.Identifier(RIG_ROLE), sql.Identifier(READER_ROLE)))
    _insert_policy(cur, "spacing_calibrations")


def _v5(cur: psycopg.Cursor[Any]) -> None:
    """The radius of a lab run's sample (local schema 8) as a column of runs; what rigs pushed before, in each
    row's extra, moved into it."""
    cur.execute("ALTER TABLE linerig.runs ADD COLUMN sample_radius_m double precision")
    cur.execute("UPDATE linerig.runs SET sample_radius_m = (extra ->> 'sample_radius_m')::double precision, "
                "extra = nullif(extra - 'sample_radius_m', '{}'::jsonb) WHERE extra ? 'sample_radius_m'")
    cur.execute("DROP VIEW linerig.run_list")
    cur.execute(_RUN_LIST)
    cur.execute(sql.SQL("GRANT SELECT ON linerig.run_list TO {}, {}").format(sql.Identifier(RIG_ROLE),
                                                                             sql.Identifier(READER_ROLE)))


MIGRATIONS: list[Callable[[psycopg.Cursor[Any]], None]] = [_v1, _v2, _v3, _v4, _v5]
CENTRAL_VERSION = len(MIGRATIONS)
# the oldest linerig (by its CENTRAL_VERSION) whose pushes a database at each version still accepts
WRITER_MIN = {1: 1, 2: 1, 3: 1, 4: 1, 5: 1}


def _read_version(cur: psycopg.Cursor[Any]) -> tuple[int, int] | None:
    cur.execute("SELECT to_regclass('linerig.schema_version') IS NOT NULL")
    row = cur.fetchone()
    if not row or not row[0]:
        return None
    cur.execute("SELECT version, writer_min FROM linerig.schema_version")
    got = cur.fetchone()
    return (int(got[0]), int(got[1])) if got else None


def server_version(conn: psycopg.Connection[Any]) -> tuple[int, int] | None:
    """(version, writer_min) of the central schema, or None when the database has none."""
    with conn.transaction(), conn.cursor() as cur:
        return _read_version(cur)


def migrate(conn: psycopg.Connection[Any], upto: int | None = None) -> tuple[int, int]:
    """Apply the missing migrations, each in its own transaction with the version bump; returns (before, after).
    A transaction-level advisory lock keeps two migrators from interleaving."""
    target = CENTRAL_VERSION if upto is None else upto
    found = server_version(conn)
    before = found[0] if found else 0
    if before > CENTRAL_VERSION:
        raise CentralSchemaError(f"the central schema is version {before}, newer than this linerig knows "
                                 f"({CENTRAL_VERSION}): upgrade linerig")
    for number in range(before, target):
        with conn.transaction(), conn.cursor() as cur:
            cur.execute("SELECT pg_advisory_xact_lock(hashtext('linerig central migrate'))")
            found = _read_version(cur)
            if found is not None and found[0] >= number + 1:
                continue  # another migrator did this one while we waited
            try:
                MIGRATIONS[number](cur)
            except psycopg.errors.InsufficientPrivilege as exc:
                raise CentralRefused(f"migration {number + 1} needs the database owner's rights "
                                     f"({exc.diag.message_primary}): run it as the role that owns the database"
                                     ) from None
            cur.execute("UPDATE linerig.schema_version SET version = %s, writer_min = %s",
                        (number + 1, WRITER_MIN[number + 1]))
    return before, max(before, target)


def require(conn: psycopg.Connection[Any], need: int, what: str) -> int:
    """The server's version when it serves ``what`` (a push needs WRITER_NEEDS, reading READER_NEEDS)."""
    found = server_version(conn)
    if found is None:
        raise CentralSchemaError("this database has no linerig schema: its owner creates it with "
                                 "`linerig central migrate URL`")
    version, writer_min = found
    if version < need:
        raise CentralSchemaError(f"the central schema is version {version}; {what} needs {need}: the database "
                                 "owner upgrades it with `linerig central migrate URL`")
    if what == "a push" and writer_min > CENTRAL_VERSION:
        raise CentralSchemaError(f"the central schema (version {version}) takes pushes only from linerig with "
                                 f"central version {writer_min} or later (this one has {CENTRAL_VERSION}): "
                                 "upgrade linerig on this rig")
    return version
