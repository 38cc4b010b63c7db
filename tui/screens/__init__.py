"""The UI's screens: live run, new run, history and run detail, probes and calibrations."""
