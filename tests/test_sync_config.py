"""The [sync] section of rig.toml: what it takes, what it refuses (a password written in it, unless insisted on),
and the commented example in systemd/rig.toml.example, uncommented, parses."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from linerig.daemon.config import parse_config
from linerig.daemon.errors import ConfigError

ROOT = Path(__file__).resolve().parent.parent


def test_a_sync_section_with_defaults_and_its_own_settings() -> None:
    assert parse_config("").sync is None
    cfg = parse_config('[sync]\nto = "service=linerig-central"\n').sync
    assert cfg is not None and cfg.to == "service=linerig-central" and cfg.rig is None and cfg.interval_s == 300
    cfg = parse_config('[sync]\nto = "postgresql://rig_n@db.example.org/linerig?sslmode=verify-full"\n'
                       'rig = "north-rig"\ninterval_s = 60\nretry_s = 5\nmax_backoff_s = 600\n').sync
    assert cfg is not None and (cfg.rig, cfg.interval_s, cfg.retry_s, cfg.max_backoff_s) == ("north-rig", 60, 5, 600)


@pytest.mark.parametrize(("text", "words"), [
    ("[sync]\n", "line 1: sync.to: expected a libpq connection string"),
    ('[sync]\nto = "postgresql://rig:s3cret@db/linerig"\n', "line 2: sync.to: a password is written here"),
    ('[sync]\nto = "host=db password=s3cret"\n', "~/.pgpass or PGPASSFILE"),
    ('[sync]\nto = "postgresql://[oops"\n', "not a PostgreSQL connection string"),
    ('[sync]\nto = "service=x"\ninterval_s = 1\n', "line 3: sync.interval_s: expected seconds from 10"),
    ('[sync]\nto = "service=x"\nretry_s = 100\nmax_backoff_s = 50\n', "sync.max_backoff_s: expected at least"),
    ('[sync]\nto = "service=x"\nrig = ""\n', "sync.rig: expected a name"),
    ('[sync]\nto = "service=x"\nallow_password = "yes"\n', "sync.allow_password: expected true or false"),
    ('[sync]\nto = "service=x"\npasword = "x"\n', "sync.pasword: unknown key"),
])
def test_a_bad_sync_setting_is_named_with_its_line(text: str, words: str) -> None:
    with pytest.raises(ConfigError) as err:
        parse_config(text, "rig.toml")
    assert words in str(err.value)


def test_a_password_in_the_file_only_when_insisted_on() -> None:
    cfg = parse_config('[sync]\nto = "postgresql://rig:s3cret@db/linerig"\nallow_password = true\n').sync
    assert cfg is not None and "s3cret" in cfg.to


def test_the_commented_example_parses_when_uncommented(tmp_path: Path) -> None:
    text = (ROOT / "systemd" / "rig.toml.example").read_text()
    block = text[text.index("# [sync]"):]
    lines = [re.sub(r"^# ", "", ln) for ln in block.splitlines() if not ln.startswith("#  ")]
    cfg = parse_config("\n".join(lines), str(tmp_path / "rig.toml"), tmp_path).sync
    assert cfg is not None and cfg.to == "service=linerig-central" and cfg.rig == "north-rig"


def test_check_config_says_where_the_rig_pushes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from linerig.daemon.main import main

    cfg = tmp_path / "rig.toml"
    cfg.write_text('[sync]\nto = "host=db.example.org dbname=linerig user=rig_n sslmode=verify-full"\n'
                   'rig = "north-rig"\ninterval_s = 120\n')
    assert main(["--config", str(cfg), "--check-config"]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.strip().startswith("sync: to "))
    assert "host=db.example.org" in line and "sslmode=verify-full" in line
    assert line.endswith("as rig north-rig, every 120 s and after each run")
