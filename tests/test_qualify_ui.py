"""The qualification screen driven by Textual's pilot: a simulated qualification with the insulation reading asked
for in the prompt line, the verdict table filled, and nothing stored against the probe's real serial."""

from __future__ import annotations

import asyncio
from pathlib import Path

from textual.app import App
from textual.widgets import Checkbox, DataTable, Input, Static

from linerig.daemon.qualify.config import CRITERION_IDS
from linerig.daemon.qualify.simrig import SimSetup
from linerig.daemon.qualify.store import list_qualifications, open_store, save_qualification
from linerig.tui.screens.qualify import QualifyScreen

PROFILE = """
[probe]
name = "bench needle"
serial = "QN-0077"
heater_length_mm = 100.0
radius_mm = 0.635
heat_capacity_MJ_per_m3K = 3.2
heater_resistance_ohm = 40.0
heater_tcr_per_K = 5e-5
thermocouple = "T"

[[sensor]]
name = "heater"
radial_mm = 0.0
axial_mm = 50.0
"""
FAST = {"procedure": {"repeats": 2, "baseline_s": 120.0, "heat_s": 700.0, "bath_log_s": 40.0,
                      "heater_check_s": 20.0}}


class _Host(App[None]):
    def __init__(self, screen: QualifyScreen) -> None:
        super().__init__()
        self._qs = screen

    def on_mount(self) -> None:
        self.push_screen(self._qs)


async def test_screen_runs_a_simulated_qualification_with_a_prompt(tmp_path: Path) -> None:
    prof = tmp_path / "probe.toml"
    prof.write_text(PROFILE)
    db = tmp_path / "ui.db"
    screen = QualifyScreen(prof, simulate=True, config_overrides=FAST, db_path=db,
                           sim_setup=SimSetup(interval_s=1.6, axial_loss=False))
    app = _Host(screen)
    async with app.run_test(size=(140, 45)) as pilot:
        await pilot.pause()
        assert screen.query_one("#profile", Input).value == str(prof)
        await pilot.click("#start")
        # no insulation reading in the form: the procedure asks for it and waits
        await asyncio.wait_for(screen.prompt_shown.wait(), 30)
        assert "Insulation resistance" in str(screen.query_one("#prompt", Static).content)
        screen.query_one("#answer", Input).focus()
        await pilot.press(*"1500", "enter")
        await asyncio.wait_for(screen.finished.wait(), 60)
        await pilot.pause()
        q = screen.qualification
        assert q is not None and q.passed, [(r.id, r.status, r.detail) for r in (q.results if q else [])]
        assert q.measurements.insulation_MOhm == 1500.0
        table = screen.query_one("#results", DataTable)
        assert table.row_count == len(q.results)
        assert {str(table.get_row_at(i)[1]) for i in range(table.row_count)} == set(CRITERION_IDS)
        assert "QUALIFIED" in str(screen.query_one("#verdict", Static).content)
    # a simulated unit is not the probe: the screen stores nothing, and the store itself would key it apart
    assert screen.qualification_id is None
    store = open_store(db)
    try:
        assert list_qualifications(store.db) == []
        qid = save_qualification(store.db, q)
        assert [(r["id"], r["probe_serial"]) for r in list_qualifications(store.db)] == [(qid, "simulated:QN-0077")]
        assert list_qualifications(store.db, "QN-0077") == []
    finally:
        store.close()


async def test_the_screen_starts_on_the_real_rig_and_stores_in_the_daemons_database(tmp_path: Path) -> None:
    """A screen opened from the operator's app (F6) qualifies the real probe by default, and its store is the
    file the daemon's status names, not a database of the UI's own."""
    from types import SimpleNamespace

    screen = QualifyScreen()
    app = _Host(screen)
    app.live = SimpleNamespace(status={"db": str(tmp_path / "daemon.db")})  # type: ignore[attr-defined]
    async with app.run_test(size=(140, 45)) as pilot:
        await pilot.pause()
        assert screen.query_one("#simulate", Checkbox).value is False
        assert screen._store_path() == tmp_path / "daemon.db"
