"""A real PostgreSQL server for the central-store tests: initdb in a temporary folder, a Unix socket in that folder,
no TCP, started with pg_ctl (which waits for the server itself) and stopped at the end.

PostgreSQL refuses to run as root. As root the server runs as an unprivileged system user: ``postgres`` when the
Debian packages made it, else ``linerig-pgtest``, created here once (useradd, no home, no shell).
"""

from __future__ import annotations

import contextlib
import glob
import os
import pwd
import shutil
import subprocess
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

INSTALL_HINT = ("PostgreSQL server binaries (initdb, pg_ctl, postgres) were not found: install them with "
                "`apt-get install postgresql` (Debian) or set LINERIG_PG_BINDIR to the folder that holds them")
ADMIN = "linerig_admin"
PASSWORD_GROUP = "linerig_test_pw"
TEST_USER = "linerig-pgtest"


class ServerMissing(RuntimeError):
    """No PostgreSQL server binaries on this machine; the message says what to install."""


def find_bindir() -> Path:
    """LINERIG_PG_BINDIR, else the newest /usr/lib/postgresql/N/bin (Debian), else initdb on PATH."""
    env = os.environ.get("LINERIG_PG_BINDIR")
    candidates = [Path(env)] if env else []
    candidates += sorted((Path(p) for p in glob.glob("/usr/lib/postgresql/*/bin")),
                         key=lambda p: int(p.parent.name) if p.parent.name.isdigit() else 0, reverse=True)
    on_path = shutil.which("initdb")
    if on_path:
        candidates.append(Path(on_path).parent)
    for c in candidates:
        if all((c / tool).is_file() for tool in ("initdb", "pg_ctl", "postgres")):
            return c
    raise ServerMissing(INSTALL_HINT)


def _server_user() -> str | None:
    """None when we are not root (the server runs as us); otherwise an unprivileged account to run it."""
    if os.geteuid() != 0:
        return None
    for name in ("postgres", TEST_USER):
        with contextlib.suppress(KeyError):
            pwd.getpwnam(name)
            return name
    subprocess.run(["useradd", "--system", "--no-create-home", "--shell", "/usr/sbin/nologin", TEST_USER],
                   check=True, capture_output=True)
    return TEST_USER


@dataclass
class PgServer:
    bindir: Path
    folder: Path
    user: str | None

    @property
    def socket_dir(self) -> Path:
        return self.folder / "sock"

    def url(self, dbname: str = "postgres", user: str = ADMIN) -> str:
        return f"postgresql://{user}@/{dbname}?host={self.socket_dir}"

    def _as_server(self, *cmd: str) -> list[str]:
        return ["runuser", "-u", self.user, "--", *cmd] if self.user else list(cmd)

    def run(self, *cmd: str) -> subprocess.CompletedProcess[str]:
        done = subprocess.run(self._as_server(*cmd), capture_output=True, text=True, cwd=self.folder)
        if done.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd)} failed ({done.returncode}): {done.stdout}{done.stderr}")
        return done


@contextlib.contextmanager
def pg_server() -> Iterator[PgServer]:
    bindir = find_bindir()
    user = _server_user()
    folder = Path(tempfile.mkdtemp(prefix="linerig-pg-"))
    try:
        (folder / "sock").mkdir()
        if user is not None:
            ent = pwd.getpwnam(user)
            for p in (folder, folder / "sock"):
                os.chown(p, ent.pw_uid, ent.pw_gid)
        srv = PgServer(bindir, folder, user)
        srv.run(str(bindir / "initdb"), "-D", str(folder / "data"), "-U", ADMIN, "--auth=trust", "-E", "UTF8",
                "--no-sync", "--locale=C")
        # everyone in by the socket without a password, except members of PASSWORD_GROUP (CentralDb.role(password=))
        hba = folder / "data" / "pg_hba.conf"
        hba.write_text(f"local all +{PASSWORD_GROUP} scram-sha-256\n" + hba.read_text())
        opts = (f"-c listen_addresses='' -k {folder / 'sock'} -c fsync=off -c synchronous_commit=off "
                "-c full_page_writes=off -c max_connections=40")
        srv.run(str(bindir / "pg_ctl"), "-D", str(folder / "data"), "-o", opts, "-l", str(folder / "server.log"),
                "-w", "-t", "60", "start")
        try:
            yield srv
        finally:
            with contextlib.suppress(RuntimeError):
                srv.run(str(bindir / "pg_ctl"), "-D", str(folder / "data"), "-m", "immediate", "-w", "stop")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


class CentralDb:
    """One fresh database on the test server, with the central schema up to ``upto`` (None: none at all) and login
    roles made for it (role names start with the database's, since roles are shared by the whole server)."""

    _count = 0

    def __init__(self, srv: PgServer, upto: int | None) -> None:
        import psycopg

        from linerig.daemon.central.schema import migrate

        CentralDb._count += 1
        self.srv = srv
        self.name = f"central{CentralDb._count}"
        with psycopg.connect(srv.url(), autocommit=True) as conn:
            conn.execute(f"CREATE DATABASE {self.name}")
        self.admin_url = srv.url(self.name)
        if upto is not None:
            with psycopg.connect(self.admin_url) as conn:
                migrate(conn, upto=upto)

    def role(self, short: str, group: str = "linerig_rig", password: str | None = None) -> str:
        """A login role in ``group`` (linerig_rig or linerig_reader, or "" for none); its connection URL (without
        the password). With ``password`` the server asks for it (scram-sha-256)."""
        import psycopg
        from psycopg import sql

        name = f"{self.name}_{short}"
        groups = [g for g in (group, PASSWORD_GROUP if password else "") if g]
        with psycopg.connect(self.admin_url, autocommit=True) as conn:
            if password and not conn.execute("SELECT 1 FROM pg_roles WHERE rolname = %s", (PASSWORD_GROUP,)).fetchone():
                conn.execute(f"CREATE ROLE {PASSWORD_GROUP} NOLOGIN")
            conn.execute(sql.SQL("CREATE ROLE {} LOGIN {} {}").format(
                sql.Identifier(name), sql.SQL("IN ROLE " + ", ".join(groups)) if groups else sql.SQL(""),
                sql.SQL("PASSWORD {}").format(password) if password else sql.SQL("")))
        return self.srv.url(self.name, name)

    def query(self, sql: str, params: tuple[object, ...] = ()) -> list[tuple[object, ...]]:
        import psycopg

        with psycopg.connect(self.admin_url) as conn:
            return conn.execute(sql, params).fetchall()  # type: ignore[arg-type]
