"""Reports (self-contained HTML and PDF) and exports (CSV, JSON) of runs, sites and workflows."""
