"""Hardware layer, hobby PWM position servos: one pulse every 20 ms whose width sets
the angle. Counts map linearly to a pulse width, clamped to the axis's safe pulse range.

MicroPython on the board (``machine.PWM``); the pulse arithmetic is plain Python and is
tested on CPython too. A hobby servo has no position feedback: it goes to the commanded
pulse at its own speed, also the first time the drives are switched on.
"""

SERVO_HZ = 50


def pulse_ns_from_counts(counts, axis):
    """The pulse width in ns for ``counts`` on ``axis`` (a config dict with
    ``pulse_at_zero_us``, ``us_per_count``, ``pulse_min_us``, ``pulse_max_us``),
    clamped to the axis's pulse range."""
    us = axis["pulse_at_zero_us"] + counts * axis["us_per_count"]
    lo = axis["pulse_min_us"]
    hi = axis["pulse_max_us"]
    if us < lo:
        us = lo
    if us > hi:
        us = hi
    return int(us * 1000 + 0.5)


class ServoAxis:
    """One servo on one PWM pin: no pulses while the drives are off."""

    def __init__(self, axis, machine):
        self.axis = axis
        self.pwm = machine.PWM(machine.Pin(axis["pin"]))
        self.pwm.freq(SERVO_HZ)
        self.pwm.duty_ns(0)
        self.on = False

    def enable(self, on):
        self.on = on
        if not on:
            self.pwm.duty_ns(0)

    def write(self, counts):
        if self.on:
            self.pwm.duty_ns(pulse_ns_from_counts(counts, self.axis))

    def lagging(self):
        return False
