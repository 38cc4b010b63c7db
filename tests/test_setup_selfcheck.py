"""linerig-setup's self-check and restart guard against a real daemon: what it prints comes from the daemon's own
status over its socket (front end and supply identity, probe, the socket's group and mode), and a measurement
under way is recognised so that a changed unit never interrupts it."""

from __future__ import annotations

import grp
import os
import shutil
from pathlib import Path

import pytest
from simulated_daemon import simulated_daemon

from linerig.daemon.install import render, selfcheck
from linerig.daemon.install.detect import Detection, Found
from linerig.daemon.install.host import Host, under_way
from linerig.daemon.install.layout import CONFIG, PROBES_DIR, on
from linerig.daemon.install.plan import Plan
from linerig.daemon.resources import probe_profile
from tests.daemon_harness import _json_request, wait_for


def _configured(root: Path) -> None:
    """A rig.toml as linerig-setup writes it, with the lab needle active."""
    on(root, PROBES_DIR).mkdir(parents=True)
    shutil.copy(probe_profile("lab-needle"), on(root, PROBES_DIR) / "lab-needle.toml")
    found = Detection(frontends=[Found("/dev/serial/by-id/usb-x-if00", "frontend", "a front end")])
    on(root, CONFIG).write_text(render.config_text(found, "NDL100-0412", ["lab-needle.toml"]))


def test_the_self_check_reports_what_the_running_daemon_says(tmp_path: Path) -> None:
    _configured(tmp_path)
    with simulated_daemon(tmp_path, 20, "--supply") as d:
        wait_for(lambda: _json_request(d["socket"], {"op": "status"}).get("link_up"), 30, "the front end link")
        ok, lines = selfcheck.report(Host(tmp_path), Plan(socket=d["socket"], starts=True))
        st = os.stat(d["socket"])
    assert ok, lines
    assert lines == [
        "configuration: /etc/linerig/rig.toml reads as linerigd will read it",
        "front end: linerig-sim serial SIM-0001, firmware sim-1.0 (link up)",
        "supply: LINERIG SIMPSU-3005 serial SIM000042, firmware 1.04",
        "probe: Lab needle, 100 mm (serial NDL100-0412), active in /etc/linerig/rig.toml",
        f"socket: {d['socket']}, group {grp.getgrgid(st.st_gid).gr_name}, mode {st.st_mode & 0o777:04o}"]


def test_a_daemon_that_does_not_answer_fails_the_self_check(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    _configured(tmp_path)
    monkeypatch.setattr(selfcheck, "IDENTITY_WAIT_S", 0.0)  # nothing listens: asking again would not change that
    ok, lines = selfcheck.report(Host(tmp_path), Plan(socket=tmp_path / "none.sock", starts=True))
    assert not ok and lines[-1].endswith("linerigd is not answering there: see journalctl -u linerigd")


def test_a_run_under_way_is_recognised_and_an_idle_daemon_is_not(tmp_path: Path) -> None:
    with simulated_daemon(tmp_path, 20) as d:
        host = Host(tmp_path)
        wait_for(lambda: _json_request(d["socket"], {"op": "status"}).get("link_up"), 30, "the front end link")
        assert under_way(host.daemon_status(d["socket"])) is None
        started = _json_request(d["socket"], {"op": "start", "heat_s": 3000, "baseline_s": 600})
        assert started.get("ok"), started
        busy = under_way(host.daemon_status(d["socket"]))
        assert busy is not None and busy.startswith(f"run {started['run_id']} is "), busy
        _json_request(d["socket"], {"op": "abort"})
        wait_for(lambda: under_way(host.daemon_status(d["socket"])) is None, 30, "the run to end")
