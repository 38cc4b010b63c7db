"""What the window rules and the model-error terms know of probe and medium: ``window.StepModel`` per sensor.

The probe-model fit when it converged (α, h; α_J from its k/α). The line's intercept α with h = 0 when there is
no model, or as a second choice when the model and the line disagree by more than 3 %: a heating the two read
differently (a power log that was wrong for a while) can leave the model an α far off. A Blackwell cylinder when
the probe's heat capacity is known, an ideal line at the radius otherwise.
"""

from __future__ import annotations

import math

import numpy as np

from .. import window as win
from ..driftfit import DriftFit
from ..linesource import ALPHA_MAX, ALPHA_MIN, RHO_C_FLOOR, RHO_C_LIMITS, LateTimeFit
from ..record import SensorRecord
from ..superposition import compress_steps
from .base import Found

MODEL_LINE_REL = 0.03  # model and line k differ by more than this: the line's α is tried as well (no source)
# Diffusivity of soils, rocks and the reference liquids: 0.05 to 2 mm²/s (de Vries 1963 tables span about 0.1–1.5;
# the ends are widened, common practice, no source).
ALPHA_PLAUSIBLE = (5e-8, 2e-6)
MEDIA_RHO_C = np.geomspace(*RHO_C_LIMITS, 7)  # the media a window's model-error term weighs (``plausible_models``)


def step_models(rec: SensorRecord, found: Found, lf: LateTimeFit | None = None) -> list[win.StepModel]:
    """The step models in order of preference (empty without a probe radius); ``lf`` stands for the line's fit
    when the line is the one asking."""
    g = rec.geometry
    a_m, probe_C = g.probe_radius_m, g.probe_C_J_per_m3K
    if a_m is None:
        return []
    model, line = found.credible("model"), found.converged("line")
    sources: list[tuple[float, float, float]] = []
    if model is not None and model.fit.alpha_m2_per_s > 0:
        sources.append((model.fit.alpha_m2_per_s, model.fit.h, model.fit.k_W_per_mK))
    if lf is None and line is not None:
        lf = line.fit
    if lf is not None and lf.alpha_m2_per_s and (
            not sources or abs(sources[0][2] / lf.k_W_per_mK - 1) > MODEL_LINE_REL):
        sources.append((lf.alpha_m2_per_s, 0.0, lf.k_W_per_mK))
    out = []
    for i, (alpha, h, k) in enumerate(sources):
        # the intercept's α carries e^{2h} of contact and of the probe's own resistance: no more than the top of
        # soils and rocks (as the live window does)
        top = ALPHA_MAX if (i == 0 and model is not None) else ALPHA_PLAUSIBLE[1]
        alpha = min(max(alpha, ALPHA_MIN), top)
        out.append(win.StepModel(alpha, a_m, 2.0 * (k / alpha) / probe_C if probe_C else None, h, g.length_m,
                                 g.axial_m, *_sample(rec, k)))
    return out


def _sample(rec: SensorRecord, k: float) -> tuple[float | None, float | None]:
    """The sample's radius and the diffusivity its face is judged with (``window.wall_alpha``)."""
    r = rec.geometry.sample_radius_m
    return (r, win.wall_alpha(k, RHO_C_FLOOR)) if r else (None, None)


def plausible_models(rec: SensorRecord, found: Found, lf: LateTimeFit) -> list[win.StepModel]:
    """The probes and media the record cannot tell apart, for a window's model-error term.

    A probe model that describes the record: that one. Otherwise the line gives k, and its intercept α·e^{2h}
    only (h the contact and the probe's own resistance, Blackwell 1954 long-time form), so every medium with a
    volumetric heat capacity in ``RHO_C_LIMITS`` is as good: α = k/ρc, and the h that puts the intercept where
    it is, h = ½·ln(α_intercept/α), where that is not negative (a resistance is not). These are the stop rule's
    media (``stop_rule.RHO_C_RANGE``): the window term and the verdict weigh the same possibilities.
    """
    g = rec.geometry
    model = found.credible("model")
    if g.probe_radius_m is None:
        return []
    if model is not None:
        return step_models(rec, found, lf)[:1]
    if not lf.alpha_m2_per_s:
        return []
    k = lf.k_W_per_mK
    media = [(k / rc, rc, 0.5 * math.log(lf.alpha_m2_per_s * rc / k)) for rc in MEDIA_RHO_C]
    media = [m for m in media if m[2] >= 0.0] or [(lf.alpha_m2_per_s, k / lf.alpha_m2_per_s, 0.0)]
    out = []
    for alpha, rho_c, h in media:
        aj = 2.0 * rho_c / g.probe_C_J_per_m3K if g.probe_C_J_per_m3K else None
        out.append(win.StepModel(alpha, g.probe_radius_m, aj, h, g.length_m, g.axial_m, *_sample(rec, k)))
    return out


def departure(rec: SensorRecord, times: np.ndarray, model: win.StepModel) -> np.ndarray:
    """Σ Δq_j·G(t − t_j) at ``times``: the predicted departure from the superposed late-time line (W/m, in
    units of 1/(4πk) kelvin), over the power steps before each time."""
    run = rec.run
    times = np.asarray(times, dtype=float)
    st, sdq = compress_steps(run.steps_t, run.steps_dq)
    ages = times[:, None] - st[None, :]
    live = ages > 0
    out = np.zeros(times.size)
    if not np.any(live):
        return out
    G, _ = model.deviation(ages[live])
    full = np.zeros(ages.shape)
    full[live] = G
    return full @ sdq


def window_u(rec: SensorRecord, fit: DriftFit, models: list[win.StepModel],
             rows: np.ndarray | None = None) -> float | None:
    """The window's model error, a relative standard uncertainty of the fit's k (None: no model to say).

    Each model predicts the error of k its departure from the late-time line causes in the fit's rows. With one
    model the prediction is the half-width of a rectangular distribution, u = |e|/√3 (JCGM 100:2008 §4.3.7);
    with several (the splits of the intercept, each as likely) u is their RMS. ``rows`` (a mask over the fit's
    rows) limits the departure to those rows.
    """
    if not models:
        return None
    keep = np.ones(fit.t_rows.size) if rows is None else rows.astype(float)
    e = np.array([fit.bias_rel(departure(rec, fit.t_rows, m) * keep) for m in models])
    if e.size == 1:
        return abs(float(e[0])) / math.sqrt(3.0)
    return math.sqrt(float(np.mean(e * e)))
