"""A run's samples for a client, built in a process of its own and streamed.

A day-long run is a reply of tens of MB. Built in the daemon, even in a thread, it held the event loop that keeps
the heater's lease and limits: numpy and the JSON encoder hold the interpreter lock for long stretches, and 2–4
readers faulted a heating run. Here a child process reads the database (read-only) and writes the JSON; the
daemon only passes its bytes on, a piece at a time, to a client that may be slow (``api.Streamed``).

Run as ``python -m linerig.daemon.samples_reply DB RUN_ID``: the samples object on stdout, exit 3 if there is no
such run.
"""

from __future__ import annotations

import asyncio
import math
import sqlite3
import sys
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Any

from linerig.daemon.jsonlines import PIECE_BYTES, encode, iter_encode

NO_SUCH_RUN = 3


def run_samples_json(db_path: Path, run_id: int) -> dict[str, Any]:
    """A run's samples: ``time_s`` from heater on, ``device_s``, ``q_W_per_m`` held from each sample on (the
    reduction's convention), ``temps_C`` by sensor (None where a channel had no reading), ``phase``. Rounded to
    what the instruments resolve. Raises KeyError when there is no such run."""
    import sqlite_utils

    from linerig.daemon.store import queries

    con = sqlite3.connect(f"file:{db_path}?mode=ro", uri=True)
    try:
        con.execute("PRAGMA busy_timeout=2000")
        rdb = sqlite_utils.Database(con)
        arr = queries.run_arrays(rdb, run_id)
        row = next(iter(rdb.query("SELECT heat_start_device_s FROM runs WHERE id = ?", [run_id])))
    finally:
        con.close()

    def listed(a: Any, nd: int) -> list[float | None]:
        return [None if not math.isfinite(v) else round(float(v), nd) for v in a]

    t0 = row["heat_start_device_s"] or 0.0
    return {"time_s": listed(arr["time_s"], 4), "device_s": listed(arr["time_s"] + t0, 4),
            "q_W_per_m": listed(arr["q_W_per_m"], 5),
            "temps_C": {n: listed(v, 5) for n, v in arr["temps_C"].items()}, "phase": arr["phase"]}


async def samples_pieces(db_path: Path, run_id: int, envelope: dict[str, Any]) -> AsyncIterator[bytes]:
    """The reply line ``{...envelope, "run_id", "samples": {...}}`` in pieces, the samples from a child process."""
    proc = await asyncio.create_subprocess_exec(sys.executable, "-m", "linerig.daemon.samples_reply", str(db_path),
                                                str(run_id), stdout=asyncio.subprocess.PIPE,
                                                stderr=asyncio.subprocess.PIPE)
    assert proc.stdout is not None and proc.stderr is not None
    try:
        yield encode({**envelope, "run_id": run_id})[:-2] + b',"samples":'  # the envelope without its "}\n"
        while chunk := await proc.stdout.read(PIECE_BYTES):
            yield chunk
        if await proc.wait() != 0:
            why = (await proc.stderr.read()).decode(errors="replace").strip().splitlines()[-1:]
            raise ConnectionError(f"the samples of run {run_id} could not be read: {' '.join(why)}")
        yield b"}\n"
    finally:
        if proc.returncode is None:  # the client went away: stop building what nobody will read
            proc.kill()
            await proc.wait()


def main(argv: list[str] | None = None) -> int:
    db, run = (argv if argv is not None else sys.argv[1:])[:2]
    try:
        samples = run_samples_json(Path(db), int(run))
    except KeyError:
        print(f"no run {run}", file=sys.stderr)
        return NO_SUCH_RUN
    out = sys.stdout.buffer
    for piece in iter_encode(samples, newline=False):
        out.write(piece)
    out.flush()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
