"""History: stored runs filtered by site and date; a run's detail, plot, events, re-reduction and export."""

from __future__ import annotations

import asyncio
import math
import os
import re
import tomllib
from pathlib import Path
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Grid, Horizontal, VerticalScroll
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Input, Label, Select, Static, TabbedContent, TabPane

from linerig.daemon.paths import default_db_path
from linerig.daemon.probe import ProbeProfile, stored_profile
from linerig.daemon.reduction.data import ReductionError, RunData
from linerig.tui.client import DaemonError
from linerig.tui.screens.confirm import TextPrompt
from linerig.tui.screens.live_state import STATE_SYMBOLS, RunTrace
from linerig.tui.screens.rereduce import (
    METHODS,
    SamplesUnavailable,
    export_run,
    read_samples_from_db,
    rereduce,
    run_data_from_arrays,
)
from linerig.tui.units import DisplayUnit, companion, show
from linerig.tui.widgets.advice import flag_words
from linerig.tui.widgets.readouts import alpha_identified
from linerig.tui.widgets.run_plot import PlotView, RunPlot, build_spec, legend_text, next_choice

if TYPE_CHECKING:
    from linerig.tui.app import LinerigApp

RUNS_LIMIT = 2000
DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
META_ROWS = (("site", "Site"), ("location", "Borehole/spot"), ("depth_m", "Depth, m"), ("sample", "Sample"),
             ("material", "Material"), ("moisture_pct", "Moisture, %"), ("dry_density_kg_per_m3", "Dry density"),
             ("operator", "Operator"), ("notes", "Notes"), ("probe_serial", "Probe"))


def filter_runs(runs: list[dict[str, Any]], site: str, date_from: str, date_to: str) -> list[dict[str, Any]]:
    """Runs whose site contains ``site`` (any case) and whose start date (UTC) is within the given days."""
    needle = site.strip().lower()
    out = []
    for r in runs:
        day = str(r.get("created_utc") or "")[:10]
        if needle and needle not in str(r.get("site") or "").lower():
            continue
        if date_from and day < date_from:
            continue
        if date_to and day > date_to:
            continue
        out.append(r)
    return out


def export_folder() -> Path:
    return Path(os.environ.get("LINERIG_EXPORT_DIR") or Path.home() / "linerig-exports")


class HistoryScreen(Screen[None]):
    """The run list; Enter opens a run."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("enter", "open", "Open run", show=True),
        Binding("r", "reload", "Reload"),   # F6 is Qualify everywhere
    ]

    def __init__(self) -> None:
        super().__init__()
        self.runs: list[dict[str, Any]] = []

    @property
    def rig(self) -> LinerigApp:
        return self.app  # type: ignore[return-value]

    def compose(self) -> ComposeResult:
        yield Static("RUNS", classes="screen-title", id="history-title")
        with Horizontal(id="filters"):
            yield Label("Site")
            yield Input(placeholder="any", id="flt-site", compact=True)
            yield Label("From")
            yield Input(placeholder="YYYY-MM-DD", id="flt-from", compact=True, max_length=10)
            yield Label("To")
            yield Input(placeholder="YYYY-MM-DD", id="flt-to", compact=True, max_length=10)
        yield Static(id="filter-note")
        yield DataTable(id="runs", cursor_type="row", zebra_stripes=True)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one("#runs", DataTable)
        table.add_columns("Run", "Started (UTC)", "State", "k W/(m·K)", "Tip depth m", "Site", "Spot", "Sample",
                          "Material")
        table.focus()
        self.action_reload()

    def on_screen_resume(self) -> None:
        self.action_reload()

    def action_reload(self) -> None:
        self._load()

    @work(exclusive=True, group="runs")
    async def _load(self) -> None:
        await self.rig.wait_connected()
        try:
            reply = await self.rig.request("runs", limit=RUNS_LIMIT)
        except DaemonError as exc:
            self.query_one("#filter-note", Static).update(Text(f"✗ {exc}", style="red"))
            return
        self.runs = list(reply.get("runs") or [])
        self._fill()

    @on(Input.Changed)
    def _filters_changed(self) -> None:
        self._fill()

    def _fill(self) -> None:
        site = self.query_one("#flt-site", Input).value
        d_from, d_to = (self.query_one(f"#flt-{k}", Input).value.strip() for k in ("from", "to"))
        bad = [d for d in (d_from, d_to) if d and not DATE.match(d)]
        note = self.query_one("#filter-note", Static)
        if bad:
            note.update(Text(f"✗ dates are YYYY-MM-DD (got {bad[0]!r})", style="red"))
            return
        shown = filter_runs(self.runs, site, d_from, d_to)
        note.update(Text(f"{len(shown)} of {len(self.runs)} runs · Enter opens the highlighted run · "
                         "Tab moves between the filters and the list", style="dim"))
        table = self.query_one("#runs", DataTable)
        table.clear()
        for r in shown:
            st = str(r.get("state") or "?")
            depth, k = r.get("depth_m"), r.get("k_W_per_mK")
            table.add_row(str(r["id"]), str(r.get("created_utc") or "")[:16].replace("T", " "),
                          f"{STATE_SYMBOLS.get(st, '?')} {st}",
                          Text(f"{k:.3f}" if isinstance(k, int | float) else "—", justify="right"),
                          Text(f"{depth:.2f}" if isinstance(depth, int | float) else "—", justify="right"),
                          str(r.get("site") or ""), str(r.get("location") or ""),
                          str(r.get("sample") or ""), str(r.get("material") or ""), key=str(r["id"]))

    def action_open(self) -> None:
        table = self.query_one("#runs", DataTable)
        if table.row_count == 0:
            return
        key = table.coordinate_to_cell_key(table.cursor_coordinate).row_key.value
        if key is not None:
            self.app.push_screen(RunDetailScreen(int(key)))

    @on(DataTable.RowSelected)
    def _row_selected(self) -> None:
        self.action_open()


class RunDetailScreen(Screen[None]):
    """One stored run: summary and results, plot, events, re-reduction, export."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "app.pop_screen", "Back"),
        Binding("e", "export", "Export"),
        Binding("u", "next_unit", "Unit"),
        Binding("v", "next_view", "View"),
        Binding("ctrl+r", "rereduce", "Re-reduce", priority=True),
    ]

    def __init__(self, run_id: int) -> None:
        super().__init__()
        self.run_id = run_id
        self.detail: dict[str, Any] | None = None
        self.data: RunData | None = None
        self.samples_note = "loading samples…"
        self.probe: ProbeProfile | None = None
        self.rereduced: dict[str, Any] | None = None
        self._sensors_listed = False

    @property
    def rig(self) -> LinerigApp:
        return self.app  # type: ignore[return-value]

    def compose(self) -> ComposeResult:
        yield Static(f"RUN {self.run_id}", classes="screen-title", id="detail-title")
        with TabbedContent(id="detail-tabs"):
            with TabPane("Summary", id="tab-summary"), VerticalScroll():
                yield Static(id="summary")
            with TabPane("Plot", id="tab-plot"):
                yield RunPlot(id="detail-plot")
                yield Static(id="detail-legend")
            with TabPane("Events", id="tab-events"):
                yield DataTable(id="events", cursor_type="row", zebra_stripes=True)
            with TabPane("Re-reduce", id="tab-rereduce"), VerticalScroll():
                with Horizontal(id="rr-method-row"):
                    yield Label("Method", classes="field-label")
                    yield Select([(v, k) for k, v in METHODS.items()], value="auto", allow_blank=False,
                                 id="rr-method", compact=True)
                with Grid(classes="form-grid"):
                    yield Label("Sensor", classes="field-label")
                    yield Select([], id="rr-sensor", allow_blank=True, prompt="(run's own)", compact=True)
                    yield Label("Window from, s", classes="field-label")
                    yield Input(placeholder="e.g. 60", id="rr-from", compact=True)
                    yield Label("Window to, s", classes="field-label")
                    yield Input(placeholder="e.g. 600", id="rr-to", compact=True)
                yield Static(Text.assemble("Press ", ("ctrl+r", "bold reverse"), " to re-reduce (a window you give "
                                           "is used with any method; leave both empty for the method's own); the "
                                           "stored result is kept. ", ("e", "bold reverse"), " exports both."),
                             classes="hint")
                yield Static(id="rr-result")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one("#events", DataTable).add_columns("Device s", "Kind", "State", "What happened")
        self._load()

    @work(exclusive=True, group="detail")
    async def _load(self) -> None:
        await self.rig.wait_connected()
        try:
            detail = (await self.rig.request("run", run_id=self.run_id))["run"]
        except DaemonError as exc:
            self.query_one("#summary", Static).update(Text(f"✗ {exc}", style="red"))
            return
        self.detail = detail
        self._preselect_method(detail)
        self._show_summary()
        self._show_events()
        self.probe = await self._probe_for(detail)
        await self._load_samples(detail)
        self._show_plot()
        self._show_summary()

    def _preselect_method(self, detail: dict[str, Any]) -> None:
        """Offer the method the stored result used, so "re-reduce" first redoes exactly that."""
        res = detail.get("results") or {}
        sensor = (detail.get("plan") or {}).get("sensor")
        first = res.get(sensor) or next(iter(res.values()), None) or {}
        if first.get("method") in METHODS:
            self.query_one("#rr-method", Select).value = first["method"]

    async def _probe_for(self, detail: dict[str, Any]) -> ProbeProfile | None:
        """The run's probe profile, when the daemon can tell it; re-reduction works without (no α)."""
        try:
            reply = await self.rig.request("probes")
        except DaemonError:
            return None
        for p in reply.get("probes") or []:
            if p.get("serial") == detail.get("probe_serial") and p.get("profile_toml"):
                try:
                    return stored_profile(p["profile_toml"], f"probe {p['serial']}")
                except (tomllib.TOMLDecodeError, ValueError, TypeError):  # ProbeProfileError is a ValueError
                    return None
        return None

    async def _load_samples(self, detail: dict[str, Any]) -> None:
        try:
            reply = await self.rig.request("samples", run_id=self.run_id)
            self.data = run_data_from_arrays(reply.get("samples") or {})
            self.samples_note = ""
            return
        except (DaemonError, KeyError, ValueError, ReductionError) as exc:
            first = str(exc)
        db = Path(self.rig.live.status.get("db") or os.environ.get("LINERIG_DB") or default_db_path())
        try:
            self.data = await asyncio.to_thread(read_samples_from_db, db, self.run_id, detail.get("created_utc"))
            self.samples_note = ""
        except (SamplesUnavailable, ReductionError) as exc:
            said = "this linerigd has no 'samples' request" if "unknown op" in first else first
            self.samples_note = f"samples unavailable: {said}, and {exc}"

    # -- views -----------------------------------------------------------------------------------------------
    def _show_summary(self) -> None:
        d = self.detail
        if d is None:
            return
        unit = self.rig.unit
        st = str(d.get("state"))
        self.query_one("#detail-title", Static).update(Text.assemble(
            (f"RUN {self.run_id} ", "bold"), f"{STATE_SYMBOLS.get(st, '?')} {st.upper()}",
            f" — {d.get('end_reason') or ''}  ·  {str(d.get('created_utc') or '')[:19].replace('T', ' ')} UTC"))
        t = Text()
        t.append("RESULTS", style="bold underline")
        results = dict(d.get("results") or {})
        if self.rereduced:
            results = {**results, **{f"{k} (re-reduced)": v for k, v in self.rereduced.items()}}
        if not results:
            t.append("\n no result stored", style="dim")
        for name, r in results.items():
            t.append(f"\n {name}: ", style="bold")
            t.append(_result_line(r, unit))
            words = flag_words(r.get("flags"))
            t.append("\n   " + (("⚑ " + "; ".join(words)) if words else "✓ no quality flags"),
                     style="yellow" if words else "green")
        t.append("\n\nSAMPLE AND PLACE", style="bold underline")
        for key, label in META_ROWS:
            if d.get(key) not in (None, ""):
                t.append(f"\n {label:<14} {d[key]}")
        plan = d.get("plan") or {}
        if plan:
            t.append("\n\nPLAN", style="bold underline")
            t.append(f"\n heat {plan.get('heat_s', 0):g} s at {plan.get('power_W_per_m', 0):g} W/m, cooling "
                     f"{plan.get('recover_s', 0):g} s, baseline {plan.get('baseline_s', 0):g} s, "
                     f"cycles {plan.get('cycles', 1)}, fit sensor {plan.get('sensor', '?')}")
        t.append(f"\n {d.get('n_samples', 0)} samples stored")
        if self.samples_note:
            t.append(f"\n {self.samples_note}", style="dim")
        self.query_one("#summary", Static).update(t)

    def _show_events(self) -> None:
        table = self.query_one("#events", DataTable)
        table.clear()
        for ev in (self.detail or {}).get("events") or []:
            dev = ev.get("device_s")
            table.add_row(f"{dev:.0f}" if isinstance(dev, int | float) else "", str(ev.get("kind") or ""),
                          str(ev.get("state") or ""), str(ev.get("reason") or ""))

    def _show_plot(self) -> None:
        plot = self.query_one("#detail-plot", RunPlot)
        sensor = ((self.detail or {}).get("plan") or {}).get("sensor")
        trace = trace_from_data(self.run_id, self.data, self._fit_result(), sensor) if self.data is not None else None
        spec = build_spec(trace, plot.choice or PlotView.LOG)
        if trace is None:
            spec.note = "no samples to plot"
        plot.draw(spec)
        self.query_one("#detail-legend", Static).update(legend_text(spec))
        if self.data is not None and not self._sensors_listed:
            self._sensors_listed = True
            self.query_one("#rr-sensor", Select).set_options([(n, n) for n in self.data.temps_C])

    def _fit_result(self) -> dict[str, Any] | None:
        d = self.detail or {}
        if self.rereduced:
            return next(iter(self.rereduced.values()))
        res = d.get("results") or {}
        sensor = (d.get("plan") or {}).get("sensor")
        return res.get(sensor) or next(iter(res.values()), None)

    # -- actions ---------------------------------------------------------------------------------------------
    def action_next_unit(self) -> None:
        self.rig.unit = self.rig.unit.next()
        self._show_summary()

    def action_next_view(self) -> None:
        plot = self.query_one("#detail-plot", RunPlot)
        plot.choice = next_choice(plot.choice) or PlotView.LOG
        self._show_plot()

    def action_rereduce(self) -> None:
        self.query_one("#detail-tabs", TabbedContent).active = "tab-rereduce"
        self._rereduce()

    @work(exclusive=True, group="rereduce")
    async def _rereduce(self) -> None:
        out = self.query_one("#rr-result", Static)
        if self.data is None:
            out.update(Text(f"✗ cannot re-reduce: {self.samples_note}", style="red"))
            return
        method = str(self.query_one("#rr-method", Select).value)
        sensor = self.query_one("#rr-sensor", Select).value
        if not isinstance(sensor, str):
            sensor = str(((self.detail or {}).get("plan") or {}).get("sensor") or next(iter(self.data.temps_C)))
        texts = [self.query_one(f"#rr-{k}", Input).value.strip() for k in ("from", "to")]
        window = None
        if any(texts):
            try:
                window = (float(texts[0]), float(texts[1]))
            except ValueError:
                out.update(Text("✗ give the window as two numbers of seconds (or leave both empty)", style="red"))
                return
        stored = ((self.detail or {}).get("results") or {}).get(sensor) or {}
        factor = stored.get("calibration_factor") if isinstance(stored.get("calibration_factor"), int | float) else 1.0
        out.update(Text("re-reducing…", style="dim"))
        try:
            res = await asyncio.to_thread(rereduce, self.data, sensor, method, window, self.probe, float(factor))
        except (ReductionError, ValueError) as exc:
            out.update(Text(f"✗ {exc}", style="red"))
            return
        self.rereduced = {sensor: res}
        stored = ((self.detail or {}).get("results") or {}).get(sensor)
        t = Text.assemble(("re-reduced ", "bold"), f"{sensor}: ", _result_line(res, self.rig.unit))
        if stored and isinstance(stored.get("k_W_per_mK"), int | float) and stored["k_W_per_mK"]:
            t.append(f"\nstored: {_result_line(stored, self.rig.unit)}  "
                     f"(difference {100 * (res['k_W_per_mK'] / stored['k_W_per_mK'] - 1):+.1f} % in k)")
        words = flag_words(res.get("flags"))
        if words:
            t.append("\n⚑ " + "; ".join(words), style="yellow")
        out.update(t)
        self._show_summary()
        self._show_plot()

    def action_export(self) -> None:
        if self.detail is None:
            return

        def chosen(folder: str | None) -> None:
            if folder:
                self._export(Path(folder).expanduser())

        self.app.push_screen(TextPrompt(f"Export run {self.run_id} (run-{self.run_id}.json and .csv) into:",
                                        "Enter writes there (the folder is made if needed); Escape cancels.",
                                        value=str(export_folder())), chosen)

    @work(exclusive=True, group="export")
    async def _export(self, folder: Path) -> None:
        assert self.detail is not None
        extra = {"rereduced": self.rereduced} if self.rereduced else None
        try:
            paths = await asyncio.to_thread(export_run, self.detail, self.data, folder, extra)
        except OSError as exc:
            self.notify(f"Export failed: {exc}", severity="error")
            return
        self.notify("Wrote " + ", ".join(str(p) for p in paths), title="export", timeout=8)


def _result_line(r: dict[str, Any], unit: DisplayUnit) -> str:
    k, ku = r.get("k_W_per_mK"), r.get("k_u_W_per_mK")
    if not isinstance(k, int | float):
        return "no value"
    u = float(ku) if isinstance(ku, int | float) else None
    win = r.get("window_s") or [None, None]
    parts = [show(float(k), u, unit).text() + " (± U, k = 2)", show(float(k), u, companion(unit)).text()]
    if win[0] is not None and win[1] is not None:
        parts.append(f"window {win[0]:.0f}–{win[1]:.0f} s")
    alpha = alpha_identified(r["alpha_mm2_per_s"] * 1e-6) if isinstance(r.get("alpha_mm2_per_s"), int | float) else None
    if alpha is not None:
        parts.append(f"α {alpha * 1e6:.2f} mm²/s")
    if r.get("method"):
        parts.append(str(r["method"]))
    return " · ".join(parts)


def trace_from_data(run_id: int, data: RunData, result: dict[str, Any] | None,
                    sensor: str | None = None) -> RunTrace:
    """A ``RunTrace`` of a stored run (heater on at device time 0), with the stored fit drawn as a line."""
    names = list(data.temps_C)
    primary = names.index(sensor) if sensor in names else 0
    tr = RunTrace(run_id, names, primary, baseline_s=float(-data.time_s[0]) if data.time_s[0] < 0 else 60.0,
                  heat_start_device_s=0.0)
    tr.device_s = [float(t) for t in data.time_s]
    tr.temps = [[float(data.temps_C[n][i]) for n in names] for i in range(data.time_s.size)]
    tr.q = [float(q) for q in data.q_W_per_m]
    try:
        tr.heat_end_device_s = data.heater_off_s()
    except ReductionError:
        tr.heat_end_device_s = None
    if result and isinstance(result.get("k_W_per_mK"), int | float):
        tr.last_estimate = reported_line(tr, primary, result)
    return tr


def reported_line(tr: RunTrace, primary: int, result: dict[str, Any]) -> dict[str, Any] | None:
    """The straight line whose slope is the reported k (q/4πk, before the probe factor), placed on the data.

    A line result is drawn through its window; a model or radial result approaches its late-time line only at the
    end, so the line is placed on the later half of the window (in ln t). The slope is the reported k either way,
    never a fit made for the picture."""
    win = result.get("window_s") or [None, None]
    q = result.get("q_mean_W_per_m")
    k = float(result["k_W_per_mK"]) / float(result.get("calibration_factor") or 1.0)
    t, dT = tr.heating()
    if win[0] is None or win[1] is None or not isinstance(q, int | float) or k <= 0 or not t.size:
        return None
    lo = win[0] if result.get("method") == "line" else math.sqrt(max(win[0], 1e-3) * win[1])
    sel = (t >= lo) & (t <= win[1]) & np.isfinite(dT[:, primary])
    if np.count_nonzero(sel) < 3:
        return None
    slope = float(q) / (4.0 * math.pi * k)
    icpt = float(np.mean(dT[sel, primary] - slope * np.log(t[sel])))
    return {"slope_K": slope, "intercept_K": icpt, "window_s": win}
