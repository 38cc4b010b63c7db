"""Probe qualification screen: pick a profile, run the guided procedure (simulated or on the daemon), see each
criterion's verdict, store it and write the report.

Self-contained: push ``QualifyScreen()`` from any app. In live mode it opens its own connection to the daemon
(closing the screen never affects the daemon); the operator's readings and "probe is in place" confirmations are
asked for in the prompt line while the procedure waits.
"""

from __future__ import annotations

import asyncio
from pathlib import Path
from typing import Any, ClassVar

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Button, Checkbox, DataTable, Footer, Input, Label, Log, Static

from linerig.daemon.paths import default_db_path
from linerig.daemon.probe import ProbeProfileError, load_probe_profile
from linerig.daemon.qualify.analysis import QualificationDataError, primary_sensor
from linerig.daemon.qualify.config import QualificationConfigError, load_config
from linerig.daemon.qualify.procedure import run_async
from linerig.daemon.qualify.report import write_report
from linerig.daemon.qualify.requests import AskNumber, Progress
from linerig.daemon.qualify.result import Qualification, judge
from linerig.daemon.qualify.simrig import SimSetup, SimulatedQualificationRig
from linerig.daemon.qualify.store import open_store, save_qualification

STATUS_STYLE = {"pass": ("PASS", "bold green"), "fail": ("FAIL", "bold red"), "warn": ("WARN", "bold yellow"),
                "not_measured": ("NOT MEASURED", "bold magenta"), "not_applicable": ("n/a", "dim")}


class QualifyScreen(Screen[None]):
    """The whole procedure on one screen; ``Finished`` is posted with the result."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "leave", "Back"),
        Binding("ctrl+r", "start", "Run", show=True),
    ]
    DEFAULT_CSS = """
    QualifyScreen { layout: vertical; }
    QualifyScreen #form { height: auto; padding: 0 1; }
    QualifyScreen #form Input { width: 1fr; }
    QualifyScreen #form Label { width: 18; padding: 1 0 0 0; }
    QualifyScreen #form Horizontal { height: auto; }
    QualifyScreen #prompt-box { height: auto; border: round $warning; padding: 0 1; display: none; }
    QualifyScreen #prompt-box.asking { display: block; }
    QualifyScreen #progress { height: 8; border: round $panel; }
    QualifyScreen #results { height: 1fr; }
    QualifyScreen #verdict { height: auto; padding: 0 1; text-style: bold; }
    """

    class Finished(Message):
        """The procedure ended: ``qualification`` is None when it could not run (``error`` says why)."""

        def __init__(self, qualification: Qualification | None, qualification_id: int | None, error: str) -> None:
            super().__init__()
            self.qualification = qualification
            self.qualification_id = qualification_id
            self.error = error

    def __init__(self, profile_path: Path | None = None, *, simulate: bool = False, criteria_path: Path | None = None,
                 config_overrides: dict[str, Any] | None = None, sim_setup: SimSetup | None = None,
                 db_path: Path | None = None, socket_path: Path | None = None, save: bool = True) -> None:
        super().__init__()
        self._profile_path = profile_path
        self._simulate = simulate
        self._criteria_path = criteria_path
        self._overrides = config_overrides
        self._sim_setup = sim_setup or SimSetup()
        self._db_path = db_path
        self._socket_path = socket_path
        self._save = save
        self._answer: asyncio.Future[str] | None = None
        self.prompt_shown = asyncio.Event()
        """Set while the procedure waits for the operator (tests wait on it instead of sleeping)."""
        self.finished = asyncio.Event()
        self.qualification: Qualification | None = None
        self.qualification_id: int | None = None

    # ---- layout -------------------------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        with Vertical(id="form"):
            yield Static("[b]Probe qualification[/b] — heater, insulation, thermocouples, reference media, geometry")
            with Horizontal():
                yield Label("Probe profile")
                yield Input(str(self._profile_path or ""), placeholder="path to PROFILE.toml", id="profile")
            with Horizontal():
                yield Label("Insulation, MΩ")
                yield Input(placeholder="megohmmeter reading (asked later if empty)", id="insulation",
                            type="number")
            with Horizontal():
                yield Label("Report file")
                yield Input(placeholder="optional: NAME.html and NAME.pdf are written", id="report")
            with Horizontal():
                yield Checkbox("simulated rig (a demonstration: nothing is stored)", self._simulate, id="simulate")
                yield Button("Run qualification", id="start", variant="primary")
        with Vertical(id="prompt-box"):
            yield Static("", id="prompt")
            yield Input(placeholder="answer, then Enter", id="answer")
        yield Log(id="progress", highlight=False)
        yield DataTable(id="results", zebra_stripes=True, cursor_type="row")
        yield Static("", id="verdict")
        yield Footer()

    def on_mount(self) -> None:
        table = self.query_one("#results", DataTable)
        table.add_columns("result", "criterion", "item", "measured", "limit", "detail")

    # ---- running ------------------------------------------------------------------------------------------
    @on(Button.Pressed, "#start")
    def _pressed(self) -> None:
        self.action_start()

    def action_start(self) -> None:
        if any(w.is_running for w in self.workers if w.group == "qualify"):
            self.notify("a qualification is already running", severity="warning")
            return
        self.finished.clear()
        self.query_one("#results", DataTable).clear()
        self.query_one("#verdict", Static).update("")
        self.run_worker(self._qualify(), group="qualify", exclusive=True, exit_on_error=False)

    def action_leave(self) -> None:
        if self._answer is not None and not self._answer.done():
            self._answer.cancel()
        self.app.pop_screen()

    def _log(self, text: str) -> None:
        self.query_one("#progress", Log).write_line(text)

    def _on_progress(self, p: Progress) -> None:
        self._log(p.message)

    async def _qualify(self) -> None:
        error = ""
        q: Qualification | None = None
        qid: int | None = None
        try:
            q, qid = await self._procedure()
        except (ProbeProfileError, QualificationConfigError, QualificationDataError, OSError, RuntimeError,
                ValueError) as e:
            error = str(e)
            self._log(f"stopped: {error}")
            self.query_one("#verdict", Static).update(Text(f"Could not qualify: {error}", style="bold red"))
        except asyncio.CancelledError:
            self._log("cancelled")
            raise
        finally:
            self._hide_prompt()
        self.qualification, self.qualification_id = q, qid
        self.finished.set()
        self.post_message(self.Finished(q, qid, error))

    async def _procedure(self) -> tuple[Qualification, int | None]:
        path = self.query_one("#profile", Input).value.strip()
        if not path:
            raise ValueError("give the probe profile (PROFILE.toml)")
        profile = load_probe_profile(Path(path))
        config = load_config(self._criteria_path, self._overrides)
        simulate = self.query_one("#simulate", Checkbox).value
        self._log(f"qualifying {profile.name} ({profile.serial or 'no serial'}) "
                  f"{'on the simulated rig' if simulate else 'on the daemon'}")
        if simulate:
            rig: Any = SimulatedQualificationRig(profile, self._sim_setup)
            m = await run_async(profile, config, rig, self, self._on_progress)
        else:
            from linerig.daemon.qualify.liverig import DaemonQualificationRig
            from linerig.tui.client import Client

            async with Client(self._socket_path) as client:
                rig = DaemonQualificationRig(client, profile, self, primary_sensor(profile, config.procedure.sensor),
                                             max_drift_K_per_min=config.procedure.max_drift_K_per_min,
                                             settle_timeout_s=config.procedure.settle_timeout_s)
                await rig.check()
                m = await run_async(profile, config, rig, self, self._on_progress)
        q = judge(profile, config, m, simulated=simulate)
        qid = None
        if simulate:
            self._log(f"simulated: not stored against probe {profile.serial or profile.name} (a simulated unit is "
                      "not the probe); the report, if written, says SIMULATED")
        elif self._save:
            db = self._store_path()
            store = open_store(db)
            try:
                qid = save_qualification(store.db, q)
            finally:
                store.close()
            self._log(f"stored as qualification {qid} in {db}")
        self._show(q)
        report = self.query_one("#report", Input).value.strip()
        if report:
            stem = Path(report).with_suffix("")
            paths = await asyncio.to_thread(write_report, q.to_json(), stem.with_suffix(".html"),
                                            stem.with_suffix(".pdf"), config.text)
            self._log("report: " + ", ".join(str(p) for p in paths))
        return q, qid

    def _store_path(self) -> Path:
        """The daemon's own database (its status names it), so the UI never keeps a store of its own."""
        if self._db_path is not None:
            return self._db_path
        live = getattr(self.app, "live", None)
        said = (getattr(live, "status", None) or {}).get("db")
        return Path(said) if said else default_db_path()

    def _show(self, q: Qualification) -> None:
        table = self.query_one("#results", DataTable)
        for r in q.results:
            word, style = STATUS_STYLE.get(r.status, (r.status, ""))
            measured = "—" if r.measured is None else f"{r.measured:.4g} {r.unit}".strip()
            table.add_row(Text(word, style=style), r.id, r.item, measured, r.limit, r.detail)
        if q.passed:
            verdict = Text("QUALIFIED", style="bold green")
        else:
            verdict = Text(f"NOT QUALIFIED: {', '.join(q.failed_ids)}", style="bold red")
        cal = q.measurements.calibration
        if cal is not None:
            verdict.append(f"    probe factor F = {cal.factor:.4f} ± {2 * cal.factor_u:.4f} (U, k = 2)", style="")
        self.query_one("#verdict", Static).update(verdict)

    # ---- the operator: prompts answered in the prompt line ------------------------------------------------
    def _hide_prompt(self) -> None:
        self.query_one("#prompt-box").remove_class("asking")
        self.prompt_shown.clear()

    async def _ask(self, text: str) -> str:
        box = self.query_one("#prompt-box")
        self.query_one("#prompt", Static).update(text)
        answer = self.query_one("#answer", Input)
        answer.value = ""
        box.add_class("asking")
        answer.focus()
        self._answer = asyncio.get_running_loop().create_future()
        self.prompt_shown.set()
        try:
            return await self._answer
        finally:
            self._hide_prompt()

    @on(Input.Submitted, "#answer")
    def _answered(self, event: Input.Submitted) -> None:
        if self._answer is not None and not self._answer.done():
            self._answer.set_result(event.value.strip())

    async def ask_number(self, request: AskNumber) -> float | None:
        if request.key == "insulation_MOhm":
            given = self.query_one("#insulation", Input).value.strip()
            if given:
                return float(given)
        while True:
            raw = await self._ask(f"{request.prompt} [{request.unit}] — empty: not measured")
            if not raw:
                return None
            try:
                return float(raw)
            except ValueError:
                self.notify(f"{raw!r} is not a number", severity="error")

    async def instruct(self, text: str) -> None:
        await self._ask(f"{text}\nPress Enter when done.")
