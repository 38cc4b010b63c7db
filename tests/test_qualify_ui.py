"""The qualification screen driven by Textual's pilot: a simulated qualification with the insulation reading asked
for in the prompt line, the verdict table filled and the result stored."""

from __future__ import annotations

import asyncio
from pathlib import Path

from textual.app import App
from textual.widgets import DataTable, Input, Static

from linerig.daemon.qualify.config import CRITERION_IDS
from linerig.daemon.qualify.simrig import SimSetup
from linerig.daemon.qualify.store import list_qualifications, open_store
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
    store = open_store(db)
    try:
        rows = list_qualifications(store.db)
    finally:
        store.close()
    assert [r["probe_serial"] for r in rows] == ["QN-0077"] and rows[0]["id"] == screen.qualification_id


async def test_screen_reports_a_missing_profile(tmp_path: Path) -> None:
    screen = QualifyScreen(tmp_path / "nowhere.toml", simulate=True, save=False)
    app = _Host(screen)
    async with app.run_test(size=(140, 45)) as pilot:
        await pilot.pause()
        await pilot.click("#start")
        await asyncio.wait_for(screen.finished.wait(), 30)
        await pilot.pause()
        assert screen.qualification is None
        assert "Could not qualify" in str(screen.query_one("#verdict", Static).content)
