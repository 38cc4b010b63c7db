"""The control socket: hostile input, many clients, permissions, and the documentation of every request."""

from __future__ import annotations

import asyncio
import grp
import json
import os
import re
import socket
import sqlite3
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from linerig.daemon.api import (
    MAX_CLIENTS,
    MAX_LINE,
    QUEUE_DEPTH,
    RESERVED_CLIENTS,
    RESERVED_REQUESTS,
    ApiServer,
    Hub,
    Outbox,
    Peer,
    RequestError,
    peer_allowed,
)
from linerig.daemon.main import handlers
from linerig.daemon.store.writer import Store
from tests.daemon_harness import (
    FAST_PLAN,
    Daemon,
    Sim,
    reap,  # noqa: F401  (kills what a test started)
    wait_for,
)

ROOT = Path(__file__).resolve().parent.parent


def test_every_request_is_documented(tmp_path: Path) -> None:
    store = Store(tmp_path / "doc.db")
    try:
        ops = set(handlers(None, store))  # type: ignore[arg-type]  # the table only, no request is made
    finally:
        store.close()
    documented = set(re.findall(r"^### (\w+)$", (ROOT / "daemon" / "API.md").read_text(), re.M))
    assert ops == documented
    # the names the UI relies on stay
    assert {"status", "start", "stop_heating", "abort", "subscribe", "runs", "run", "probes",
            "calibrations"} <= ops


class Server:
    """An ApiServer on a real socket with two handlers: one that counts, one with a bug."""

    def __init__(self, path: Path) -> None:
        self.calls = 0
        self.hub = Hub()

        async def count(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
            self.calls += 1
            return {"calls": self.calls, "uid": peer.uid}

        async def refuse(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
            raise RequestError("not now")

        async def buggy(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
            return {"x": 1 / 0}

        async def subscribe(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
            return {"_subscribe": True}

        async def abort(req: dict[str, Any], peer: Peer) -> dict[str, Any]:
            self.aborted = True
            return {}

        self.aborted = False
        self.api = ApiServer(path, {"count": count, "refuse": refuse, "buggy": buggy, "subscribe": subscribe,
                                    "abort": abort}, self.hub)


async def exchange(path: Path, payload: bytes, replies: int = 1) -> list[dict[str, Any]]:
    r, w = await asyncio.open_unix_connection(str(path), limit=1 << 20)
    w.write(payload)
    await w.drain()
    out = [json.loads(await asyncio.wait_for(r.readline(), 5)) for _ in range(replies)]
    w.close()
    return out


async def test_hostile_input_gets_error_replies_and_the_connection_stays_usable(tmp_path: Path) -> None:
    srv = Server(tmp_path / "api.sock")
    await srv.api.start()
    try:
        assert oct(os.stat(tmp_path / "api.sock").st_mode & 0o777) == "0o660"
        cases = [
            (b"this is not json\n", "not a JSON request"),
            (b"\xff\xfe\x00garbage\x00\n", "not a JSON request"),
            (b"[" * 50000 + b"\n", "not a JSON request"),  # nesting deep enough to exhaust the parser's stack
            (b'["op", "count"]\n', 'a JSON object with a string "op"'),
            (b'{"op": 5}\n', 'a JSON object with a string "op"'),
            (b'{"op": "launch"}\n', "unknown op 'launch'; known: abort, buggy, count, refuse, subscribe"),
            (b'{"op": "refuse", "id": 3}\n', "not now"),
            (b'{"op": "buggy", "id": {"x": 1}}\n', "internal error: ZeroDivisionError"),
            (b"x" * (MAX_LINE + 10) + b"\n", f"request longer than {MAX_LINE} bytes"),
        ]
        for payload, words in cases:
            first, after = await exchange(srv.api.path, payload + b'{"op": "count", "id": 9}\n', replies=2)
            assert first["ok"] is False and words in first["error"], (payload[:40], first)
            assert after == {"id": 9, "ok": True, "calls": after["calls"], "uid": os.getuid()}
        assert (await exchange(srv.api.path, b'{"op":"refuse","id":3}\n'))[0]["id"] == 3
        # a line far over the limit, sent in pieces, is skipped as a whole
        r, w = await asyncio.open_unix_connection(str(srv.api.path))
        for _ in range(40):
            w.write(b"y" * 65536)
        w.write(b'\n{"op": "count", "id": 10}\n')
        await w.drain()
        err = json.loads(await asyncio.wait_for(r.readline(), 5))
        ok = json.loads(await asyncio.wait_for(r.readline(), 5))
        assert not err["ok"] and ok["id"] == 10 and ok["ok"]
        w.close()
        # half a request and gone: nothing happens, the server carries on
        r, w = await asyncio.open_unix_connection(str(srv.api.path))
        w.write(b'{"op": "cou')
        await w.drain()
        w.close()
        assert (await exchange(srv.api.path, b'{"op":"count"}\n'))[0]["ok"]
        assert srv.api.clients <= 1
    finally:
        await srv.api.close()


async def test_too_many_clients_are_turned_away_and_slow_subscribers_lose_old_events(tmp_path: Path) -> None:
    srv = Server(tmp_path / "api.sock")
    await srv.api.start()
    conns = []
    try:
        for _ in range(MAX_CLIENTS):
            r, w = await asyncio.open_unix_connection(str(srv.api.path))
            w.write(b'{"op":"count"}\n')
            await w.drain()
            assert json.loads(await asyncio.wait_for(r.readline(), 5))["ok"]
            conns.append((r, w))
        # past the limit a few reserved connections may still abort or stop the heating, one request each
        reserved = []
        for _ in range(RESERVED_CLIENTS):
            r, w = await asyncio.open_unix_connection(str(srv.api.path))
            notice = json.loads(await asyncio.wait_for(r.readline(), 5))
            assert not notice["ok"] and "serves abort, stop_heating and status only" in notice["error"]
            reserved.append((r, w))
        r, w = await asyncio.open_unix_connection(str(srv.api.path))
        refused = json.loads(await asyncio.wait_for(r.readline(), 5))
        assert not refused["ok"] and "too many clients" in refused["error"]
        assert await asyncio.wait_for(r.read(), 5) == b""  # and closed
        r, w = reserved[0]
        w.write(b'{"op":"count","id":1}\n' * RESERVED_REQUESTS)
        await w.drain()
        for _ in range(RESERVED_REQUESTS):
            assert "only abort, ping, status, stop_heating are served" in json.loads(
                await asyncio.wait_for(r.readline(), 5))["error"]
        assert await asyncio.wait_for(r.read(), 5) == b""  # a few requests, then closed
        r, w = reserved[1]
        w.write(b'{"op":"abort","id":2}\n')
        await w.drain()
        assert json.loads(await asyncio.wait_for(r.readline(), 5)) == {"id": 2, "ok": True} and srv.aborted
        for _, cw in conns + reserved:
            cw.close()
        await wait_async(lambda: srv.api.clients == 0 and srv.api.reserved == 0)
        # a subscriber that never reads: publishing stays instant, its queue is capped
        r, w = await asyncio.open_unix_connection(str(srv.api.path))
        w.write(b'{"op":"subscribe"}\n')
        await w.drain()
        await asyncio.wait_for(r.readline(), 5)
        for i in range(20000):
            srv.hub.publish({"event": "sample", "i": i, "pad": "z" * 200})
        assert srv.hub.dropped > 0
        w.close()
    finally:
        await srv.api.close()


async def wait_async(pred: Any, timeout: float = 5.0) -> None:
    loop = asyncio.get_running_loop()
    end = loop.time() + timeout
    while not pred():
        assert loop.time() < end, "condition not met in time"
        await asyncio.sleep(0.01)


async def test_a_lagging_subscriber_loses_old_samples_but_never_a_state_change() -> None:
    box = Outbox()
    for i in range(QUEUE_DEPTH * 3):
        box.put(f"sample {i}".encode(), lossy=True)
        if i % 1000 == 500:
            box.put(f"state {i}".encode(), lossy=False)
    got = []
    while box.ready:
        got.append((await box.get()).decode())
    states = [g for g in got if g.startswith("state")]
    assert states == [f"state {i}" for i in range(500, QUEUE_DEPTH * 3, 1000)]  # every one, in order
    samples = [int(g.split()[1]) for g in got if g.startswith("sample")]
    assert len(samples) == QUEUE_DEPTH and samples == sorted(samples) and samples[-1] == QUEUE_DEPTH * 3 - 1
    # order across the two kinds is kept: a state change comes after the samples that preceded it
    last_state = got.index(states[-1])
    assert all(int(g.split()[1]) <= 5500 for g in got[:last_state] if g.startswith("sample"))


def test_peer_check_allows_root_self_and_group_members_only() -> None:
    gid = grp.getgrnam("dialout").gr_gid
    assert peer_allowed(Peer(1, 0, 0), gid)
    assert peer_allowed(Peer(1, os.getuid(), os.getgid()), gid)
    assert peer_allowed(Peer(1, 65534, gid), gid)  # primary group
    assert not peer_allowed(Peer(None, 65534, 65534), gid)  # nobody, not a member
    assert peer_allowed(Peer(1, 65534, 65534), None)  # no group: the file mode decides


CLIENT = ("import json, socket, sys\n"
          "s = socket.socket(socket.AF_UNIX)\n"
          "try:\n"
          "    s.connect(sys.argv[1])\n"
          "except PermissionError:\n"
          "    print('EACCES'); raise SystemExit(0)\n"
          "try:\n"
          "    s.sendall(b'{\"op\":\"status\"}\\n')\n"
          "except OSError:\n"
          "    pass  # a refused peer may be cut off before its request is read\n"
          "print(json.loads(s.makefile().readline())['ok'])\n")


@pytest.mark.skipif(os.geteuid() != 0, reason="switching to another user needs root")
def test_a_user_outside_the_control_group_cannot_connect(tmp_path: Path) -> None:
    shared = Path(f"/tmp/linerig-perm-{os.getpid()}")
    shared.mkdir(mode=0o755, exist_ok=True)
    shared.chmod(0o755)  # others may reach the socket file; its own mode and group decide the rest
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend, socket_path=shared / "d.sock", extra=("--group", "dialout"))
    try:
        st = os.stat(d.socket)
        assert oct(st.st_mode & 0o777) == "0o660" and st.st_gid == grp.getgrnam("dialout").gr_gid
        python = "/usr/bin/python3"
        outsider = subprocess.run([python, "-c", CLIENT, str(d.socket)], user="nobody", group="nogroup",
                                  extra_groups=[], capture_output=True, text=True, timeout=20, cwd="/")
        assert outsider.stdout.strip() == "EACCES", outsider
        member = subprocess.run([python, "-c", CLIENT, str(d.socket)], user="nobody", group="nogroup",
                                extra_groups=["dialout"], capture_output=True, text=True, timeout=20, cwd="/")
        assert member.stdout.strip() == "True", member
        assert "uid 65534" in d.stderr()  # the member's credentials are in the log
        # second line of defence: were the file opened up by mistake, the credential check still refuses
        os.chmod(d.socket, 0o666)
        outsider = subprocess.run([python, "-c", CLIENT, str(d.socket)], user="nobody", group="nogroup",
                                  extra_groups=[], capture_output=True, text=True, timeout=20, cwd="/")
        assert outsider.stdout.strip() == "False", outsider
        assert "refused client" in d.stderr()
    finally:
        d.stop()
        sim.stop()
        for p in shared.iterdir():
            p.unlink()
        shared.rmdir()


def test_hostile_clients_never_disturb_a_heating_run(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=20)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid = d.request("start", **{**FAST_PLAN, "heat_s": 100})["run_id"]
        wait_for(lambda: sim.state()["heater_on"], 10, "heater on")
        payloads = [b"\x00" * 1000 + b"\n", b"{" * 100000 + b"\n", b"z" * (3 * MAX_LINE) + b"\n",
                    b'{"op":"start","heat_s":1e308}\n', b'{"op":"abort","reason":["x"]}\n',
                    b'{"op":"run","run_id":true}\n', b'{"op":"runs","limit":-5}\n', b'{"op":"resume"}\n',
                    b'{"op":"start","metadata":{"depth_m":"deep"}}\n', b'{"op": "stop_heating", "id": [1]}\n']
        socks = []
        for p in payloads:
            s = socket.socket(socket.AF_UNIX)
            s.connect(str(d.socket))
            s.sendall(p)
            socks.append(s)
        for _ in range(60):  # a crowd that connects and leaves without a word
            s = socket.socket(socket.AF_UNIX)
            s.connect(str(d.socket))
            s.close()
        replies = []
        for s in socks:
            s.settimeout(5)
            replies.append(json.loads(s.makefile("rb").readline()))
            s.close()
        assert all(not r["ok"] for r in replies[:4]), replies[:4]
        assert "still heating" in replies[3]["error"]
        assert replies[4]["error"] == "reason must be text" and "run_id must be a whole number" in replies[5]["error"]
        # the stop_heating with an odd id was a valid request: its id is dropped, the stop is honoured
        assert replies[9]["ok"] and replies[9]["id"] is None
        assert d.wait_state(rid, "done", 30) == "done"
        st = d.status()
        assert st["fault"] is None
        assert [e["heater_on"] for e in sim.heater_events()] == [True, False]
    finally:
        d.stop()
        sim.stop()


def test_the_client_in_use_by_the_ui_still_works(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=50)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        done = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "--socket", str(d.socket), "status", "--json"],
                              capture_output=True, text=True, timeout=30, cwd=ROOT)
        assert done.returncode == 0, done.stderr
        assert json.loads(done.stdout)["link_up"] is True
    finally:
        d.stop()
        sim.stop()


def test_a_client_gets_a_runs_samples_and_its_probe_profile(tmp_path: Path) -> None:
    """What the UI's run detail and reconnect use: the samples as the reduction takes them, and the profile."""
    from linerig.daemon.probe import stored_profile
    from linerig.daemon.reduction.alignment import power_held_from_each_sample

    sim = Sim(tmp_path, speed=50)
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        rid = d.request("start", **FAST_PLAN)["run_id"]
        assert d.wait_state(rid, "done", 30) == "done"
        arr = d.request("samples", run_id=rid)["samples"]
        probes = d.request("probes")
        missing = d.raw(op="samples", run_id=999)
        assert not missing["ok"] and "no run 999" in missing["error"]
    finally:
        d.stop()
        sim.stop()
    con = sqlite3.connect(d.db)
    rows = con.execute("SELECT device_s, q_W_per_m FROM samples WHERE run_id = ? ORDER BY n", [rid]).fetchall()
    t0 = con.execute("SELECT heat_start_device_s FROM runs WHERE id = ?", [rid]).fetchone()[0]
    assert arr["device_s"] == pytest.approx([r[0] for r in rows], abs=1e-4)
    t = [r[0] - t0 for r in rows]
    assert arr["time_s"] == pytest.approx(t, abs=1e-4)
    # power moved to the interval it was delivered in (recorded readings describe the interval before them)
    held = power_held_from_each_sample(np.asarray(t), np.asarray([r[1] or 0.0 for r in rows]))
    assert arr["q_W_per_m"] == pytest.approx(list(held), abs=1e-4)
    assert max(arr["q_W_per_m"]) == pytest.approx(FAST_PLAN.get("power_W_per_m", 5.0), rel=0.02)
    assert set(arr["phase"]) >= {"settling", "heating", "recovering"}
    for name, temps in arr["temps_C"].items():
        assert len(temps) == len(rows), name
    # the profile the daemon stored for its probe reads back as that probe
    active = probes["active"]["serial"]
    row = next(p for p in probes["probes"] if p["serial"] == active)
    assert stored_profile(row["profile_toml"], "stored").serial == active


def test_a_reply_sent_in_pieces_is_the_same_line() -> None:
    from linerig.daemon.jsonlines import encode, iter_encode

    obj = {"id": 3, "ok": True, "run_id": 7,
           "samples": {"t": [i / 3 for i in range(10_000)], "x": [float("nan"), 1.5, None] * 3000,
                       "phase": ["heating"] * 5000, "empty": [], "nested": {"a": [1, 2]}}}
    pieces = list(iter_encode(obj))
    assert len(pieces) > 3 and b"".join(pieces) == encode(obj)
    assert json.loads(b"".join(pieces))["samples"]["x"][:3] == [None, 1.5, None]  # NaN is null, as in one line


async def test_a_client_that_asks_nothing_is_closed_but_a_quiet_subscriber_is_not(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from linerig.daemon import api

    monkeypatch.setattr(api, "IDLE_TIMEOUT_S", 0.3)
    srv = Server(tmp_path / "api.sock")
    await srv.api.start()
    try:
        r, w = await asyncio.open_unix_connection(str(srv.api.path))
        assert await asyncio.wait_for(r.read(), 10) == b""  # closed for saying nothing
        assert srv.api.dropped == 1
        r, w = await asyncio.open_unix_connection(str(srv.api.path))
        w.write(b'{"op":"subscribe","id":1}\n')
        await w.drain()
        await asyncio.wait_for(r.readline(), 5)
        # an idle client that came after it is closed: the subscriber has been quiet as long, and stays
        r2, _ = await asyncio.open_unix_connection(str(srv.api.path))
        assert await asyncio.wait_for(r2.read(), 10) == b""
        srv.hub.publish({"event": "state", "state": "heating"})
        assert json.loads(await asyncio.wait_for(r.readline(), 5))["state"] == "heating"
        w.close()
    finally:
        await srv.api.close()
