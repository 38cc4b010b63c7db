"""Faults and quality flags in plain words, each with what to do next.

The daemon's reasons already say what happened; this adds the operator's next step. Matching is on words
the daemon's safety module uses, so an unknown reason still gets the general advice.
"""

from __future__ import annotations

# (words to look for, what to do next); first match wins, so the most specific come first.
_FAULT_ADVICE: tuple[tuple[tuple[str, ...], str], ...] = (
    (("another program",),
     "Something else is writing to the front end's port. Find and stop it (who is in the port's group?); the "
     "daemon keeps switching the heater off meanwhile. Start a run only once it is gone."),
    (("clock has stopped", "clock went back"),
     "The front end's clock stopped or jumped, so heating time cannot be trusted. Power-cycle the front end and "
     "check its firmware before the next run."),
    (("below the",),
     "The heater got less power than asked. Charge or swap the battery, check the heater leads and connector."),
    (("pre-check failed",),
     "Nothing was heated. Fix each item listed, then start the run again."),
    (("probe temperature", "probe already at"),
     "Let the probe cool to ground temperature, then start again with less power per metre."),
    (("temperature rise",),
     "The needle got too hot for this soil. Start again with less power per metre or a shorter heating time."),
    (("heating time",),
     "The run heated for longer than allowed. Shorten the planned heating time."),
    (("supply voltage", "battery"),
     "Charge or swap the battery, then start again. Measurements on a sagging supply are not trusted."),
    (("thermocouple", "channel"),
     "Check the probe plug and thermocouple lead; an open or damaged junction reads as a fault."),
    (("resistance", "no current", "heater open", "shorted"),
     "Check the heater leads and connector, and measure the heater resistance before the next run."),
    (("heater power",),
     "The source delivered more power than asked. Check the power supply settings and the heater leads."),
    (("heater on when it should be off",),
     "Unplug the heater now and check the front end; its output did not switch off when told."),
    (("front end", "no data", "lease", "restarted"),
     "Check the USB cable and the front end's power. Its lease has switched the heater off."),
    (("corrupted frames",),
     "Move the cable away from motors and mains leads, or use a shorter shielded cable."),
    (("database", "disk", "store"),
     "Free disk space or check the storage card; no run can start until writes work again."),
    (("internal error",),
     "The daemon hit an unexpected error and switched the heater off. Save its log for a bug report."),
)
_GENERAL = "The heater is off. Read the run's events in History, fix the cause, then start again."

FLAG_WORDS = {
    "window_short": "fit window still short",
    "residual_trend": "curve still bending in the window",
    "sample_wall": "window cut short by the sample's edge",
    "noise_high": "noisy readings",
    "rise_above_limit": "rise above the limit",
    "drift": "ground temperature drifting",
    "not_settled": "baseline had not settled",
    "no_baseline": "no baseline recorded",
}


def fault_advice(reason: str) -> str:
    """What the operator should do next after the daemon tripped for ``reason``."""
    low = reason.lower()
    for words, advice in _FAULT_ADVICE:
        if any(w in low for w in words):
            return advice
    return _GENERAL


def flag_words(flags: list[str] | tuple[str, ...] | None) -> list[str]:
    """Quality flags as short phrases; an unknown flag keeps its name with spaces."""
    return [FLAG_WORDS.get(f, f.replace("_", " ")) for f in flags or ()]
