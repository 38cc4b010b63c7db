"""linerig-setup against a throwaway root: the ports of a real simulator found by asking them, the files written where
the system reads them, a dry run that shows exactly what a real run then writes, a second run that changes nothing,
and an uninstall that leaves the measurements and the configuration."""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import re
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from linerig.daemon.config import load_config
from linerig.daemon.install.render import untouched
from linerig.daemon.resources import probe_profiles, service_file
from linerig.daemon.store.writer import Store

FRONTEND = "/dev/serial/by-id/usb-Sim_Front_End_E6614103E7-if00"
SUPPLY = "/dev/serial/by-id/usb-FTDI_FT232R_USB_UART_A10K9ZQ1-if00-port0"
SILENT = "/dev/serial/by-id/usb-Prolific_USB-Serial_Controller-if00-port0"
BUSY = "/dev/serial/by-id/usb-1a86_USB_Serial-if00-port0"
BIN = Path(sys.executable).parent


@pytest.fixture(scope="module")
def ports(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, str]]:
    """Real ports: a simulator's front end and SCPI supply, a pty nobody answers on, and one another program holds."""
    links = tmp_path_factory.mktemp("sim")
    sim = subprocess.Popen([sys.executable, "-m", "linerig.daemon.sim.main", "--supply", "--speed", "10",
                            "--link-dir", str(links)], stdout=subprocess.PIPE, text=True)
    silent_master, silent = os.openpty()
    busy_master, busy = os.openpty()
    held = os.open(os.ttyname(busy), os.O_RDWR | os.O_NOCTTY)
    fcntl.flock(held, fcntl.LOCK_EX | fcntl.LOCK_NB)
    try:
        assert sim.stdout is not None
        info = json.loads(sim.stdout.readline())
        yield {FRONTEND: os.path.realpath(info["frontend"]), SUPPLY: os.path.realpath(info["supply"]),
               SILENT: os.ttyname(silent), BUSY: os.ttyname(busy)}
    finally:
        sim.terminate()
        sim.wait(10)
        for fd in (held, silent_master, silent, busy_master, busy):
            os.close(fd)


def plug(root: Path, ports: dict[str, str], *names: str) -> Path:
    """``names`` appear under root's /dev/serial/by-id, pointing at the real ports (as udev's links do)."""
    by_id = root / "dev" / "serial" / "by-id"
    by_id.mkdir(parents=True, exist_ok=True)
    for name in names:
        (by_id / Path(name).name).symlink_to(ports[name])
    return root


def setup(root: Path, *args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "linerig.daemon.install.main", "--root", str(root), *args],
                          capture_output=True, text=True, timeout=120)


def changes(out: str) -> list[str]:
    """The change lines of a run's output (a dry run's without the diffs)."""
    return [line for line in out.splitlines() if re.match(r"  (create folder|write|remove|run) ", line)]


def files_from_diffs(out: str) -> dict[str, str]:
    """New files as a dry run shows them: each diff against /dev/null, put back together."""
    files: dict[str, list[str]] = {}
    current: list[str] | None = None
    for line in out.splitlines():
        if m := re.match(r"  write (\S+) \(new file", line):
            current = files.setdefault(m.group(1), [])
        elif current is not None and line.startswith("      +") and not line.startswith("      +++"):
            current.append(line.removeprefix("      +") + "\n")
        elif not line.startswith("      "):
            current = None
    return {path: "".join(lines) for path, lines in files.items()}


def tree(root: Path) -> dict[str, str]:
    """Every file linerig-setup wrote under root (not the ports), with its content."""
    return {"/" + p.relative_to(root).as_posix(): p.read_text() for p in sorted(root.rglob("*"))
            if p.is_file() and not p.is_symlink() and "dev" not in p.relative_to(root).parts}


def test_dry_run_shows_what_a_real_run_then_writes_and_a_second_run_changes_nothing(
        tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, FRONTEND, SUPPLY, SILENT, BUSY)
    dry = setup(root, "--dry-run")
    assert dry.returncode == 0, dry.stderr
    assert tree(root) == {}, "a dry run wrote something"
    real = setup(root)
    assert real.returncode == 0, real.stderr
    assert changes(dry.stdout) == changes(real.stdout) != []
    written = tree(root)
    assert files_from_diffs(dry.stdout) == written

    profiles = {f"/etc/linerig/probes/{p.name}" for p in probe_profiles()}
    assert set(written) == {"/etc/sysusers.d/linerig.conf", "/etc/udev/rules.d/70-linerig.rules",
                            "/etc/systemd/system/linerigd.service", "/etc/linerig/rig.toml", *profiles}
    assert written["/etc/sysusers.d/linerig.conf"] == service_file("linerig.sysusers").read_text()
    unit = written["/etc/systemd/system/linerigd.service"]
    assert f"ExecStart={BIN}/linerigd --config /etc/linerig/rig.toml" in unit and "/opt/linerig" not in unit
    rules = written["/etc/udev/rules.d/70-linerig.rules"]
    for name, link in ((FRONTEND, "linerig-frontend"), (SUPPLY, "linerig-supply")):
        rule = next(r for r in rules.replace("\\\n", "").splitlines() if f'SYMLINK+="{link}"' in r)
        assert f'SYMLINK=="{name.removeprefix("/dev/")}"' in rule and 'MODE="0660"' in rule
    assert "REPLACE-WITH" not in rules and "Prolific" not in rules and "1a86" not in rules

    config_text = written["/etc/linerig/rig.toml"]
    assert untouched(config_text)
    cfg = load_config(root / "etc/linerig/rig.toml", lambda g: g == "linerig")
    assert (cfg.devices.frontend, cfg.devices.supply) == ("/dev/linerig-frontend", "/dev/linerig-supply")
    assert cfg.probe.serial == "NDL100-0412" and len(cfg.probes) == len(profiles)
    assert "serial SIM-0001" in config_text and "serial SIM000042" in config_text

    out = real.stdout
    assert f"front end: linerig-sim serial SIM-0001, firmware sim-1.0, 1 channel at {FRONTEND}" in out
    assert f"supply: LINERIG SIMPSU-3005 serial SIM000042, firmware 1.04 at {SUPPLY}" in out
    assert f"no answer (neither a front end nor a SCPI supply): {SILENT}" in out
    assert f"busy (another program holds it; not probed): {BUSY}" in out
    commands = [line for line in changes(out) if line.startswith("  run ")]
    assert [c.split("  (")[0] for c in commands] == [
        "  run systemd-sysusers /etc/sysusers.d/linerig.conf", "  run udevadm control --reload",
        "  run udevadm trigger --subsystem-match=tty --action=change", "  run udevadm settle",
        "  run systemctl daemon-reload", "  run systemctl enable --now linerigd"]
    assert all(c.endswith("[printed, not run: --root]") for c in commands)
    check = out.split("self-check:\n")[1]
    assert "configuration: /etc/linerig/rig.toml reads as linerigd will read it" in check
    assert "probe: Lab needle, 100 mm (serial NDL100-0412)" in check
    assert "socket: /run/linerig/linerigd.sock, group linerig" in check

    again = setup(root)
    assert again.returncode == 0, again.stderr
    assert changes(again.stdout) == [] and "nothing to change: this rig is already set up as asked" in again.stdout
    assert tree(root) == written


def test_without_a_front_end_nothing_starts_and_plugging_it_in_later_finishes_the_job(
        tmp_path: Path, ports: dict[str, str]) -> None:
    first = setup(tmp_path)
    assert first.returncode == 0, first.stderr
    config = (tmp_path / "etc/linerig/rig.toml").read_text()
    assert "\n# frontend = " in config and "no front end found at set-up: plug it in" in config
    assert "no front end found" in first.stdout and "installed but not started" in first.stdout
    assert "systemctl enable" not in first.stdout
    assert "linerig-frontend" not in (tmp_path / "etc/udev/rules.d/70-linerig.rules").read_text().replace(
        "/dev/linerig-frontend is not made", "")

    plug(tmp_path, ports, FRONTEND)
    second = setup(tmp_path)
    assert second.returncode == 0, second.stderr
    assert [c.split("  (")[0] for c in changes(second.stdout)] == [
        "  write /etc/udev/rules.d/70-linerig.rules (changed, mode 0644)",
        "  write /etc/linerig/rig.toml (changed, mode 0644)",
        "  run udevadm control --reload", "  run udevadm trigger --subsystem-match=tty --action=change",
        "  run udevadm settle", "  run systemctl enable --now linerigd"]
    assert load_config(tmp_path / "etc/linerig/rig.toml", lambda g: True).devices.frontend == "/dev/linerig-frontend"


def test_an_edited_configuration_is_never_written_again(tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, FRONTEND)
    assert setup(root).returncode == 0
    config = root / "etc/linerig/rig.toml"
    mine = config.read_text().replace("max_rise_K = 10", "max_rise_K = 8")
    config.write_text(mine)
    plug(root, ports, SUPPLY)
    run = setup(root)
    assert run.returncode == 0, run.stderr
    assert config.read_text() == mine
    assert "/etc/linerig/rig.toml is yours" in run.stdout
    assert f"found a supply at {SUPPLY}, but /etc/linerig/rig.toml names none" in run.stdout
    assert 'SYMLINK+="linerig-supply"' in (root / "etc/udev/rules.d/70-linerig.rules").read_text()
    assert "run systemctl restart linerigd" in run.stdout  # the rule changed under a running service


def test_a_rig_that_pushes_to_a_central_database_gets_the_network_drop_in_and_loses_it_again(
        tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, FRONTEND)
    assert setup(root).returncode == 0
    config = root / "etc/linerig/rig.toml"
    plain = config.read_text()
    config.write_text(plain + '\n[sync]\nto = "service=linerig-central"\n')
    dropin = root / "etc/systemd/system/linerigd.service.d/sync.conf"
    on = setup(root)
    assert on.returncode == 0, on.stderr
    assert dropin.read_text() == service_file("linerigd-sync.conf").read_text()
    assert [c.split("  (")[0] for c in changes(on.stdout)] == [
        "  create folder /etc/systemd/system/linerigd.service.d (mode 0755)",
        "  write /etc/systemd/system/linerigd.service.d/sync.conf (new file, mode 0644)",
        "  run systemctl daemon-reload", "  run systemctl restart linerigd"]
    config.write_text(plain.replace("max_rise_K = 10", "max_rise_K = 9"))
    off = setup(root)
    assert "  remove /etc/systemd/system/linerigd.service.d/sync.conf" in changes(off.stdout)
    assert not dropin.parent.exists()


def test_operators_join_the_control_group_and_stay_there(tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, FRONTEND)
    (root / "etc").mkdir()
    (root / "etc/passwd").write_text("root:x:0:0::/root:/bin/sh\nalice:x:1000:1000::/home/alice:/bin/sh\n"
                                     "bob:x:1001:1001::/home/bob:/bin/sh\n")
    wrong = setup(root, "--operator", "alcie")
    assert wrong.returncode == 2 and "--operator alcie: no such user" in wrong.stderr
    assert not (root / "etc/sysusers.d").exists()

    assert setup(root, "--operator", "alice").returncode == 0
    operators = root / "etc/sysusers.d/linerig-operators.conf"
    assert [line for line in operators.read_text().splitlines() if not line.startswith("#")] == ["m alice linerig"]
    later = setup(root)
    assert "nothing to change" in later.stdout and operators.exists()
    more = setup(root, "--operator", "bob", "--operator", "alice")
    assert [line for line in operators.read_text().splitlines() if line.startswith("m ")] == [
        "m alice linerig", "m bob linerig"]
    assert ("run systemd-sysusers /etc/sysusers.d/linerig.conf /etc/sysusers.d/linerig-operators.conf"
            in more.stdout)


def test_the_probe_in_use_is_chosen_by_its_profile(tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, FRONTEND)
    unknown = setup(root, "--probe", "lab-needel")
    assert unknown.returncode == 2 and "--probe lab-needel: no /etc/linerig/probes/lab-needel.toml" in unknown.stderr
    assert setup(root, "--probe", "field-rod").returncode == 0
    cfg = load_config(root / "etc/linerig/rig.toml", lambda g: True)
    # the 1.5 m rod on the front end's heater: 45 W flashed limit / 1.5 m (hardware/firmware/probefw/limits.py)
    assert cfg.probe.serial == "RX15-4J-0011" and cfg.limits.max_power_W_per_m == 30
    assert "nothing to change" in setup(root).stdout  # the choice stays without --probe


def test_uninstall_removes_what_it_installed_and_keeps_the_measurements_and_the_configuration(
        tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, FRONTEND)
    (root / "etc").mkdir()
    (root / "etc/passwd").write_text("alice:x:1000:1000::/home/alice:/bin/sh\n")
    assert setup(root, "--operator", "alice").returncode == 0
    db = root / "var/lib/linerig/linerig.db"
    store = Store(db)
    store.close()
    measured = db.read_bytes()
    config = (root / "etc/linerig/rig.toml").read_text()

    dry = setup(root, "--uninstall", "--dry-run")
    assert dry.returncode == 0 and (root / "etc/systemd/system/linerigd.service").exists()
    gone = setup(root, "--uninstall")
    assert gone.returncode == 0, gone.stderr
    assert changes(dry.stdout) == changes(gone.stdout)
    assert [c.split("  (")[0] for c in changes(gone.stdout)] == [
        "  run systemctl disable --now linerigd", "  remove /etc/sysusers.d/linerig.conf",
        "  remove /etc/sysusers.d/linerig-operators.conf", "  remove /etc/udev/rules.d/70-linerig.rules",
        "  remove /etc/systemd/system/linerigd.service", "  run systemctl daemon-reload",
        "  run udevadm control --reload"]
    assert db.read_bytes() == measured and (root / "etc/linerig/rig.toml").read_text() == config
    assert sorted(p.name for p in (root / "etc/linerig/probes").iterdir()) == [p.name for p in probe_profiles()]
    for kept in ("kept /etc/linerig/rig.toml", "kept /var/lib/linerig/linerig.db: the measurements",
                 "kept the linerig user and its groups"):
        assert kept in gone.stdout
    assert "nothing to change: nothing of linerig-setup's is installed here" in setup(root, "--uninstall").stdout


@pytest.mark.parametrize(("args", "says"), [
    (["--frontend", "/dev/ttyACM0"], "/dev/ttyACM0: give the port by its /dev/serial/by-id name"),
    (["--frontend", "/dev/serial/by-id/usb-none-if00"], "no such port; is it plugged in?"),
    (["--uninstall", "--operator", "alice"], "--uninstall takes only --root and --dry-run"),
])
def test_bad_requests_are_refused_naming_what_is_wrong(tmp_path: Path, args: list[str], says: str) -> None:
    done = setup(tmp_path, *args)
    assert done.returncode == 2 and says in done.stderr and done.stdout.count("write ") == 0
    with contextlib.suppress(FileNotFoundError):
        assert list((tmp_path / "etc").rglob("*")) == []


def test_a_missing_root_is_refused(tmp_path: Path) -> None:
    done = setup(tmp_path / "nowhere")
    assert done.returncode == 2 and f"--root {tmp_path / 'nowhere'}: no such folder" in done.stderr


def test_a_port_named_on_the_command_line_is_used_even_when_it_does_not_answer(
        tmp_path: Path, ports: dict[str, str]) -> None:
    root = plug(tmp_path, ports, SILENT)
    done = setup(root, "--frontend", SILENT)
    assert done.returncode == 0, done.stderr
    assert f"front end: given with --frontend, did not identify itself at {SILENT}" in done.stdout
    assert f'SYMLINK=="{SILENT.removeprefix("/dev/")}"' in (root / "etc/udev/rules.d/70-linerig.rules").read_text()


def test_the_live_system_is_changed_only_by_root_on_a_machine_run_by_systemd(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    """Without --root nothing is written unless both hold (here neither may: systemd's marker is pointed away)."""
    from linerig.daemon.install import main as setup_main

    monkeypatch.setattr(setup_main, "SYSTEMD_RUNNING", tmp_path / "no-systemd")
    assert setup_main.main([]) == 2
    err = capsys.readouterr().err
    assert ("changing the system needs root" in err if os.geteuid() != 0
            else f"this machine does not run systemd ({tmp_path / 'no-systemd'} is missing)" in err)
