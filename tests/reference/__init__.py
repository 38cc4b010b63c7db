"""Reference records from an independent resolved-probe solver (see README.md in this folder).

    from tests.reference import records, load
    rec = load(records("lab-needle-long")[0])
    rec.to_run_csv("run.csv", seed=1, noise_K=0.005)     # then: linerig reduce run.csv --probe rec.profile_path

Nothing in this package imports the project's reduction or simulator.
"""

from .loader import Instrument, RefRecord, RunArrays, families, load, records

__all__ = ["Instrument", "RefRecord", "RunArrays", "families", "load", "records"]
