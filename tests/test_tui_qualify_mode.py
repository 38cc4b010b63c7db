"""The qualification screen is reachable from the operator's app (F6), without a daemon."""

from __future__ import annotations

from pathlib import Path

from linerig.tui.app import LinerigApp
from linerig.tui.screens.qualify import QualifyScreen


async def test_f6_opens_the_qualification_screen(tmp_path: Path) -> None:
    app = LinerigApp(socket_path=tmp_path / "nobody-here.sock")
    async with app.run_test(size=(100, 30)) as pilot:
        await pilot.press("f6")
        await pilot.pause()
        assert isinstance(app.screen, QualifyScreen)
        await pilot.press("f2")
        await pilot.pause()
        assert not isinstance(app.screen, QualifyScreen)
