"""When the heater came on, from the power column, and the power per metre the run CSV holds.

The rule: the heating plateau is the median of the readings above half the largest; the heater is on in the rows
whose power is at least ``on_fraction`` (default one half) of that plateau. Time zero is the first such row, so its
power is held from t = 0 as the run CSV has it, and the rows before it are the baseline (negative time). Readings
of the heater while off (offsets, noise) are written as 0, up to 5 % of the plateau; a larger one is an error.
One heating per file: a heater that comes on again after going off is an error, never a silent merge.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .errors import LoggerImportError

OFF_LIMIT = 0.05  # off readings above this fraction of the plateau are not offsets: refused, not zeroed
RULE = ("the first row at {f:.0%} or more of the heating plateau, {plateau}, the median of the readings above half "
        "the largest")


@dataclass(frozen=True)
class Heating:
    on: int  # index of the first row with the heater on
    off: int | None  # index of the first row after it with the heater off (None: on to the end)
    plateau: float
    threshold: float
    largest_off: float  # the largest reading of an off row, written as 0

    def held(self, power: np.ndarray) -> np.ndarray:
        """The readings with every off row set to 0."""
        p = np.zeros_like(power, dtype=float)
        end = self.off if self.off is not None else power.shape[0]
        p[self.on:end] = power[self.on:end]
        return p


def find_heating(power: np.ndarray, on_fraction: float, lines: Sequence[int], column: str,
                 name: str) -> Heating:
    """Apply the rule; ``lines`` are the file lines of the rows, ``column`` says where the power came from."""
    p = np.asarray(power, dtype=float)
    top = float(np.max(p)) if p.size else 0.0
    if not top > 0:
        raise LoggerImportError(f"{name}: column {column}: the power is never above 0, so the heater never came "
                                "on (reversed leads give a negative power: check the wiring or the columns)")
    plateau = float(np.median(p[p >= 0.5 * top]))
    threshold = on_fraction * plateau
    on = p >= threshold
    first = int(np.argmax(on))
    if first == 0:
        raise LoggerImportError(f"{name}: line {lines[0]}, column {column}: the heater is on from the first data row, "
                                "so there is no baseline; record the ground's temperature for a while before heating")
    after = np.flatnonzero(~on[first:])
    off = first + int(after[0]) if after.size else None
    if off is not None and np.any(on[off:]):
        again = off + int(np.argmax(on[off:]))
        raise LoggerImportError(
            f"{name}: line {lines[again]}, column {column}: the heater is on again after going off at line "
            f"{lines[off]}; import one heating at a time (split the file), or lower [heater] on_fraction if the "
            "power only dipped")
    off_rows = np.ones(p.shape[0], dtype=bool)
    off_rows[first:off] = False
    largest_off = 0.0
    if off_rows.any():
        k = int(np.argmax(np.where(off_rows, np.abs(p), -1.0)))
        largest_off = float(abs(p[k]))
        if largest_off > OFF_LIMIT * plateau:
            raise LoggerImportError(
                f"{name}: line {lines[k]}, column {column}: the heater reads {p[k]:.4g} with the heater taken as off, "
                f"more than {OFF_LIMIT:.0%} of its plateau ({plateau:.4g}): a pre-heat, a heater not quite off, or "
                "a second power level cannot be written as off; lower [heater] on_fraction if these rows are heating, "
                "or cut them from the file")
    return Heating(first, off, plateau, threshold, largest_off)


def per_metre(power_W: np.ndarray, length_mm: float) -> np.ndarray:
    return np.asarray(power_W, dtype=float) / (length_mm * 1e-3)
