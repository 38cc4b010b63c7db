"""The stored records: current, complete, physically sound, and readable by the project's tools."""

from __future__ import annotations

import math

import numpy as np
import pytest

from linerig.daemon.probe import load_probe_profile

from . import generate
from .catalogue import CATALOGUE, PROFILES
from .loader import PROBES_DIR, load, records
from .materials import MEDIA

NAMES = records()


def test_stored_records_are_current(capsys: pytest.CaptureFixture[str]) -> None:
    # parameters equal the catalogue's, made by the present solver code, profiles as generated
    assert generate.check(NAMES, recompute=False) == 0, capsys.readouterr().out


def test_the_set_is_complete() -> None:
    # every catalogue record is stored (the set issue 11 asks for: at least 40, all three probe kinds)
    assert list(CATALOGUE) == NAMES
    assert len(NAMES) >= 40
    kinds = {CATALOGUE[n]["profile"] for n in NAMES}
    assert {"ref-lab-needle.toml", "ref-dual-needle.toml", "ref-field-rod.toml"} <= kinds


def test_media_are_the_simulators_numbers() -> None:
    # the records copy the simulator's demo media by hand (no import in the solver); keep the copies honest
    from linerig.daemon.sim.materials import MATERIALS

    assert set(MEDIA) == set(MATERIALS)
    for key, m in MEDIA.items():
        assert (m.k, m.rho_c) == (MATERIALS[key].k_W_per_mK, MATERIALS[key].rho_c_J_per_m3K)


@pytest.mark.parametrize("fname", sorted(PROFILES))
def test_probe_profiles_load_with_the_project_reader(fname: str) -> None:
    prof = load_probe_profile(PROBES_DIR / fname)
    users = [n for n, p in CATALOGUE.items() if p["profile"] == fname]
    assert users, f"{fname} is used by no record"
    for name in users:
        p = CATALOGUE[name]
        assert [s.name for s in prof.sensors] == [s["name"] for s in p["sensors"]]


@pytest.mark.parametrize("name", NAMES)
def test_record_is_sound(name: str) -> None:
    rec = load(name)
    p = rec.params
    # energy ledger of the solve: power in = stored + through the bath, to rounding
    assert abs(rec.stats["energy_residual_rel"]) < 1e-9
    # the stored grid covers the record and holds every power change
    assert rec.t_s[0] == 0.0 and rec.t_s[-1] == pytest.approx(p["t_end_s"])
    assert np.all(np.isin(np.asarray(p["power"]["t_s"]), rec.t_s))
    for s in rec.sensors:
        y = rec.dT[s]
        assert np.all(np.isfinite(y)) and y[0] == 0.0
        # heat only ever warms a medium that started uniform; the scheme's stability function dips slightly below
        # zero for the stiffest modes (R(z) → 0⁻), which leaves undershoots of order 1e-5 K ahead of a pulse
        assert y.min() > -1e-4 * y.max()
        err = rec.true["sensors"][s]["model_error"]
        assert err["rel_to_max"] < 0.01
        if err.get("slope_rel_heating") is not None:
            assert err["slope_rel_heating"] < 0.005
    # the true block's answer is the medium the sensor sits in
    for s in rec.sensors:
        m = rec.true["sensors"][s]["medium"]
        assert m["k_W_per_mK"] == MEDIA[m["material"]].k
        assert m["alpha_m2_per_s"] == pytest.approx(MEDIA[m["material"]].alpha, rel=1e-12)


def test_late_heating_slope_of_a_low_diffusivity_needle_record_is_the_line_source() -> None:
    # Carslaw & Jaeger 1959 §10.4 / Blackwell 1954: after the probe's transient and before axial loss, the rise
    # grows as q/(4πk)·ln t. In glycerol (α ≈ 9e-8) the 100 mm needle keeps axial loss below 0.1 % of the slope
    # up to L²/(86.6α) ≈ 1200 s (reference-values §2.6 criterion, erf form), and the probe's own slope error
    # (α_J·τ in the hundreds) is small from a few hundred seconds.
    name = "ln-glycerol-1200s"
    if name not in NAMES:
        pytest.skip(f"{name} not generated")
    rec = load(name)
    k = rec.true["k_W_per_mK"]
    q = rec.power_q[0]
    t = np.array([400.0, 1200.0])
    y = rec.clean(t)["heater"]
    slope = (y[1] - y[0]) / math.log(t[1] / t[0])
    assert slope == pytest.approx(q / (4 * math.pi * k), rel=5e-3)
