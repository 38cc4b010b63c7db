"""Repeat-cycle statistics against ISO 5725 and the Iglewicz–Hoaglin rule."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from linerig.daemon.workflows.cycles import (
    REPEATABILITY_FACTOR,
    CycleDataError,
    CycleValue,
    grubbs_critical,
    modified_z,
    split_cycles,
    summarise_cycles,
)

# ISO 5725-2:1994 Table 5, Grubbs' single-outlier critical values (upper 1 % and upper 5 %), from memory;
# the same numbers are in ASTM E178 for the two-sided test.
ISO_5725_2_TABLE5 = {
    3: (1.155, 1.155), 4: (1.496, 1.481), 5: (1.764, 1.715), 6: (1.973, 1.887),
    7: (2.139, 2.020), 8: (2.274, 2.126), 9: (2.387, 2.215), 10: (2.482, 2.290),
}


@pytest.mark.parametrize("n", sorted(ISO_5725_2_TABLE5))
def test_grubbs_critical_values_match_iso_5725_2_table_5(n: int) -> None:
    one, five = ISO_5725_2_TABLE5[n]
    assert grubbs_critical(n, 0.01) == pytest.approx(one, abs=1.5e-3)
    assert grubbs_critical(n, 0.05) == pytest.approx(five, abs=1.5e-3)


def test_repeatability_limit_holds_95_percent_of_differences() -> None:
    # ISO 5725-6 §4.1.4: the repeatability limit r is the value the absolute difference between two results under
    # repeatability conditions stays below with 95 % probability (r = 1.96·√2·σ_r ≈ 2.8·σ_r). Checked by its
    # meaning: pairs of normal results with the summary's own sd of 8 cycles, 20 000 pairs (binomial sd 0.15 %).
    rng = np.random.default_rng(11)
    ks = list(0.6 + 0.01 * rng.standard_normal(8))
    s = summarise_cycles([CycleValue(i + 1, k) for i, k in enumerate(ks)])
    pairs = rng.normal(0.0, s.sd, size=(20_000, 2))
    within = float(np.mean(np.abs(pairs[:, 0] - pairs[:, 1]) <= s.repeatability_limit))
    assert within == pytest.approx(stats.chi2.cdf((REPEATABILITY_FACTOR / math.sqrt(2)) ** 2, 1), abs=0.005)
    assert 0.945 <= within <= 0.955


def test_modified_z_equals_scipy_normal_scaled_mad() -> None:
    # Iglewicz & Hoaglin (1993): M = 0.6745 (x − median)/MAD, i.e. (x − median)/(MAD/Φ⁻¹(0.75)).
    x = np.array([1.02, 0.98, 1.01, 0.99, 1.00, 1.35])
    mad_sigma = stats.median_abs_deviation(x, scale="normal")
    expect = (x - np.median(x)) / mad_sigma
    assert np.allclose(modified_z(x), expect, rtol=2e-4)


def test_summary_mean_sd_and_repeatability() -> None:
    ks = [0.602, 0.611, 0.598, 0.607, 0.604]
    s = summarise_cycles([CycleValue(i + 1, k) for i, k in enumerate(ks)])
    assert s.mean == pytest.approx(np.mean(ks))
    assert s.sd == pytest.approx(np.std(ks, ddof=1))
    assert s.repeatability_limit == pytest.approx(2.8 * np.std(ks, ddof=1))
    assert s.flags == ()


def test_one_wild_cycle_is_flagged_by_both_rules() -> None:
    ks = [0.602, 0.611, 0.598, 0.607, 0.604, 0.603, 0.606, 0.702]
    s = summarise_cycles([CycleValue(i + 1, k) for i, k in enumerate(ks)])
    assert "outlier" in s.flags
    assert "grubbs_outlier" in s.flags_by_cycle[8]
    assert "mad_outlier" in s.flags_by_cycle[8]
    assert all(c == 8 for c in s.flags_by_cycle)


def test_steady_drift_across_cycles_is_a_trend_not_an_outlier() -> None:
    ks = [0.640, 0.631, 0.623, 0.612, 0.606, 0.597]
    s = summarise_cycles([CycleValue(i + 1, k) for i, k in enumerate(ks)])
    assert "trend_across_cycles" in s.flags
    assert s.trend_per_cycle < 0
    assert "outlier" not in s.flags


def test_cycle_that_started_warm_is_flagged() -> None:
    vals = [CycleValue(1, 0.60, rise_K=2.0, start_offset_K=0.0), CycleValue(2, 0.606, start_offset_K=0.3),
            CycleValue(3, 0.603, start_offset_K=0.02)]
    s = summarise_cycles(vals)
    assert s.flags_by_cycle == {2: ("not_reequilibrated",)}


def test_one_cycle_is_refused_with_advice() -> None:
    with pytest.raises(CycleDataError, match="at least 2"):
        summarise_cycles([CycleValue(1, 0.6), CycleValue(2, math.nan)])


def _record(n_cycles: int = 3) -> tuple[np.ndarray, np.ndarray, list[str]]:
    t, q, ph = [], [], []
    t0 = 0.0
    for _ in range(n_cycles):
        for name, dur, power in (("settling", 60, 0.0), ("heating", 100, 5.0), ("recovering", 100, 0.0)):
            for s in range(dur):
                t.append(t0 + s)
                q.append(power)
                ph.append(name)
            t0 += dur
    return np.array(t), np.array(q), ph


def test_split_cycles_with_and_without_phases() -> None:
    t, q, ph = _record()
    with_phase = split_cycles(t, q, ph)
    assert with_phase == [(0, 60, 260), (260, 320, 520), (520, 580, 780)]
    blind = split_cycles(t, q)
    # without phases the baseline is the last third of the 160 s gap before each heater-on
    assert [c[1] for c in blind] == [60, 320, 580]
    assert blind[1][0] == 267  # first sample at or after 320 − 160/3 s
