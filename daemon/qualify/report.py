"""Qualification report, HTML and PDF, drawn from the stored results JSON.

The content is a ``daemon.report`` Report (headings, paragraphs, tables, figures), so the qualification report
looks like every other linerig report and shares its HTML and PDF writers. Figures are built on
``matplotlib.figure.Figure`` directly (no pyplot state).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from linerig.daemon.reduction import window as win
from linerig.daemon.reduction.probe_model import response_stehfest
from linerig.daemon.report import model as rm
from linerig.daemon.report.build import identification, report_number, when
from linerig.daemon.report.html import render_html
from linerig.daemon.report.pdf import render_pdf
from linerig.daemon.report.plots import svg_bytes
from linerig.daemon.report.text import SIGN_OFF

STATUS_WORDS = {"pass": "PASS", "fail": "FAIL", "warn": "WARN", "not_measured": "NOT MEASURED",
                "not_applicable": "n/a"}

# The hazards of this procedure (a megohmmeter, heater power beside water baths, a hot needle), printed with
# every qualification report as the run and site reports print theirs.
CAUTIONS = (
    "Insulation test: a megohmmeter's 500 V DC can give a shock and destroys thermocouple converters. Disconnect "
    "the probe from the front end first, keep hands off the leads while testing, and discharge them afterwards.",
    "Electrical safety: heater supplies are used beside water baths. Use a battery or a protected "
    "(residual-current) supply, keep connections dry and inspect leads before use.",
    "Never power the heater in air: out of a medium a needle overheats quickly. The probe is hot after heating; "
    "let it cool before handling it.",
    "A qualification shows that the probe measured right in these reference media under these conditions. It does "
    "not replace the probe's calibration record, nor engineering judgement on field results.",
)


def _fmt(v: Any) -> str:
    if v is None:
        return "—"
    if isinstance(v, float):
        if v == 0 or 1e-3 <= abs(v) < 1e5:
            return f"{v:.4g}"
        return f"{v:.3e}"
    return str(v)


# ---- figures --------------------------------------------------------------------------------------------------

def fig_heater(res: dict[str, Any]) -> Figure | None:
    s = res["summary"]
    pts = s.get("resistance_points") or []
    if not pts:
        return None
    fig = Figure(figsize=(6.4, 3.6))
    ax = fig.add_subplot()
    T = np.array([p["heater_C"] for p in pts])
    R = np.array([p["R_ohm"] for p in pts])
    ax.errorbar(T, R, yerr=[p["R_u_ohm"] for p in pts], fmt="o", label="bath points")
    h = s.get("heater")
    if h:
        tt = np.linspace(T.min() - 2, T.max() + 2, 50)
        ax.plot(tt, h["R20_ohm"] * (1 + h["tcr_per_K"] * (tt - 20.0)), "-",
                label=f"R20 = {h['R20_ohm']:.3f} Ω, TCR = {h['tcr_per_K']:.2e} /K")
    d = s.get("drift")
    if d:
        ax.set_title(f"Heater resistance (drift at constant temperature {100 * d['rate_rel_per_h']:+.3f} %/h)",
                     fontsize=9)
    ax.set_xlabel("heater temperature (°C)")
    ax.set_ylabel("R (Ω)")
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


def fig_baths(res: dict[str, Any]) -> Figure | None:
    traces = res["summary"].get("bath_traces") or []
    if not traces:
        return None
    names = list(traces[0]["temps_C"])
    fig = Figure(figsize=(6.4, 1.0 + 2.0 * len(names)))
    for i, name in enumerate(names):
        ax = fig.add_subplot(len(names), 1, i + 1)
        for tr in traces:
            y = np.array([np.nan if v is None else v for v in tr["temps_C"].get(name, [])], dtype=float)
            t = np.array(tr["t_s"], dtype=float)
            if y.size == t.size and y.size:
                ax.plot(t - t[0], 1000.0 * (y - tr["bath_C"]), ".", ms=2, label=f"bath {tr['bath_C']:g} °C")
        ch = res["summary"]["channels"].get(name, {})
        ax.set_title(f"{name}: worst offset {_fmt(ch.get('worst_offset_K'))} K, noise {_fmt(ch.get('noise_mK'))} mK "
                     "RMS", fontsize=9)
        ax.set_ylabel("T − bath (mK)")
        ax.legend(fontsize=7, loc="upper right")
    fig.axes[-1].set_xlabel("time in bath, heater off (s)")
    fig.tight_layout()
    return fig


def fig_runs(res: dict[str, Any]) -> Figure | None:
    runs = res["summary"].get("runs") or []
    media = list(dict.fromkeys(r["medium"] for r in runs))
    if not media:
        return None
    fig = Figure(figsize=(6.4, 3.0 * len(media)))
    for i, medium in enumerate(media):
        ax = fig.add_subplot(len(media), 1, i + 1)
        for r in (x for x in runs if x["medium"] == medium):
            c = r.get("curve") or {}
            t = np.array(c.get("t_s", []), dtype=float)
            if not t.size:
                continue
            line = ax.plot(t, c["dT_K"], ".", ms=2, label=f"run {r['repeat']}")[0]
            if c.get("model_K"):
                ax.plot(t, c["model_K"], "-", lw=0.8, color=line.get_color())
            if r.get("window_s"):
                ax.axvspan(r["window_s"][0], r["window_s"][1], color=line.get_color(), alpha=0.06)
        ax.set_xscale("log")
        ax.set_title(f"{medium}: ΔT against ln t, probe model (lines) and late-time windows (shaded)", fontsize=9)
        ax.set_ylabel("ΔT (K)")
        ax.legend(fontsize=7, loc="upper left")
    fig.axes[-1].set_xlabel("time since heater on (s)")
    fig.tight_layout()
    return fig


def fig_calibration(res: dict[str, Any]) -> Figure | None:
    s = res["summary"]
    cal = s.get("calibration")
    if not cal:
        return None
    refs = {r["name"]: r for r in s.get("reference_values", [])}
    fig = Figure(figsize=(6.4, 3.4))
    ax = fig.add_subplot()
    names = [m["name"] for m in cal["media"]]
    for i, name in enumerate(names):
        kref = refs.get(name, {}).get("k_W_per_mK") or next(m["k_ref_W_per_mK"] for m in cal["media"]
                                                              if m["name"] == name)
        ks = [r["k_raw_W_per_mK"] for r in s["runs"] if r["medium"] == name and r.get("k_raw_W_per_mK")]
        ax.plot([i] * len(ks), [100 * (k / kref - 1) for k in ks], "o", label=None)
        ax.plot([i], [100 * (cal["media"][i]["k_mean_W_per_mK"] / kref - 1)], "k_", ms=20)
    ax.axhline(100 * (1 / cal["factor"] - 1), color="C3", lw=1, label=f"1/F − 1 (F = {cal['factor']:.4f})")
    ax.axhline(0, color="0.5", lw=0.5)
    ax.set_xticks(range(len(names)), names)
    ax.set_ylabel("k measured / k reference − 1 (%)")
    ax.set_title("Uncalibrated bias per run and medium mean", fontsize=9)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


def fig_geometry(res: dict[str, Any]) -> Figure | None:
    g = res["summary"].get("geometry")
    if not g:
        return None
    alpha = g["intended_alpha_m2_per_s"]
    t_heat = g["heating_s"]
    L = g["length_mm"] * 1e-3
    fig = Figure(figsize=(6.4, 3.4))
    ax = fig.add_subplot(1, 2, 1)
    t = np.geomspace(1.0, max(20 * t_heat, 10.0), 200)
    for s in g["sensors"]:
        z = None if s["axial_mm"] is None else s["axial_mm"] * 1e-3
        ax.plot(t, 100 * (1 - win.axial_slope_factor(t, L, alpha, z)), label=s["name"])
    ax.axvline(t_heat, color="k", ls="--", lw=0.8, label="intended heating")
    ax.axhline(1.0, color="0.5", lw=0.5)
    ax.set_xscale("log")
    ax.set_xlabel("t (s)")
    ax.set_ylabel("slope deficit from axial loss (%)")
    ax.legend(fontsize=7)
    ax2 = fig.add_subplot(1, 2, 2)
    if g.get("sample_radius_mm"):
        a = g["diameter_mm"] / 2e3
        R = g["sample_radius_mm"] * 1e-3
        tau = t * alpha / a**2
        lt = np.log(tau)
        sb = np.gradient(response_stehfest(tau, None, 0.0, 1.0, R / a), lt)
        si = np.gradient(response_stehfest(tau, None, 0.0), lt)
        ax2.plot(t, 100 * np.abs(sb / si - 1), label=f"R = {g['sample_radius_mm']:g} mm")
        ax2.axvline(t_heat, color="k", ls="--", lw=0.8)
        ax2.axhline(1.0, color="0.5", lw=0.5)
        ax2.set_xscale("log")
        ax2.set_yscale("log")
        ax2.set_ylim(1e-3, 100)
        ax2.legend(fontsize=7)
    else:
        ax2.text(0.5, 0.5, "no sample boundary\n(field use)", ha="center", va="center", transform=ax2.transAxes)
    ax2.set_xlabel("t (s)")
    ax2.set_ylabel("slope change from the sample boundary (%)")
    fig.suptitle(f"Intended use: κ = {1e6 * alpha:.3g} mm²/s, heating {t_heat:g} s", fontsize=9)
    fig.tight_layout()
    return fig


FIGURES: list[tuple[str, Callable[[dict[str, Any]], Figure | None]]] = [
    ("Heater resistance against temperature", fig_heater),
    ("Thermocouples in the isothermal baths", fig_baths),
    ("Reference runs", fig_runs),
    ("Calibration", fig_calibration),
    ("Geometry for the intended use", fig_geometry),
]


def build_report(res: dict[str, Any], criteria_toml: str = "") -> rm.Report:
    """The report's content from ``Qualification.to_json()`` (as stored in the database)."""
    p = res["probe"]
    s = res["summary"]
    passed = res["passed"]
    sim = " — simulated rig" if res.get("simulated") else ""
    rep = rm.Report(f"Probe qualification: {p['name']} ({p['serial'] or 'no serial'})",
                    f"Acceptance of a probe design or unit in reference media{sim}",
                    number=report_number("Q", p.get("serial") or p.get("name") or ""), kind="qualification")
    identification(rep, "probe qualification" + (" (SIMULATED RIG: not a qualification of real hardware)"
                                                 if res.get("simulated") else ""), "",
                   (("Made", when(res.get("created_utc"))), ("Probe", f"{p['name']}, serial {p['serial'] or '—'}"),
                    ("Front end", str(res.get("frontend") or "not recorded")),
                    ("Operator", str(res.get("operator") or "not recorded"))))
    rep.add(rm.Heading("Method statement"), rm.Para(
        "Practice followed: the probe is run in isothermal baths (thermocouple offsets and noise), its heater "
        "resistance is measured against temperature, and repeat heating runs are made in reference media of "
        "known conductivity, reduced by the needle-probe practice (ASTM D5334 / IEEE Std 442) and judged "
        "against the criteria listed with their sources. Where the criteria are linerig's own, their source "
        "says so."))
    failed = sorted({c["id"] for c in res["criteria"] if c["status"] in ("fail", "not_measured")
                     and c.get("required", True)})
    if passed:
        rep.add(rm.Para("Verdict: QUALIFIED. Every required criterion passed."))
    else:
        rep.add(rm.Para(f"Verdict: NOT QUALIFIED. Failed or not measured: {', '.join(failed)}.", "caution"))

    sensors = "; ".join(f"{x['name']} (r = {x['radial_mm']} mm, z = {x['axial_mm']} mm)" for x in p["sensors"])
    props = [(k, _fmt(p.get(k))) for k in ("kind", "heater_length_mm", "radius_mm", "heat_capacity_MJ_per_m3K",
                                           "heater_resistance_ohm", "thermocouple")]
    rep.add(rm.Heading("Probe"), rm.Table(("property", "value"), (*props, ("sensors", sensors))))

    rep.add(rm.Heading("Criteria"), rm.Table(
        ("result", "criterion", "item", "measured", "limit", "detail"),
        tuple((STATUS_WORDS.get(c["status"], c["status"]) + ("" if c.get("required", True) else " (advisory)"),
               c["id"], c["item"], f"{_fmt(c['measured'])} {c['unit']}".strip(), c["limit"] or "—", c["detail"])
              for c in res["criteria"]),
        "Measured values in the unit given; n/a: does not apply to this probe or use."))
    seen: dict[str, str] = {}
    for c in res["criteria"]:
        seen.setdefault(c["id"], f"{c['id']} ({c['title']}): {c['source']}")
    rep.add(rm.Heading("Where each limit comes from", 3), rm.Bullets(tuple(seen.values()), "small"))

    cal = s.get("calibration")
    if cal:
        rep.add(rm.Heading("Calibration"),
                rm.Para(f"Probe factor F = {cal['factor']:.4f} ± {2 * cal['factor_u']:.4f} (± U, k = 2; standard "
                        f"uncertainty {cal['factor_u']:.4f}); later results are multiplied by F "
                        "(F = k_reference / k_measured)."),
                rm.Table(("medium", "reference k ± U (k = 2)", "runs", "mean k", "RSD", "raw bias", "bias after F"),
                         tuple(
                    (m["name"], f"{m['k_ref_W_per_mK']:.4f} ± {2 * m['k_ref_u_W_per_mK']:.4f}", str(m["n"]),
                     f"{m['k_mean_W_per_mK']:.4f}",
                     "—" if m["k_rel_sd"] is None else f"{100 * m['k_rel_sd']:.2f} %",
                     f"{100 * m['bias_rel']:+.2f} %", f"{100 * m['residual_bias_rel']:+.2f} %")
                    for m in cal["media"]), "k in W/(m·K)."))
    runs = s.get("runs") or []
    if runs:
        rows = []
        for r in runs:
            pr = r.get("probe") or {}
            w = r.get("window_s")
            rows.append((r["medium"], str(r["repeat"]), _fmt(r.get("k_raw_W_per_mK")),
                         "—" if not w else f"{w[0]:.0f}–{w[1]:.0f}", _fmt(r.get("response_s")),
                         _fmt(pr.get("probe_rho_c_MJ_per_m3K")), _fmt(pr.get("contact_m2K_per_W")),
                         _fmt(r.get("rise_K")), ", ".join(r.get("flags") or []) or "—"))
        rep.add(rm.Heading("Reference runs"), rm.Table(
            ("medium", "run", "k raw", "window (s)", "response (s)", "probe ρc", "R_c", "rise (K)", "flags"),
            tuple(rows), "k raw in W/(m·K) (uncalibrated, late-time line on the window physics allows); probe ρc "
                         "in MJ/(m³·K) and R_c in m²·K/W from the full probe model."))
    problems = [f"{k}: {v}" for k, v in (s.get("errors") or {}).items()] + list(s.get("notes") or [])
    if problems:
        rep.add(rm.Heading("Problems met"), rm.Bullets(tuple(problems), "caution"))

    rep.add(rm.Heading("Plots"))
    for title, make in FIGURES:
        fig = make(res)
        if fig is not None:
            rep.add(rm.Figure(svg_bytes(fig), title))

    iu = s.get("intended_use") or {}
    if iu:
        rep.add(rm.Heading("Intended use"), rm.Para(
            f"{iu.get('description', '')}: k = {_fmt(iu.get('k_W_per_mK'))} W/(m·K), ρc = "
            f"{_fmt(iu.get('rho_c_MJ_per_m3K'))} MJ/(m³·K), heating {_fmt(iu.get('heating_s'))} s, sample "
            f"{_fmt(iu.get('sample_diameter_mm'))} mm × {_fmt(iu.get('sample_height_mm'))} mm."),
            rm.Para(iu.get("source", ""), "small"))
    refs = {r["name"]: r for r in s.get("references") or []}
    values = s.get("reference_values") or []
    if values:
        items = []
        for v in values:
            r = refs.get(v["name"], {})
            at = "" if v.get("temperature_C") is None else f" at {v['temperature_C']:.2f} °C"
            items.append(f"{v['name']} ({r.get('description', '')}): k = {v['k_W_per_mK']:.4f} ± "
                         f"{2 * v['k_u_W_per_mK']:.4f} W/(m·K) (± U, k = 2){at}, "
                         f"ρc = {_fmt(r.get('rho_c_MJ_per_m3K'))} MJ/(m³·K). "
                         f"{v['source']}")
        rep.add(rm.Heading("Reference media", 3), rm.Bullets(tuple(items), "small"))
    if criteria_toml:
        rep.add(rm.Heading("Criteria and procedure used", 3),
                rm.Para("The full settings are stored with this qualification in the database "
                        "(qualifications.criteria_toml).", "small"))
    rep.add(rm.Heading("Uncertainty"), rm.Para(
        "In this report the probe factor is quoted with its standard uncertainty u and its expanded uncertainty "
        "U = 2u (coverage factor k = 2, about 95 %); reference values are quoted as ± U (k = 2)."))
    rep.add(rm.Heading("Cautions"), rm.Bullets(CAUTIONS, "caution"))
    rep.add(rm.Heading("Sign-off"), rm.SignOff(statement=SIGN_OFF))
    return rep


def write_report(res: dict[str, Any], html_path: str | Path | None = None, pdf_path: str | Path | None = None,
                 criteria_toml: str = "") -> list[Path]:
    """Write whichever of the two reports are asked for; return their paths."""
    rep = build_report(res, criteria_toml)
    out = []
    if html_path is not None:
        hp = Path(html_path)
        hp.write_text(render_html(rep), encoding="utf-8")
        out.append(hp)
    if pdf_path is not None:
        pp = Path(pdf_path)
        render_pdf(rep, pp)
        out.append(pp)
    return out
