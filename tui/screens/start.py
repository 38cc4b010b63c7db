"""New run: preset, plan, sample metadata, and a pre-check that must pass before the heater can be armed."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Grid, Horizontal, VerticalScroll
from textual.screen import Screen
from textual.widgets import Checkbox, Footer, Input, Label, Select, Static

from linerig.tui.client import DaemonError
from linerig.tui.screens.confirm import Confirm
from linerig.tui.screens.run_form import DEFAULT_PRESET, PRESETS, FormResult, can_arm, check_form, precheck

if TYPE_CHECKING:
    from linerig.tui.app import LinerigApp

# (field, label, placeholder) in the order the Tab key visits them
PLAN_INPUTS = (("heat_s", "Heat, s", "600"), ("recover_s", "Cooling, s", "600"),
               ("power_W_per_m", "Power, W/m", "5"), ("baseline_s", "Baseline, s", "120"),
               ("cycles", "Cycles", "1"))
META_INPUTS = (("site", "Site *", "e.g. North paddock"), ("location", "Borehole/spot", "e.g. BH-3"),
               ("depth_m", "Tip depth, m", "probe tip, below ground"), ("sample", "Sample", "e.g. S-14"),
               ("material", "Material", "e.g. silty sand"), ("moisture_pct", "Moisture, %", "by mass"),
               ("dry_density_kg_per_m3", "Dry dens., kg/m³", "e.g. 1650"), ("operator", "Operator", ""),
               ("notes", "Notes", ""))
KEPT_FOR_NEXT_SAMPLE = ("operator",)   # the person stays; the sample, place, moisture and density do not
RECHECK_S = 0.5
AUTO_STOP_LABEL = "Stop heating by itself once the estimate is steady: "


class StartScreen(Screen[None]):
    """Fill in, check, then arm."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("ctrl+s", "start", "Arm & start", priority=True),
        Binding("ctrl+r", "reset", "Preset values"),
    ]

    def __init__(self) -> None:
        super().__init__()
        self._seen = -1
        self.form: FormResult | None = None

    @property
    def rig(self) -> LinerigApp:
        return self.app  # type: ignore[return-value]

    def compose(self) -> ComposeResult:
        yield Static("NEW RUN", id="start-title", classes="screen-title")
        with VerticalScroll(id="start-body"):
            with Horizontal(id="preset-row"):
                yield Label("Preset", classes="field-label")
                yield Select([(p["label"], key) for key, p in PRESETS.items()], value=DEFAULT_PRESET,
                             allow_blank=False, id="preset", compact=True)
            with Grid(id="plan-grid", classes="form-grid"):
                for name, label, ph in PLAN_INPUTS:
                    yield Label(label, classes="field-label")
                    yield Input(placeholder=ph, id=f"f-{name}", compact=True)
                yield Label("Fit sensor", classes="field-label")
                yield Select([], id="sensor", allow_blank=True, prompt="(probe's own)", compact=True)
            yield Checkbox(AUTO_STOP_LABEL + "off", id="auto-stop", compact=True)
            yield Static("SAMPLE AND PLACE", classes="section")
            with Grid(id="meta-grid", classes="form-grid"):
                for name, label, ph in META_INPUTS:
                    yield Label(label, classes="field-label")
                    yield Input(placeholder=ph, id=f"f-{name}", compact=True)
            yield Static(id="form-errors")
            yield Static("PRE-CHECK", classes="section")
            yield Static(id="precheck")
        yield Static(id="arm-line")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.apply_preset(DEFAULT_PRESET)
        self.set_interval(RECHECK_S, self._tick)

    def on_screen_resume(self) -> None:
        pending = self.rig.pending_preset
        if pending is not None:
            self.rig.pending_preset = None
            self.apply_preset(*pending)
        self.refresh_checks()

    def _tick(self) -> None:
        if self.rig.live.version != self._seen:
            self.refresh_checks()

    # -- form ------------------------------------------------------------------------------------------------
    def apply_preset(self, key: str, metadata: dict[str, Any] | None = None) -> None:
        """Fill the plan fields from a preset and, optionally, metadata fields (e.g. for a calibration)."""
        preset = PRESETS[key]
        sel = self.query_one("#preset", Select)
        if sel.value != key:
            sel.value = key
        for name, _, _ in PLAN_INPUTS:
            self.query_one(f"#f-{name}", Input).value = f"{preset[name]:g}"
        if metadata is not None:  # a new kind of sample (a calibration): nothing of the last one carries over
            for name, _, _ in META_INPUTS:
                if name not in KEPT_FOR_NEXT_SAMPLE:
                    self.query_one(f"#f-{name}", Input).value = str(metadata.get(name, ""))
        self.refresh_checks()

    def values(self) -> dict[str, str]:
        return {w.id.removeprefix("f-"): w.value for w in self.query(Input) if w.id and w.id.startswith("f-")}

    @on(Select.Changed, "#preset")
    def _preset_chosen(self, event: Select.Changed) -> None:
        if isinstance(event.value, str) and event.value in PRESETS:
            self.apply_preset(event.value)

    @on(Input.Changed)
    @on(Select.Changed, "#sensor")
    def _edited(self) -> None:
        self.refresh_checks()

    @on(Checkbox.Changed, "#auto-stop")
    def _auto_stop_changed(self, event: Checkbox.Changed) -> None:
        event.checkbox.label = AUTO_STOP_LABEL + ("ON" if event.value else "off")  # words, not only colour
        self.refresh_checks()

    def _sync_sensors(self) -> None:
        sel = self.query_one("#sensor", Select)
        names = list((self.rig.live.status.get("probe") or {}).get("sensors") or [])
        if names and getattr(self, "_sensor_names", None) != names:
            self._sensor_names = names
            sel.set_options([(n, n) for n in names])

    def refresh_checks(self) -> None:
        live = self.rig.live
        self._seen = live.version
        self._sync_sensors()
        probe = live.status.get("probe") or {}
        title = Text("NEW RUN", style="bold")
        if probe:
            title.append(f"  probe {probe.get('name', '?')} ({probe.get('serial', '?')}), "
                         f"sensors: {', '.join(probe.get('sensors') or [])}")
        self.query_one("#start-title", Static).update(title)
        sensor = self.query_one("#sensor", Select).value
        form = check_form(self.values(), live.limits, self.query_one("#auto-stop", Checkbox).value,
                          sensor if isinstance(sensor, str) else None)
        self.form = form
        for w in self.query(Input):
            name = (w.id or "").removeprefix("f-")
            w.set_class(name in form.errors, "-bad")
        err = Text()
        for msg in form.errors.values():
            err.append("✗ ", style="bold red")
            err.append(f"{msg}\n")
        err.rstrip()
        self.query_one("#form-errors", Static).update(err if form.errors else Text("✓ form complete", style="green"))
        checks = precheck(live, form.plan)
        text = Text()
        for c in checks:
            text.append(f"{c.symbol} ", style={True: "green", False: "bold red", None: "yellow"}[c.ok])
            text.append(c.text + "\n")
        text.rstrip()
        self.query_one("#precheck", Static).update(text)
        arm = self.query_one("#arm-line", Static)
        if can_arm(checks, form):
            arm.update(Text.assemble(("✓ READY ", "bold green"), "— press ", ("ctrl+s", "bold reverse"),
                                     " to arm the heater and start"))
        else:
            n = len(form.errors) + sum(c.ok is False for c in checks)
            arm.update(Text.assemble(("✗ NOT READY ", "bold red"), f"— {n} item{'s' if n != 1 else ''} to fix "
                                     "(listed above)"))

    # -- actions ---------------------------------------------------------------------------------------------
    def action_reset(self) -> None:
        key = self.query_one("#preset", Select).value
        self.apply_preset(key if isinstance(key, str) else DEFAULT_PRESET)

    def action_start(self) -> None:
        self.refresh_checks()
        form = self.form
        checks = precheck(self.rig.live, form.plan if form else {})
        if form is None or not can_arm(checks, form):
            self.notify("Not ready to arm: fix the items marked ✗.", severity="warning")
            return
        p = form.plan
        detail = (f"Baseline at least {p['baseline_s']:g} s, then {p['heat_s']:g} s heating at "
                  f"{p['power_W_per_m']:g} W/m and {p['recover_s']:g} s cooling"
                  + (f", {p['cycles']} cycles" if p.get("cycles", 1) > 1 else "") + ".")

        def answered(yes: bool | None) -> None:
            if yes:
                self.run_worker(self._start(form), group="requests")

        self.app.push_screen(Confirm("Arm the heater and start this run?", detail), answered)

    async def _start(self, form: FormResult) -> None:
        try:
            run_id = await self.rig.start_run(form.plan, form.metadata)
        except DaemonError as exc:
            self.notify(str(exc), title="start refused", severity="error", timeout=10)
            return
        self.notify(f"Run {run_id} started.", title="run")
