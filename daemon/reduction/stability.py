"""The "heating can stop" rule, one implementation for the live verdict and for the offline ``stable_at_s``.

Rule: at time t the estimate is stable when (1) over the latest stretch of ln t (all estimates since
t·e^−0.7, the last half of the elapsed time) it has stayed within ``tolerance`` (relative, default 1 %) of its
current value and ended within half that of where the stretch began (a steady creep is not steadiness),
(2) valid estimates reach back, without a gap, to the start of that stretch, (3) its statistical standard
uncertainty is under ``target_rel_u`` (the part heating longer can still improve; power and calibration terms
cannot), and (4) the window is not flagged short and the residuals show no trend. Once stable, ``stable_at_s``
stays latched.
The tolerance over a stretch echoes the slope-stability rule of Manohar et al. (2000), J. Test. Eval.
28(5):345–351 (three consecutive slopes within 2.5 %); the exact numbers here are common practice, no source.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, field

STRETCH_LN = 0.7
BLOCKING_FLAGS = frozenset({"window_short", "residual_trend"})


@dataclass
class StabilityTracker:
    tolerance: float = 0.01
    target_rel_u: float = 0.02
    stretch_ln: float = STRETCH_LN
    stable_at_s: float | None = None
    _first_t: float | None = None
    _max: deque[tuple[float, float]] = field(default_factory=deque)
    _min: deque[tuple[float, float]] = field(default_factory=deque)
    _all: deque[tuple[float, float]] = field(default_factory=deque)

    def reset(self) -> None:
        """Forget the history (no valid estimate at this sample); a latched ``stable_at_s`` stays."""
        self._first_t = None
        self._max.clear()
        self._min.clear()
        self._all.clear()

    def update(self, t_s: float, k: float, rel_u_stat: float,
               flags: tuple[str, ...] | list[str] = ()) -> bool:
        """Feed one estimate; True when the rule holds now. Estimates must come in increasing t."""
        if self._first_t is None:
            self._first_t = t_s
        while self._max and self._max[-1][1] <= k:
            self._max.pop()
        self._max.append((t_s, k))
        while self._min and self._min[-1][1] >= k:
            self._min.pop()
        self._min.append((t_s, k))
        t_from = t_s * math.exp(-self.stretch_ln)
        while self._max[0][0] < t_from:
            self._max.popleft()
        while self._min[0][0] < t_from:
            self._min.popleft()
        self._all.append((t_s, k))
        while self._all[0][0] < t_from:
            self._all.popleft()
        covered = self._first_t <= t_from
        moved = max(self._max[0][1] - k, k - self._min[0][1]) / abs(k) if k else math.inf
        # a steady creep is not steadiness: across the stretch the estimate may wander but not travel
        travelled = abs(k - self._all[0][1]) / abs(k) if k else math.inf
        ok = (covered and moved <= self.tolerance and travelled <= self.tolerance / 2
              and rel_u_stat <= self.target_rel_u
              and not (BLOCKING_FLAGS & set(flags)))
        if ok and self.stable_at_s is None:
            self.stable_at_s = t_s
        return ok
