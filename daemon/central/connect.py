"""A connection to the central server, by libpq's own rules.

The target is any libpq connection string: a URL (``postgresql://rig_north@db.example/linerig?sslmode=verify-full``)
or key=value words (``service=linerig``). Whatever it leaves out comes from where libpq always looks: the PG*
environment (PGHOST, PGSSLMODE …), a service file (PGSERVICEFILE, ~/.pg_service.conf), the password file
(PGPASSFILE, ~/.pgpass). So the password never needs to be in rig.toml; ``has_password`` lets the configuration
refuse one written there.
"""

from __future__ import annotations

import os
from typing import Any

import psycopg
from psycopg.conninfo import conninfo_to_dict, make_conninfo

from linerig.daemon.central.errors import CentralError, CentralRefused, CentralUnreachable

DEFAULT_CONNECT_TIMEOUT_S = 10
# a field rig's link can vanish mid-push without a word (a modem drops out): TCP keepalives and a send timeout make
# a dead connection an error within about a minute instead of a push that waits for ever; a target may override each
NETWORK_DEFAULTS = {"keepalives": 1, "keepalives_idle": 30, "keepalives_interval": 10, "keepalives_count": 3,
                    "tcp_user_timeout": 60_000}
# words in libpq's messages that mean "the server answered and said no", not "no server there"
_REFUSALS = ("password authentication failed", "does not exist", "no pg_hba.conf entry", "authentication",
             "permission denied", "ssl", "certificate", "no password supplied", "too many connections")


def parse_target(target: str) -> dict[str, Any]:
    """The connection string's own settings; CentralError naming what is wrong when libpq cannot read it."""
    if not target or not target.strip():
        raise CentralError("no server given: a libpq connection string such as postgresql://ROLE@HOST/DBNAME "
                           "or service=NAME")
    try:
        return conninfo_to_dict(target)
    except psycopg.ProgrammingError as exc:
        raise CentralError(f"not a PostgreSQL connection string ({exc}); give a URL such as "
                           "postgresql://ROLE@HOST/DBNAME or key=value words such as service=NAME") from None


def has_password(target: str) -> bool:
    return bool(parse_target(target).get("password"))


def describe(target: str) -> str:
    """The target for messages and status, without a password."""
    parts = {k: v for k, v in parse_target(target).items() if k != "password"}
    return make_conninfo(**parts) if parts else "(libpq defaults)"


def connect(target: str, application: str = "linerig", autocommit: bool = False) -> psycopg.Connection[Any]:
    """Open a connection; CentralUnreachable when no server answers, CentralRefused when it says no."""
    parts = parse_target(target)
    extra: dict[str, Any] = {}
    if "connect_timeout" not in parts and "PGCONNECT_TIMEOUT" not in os.environ:
        extra["connect_timeout"] = DEFAULT_CONNECT_TIMEOUT_S
    if "application_name" not in parts and "PGAPPNAME" not in os.environ:
        extra["application_name"] = application
    extra.update({k: v for k, v in NETWORK_DEFAULTS.items() if k not in parts})
    try:
        return psycopg.connect(target, autocommit=autocommit, **extra)
    except psycopg.OperationalError as exc:
        why = str(exc).strip().splitlines()[-1] if str(exc).strip() else type(exc).__name__
        if any(word in str(exc).lower() for word in _REFUSALS):
            raise CentralRefused(f"{describe(target)}: the server refused the connection: {why}") from None
        raise CentralUnreachable(f"{describe(target)}: cannot reach the server: {why}") from None
