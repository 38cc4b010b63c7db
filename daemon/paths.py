"""Where the socket and the database live unless told otherwise."""

from __future__ import annotations

import os
from pathlib import Path

SERVICE_SOCKET = Path("/run/linerig/linerigd.sock")


def default_socket_path() -> Path:
    """The installed service's socket when it is there (operators cannot write /run/linerig, but may connect),
    else a per-user one for a daemon started by hand."""
    if env := os.environ.get("LINERIG_SOCKET"):
        return Path(env)
    run = SERVICE_SOCKET.parent
    if SERVICE_SOCKET.exists() or (run.is_dir() and os.access(run, os.W_OK)):
        return SERVICE_SOCKET
    base = os.environ.get("XDG_RUNTIME_DIR") or f"/tmp/linerig-{os.getuid()}"
    return Path(base) / "linerigd.sock"


def default_db_path() -> Path:
    if env := os.environ.get("LINERIG_DB"):
        return Path(env)
    state = Path("/var/lib/linerig")
    if state.is_dir() and os.access(state, os.W_OK):
        return state / "linerig.db"
    base = os.environ.get("XDG_DATA_HOME") or str(Path.home() / ".local" / "share")
    return Path(base) / "linerig" / "linerig.db"
