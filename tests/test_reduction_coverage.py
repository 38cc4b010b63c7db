"""Coverage of the noise terms of the budget on 200 noisy synthetic records (fast late-time method).

Records: exact line-source response (Carslaw & Jaeger 1959 §10.4) of a water-like medium plus white or AR(1)
noise and a small random drift. The statistical and drift terms (what noise and drift do) must hold the true k
in about 95 % of cases (binomial sd ≈ 1.5 % at n = 200, so 90–99 % is accepted). The window's model-error term is
left out here: on an exact line source it only adds width; its coverage is measured on the resolved-probe
reference records by bench/reference_bench.py.
"""

import math

import numpy as np

from linerig.daemon.probe import ProbeProfile
from linerig.daemon.reduction.api import reduce_run
from linerig.daemon.reduction.data import RunData
from linerig.daemon.reduction.synthetic import line_source_run


def test_expanded_interval_covers_about_95_percent() -> None:
    k, rho_c, q, r = 0.6065, 4.169e6, 5.0, 0.635e-3
    t = np.arange(-300.0, 600.5, 2.0)
    clean = 20.0 + line_source_run(k, rho_c, q, r, t)
    qq = np.where(t >= 0, q, 0.0)
    probe = ProbeProfile(name="ideal line", radius_mm=0.635)
    rng = np.random.default_rng(2024)
    inside = 0
    n = 200
    for i in range(n):
        if i % 2:
            noise = 0.01 * rng.standard_normal(t.size)
        else:  # AR(1), ρ = 0.6, same marginal sd
            e = rng.standard_normal(t.size) * 0.01 * np.sqrt(1 - 0.36)
            noise = np.empty_like(e)
            noise[0] = e[0] / np.sqrt(1 - 0.36)
            for j in range(1, e.size):
                noise[j] = 0.6 * noise[j - 1] + e[j]
        drift = rng.normal(0, 0.2) / 3600.0 * t
        data = RunData(t, qq, {"heater": clean + noise + drift})
        res = reduce_run(data, probe, method="line", power_u_rel=0.0, stable_rule=False).sensors["heater"]
        u_noise = res.k_W_per_mK * math.hypot(res.u_budget_rel["statistical"], res.u_budget_rel["drift"])
        inside += abs(res.k_W_per_mK - k) <= 2.0 * u_noise
    assert 0.90 * n <= inside <= 0.99 * n, inside
