"""Hardware layer, step/direction drivers: at every tick the axis steps from where it
is to the interpolated setpoint, one pulse per count. More steps than
``max_steps_per_tick`` in one tick means the motor cannot follow (a FOLLOWING fault).

MicroPython on the board (``machine.Pin``); :class:`StepCounter` is plain Python and is
tested on CPython too. Set the arm file's ``counts_per_unit`` to the driver's steps per
degree (per mm), so one count is one (micro)step.
"""


class StepCounter:
    """Where a step/direction axis is, in steps, and the pulses a new setpoint needs."""

    def __init__(self, max_steps_per_tick):
        self.at = 0
        self.max_steps = max_steps_per_tick
        self.lag = False

    def plan(self, target):
        """(direction 1/-1/0, pulses) for this tick toward ``target``, at most
        ``max_steps`` pulses; ``lag`` tells whether the setpoint was out of reach."""
        delta = target - self.at
        if delta == 0:
            return 0, 0
        direction = 1 if delta > 0 else -1
        n = delta * direction
        self.lag = n > self.max_steps
        if self.lag:
            n = self.max_steps
        self.at += direction * n
        return direction, n


class StepDirAxis:
    """One step/direction driver: step, dir and (optional, active low) enable pins."""

    def __init__(self, axis, machine, sleep_us):
        Pin = machine.Pin
        self.axis = axis
        self.step = Pin(axis["step_pin"], Pin.OUT, value=0)
        self.dir = Pin(axis["dir_pin"], Pin.OUT, value=0)
        self.en = None
        if axis.get("enable_pin") is not None:
            self.en = Pin(axis["enable_pin"], Pin.OUT, value=1)   # active low: off
        self.counter = StepCounter(axis.get("max_steps_per_tick", 20))
        self.sleep_us = sleep_us
        self.invert = axis.get("dir_invert", False)
        self.on = False

    def enable(self, on):
        self.on = on
        if self.en is not None:
            self.en.value(0 if on else 1)

    def set_position(self, counts):
        """After homing the axis stands at ``counts`` (no pulses)."""
        self.counter.at = counts

    def write(self, counts):
        if not self.on:
            self.counter.at = counts   # moved by hand while off: nothing to catch up
            return
        direction, n = self.counter.plan(counts)
        if n == 0:
            return
        self.dir.value(1 if (direction > 0) != self.invert else 0)
        step, sleep_us = self.step, self.sleep_us
        for _ in range(n):
            step.value(1)
            sleep_us(2)
            step.value(0)
            sleep_us(2)

    def lagging(self):
        return self.counter.lag
