"""The ``linerig`` command line loads only the subcommand asked for; help still lists every one."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

PROBE = """
import sys
from linerig.tui.cli import _command_asked, build_parser
args = build_parser(_command_asked({argv!r})).parse_args({argv!r})
print(args.command, "linerig.daemon.reduction.api" in sys.modules, "linerig.daemon.report.pdf" in sys.modules)
"""


def loaded(argv: list[str]) -> str:
    done = subprocess.run([sys.executable, "-c", PROBE.format(argv=argv)], capture_output=True, text=True,
                          cwd=ROOT, timeout=60)
    assert done.returncode == 0, done.stderr
    return done.stdout.strip()


def test_a_light_command_does_not_load_the_reduction_or_the_reports() -> None:
    assert loaded(["--socket", "/tmp/x.sock", "status", "--json"]) == "status False False"
    assert loaded(["stop-heating"]) == "stop-heating False False"
    assert loaded(["reduce", "run.csv"]).startswith("reduce True")
    assert loaded(["import", "log.txt", "-o", "run.csv"]).startswith("import ")  # import_.py: a keyword


def test_help_and_a_mistyped_command_still_list_every_command() -> None:
    commands = [p.stem.rstrip("_").replace("_", "-") for p in (ROOT / "tui" / "commands").glob("*.py")
                if p.stem != "__init__"]
    helped = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "--help"], capture_output=True, text=True,
                            cwd=ROOT, timeout=60)
    assert helped.returncode == 0 and all(c in helped.stdout for c in commands)
    typo = subprocess.run([sys.executable, "-m", "linerig.tui.cli", "statuz"], capture_output=True, text=True, cwd=ROOT,
                          timeout=60)
    assert typo.returncode == 2 and "invalid choice: 'statuz'" in typo.stderr and "stop-heating" in typo.stderr
