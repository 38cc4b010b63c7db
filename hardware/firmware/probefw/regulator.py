"""Constant heater power from a sagging battery by PWM duty.

A resistive heater switched at duty D from a supply at V_on draws mean current
Ī = D·V_on/R, so its mean power is P = V_on·Ī and R = D·V_on/Ī: both follow from the
supply voltage and the *mean* current, which is what an averaging current monitor gives.
Each control cycle re-solves D = P*·R/V_on² from the fresh measurements (feed-forward),
so the power tracks the battery as it sags, with a small bounded integral trim for what
the model leaves out (switch drop, lead resistance). RMS values are reported so the host's
P = V·I and R = V/I hold for PWM exactly as for a DC supply (PROTOCOL.md §4.3).
"""

from .limits import POWER_MAX_W


class PowerRegulator:
    def __init__(
        self,
        duty_max: float = 0.98,
        duty_probe: float = 0.02,
        trim_gain: float = 0.5,
        trim_limit: float = 0.15,
        switch_ohm: float = 0.0,
    ) -> None:
        self.duty_max = duty_max
        self.duty_probe = duty_probe  # first duty after arming: enough to measure R, too little to harm a short
        self.trim_gain = trim_gain
        self.trim_limit = trim_limit
        self.switch_ohm = switch_ohm
        self.target_W = 0.0
        self.trim = 0.0
        self.duty = 0.0
        self.saturated = False
        self.power_W = 0.0
        self.resistance_ohm = 0.0
        self.on_current_A = 0.0
        self.v_rms = 0.0
        self.i_rms = 0.0

    def start(self, target_W: float) -> float:
        """Arm at a new target; returns the duty to apply now."""
        target_W = min(float(target_W), POWER_MAX_W)
        if self.duty <= 0.0:
            self.trim = 0.0
            self.duty = min(self.duty_probe, self.duty_max)
        self.target_W = target_W
        return self.duty

    def stop(self) -> float:
        self.target_W = 0.0
        self.duty = 0.0
        self.trim = 0.0
        self.saturated = False
        return 0.0

    def measure(self, supply_V: float, mean_A: float, duty: float) -> None:
        """Digest one measurement taken while ``duty`` was applied."""
        if duty <= 0.0 or mean_A <= 0.0:
            self.power_W = 0.0
            self.on_current_A = 0.0
            self.v_rms = 0.0
            self.i_rms = 0.0
            return
        i_on = mean_A / duty
        v_on = supply_V - i_on * self.switch_ohm
        self.on_current_A = i_on
        self.resistance_ohm = v_on / i_on
        self.power_W = v_on * mean_A
        root = duty**0.5
        self.v_rms = v_on * root
        self.i_rms = mean_A / root

    def update(self, supply_V: float, mean_A: float, duty: float) -> float:
        """Measure, then return the duty for the next cycle."""
        self.measure(supply_V, mean_A, duty)
        if self.target_W <= 0.0:
            return self.stop()
        if self.power_W <= 0.0 or self.resistance_ohm <= 0.0:
            return self.duty  # nothing measured yet (or an open heater: the limits decide)
        err = (self.target_W - self.power_W) / self.target_W
        if abs(err) < 0.2:  # integrate only near the target: far from it (the probe pulse) feed-forward rules
            self.trim = max(-self.trim_limit, min(self.trim_limit, self.trim + self.trim_gain * err))
        v_on = supply_V - self.on_current_A * self.switch_ohm
        wanted = self.target_W * self.resistance_ohm / (v_on * v_on) * (1.0 + self.trim)
        self.saturated = wanted > self.duty_max
        if self.saturated:
            self.trim = min(self.trim, 0.0)  # no wind-up while the battery cannot deliver
        self.duty = max(0.0, min(self.duty_max, wanted))
        return self.duty
