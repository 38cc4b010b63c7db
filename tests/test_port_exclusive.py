"""Nobody else may write to the front end while linerigd holds it: a second opener is refused, and a heater-on
or an answer to a command the daemon never sent is a fault that keeps the heater off. Real processes throughout.

The second opener runs as an unprivileged user when the tests run as root, because the kernel lets a process
with CAP_SYS_ADMIN past a terminal's exclusive mode (tty_ioctl(4), TIOCEXCL).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from linerig.daemon.rig import messages as m
from tests.daemon_harness import Daemon, Sim, reap, wait_for  # noqa: F401  (reap kills what a test started)
from tests.test_daemon_process import HostPort

pytestmark = pytest.mark.timeout(120)
NOBODY = 65534

OPENER = """
import os, sys
if len(sys.argv) > 2:
    os.setgroups([]); os.setgid(int(sys.argv[2])); os.setuid(int(sys.argv[2]))
try:
    fd = os.open(sys.argv[1], os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
except OSError as e:
    print("refused", e.errno)
else:
    os.write(fd, b"$O,1*00000000\\n")  # what a second host would do: write to the front end
    print("opened")
"""


def second_opener(tty: str) -> str:
    """Another process opening the front end's port: 'opened' or 'refused <errno>'."""
    demote = [str(NOBODY)] if os.geteuid() == 0 else []
    done = subprocess.run([sys.executable, "-c", OPENER, tty, *demote], capture_output=True, text=True, timeout=30)
    assert done.returncode == 0, done.stderr
    return done.stdout.strip()


@pytest.fixture
def rig(tmp_path: Path):
    sim = Sim(tmp_path, speed=10)
    tty = os.path.realpath(sim.frontend)
    if os.geteuid() == 0:
        os.chmod(tty, 0o666)  # so that only the exclusive mode, not the file mode, can refuse the unprivileged opener
    yield sim, tty
    sim.stop()


def test_a_second_opener_is_refused_while_the_daemon_holds_the_port(rig, tmp_path: Path) -> None:
    sim, tty = rig
    assert second_opener(tty) == "opened"  # the port itself is open to this user
    d = Daemon(tmp_path, sim.frontend)
    try:
        d.wait_link()
        assert second_opener(tty) == f"refused {__import__('errno').EBUSY}"
        # a second linerigd on the same port does not get it either, and says why
        d2 = Daemon(tmp_path, sim.frontend, socket_path=tmp_path / "second.sock", db=tmp_path / "second.db")
        try:
            st = wait_for(lambda: (s := d2.status())["link_problem"] and s, 10, "the second daemon's reason")
            assert not st["link_up"] and "another program holds the port" in st["link_problem"]
        finally:
            d2.stop()
        assert d.status()["link_up"] and d.status()["fault"] is None
    finally:
        assert d.stop() == 0
    assert second_opener(tty) == "opened"  # a daemon that stops gives the port back


def test_a_killed_daemon_does_not_leave_the_simulated_port_locked(rig, tmp_path: Path) -> None:
    sim, tty = rig
    d = Daemon(tmp_path, sim.frontend)
    d.wait_link()
    d.kill()
    # a USB port leaves exclusive mode at its last close; the simulator does the same for its pty
    wait_for(lambda: second_opener(tty) == "opened", 10, "the port to be free again")


def test_a_heater_switched_on_by_another_program_is_a_fault_and_is_kept_off(tmp_path: Path) -> None:
    sim = Sim(tmp_path, speed=10)
    host = HostPort(sim.frontend)  # opened before the daemon, which exclusive mode cannot undo
    try:
        d = Daemon(tmp_path, sim.frontend)
        try:
            d.wait_link()
            events = d.subscribe()
            host.send(m.CMD_CONFIGURE, "1", "T", "T", "100.0")
            for i in range(5):  # it keeps switching the heater on
                host.send(m.CMD_POWER, "5.0", "1000")
                events.next(lambda e: e.get("event") == "fault", 10)
                # on, then off again: two more entries in the simulator's heater log
                wait_for(lambda i=i: len(sim.heater_events()) >= 2 * i + 2 and not sim.state()["heater_on"], 5,
                         "the daemon's heater-off")
            faults = [e["reason"] for e in events.seen if e.get("event") == "fault"]
            assert any("another program is writing to" in f for f in faults), faults
            assert not d.status()["heater_armed"]
            heater = sim.heater_events()
            assert [e["heater_on"] for e in heater] == [True, False] * 5
            assert all(e["reason"] == "host command" for e in heater)  # each off was the daemon's, not the lease
            d.wait_fresh(3)
            assert not sim.state()["heater_on"]
            events.close()
        finally:
            d.stop()
    finally:
        host.close()
        sim.stop()
