"""Assertion helpers that mean the same under CPython's pytest and MicroPython's runner (mpyrun.py).

The firmware's shared test cases (cases_*.py) may use only these and plain ``assert``: pytest, hypothesis and
numpy do not exist on MicroPython, and a case written twice would drift.
"""


def close(a: float, b: float, rel: float = 1e-6, abs_: float = 0.0) -> bool:
    """|a − b| within rel·|b| or abs_, as pytest.approx judges it."""
    return abs(a - b) <= max(rel * abs(b), abs_)


def raises(exc: type, fn: object, *args: object) -> bool:
    """True when fn(*args) raises exc; any other outcome is False (or the other exception propagates)."""
    try:
        fn(*args)  # type: ignore[operator]
    except exc:
        return True
    return False


def pairwise(xs: list) -> list:
    return [(xs[i], xs[i + 1]) for i in range(len(xs) - 1)]


class patched:  # noqa: N801 (used like a function, as contextlib's helpers are)
    """Set ``obj.name`` for the body of a ``with`` and restore it after, even when the body fails."""

    def __init__(self, obj: object, name: str, value: object) -> None:
        self.obj, self.name, self.value = obj, name, value
        self.had = name in dir(obj)
        self.old = getattr(obj, name, None)

    def __enter__(self) -> object:
        setattr(self.obj, self.name, self.value)
        return self.value

    def __exit__(self, *exc: object) -> bool:
        if self.had:
            setattr(self.obj, self.name, self.old)
        else:
            delattr(self.obj, self.name)
        return False


def cases(module: object) -> list:
    """The module's test functions, in source order where the interpreter keeps it, by name otherwise."""
    names = sorted(n for n in dir(module) if n.startswith("test_"))
    return [(n, getattr(module, n)) for n in names]
