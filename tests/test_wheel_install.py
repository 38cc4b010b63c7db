"""The wheel as a user gets it: built from the sources, installed into a fresh virtual environment outside the
checkout, and used from there: no top-level ``daemon`` or ``tui``, the package data present and found, an offline
reduction, a short simulated run on the packaged firmware, and linerig-setup on a throwaway root.

One wheel and one environment for the whole session: the build takes the sources only (a copy, so no build/ folder
is left in the checkout), and the environment's dependencies come from the registry through pip's own cache.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tomllib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
from simulated_daemon import simulated_daemon

from linerig.daemon.sim.materials import DEFAULT_MATERIAL_KEY, get_material
from tests.daemon_harness import _json_request, wait_for

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "examplemoor"
pytestmark = pytest.mark.timeout(900)


@dataclass(frozen=True)
class Installed:
    venv: Path
    wheel: Path
    work: Path  # the folder every command runs in: not the checkout, so nothing is imported from there

    def bin(self, name: str) -> str:
        return str(self.venv / "bin" / name)

    def run(self, *argv: str, timeout: float = 120) -> subprocess.CompletedProcess[str]:
        env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME", "VIRTUAL_ENV")}
        return subprocess.run(list(argv), capture_output=True, text=True, timeout=timeout, cwd=self.work, env=env)

    def python(self, code: str) -> subprocess.CompletedProcess[str]:
        return self.run(self.bin("python"), "-c", code)


def _sources(dest: Path) -> Path:
    """What the build reads: pyproject.toml, the readme and the folders the packages map to."""
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    folders = set(project["tool"]["setuptools"]["package-dir"].values())
    dest.mkdir()
    for name in ("pyproject.toml", project["project"]["readme"]):
        shutil.copy2(ROOT / name, dest / name)
    for folder in folders:
        shutil.copytree(ROOT / folder, dest / folder, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    return dest


@pytest.fixture(scope="module")
def installed(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Installed]:
    base = tmp_path_factory.mktemp("wheel")
    src, out, venv, work = _sources(base / "src"), base / "dist", base / "venv", base / "work"
    work.mkdir()
    built = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "-w", str(out), str(src)],
                           capture_output=True, text=True, timeout=600)
    assert built.returncode == 0, built.stdout + built.stderr
    (wheel,) = out.glob("linerig-*.whl")
    made = subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], capture_output=True, text=True,
                          timeout=300)
    assert made.returncode == 0, made.stderr
    put = subprocess.run([sys.executable, "-m", "pip", "--python", str(venv / "bin" / "python"), "install", "--quiet",
                          str(wheel)], capture_output=True, text=True, timeout=900)
    assert put.returncode == 0, put.stdout + put.stderr
    yield Installed(venv, wheel, work)


def test_only_the_linerig_namespace_is_installed(installed: Installed) -> None:
    record = next(installed.venv.glob("lib/python*/site-packages/linerig-*.dist-info/RECORD")).read_text()
    tops = {line.split(",")[0].split("/")[0] for line in record.splitlines()}
    assert {t for t in tops if not t.startswith(("linerig-", ".."))} == {"linerig"}
    found = installed.python("import importlib.util as u; print([u.find_spec(n) is None for n in "
                             "('daemon', 'tui', 'hardware', 'systemd')])")
    assert found.stdout.strip() == "[True, True, True, True]", found.stderr
    for command in ("linerig", "linerigd", "linerig-sim", "linerig-setup"):
        assert (installed.venv / "bin" / command).is_file()


def test_the_package_data_is_in_the_wheel_and_found_there(installed: Installed) -> None:
    code = """if True:
        import json
        from linerig.daemon import resources as r
        paths = [r.firmware_dir() / "main.py", r.firmware_dir() / "probefw" / "device.py", r.default_probe_path(),
                 r.qualify_criteria_path(), r.firmware_process_script(), r.hardware_doc("PROTOCOL.md"),
                 *r.probe_profiles(),
                 *(r.service_file(n) for n in ("linerigd.service", "70-linerig.rules", "linerig.sysusers",
                                               "rig.toml.example", "README.md"))]
        print(json.dumps([[str(p), p.is_file()] for p in paths]))
    """
    done = installed.python(code)
    assert done.returncode == 0, done.stderr
    paths = json.loads(done.stdout)
    site = next(installed.venv.glob("lib/python*/site-packages"))
    assert len(paths) == 14
    for path, is_file in paths:
        assert is_file and Path(path).is_relative_to(site / "linerig"), path
    names = sorted(Path(p).name for p, _ in paths if "/probes/" in p)
    assert names == sorted(p.name for p in (ROOT / "hardware" / "probes").glob("*.toml"))
    criteria = installed.run(installed.bin("linerig"), "qualify", "criteria")
    assert criteria.returncode == 0 and criteria.stdout == (ROOT / "daemon/qualify/criteria.toml").read_text()


def test_an_offline_reduction_from_the_install_matches_the_checkout(installed: Installed) -> None:
    args = ("reduce", str(EXAMPLE / "run_BH1_1.5m.csv"), "--probe", str(EXAMPLE / "FN-0412.toml"), "--json")
    there = installed.run(installed.bin("linerig"), *args)
    assert there.returncode == 0, there.stderr
    here = subprocess.run([sys.executable, "-m", "linerig.tui.cli", *args], capture_output=True, text=True,
                          timeout=120)
    assert json.loads(there.stdout) == json.loads(here.stdout)
    k = json.loads(there.stdout)["sensors"]
    assert k and all(0.1 < s["k_W_per_mK"] < 5 for s in k.values())


def test_a_short_simulated_run_on_the_packaged_firmware(installed: Installed) -> None:
    with simulated_daemon(installed.work, 50, "--firmware", linerigd=(installed.bin("linerigd"),)) as daemon:
        assert daemon["ready"].get("firmware") == "cpython"  # the packaged firmware; no micropython in a plain install
        sock = daemon["socket"]
        wait_for(lambda: _json_request(sock, {"op": "status"}).get("link_up"), 30, "the front end link")
        done = installed.run(installed.bin("linerig"), "--socket", str(sock), "start", "--heat-s", "120",
                             "--recover-s", "60", "--baseline-s", "60", "--wait", "--json")
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    k_true = get_material(DEFAULT_MATERIAL_KEY).k_W_per_mK
    assert out["state"] == "done" and abs(out["results"]["heater"]["k_W_per_mK"] / k_true - 1) < 0.15, out


def test_the_setup_command_from_the_install_on_a_throwaway_root(installed: Installed) -> None:
    root = installed.work / "root"
    root.mkdir()
    first = installed.run(installed.bin("linerig-setup"), "--root", str(root))
    assert first.returncode == 0, first.stderr
    unit = (root / "etc/systemd/system/linerigd.service").read_text()
    assert f"ExecStart={installed.bin('linerigd')} --config /etc/linerig/rig.toml" in unit
    assert (root / "etc/linerig/probes/lab-needle.toml").read_text() == \
        (ROOT / "hardware/probes/lab-needle.toml").read_text()
    again = installed.run(installed.bin("linerig-setup"), "--root", str(root))
    assert "nothing to change" in again.stdout
