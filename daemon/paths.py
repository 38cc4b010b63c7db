"""Where the socket and the database live unless told otherwise, and whether a socket's folder can be trusted."""

from __future__ import annotations

import os
import pwd
import stat
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
    base = os.environ.get("XDG_RUNTIME_DIR") or f"/tmp/linerig-{os.getuid()}"  # created 0700 by the daemon
    return Path(base) / "linerigd.sock"


def default_db_path() -> Path:
    if env := os.environ.get("LINERIG_DB"):
        return Path(env)
    state = Path("/var/lib/linerig")
    if state.is_dir() and os.access(state, os.W_OK):
        return state / "linerig.db"
    base = os.environ.get("XDG_DATA_HOME") or str(Path.home() / ".local" / "share")
    return Path(base) / "linerig" / "linerig.db"


SERVICE_USER = "linerig"  # systemd/linerig.sysusers


def _service_uid() -> int | None:
    try:
        return pwd.getpwnam(SERVICE_USER).pw_uid
    except KeyError:
        return None


def socket_folder_problem(sock: Path, *, serving: bool) -> str | None:
    """Why the folder that holds control socket ``sock`` cannot be trusted, or None.

    Whoever may write to the folder can swap the socket for their own: a daemon would then never hear its
    operators, and a client (root's included) would hand its requests, an abort among them, to a stranger. So the
    folder must be a real directory, writable by its owner alone, and owned by root or by this user; a client
    also trusts the rig's service user. ``serving``: the daemon's check, made before the socket is bound.
    """
    folder = sock.parent
    try:
        st = os.lstat(folder)
    except FileNotFoundError:
        return None  # the daemon makes it; a client's connect then says the daemon is not there
    except OSError as exc:
        return f"cannot inspect {folder} ({exc.strerror})"
    if stat.S_ISLNK(st.st_mode) or not stat.S_ISDIR(st.st_mode):
        return f"{folder} is not a plain directory (a symbolic link?), so {sock.name} there could be anyone's"
    trusted = {0, os.getuid()} | (set() if serving else {uid for uid in (_service_uid(),) if uid is not None})
    if st.st_uid not in trusted:
        try:
            owner = pwd.getpwuid(st.st_uid).pw_name
        except KeyError:
            owner = f"uid {st.st_uid}"
        return (f"{folder} belongs to {owner}, not to you, root{'' if serving else ' or the ' + SERVICE_USER} "
                f"user: its owner could swap {sock.name} for their own")
    if st.st_mode & (stat.S_IWGRP | stat.S_IWOTH):
        return (f"{folder} is writable by its group or by everyone (mode {stat.S_IMODE(st.st_mode):04o}): anyone "
                f"who may write there could swap {sock.name} for their own")
    return None
