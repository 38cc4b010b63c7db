"""Lab and field workflows built on single-run reductions: repeat cycles, probe calibration in reference media,
depth profiles, dry-out curves and the surface-step cylinder test. Pure functions and small models; no I/O."""
