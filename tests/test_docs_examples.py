"""The examples in docs/ run as written.

A fenced block whose info string names a file (```csv needle-in-sand.csv) is written to a scratch folder; each line
of an ```sh block is run there through the real command line; an ```output block must be what the command before
it printed; a ```toml block without a name must be a valid logger map; each ```sql block (docs/store.md) is run
against a store made by the daemon's own store code. Figures the prose states are checked against the commands.
"""

from __future__ import annotations

import json
import math
import re
import shlex
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from linerig.daemon.logger_import import parse_map
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.synthetic import Medium, make_run
from linerig.daemon.store.writer import SAMPLE_COLUMNS, Store

ROOT = Path(__file__).resolve().parent.parent
DOCS = ROOT / "docs"
FENCE = re.compile(r"^```([A-Za-z]*)[ \t]*([^\n`]*)\n(.*?)^```[ \t]*$", re.MULTILINE | re.DOTALL)


@dataclass(frozen=True)
class Block:
    lang: str
    name: str
    body: str


def blocks(page: str) -> list[Block]:
    return [Block(m[1], m[2].strip(), m[3]) for m in FENCE.finditer((DOCS / page).read_text(encoding="utf-8"))]


def linerig(line: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    argv = shlex.split(line)
    assert argv[0] == "linerig", f"a doc example runs linerig only: {line}"
    return subprocess.run([sys.executable, "-m", "linerig.tui.cli", *argv[1:]], capture_output=True, text=True,
                          cwd=cwd, timeout=300)


def run_page(page: str, where: Path) -> list[str]:
    """Write the page's files, run its commands, check its printed output; the commands' stdout in order."""
    printed: list[str] = []
    for b in blocks(page):
        if b.name:
            (where / b.name).write_text(b.body, encoding="utf-8")
        elif b.lang == "sh":
            for line in (x.strip() for x in b.body.splitlines()):
                if line and not line.startswith("#"):
                    done = linerig(line, where)
                    assert done.returncode == 0, f"{page}: {line}\n{done.stderr}"
                    printed.append(done.stdout)
        elif b.lang == "output":
            got = {x.strip() for x in printed[-1].splitlines()}
            for line in (x.strip() for x in b.body.splitlines() if x.strip()):
                assert line in got, f"{page}: the doc shows {line!r}; the command printed:\n{printed[-1]}"
        elif b.lang == "toml":
            parse_map(b.body, f"{page} example")
    return printed


def k_of(page_dir: Path, *argv: str) -> float:
    done = linerig(shlex.join(["linerig", "reduce", *argv, "--json"]), page_dir)
    assert done.returncode == 0, done.stderr
    (sensor,) = json.loads(done.stdout)["sensors"].values()
    return float(sensor["k_W_per_mK"])


def test_the_run_csv_example_reduces_to_the_figures_the_page_states(tmp_path: Path) -> None:
    printed = run_page("run-csv.md", tmp_path)
    assert "needle" in printed[0] and "line" in printed[0]
    text = (DOCS / "run-csv.md").read_text(encoding="utf-8")
    stated = re.search(r"k = ([\d.]+) W/\(m·K\) by the late-time line .*\nresistivity ([\d.]+) °C·cm/W", text)
    assert stated is not None
    done = linerig("linerig reduce needle-in-sand.csv --json", tmp_path)
    assert "applying the probe factor 1.02 ± 0.01 from needle-in-sand.csv (probe LN-0042)" in done.stderr
    k = json.loads(done.stdout)["sensors"]["needle"]["k_W_per_mK"]
    assert f"{k:.2f}" == stated[1] and f"{100 / k:.1f}" == stated[2]
    # the example is the exact line source for k = 1.5 (Carslaw & Jaeger 1959, §10.4), its late-time slope q/4πk,
    # reported with the header's factor 1.02
    assert k == pytest.approx(1.5 * 1.02, rel=0.005)


def test_the_logger_import_example_imports_as_shown_and_reduces_to_its_k(tmp_path: Path) -> None:
    run_page("logger-import.md", tmp_path)
    text = (DOCS / "logger-import.md").read_text(encoding="utf-8")
    stated = re.search(r"gives k = ([\d.]+) W/\(m·K\)", text)
    assert stated is not None
    imported = k_of(tmp_path, "bench-run.csv")
    direct = k_of(tmp_path, "bench-log.txt", "--map", "bench-log.toml")
    assert f"{imported:.2f}" == stated[1] and direct == pytest.approx(imported, rel=1e-9)
    # made from the exact line source for k = 1.5 (Carslaw & Jaeger 1959, §10.4), logged every 30 s
    assert imported == pytest.approx(1.5, rel=0.005)


def test_the_full_map_on_the_import_page_is_read_key_by_key() -> None:
    (full,) = [b for b in blocks("logger-import.md") if b.lang == "toml" and not b.name]
    m = parse_map(full.body, "example")
    assert (m.delimiter, m.decimal, m.header_line, m.units_line, m.date_order) == (";", ",", 4, 5, "day-first")
    assert m.temperatures == {"needle": "Ch1", "far": "Ch2"} and (m.voltage, m.current) == ("Heater U", "Heater I")
    assert m.units == {"Heater U": "mV", "Ch1": "°C"} and (m.length_mm, m.on_fraction) == (60.0, 0.5)


@pytest.fixture
def greyridge(tmp_path: Path) -> Path:
    """The store the store page's examples assume: probe GR-0007 at Greyridge cutting, run 1 with a sensor 'tip'
    (and one with a thermocouple fault), final results from the reduction itself."""
    path = tmp_path / "linerig.db"
    store = Store(path)
    try:
        for depth, k in ((1.0, 1.2), (2.0, 1.7)):
            data = make_run(Medium(k, 2.5e6), q_W_per_m=10.0, heat_s=300.0, baseline_s=60.0, noise_K=0.002,
                            rng=np.random.default_rng(int(depth)), sensor="tip")
            run_id = store.create_run({"site": "Greyridge cutting", "location": "BH3", "depth_m": depth,
                                       "probe_serial": "GR-0007", "sensor_names": json.dumps(["tip", "mid"]),
                                       "heat_start_device_s": 100.0, "q_timing": "held", "state": "done"})
            for n, (t, q, temp) in enumerate(zip(data.time_s, data.q_W_per_m, data.temps_C["tip"], strict=True)):
                mid = None if n in (3, 4) else float(temp) - 0.5
                row = {"run_id": run_id, "n": n, "seq": n, "device_ms": int((t + 100) * 1000),
                       "device_s": float(t + 100), "phase": "heating" if t >= 0 else "settling",
                       "heater_on": int(q > 0), "heater_V": None, "heater_A": None, "supply_V": 12.5,
                       "q_W_per_m": float(q), "cj_C": 18.0, "temps_C": json.dumps([float(temp), mid]),
                       "faults": "[0,0]"}
                store.add_sample(tuple(row[c] for c in SAMPLE_COLUMNS))
            store.flush(wait=True)
            red = reduce_run(data)
            store.add_result(run_id, "tip", red.sensors["tip"].to_json(), source="final")
    finally:
        store.close()
    return path


def test_every_query_on_the_store_page_runs_and_finds_rows(greyridge: Path) -> None:
    import sqlite3

    queries = [b.body for b in blocks("store.md") if b.lang == "sql"]
    assert len(queries) >= 4
    conn = sqlite3.connect(f"file:{greyridge}?mode=ro", uri=True)  # read-only, as the page advises
    conn.row_factory = sqlite3.Row
    try:
        results = [conn.execute(q).fetchall() for q in queries]
    finally:
        conn.close()
    assert all(results), [q.splitlines()[0] for q, r in zip(queries, results, strict=True) if not r]
    last_week, rise, by_depth, faults, budget = results[:5]
    assert [(r["depth_m"], r["sensor"]) for r in last_week] == [(1.0, "tip"), (2.0, "tip")]
    assert last_week[0]["k_W_per_mK"] == pytest.approx(1.2, rel=0.03)  # the invented ground's k, reduced
    assert all(r["ln_t"] == pytest.approx(math.log(r["time_s"])) for r in rise)
    assert [r["mean_k_W_per_mK"] for r in by_depth] == pytest.approx([1.2, 1.7], rel=0.03)
    assert [(r["run_id"], r["sensor"], r["samples_without_temperature"]) for r in faults] == [(1, "mid", 2),
                                                                                              (2, "mid", 2)]
    assert {r["part"] for r in budget} >= {"statistical", "drift", "power"}
    assert all(r["relative_u"] >= 0 for r in budget)
