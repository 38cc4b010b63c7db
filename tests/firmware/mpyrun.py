"""A small test runner for MicroPython, where pytest does not run: ``micropython mpyrun.py cases_lease ...``.

Puts the firmware (hardware/firmware) and this folder on the path, imports each named module, runs every
``test_*`` function in it, prints one line per test and a traceback for each failure, and exits 1 if any
failed (2 if a module would not import). tests/test_firmware_*.py run it as a subprocess, one pytest test per
module, so a failure under either interpreter fails CI.
"""

import sys

HERE = sys.argv[0].rsplit("/", 1)[0] if "/" in sys.argv[0] else "."
sys.path.insert(0, HERE)
sys.path.insert(0, HERE + "/../../hardware/firmware")

from check import cases  # noqa: E402


def _print_exception(exc: BaseException) -> None:
    try:
        sys.print_exception(exc)  # type: ignore[attr-defined]  (MicroPython)
    except AttributeError:
        import traceback

        traceback.print_exception(exc)


def run(names: list) -> int:
    failed = 0
    ran = 0
    for name in names:
        try:
            module = __import__(name)
        except Exception as exc:  # a module that does not even import under this interpreter
            print("IMPORT ERROR", name)
            _print_exception(exc)
            return 2
        for case_name, fn in cases(module):
            ran += 1
            try:
                fn()
            except Exception as exc:  # report every failure, then carry on with the next case
                failed += 1
                print("FAIL", name + "." + case_name)
                _print_exception(exc)
            else:
                print("ok  ", name + "." + case_name)
    print("%d passed, %d failed under %s" % (ran - failed, failed, sys.implementation.name))  # noqa: UP031
    return 1 if failed or not ran else 0


if __name__ == "__main__":
    sys.exit(run(sys.argv[1:]))
