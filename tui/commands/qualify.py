"""``linerig qualify``: a guided qualification of one probe serial, judged against acceptance criteria.

    linerig qualify run PROFILE.toml --simulate [--insulation-MOhm R] [--criteria FILE] [--html F] [--pdf F]
    linerig qualify run PROFILE.toml [--insulation-MOhm R] ...       (the live daemon on --socket, prompts)
    linerig qualify list [--serial S]
    linerig qualify show ID [--json]
    linerig qualify report ID [--html F] [--pdf F]
    linerig qualify criteria                                        (print the default criteria file)

Exit status of ``run``: 0 qualified, 1 not qualified, 2 could not run.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import sys
from pathlib import Path
from typing import Any

from linerig.daemon.paths import default_db_path
from linerig.daemon.probe import ProbeProfileError, load_probe_profile
from linerig.daemon.qualify.config import DEFAULT_CRITERIA_PATH, QualificationConfigError, load_config
from linerig.daemon.qualify.procedure import run_async, run_sync
from linerig.daemon.qualify.report import write_report
from linerig.daemon.qualify.requests import AskNumber, Progress
from linerig.daemon.qualify.result import Qualification, judge
from linerig.daemon.qualify.simrig import SimSetup, SimulatedQualificationRig
from linerig.daemon.qualify.store import (
    QualificationNotFound,
    list_qualifications,
    load_qualification,
    open_store,
    save_qualification,
)
from linerig.daemon.report.sources import SourceError, open_db
from linerig.daemon.sim.rig_model import FAULT_NAMES

CMD = "qualify"
EXIT_NOT_QUALIFIED = 1
EXIT_ERROR = 2


def add_parser(sub: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    p = sub.add_parser(CMD, help="qualify a probe: guided checks judged against acceptance criteria",
                       description="Guided qualification of one probe serial: heater resistance and TCR, insulation, "
                                   "thermocouple offset and noise, response time, calibration in reference media, "
                                   "probe heat capacity and contact resistance, geometry for the intended use.")
    qs = p.add_subparsers(dest="qualify_command", metavar="ACTION", required=True)

    r = qs.add_parser("run", help="run the procedure (simulated or on the live daemon) and store the result")
    r.add_argument("profile", type=Path, metavar="PROFILE.toml", help="the probe's profile (its serial is the key)")
    r.add_argument("--criteria", type=Path, metavar="FILE", help="criteria/procedure TOML merged over the defaults")
    r.add_argument("--insulation-MOhm", type=float, dest="insulation_MOhm", metavar="R",
                   help="megohmmeter reading, heater and thermocouples to sheath (asked for when not given)")
    r.add_argument("--notes", default="", help="free text kept with the qualification")
    r.add_argument("--html", type=Path, metavar="FILE", help="write the HTML report here")
    r.add_argument("--pdf", type=Path, metavar="FILE", help="write the PDF report here")
    r.add_argument("--db", type=Path, metavar="PATH", help="database (default: the daemon's)")
    r.add_argument("--no-save", action="store_true", help="do not store the result")
    r.add_argument("--json", action="store_true", help="print the result as JSON")
    r.add_argument("--quiet", action="store_true", help="no progress lines")
    sim = r.add_argument_group("simulation (in process, faster than real time)")
    sim.add_argument("--simulate", action="store_true", help="qualify a simulated unit built from the profile")
    sim.add_argument("--sim-fault", action="append", default=[], metavar="NAME",
                     help=f"simulator fault, repeatable ({', '.join(FAULT_NAMES)})")
    sim.add_argument("--sim-seed", type=int, default=1, metavar="N")
    sim.add_argument("--sim-noise-mK", type=float, default=10.0, metavar="X", help="channel noise, mK RMS")
    sim.add_argument("--sim-heat-capacity", type=float, metavar="MJ_PER_M3K",
                     help="the unit's real heat capacity (default: the profile's)")
    sim.add_argument("--sim-contact", type=float, default=3000.0, metavar="W_PER_M2K",
                     help="contact conductance in the media")
    sim.add_argument("--sim-interval", type=float, metavar="S",
                     help="sample spacing of the simulation (1.6 s is about three times faster than 1 s)")
    sim.add_argument("--sim-radial-only", action="store_true",
                     help="radial conduction only (no axial loss; faster, unrealistic for short probes)")
    r.set_defaults(func=run)

    ls = qs.add_parser("list", help="stored qualifications")
    ls.add_argument("--serial", help="one probe serial only")
    ls.add_argument("--db", type=Path, metavar="PATH")
    ls.add_argument("--json", action="store_true")
    ls.set_defaults(func=run)

    sh = qs.add_parser("show", help="one stored qualification, criterion by criterion")
    sh.add_argument("id", type=int)
    sh.add_argument("--db", type=Path, metavar="PATH")
    sh.add_argument("--json", action="store_true")
    sh.set_defaults(func=run)

    rp = qs.add_parser("report", help="write the report of a stored qualification")
    rp.add_argument("id", type=int)
    rp.add_argument("--html", type=Path, metavar="FILE")
    rp.add_argument("--pdf", type=Path, metavar="FILE")
    rp.add_argument("--db", type=Path, metavar="PATH")
    rp.set_defaults(func=run)

    cr = qs.add_parser("criteria", help="print the default criteria and procedure (TOML) to copy and edit")
    cr.set_defaults(func=run)


def _err(msg: str) -> int:
    print(f"linerig {CMD}: error: {msg}", file=sys.stderr)
    return EXIT_ERROR


def _print_results(res: dict[str, Any], qual_id: int | None = None) -> None:
    p = res["probe"]
    head = f"qualification{'' if qual_id is None else f' {qual_id}'} of {p['name']} ({p['serial'] or 'no serial'})"
    print(head + (" — simulated rig" if res.get("simulated") else ""))
    width = max(len(c["id"] + (f" [{c['item']}]" if c["item"] else "")) for c in res["criteria"])
    for c in res["criteria"]:
        name = c["id"] + (f" [{c['item']}]" if c["item"] else "")
        status = c["status"].upper().replace("_", " ")
        print(f"  {status:<14} {name:<{width}}  {c['detail']}")
    failed = sorted({c["id"] for c in res["criteria"] if c["status"] in ("fail", "not_measured")
                     and c.get("required", True)})
    cal = res["summary"].get("calibration")
    if cal:
        print(f"probe factor F = {cal['factor']:.4f} ± {2 * cal['factor_u']:.4f} (± U, k = 2)")
    print("QUALIFIED" if res["passed"] else f"NOT QUALIFIED: {', '.join(failed)}")


class _PromptOperator:
    """Asks at the terminal; a reading given on the command line is used without asking."""

    def __init__(self, given: dict[str, float | None], interactive: bool) -> None:
        self.given = given
        self.interactive = interactive

    def ask_number(self, request: AskNumber) -> float | None:
        if request.key in self.given:
            return self.given[request.key]
        if not self.interactive:
            print(f"linerig {CMD}: {request.prompt}: not given (stdin is not a terminal); recorded as not measured",
                  file=sys.stderr)
            return None
        while True:
            raw = input(f"{request.prompt} [{request.unit}, empty = not measured]: ").strip()
            if not raw:
                return None
            try:
                return float(raw)
            except ValueError:
                print(f"  {raw!r} is not a number", file=sys.stderr)

    def instruct(self, text: str) -> None:
        if self.interactive:
            input(f"{text}\n  press Enter when done ")
        else:
            raise RuntimeError(f"the live procedure needs an operator at a terminal: {text}")


class _AsyncPromptOperator:
    """The same prompts, read from stdin through the event loop so the daemon's events keep flowing."""

    def __init__(self, sync: _PromptOperator) -> None:
        self.sync = sync
        self._reader: asyncio.StreamReader | None = None

    async def _line(self, prompt: str) -> str:
        print(prompt, end="", flush=True)
        if self._reader is None:
            loop = asyncio.get_running_loop()
            self._reader = asyncio.StreamReader()
            await loop.connect_read_pipe(lambda: asyncio.StreamReaderProtocol(self._reader), sys.stdin)
        line = await self._reader.readline()
        if not line:
            raise EOFError("stdin closed")
        return line.decode().strip()

    async def ask_number(self, request: AskNumber) -> float | None:
        if request.key in self.sync.given or not self.sync.interactive:
            return self.sync.ask_number(request)
        while True:
            raw = await self._line(f"{request.prompt} [{request.unit}, empty = not measured]: ")
            if not raw:
                return None
            try:
                return float(raw)
            except ValueError:
                print(f"  {raw!r} is not a number", file=sys.stderr)

    async def instruct(self, text: str) -> None:
        if not self.sync.interactive:
            raise RuntimeError(f"the live procedure needs an operator at a terminal: {text}")
        await self._line(f"{text}\n  press Enter when done ")


def _progress(args: argparse.Namespace) -> Any:
    def show(p: Progress) -> None:
        if not args.quiet and not args.json:
            print(p.message, file=sys.stderr, flush=True)
    return show


async def _live(args: argparse.Namespace, profile: Any, config: Any, operator: _PromptOperator) -> Any:
    from linerig.daemon.qualify.analysis import primary_sensor
    from linerig.daemon.qualify.liverig import DaemonQualificationRig
    from linerig.tui.client import Client

    prompts = _AsyncPromptOperator(operator)
    async with Client(args.socket) as client:
        rig = DaemonQualificationRig(client, profile, prompts, primary_sensor(profile, config.procedure.sensor),
                                     max_drift_K_per_min=config.procedure.max_drift_K_per_min,
                                     settle_timeout_s=config.procedure.settle_timeout_s)
        await rig.check()
        return await run_async(profile, config, rig, prompts, _progress(args))


def _run(args: argparse.Namespace) -> int:
    from linerig.daemon.qualify.analysis import QualificationDataError
    from linerig.daemon.qualify.liverig import LiveRigError
    from linerig.tui.client import DaemonError

    problem = _output_problem(args)
    if problem:
        return _err(problem)
    try:
        profile = load_probe_profile(args.profile)
        overrides: dict[str, Any] = {}
        if args.sim_interval:
            overrides["procedure"] = {"sample_interval_s": args.sim_interval}
        config = load_config(args.criteria, overrides or None)
    except (ProbeProfileError, QualificationConfigError) as e:
        return _err(str(e))
    given: dict[str, float | None] = {}
    if args.insulation_MOhm is not None:
        given["insulation_MOhm"] = args.insulation_MOhm
    operator = _PromptOperator(given, sys.stdin.isatty())
    try:
        if args.simulate:
            unknown = [f for f in args.sim_fault if f.partition(":")[0] + (":<channel>" if ":" in f else "")
                       not in FAULT_NAMES]
            if unknown:
                return _err(f"unknown simulator fault {unknown[0]!r}; known: {', '.join(FAULT_NAMES)}")
            setup = SimSetup(seed=args.sim_seed, noise_K_rms=args.sim_noise_mK / 1000.0,
                             faults=tuple(args.sim_fault), axial_loss=not args.sim_radial_only,
                             contact_conductance_W_per_m2K=args.sim_contact,
                             probe_rho_c_MJ_per_m3K=args.sim_heat_capacity, interval_s=args.sim_interval)
            m = run_sync(profile, config, SimulatedQualificationRig(profile, setup), operator, _progress(args))
        else:
            m = asyncio.run(_live(args, profile, config, operator))
    except (QualificationDataError, LiveRigError, DaemonError, RuntimeError, EOFError, ValueError) as e:
        return _err(str(e))
    q: Qualification = judge(profile, config, m, simulated=args.simulate, notes=args.notes)
    res = q.to_json()
    qual_id = None
    if not args.no_save:
        store = open_store(args.db or default_db_path())
        try:
            qual_id = save_qualification(store.db, q)
        finally:
            store.close()
    try:
        paths = write_report(res, args.html, args.pdf, config.text) if (args.html or args.pdf) else []
    except OSError as e:
        kept = (f"; the result is stored as qualification {qual_id} (`linerig qualify report {qual_id}` writes it "
                "again)") if qual_id is not None else ""
        return _err(f"cannot write the report: {e.strerror or e} ({e.filename}){kept}")
    if args.json:
        print(json.dumps({"id": qual_id, "passed": q.passed, "failed": q.failed_ids, "probe_serial": profile.serial,
                          "reports": [str(x) for x in paths], "criteria": res["criteria"],
                          "calibration": res["summary"]["calibration"]}, indent=2))
    else:
        _print_results(res, qual_id)
        for path in paths:
            print(f"report: {path}")
    return 0 if q.passed else EXIT_NOT_QUALIFIED


def _output_problem(args: argparse.Namespace) -> str | None:
    """Where the result and the reports go, checked before a procedure that can take hours on a live rig."""
    for opt, path in (("--html", args.html), ("--pdf", args.pdf)):
        if path is not None and not Path(path).parent.is_dir():
            return f"{opt} {path}: no folder {Path(path).parent}"
    if args.no_save:
        return None
    path = Path(args.db or default_db_path())
    if path.exists():
        try:
            open_db(path).conn.close()
        except SourceError as e:
            return str(e)
    elif args.db is not None and not path.parent.is_dir():
        return f"--db {path}: no folder {path.parent} (give the daemon's database, or an existing folder)"
    return None


def _db(args: argparse.Namespace) -> Any:
    """The database, read-only in spirit: never created, migrated or moved aside by list, show or report."""
    return open_db(Path(args.db or default_db_path()))


def run(args: argparse.Namespace) -> int:
    action = args.qualify_command
    if action == "criteria":
        sys.stdout.write(DEFAULT_CRITERIA_PATH.read_text(encoding="utf-8"))
        return 0
    if action == "run":
        return _run(args)
    try:
        db = _db(args)
    except SourceError as e:
        return _err(str(e))
    stored = "qualifications" in db.table_names()
    try:
        if action == "list":
            rows = list_qualifications(db, args.serial) if stored else []
            if args.json:
                print(json.dumps(rows, indent=2))
            elif not rows:
                print("no qualifications stored")
            for r in rows if not args.json else []:
                verdict = "QUALIFIED" if r["passed"] else "NOT QUALIFIED: " + ", ".join(r["failed"])
                print(f"{r['id']:>4}  {r['created_utc']}  {r['probe_serial']:<16} {verdict}"
                      f"{'  (simulated)' if r['simulated'] else ''}")
            return 0
        if not stored:
            raise QualificationNotFound(f"no qualification {args.id}: {db_path_of(args)} holds none yet")
        row = load_qualification(db, args.id)
        if action == "show":
            if args.json:
                print(json.dumps(row, indent=2))
            else:
                _print_results(row["results"], row["id"])
            return 0
        if not (args.html or args.pdf):
            return _err("give --html FILE and/or --pdf FILE")
        for path in write_report(row["results"], args.html, args.pdf, row["criteria_toml"]):
            print(f"report: {path}")
        return 0
    except QualificationNotFound as e:
        return _err(str(e.args[0]))
    except OSError as e:
        return _err(f"cannot write the report: {e.strerror or e} ({e.filename})")
    finally:
        db.conn.close()


def db_path_of(args: argparse.Namespace) -> Path:
    return Path(args.db or default_db_path())
