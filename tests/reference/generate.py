"""Regenerate the reference records (tests/reference/records/) and probe profiles (tests/reference/probes/).

    .venv/bin/python -m tests.reference.generate              # everything (tens of minutes on a shared machine)
    .venv/bin/python -m tests.reference.generate --only NAME  # one record (repeatable; shell patterns)
    .venv/bin/python -m tests.reference.generate --check      # are the files current? exit 1 if not
    .venv/bin/python -m tests.reference.generate --list       # names, families, descriptions

A record is current when its stored parameters equal the catalogue's and it was made by the present solver code
(a hash of stepper.py, fv_axi.py and fv_planar.py is stored with it). `--check --recompute` also re-solves the
named records and compares the stored series.
"""

from __future__ import annotations

import argparse
import fnmatch
import hashlib
import json
import sys
import time
from pathlib import Path
from typing import Any

if __name__ == "__main__" and not __package__:  # run as a file: make the package importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    __package__ = "tests.reference"

import numpy as np

from .build import run_record, solve
from .catalogue import CATALOGUE, PROFILES

HERE = Path(__file__).resolve().parent
RECORDS = HERE / "records"
PROBES = HERE / "probes"
SOLVER_FILES = ("stepper.py", "fv_axi.py", "fv_planar.py")  # the physics; build.py only maps and reports


def solver_hash() -> str:
    h = hashlib.sha256()
    for f in SOLVER_FILES:
        h.update((HERE / f).read_bytes())
    return h.hexdigest()[:16]


def _roundtrip(obj: Any) -> Any:
    return json.loads(json.dumps(obj))


def write_index() -> None:
    recs = []
    for name, p in CATALOGUE.items():
        if (RECORDS / f"{name}.json").exists():
            recs.append({"name": name, "family": p["family"], "description": p["description"]})
    (RECORDS / "index.json").write_text(json.dumps({"records": recs}, indent=1, ensure_ascii=False) + "\n",
                                        encoding="utf-8")


def write_profiles() -> None:
    PROBES.mkdir(exist_ok=True)
    for fname, text in PROFILES.items():
        (PROBES / fname).write_text(text, encoding="utf-8")


def generate(names: list[str]) -> None:
    RECORDS.mkdir(exist_ok=True)
    write_profiles()
    code = solver_hash()
    t_all = time.perf_counter()
    for n, name in enumerate(names, 1):
        p = CATALOGUE[name]
        t0 = time.perf_counter()
        print(f"[{n}/{len(names)}] {name} ({p['family']})", flush=True)
        res = run_record(p, log=lambda s: print(s, flush=True))
        arrays = {"t_s": res.t_s, **{f"dT_{s}": v.astype(np.float32) for s, v in res.dT.items()}}
        np.savez_compressed(RECORDS / f"{name}.npz", **arrays)
        res.stats["wall_s"] = round(time.perf_counter() - t0, 1)
        meta = {"params": p, "sensors": list(res.dT), "true": res.true, "stats": res.stats, "solver_hash": code,
                "arrays": "t_s (float64, s from heater-on); dT_<sensor> (float32, K above the initial temperature)"}
        (RECORDS / f"{name}.json").write_text(json.dumps(meta, indent=1, ensure_ascii=False) + "\n",
                                              encoding="utf-8")
    write_index()
    print(f"generated {len(names)} record(s) in {time.perf_counter() - t_all:.0f} s", flush=True)


def check(names: list[str], recompute: bool) -> int:
    code = solver_hash()
    problems: list[str] = []
    for fname, text in PROFILES.items():
        f = PROBES / fname
        if not f.exists() or f.read_text(encoding="utf-8") != text:
            problems.append(f"probe profile {fname}: missing or differs from the catalogue")
    for name in names:
        f = RECORDS / f"{name}.json"
        if not f.exists() or not (RECORDS / f"{name}.npz").exists():
            problems.append(f"{name}: missing")
            continue
        meta = json.loads(f.read_text(encoding="utf-8"))
        if meta["params"] != _roundtrip(CATALOGUE[name]):
            problems.append(f"{name}: parameters differ from the catalogue")
        if meta.get("solver_hash") != code:
            problems.append(f"{name}: made by other solver code ({meta.get('solver_hash')} vs {code})")
        if recompute:
            sol, sensors, _ = solve(CATALOGUE[name])
            with np.load(RECORDS / f"{name}.npz") as z:
                t = z["t_s"]
                same_t = t.shape == sol.t_s.shape and np.allclose(t, sol.t_s, rtol=0, atol=1e-9)
                worst = max(float(np.max(np.abs(z[f"dT_{s}"] - sol.values[:, i]))) for i, s in enumerate(sensors)) \
                    if same_t else float("inf")
            if worst > 1e-5:
                problems.append(f"{name}: recomputed series differ by {worst:.2e} K")
            else:
                print(f"{name}: recomputed, largest difference {worst:.1e} K (float32 storage)")
    stored = {f.stem for f in RECORDS.glob("*.json")} - {"index"}
    for extra in sorted(stored - set(CATALOGUE)):
        problems.append(f"{extra}: stored but not in the catalogue")
    idx = RECORDS / "index.json"
    want = [n for n in CATALOGUE if (RECORDS / f"{n}.json").exists()]
    if not idx.exists() or [r["name"] for r in json.loads(idx.read_text())["records"]] != want:
        problems.append("index.json is out of date")
    for msg in problems:
        print(msg)
    print("reference records are current" if not problems else f"{len(problems)} problem(s)")
    return 1 if problems else 0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--only", action="append", metavar="NAME", help="record name or pattern (repeatable)")
    ap.add_argument("--check", action="store_true", help="verify the stored files are current")
    ap.add_argument("--recompute", action="store_true", help="with --check: re-solve and compare the series")
    ap.add_argument("--list", action="store_true", help="list the catalogue")
    args = ap.parse_args(argv)
    names = list(CATALOGUE)
    if args.only:
        names = [n for n in names if any(fnmatch.fnmatch(n, pat) for pat in args.only)]
        if not names:
            ap.error(f"no record matches {args.only}")
    if args.list:
        for n in names:
            print(f"{n:34s} {CATALOGUE[n]['family']:26s} {CATALOGUE[n]['description']}")
        print(f"{len(names)} records")
        return 0
    if args.check:
        return check(names, args.recompute)
    generate(names)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
