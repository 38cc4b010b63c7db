"""The front-end firmware's heap under MicroPython, through an accelerated hour of heat/recover cycles.

Run: .venv/bin/python bench/firmware_heap_bench.py  (CPython starts the `micropython` command on this same file)

The firmware, the board model and this file are compiled with mpy-cross first, as a board would run them (a
board that compiles source at import needs heap for the compiler). Under MicroPython it runs
probefw.device.FrontEnd on the shared board model (tests/firmware/board.py) in
simulated time: configured for 10 Hz samples, three cycles of 10 min heating (lease renewed every 200 ms, as
the daemon does) and 10 min recovery, the loop stepped every 5 ms as on the board, frames written to a
sink that keeps only a byte count. Every simulated minute it collects garbage and records ``gc.mem_alloc()``:
the firmware's live heap (with the board model's and this script's few objects). The interpreter's heap is
capped at BOARD_HEAP (``-X heapsize``): a MemoryError anywhere in the hour fails the bench, so every transient
of the hour fitted too. The Unix port is 64-bit; an RP2040-class board is 32-bit and its objects are about
half the size, so these figures bound the board's from above.

Pass: no growth (no minute of the last cycle holds more than GROWTH_BYTES over the same minute of the first) and
the hour completed inside the cap. Exit code 1 otherwise.
"""

import sys

BOARD_HEAP_KB = 64  # the aim: fits the heap of a small board (an RP2040 running MicroPython offers ~190 KB)
GROWTH_BYTES = 256
HEAT_MS = 600_000
RECOVER_MS = 600_000
CYCLES = 3
STEP_MS = 5
RENEW_MS = 200


def hour() -> None:
    """The simulated hour (MicroPython); prints one RESULT line."""
    import gc

    gc.collect()
    bare = gc.mem_alloc()
    from board import FakeRig
    from probefw.codec import encode
    from probefw.device import FrontEnd

    sent = [0, 0]  # frames, bytes

    def sink(frame: bytes) -> None:
        sent[0] += 1
        sent[1] += len(frame)

    rig = FakeRig(r_th_K_per_W=2.0)

    def set_duty(duty: float) -> None:  # the board model without its test log of every duty
        rig.duty = duty

    rig.set_duty = set_duty
    fe = FrontEnd(rig, sink, "0000BEEF")
    gc.collect()
    base = gc.mem_alloc()
    fe.start(0, "POWERON")
    seq = [0]

    def command(kind: str, fields: list) -> None:
        fe.receive(encode(kind, seq[0], fields), rig.now_ms)
        seq[0] += 1

    command("I", [])
    command("C", ["10", "T", "T", "1000"])
    per_minute = [0] * ((HEAT_MS + RECOVER_MS) * CYCLES // 60_000)  # allocated up front: it must not grow either
    minute = 0
    for _ in range(CYCLES):
        for phase_ms, heating in ((HEAT_MS, True), (RECOVER_MS, False)):
            if heating:
                command("P", ["10", "1000"])
            else:
                command("O", [])
            end = rig.now_ms + phase_ms
            next_renew = rig.now_ms + RENEW_MS
            while rig.now_ms < end:
                rig.advance(STEP_MS)
                fe.tick(rig.now_ms)
                if heating and rig.now_ms >= next_renew:
                    command("L", ["1000"])
                    next_renew += RENEW_MS
                if rig.now_ms % 60_000 == 0:
                    gc.collect()
                    per_minute[minute] = gc.mem_alloc()
                    minute += 1
    print("RESULT", bare, base, " ".join(str(x) for x in per_minute), sent[0], sent[1], fe.bad_frames)


def _report(out: str) -> int:
    line = next(x for x in out.splitlines() if x.startswith("RESULT"))
    fields = line.split()
    bare, base = int(fields[1]), int(fields[2])
    minutes = [int(x) for x in fields[3:-3]]
    frames, nbytes, bad = int(fields[-3]), int(fields[-2]), int(fields[-1])
    per_cycle = len(minutes) // CYCLES
    first, last = minutes[:per_cycle], minutes[-per_cycle:]
    growth = max(b - a for a, b in zip(first, last, strict=True))  # the same minute of the first and last cycle
    print(f"firmware heap under MicroPython ({BOARD_HEAP_KB} KB heap cap, 64-bit Unix port), one simulated hour:")
    print(f"  {CYCLES} cycles of {HEAT_MS // 60_000} min heating + {RECOVER_MS // 60_000} min recovery, "
          f"10 Hz samples, loop every {STEP_MS} ms")
    print(f"  frames sent {frames} ({nbytes / 1e6:.1f} MB), corrupt host frames {bad}")
    print(f"  live heap, interpreter and this bench only       {bare:7d} B")
    print(f"  live heap with the firmware and board model loaded {base:7d} B  (+{base - bare} B)")
    print(f"  live heap per minute      min {min(minutes):7d} B  max {max(minutes):7d} B  "
          f"(firmware running: +{max(minutes) - base} B at most)")
    print(f"  minute by minute (B)      {' '.join(str(m) for m in minutes)}")
    print(f"  growth, last cycle against the first, minute by minute: {growth:+d} B at most (allowed {GROWTH_BYTES})")
    ok = growth <= GROWTH_BYTES and max(minutes) <= BOARD_HEAP_KB * 1024
    print("  PASS" if ok else "  FAIL")
    return 0 if ok else 1


def main() -> int:
    import subprocess
    import tempfile
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    bin_dir = Path(sys.executable).parent
    sources = sorted((root / "hardware" / "firmware" / "probefw").glob("*.py"))  # (no *-unpacking: mpy-cross
    sources += [root / "tests" / "firmware" / "board.py", Path(__file__).resolve()]  # compiles this file too)
    with tempfile.TemporaryDirectory() as tmp:
        (Path(tmp) / "probefw").mkdir()
        for src in sources:
            rel = src.relative_to(src.parents[1]) if src.parent.name == "probefw" else Path(src.name)
            subprocess.run([str(bin_dir / "mpy-cross"), "-o", str(Path(tmp) / rel.with_suffix(".mpy")), str(src)],
                           check=True)
        code = f"import sys; sys.path[:0] = [{tmp!r}]; import firmware_heap_bench; firmware_heap_bench.hour()"
        done = subprocess.run([str(bin_dir / "micropython"), "-X", f"heapsize={BOARD_HEAP_KB}K", "-c", code],
                              capture_output=True, text=True, cwd=tmp, env={"MICROPYPATH": ""})
    if done.returncode != 0:
        print(f"the hour failed under MicroPython (exit {done.returncode}), {BOARD_HEAP_KB} KB heap:")
        print(done.stdout[-2000:], done.stderr[-2000:])
        return 1
    return _report(done.stdout)


if __name__ == "__main__":
    sys.exit(main())
