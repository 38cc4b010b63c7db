"""Front-end firmware, CPython only: the raw-emf temperature bound against the exact ITS-90 inversion (numpy and
the daemon's its90). The trips themselves are asserted under both interpreters in tests/firmware/cases_limits.py."""

from __future__ import annotations

import numpy as np
from firmware_path import FW_DIR  # noqa: F401  (puts the firmware on sys.path)
from probefw import limits

from linerig.daemon.rig import its90


def test_raw_emf_bound_never_underestimates() -> None:
    # The firmware bounds temperature from raw emf with a conservative Seebeck coefficient; compare with the
    # exact ITS-90 inversion (daemon/rig/its90.py, NIST Monograph 175 coefficients) over the working range.
    for tc_type in limits.S_MIN_UV_PER_K:
        for cj in (-40.0, -10.0, 0.0, 22.0, 45.0):
            hot = np.linspace(cj, 150.0, 200)
            emf = its90.emf_for_temperature(hot, cj, tc_type)
            bound = np.array([limits.temperature_bound_C(float(e), cj, tc_type) for e in emf])
            assert np.all(bound >= hot - 1e-9), (tc_type, cj)
            assert limits.temperature_bound_C(float(emf[-1]), cj, tc_type) < 150.0 * 1.6  # and not absurd
