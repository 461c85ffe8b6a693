"""The board: the hardware layer the core drives (see core.py for its methods), built
from config.py. Axes are hobby servos (hw_servo.py) or step/direction drivers
(hw_stepdir.py); inputs are the e-stop, and per axis an optional limit switch and home
switch; up to 8 digital outputs; an optional pin that switches a drive-supply relay.

Inputs are wired as normally-closed contacts to GND with the pin's pull-up on, so a
pressed button, an opened switch or a broken wire all read 1, "active" (fail-safe).
Reading them here is NOT a safety function: the e-stop must also break the drives'
supply in hardware, and safeguarding per ISO 10218 / ISO 13849 comes first.
"""


class Board:
    def __init__(self, config, machine, sleep_us):
        from hw_servo import ServoAxis
        from hw_stepdir import StepDirAxis

        Pin = machine.Pin
        self.axes = []
        self.limits = []
        self.homes = []
        for ax in config.AXES:
            if ax["kind"] == "servo":
                self.axes.append(ServoAxis(ax, machine))
            elif ax["kind"] == "stepdir":
                self.axes.append(StepDirAxis(ax, machine, sleep_us))
            else:
                raise ValueError("axis %s: kind must be servo or stepdir" % ax["name"])
            self.limits.append(_input(Pin, ax.get("limit_pin")))
            self.homes.append(_input(Pin, ax.get("home_pin")))
        self.estop = _input(Pin, config.ESTOP_PIN)
        if self.estop is None:
            raise ValueError("ESTOP_PIN must be set")
        self.supply = None
        if getattr(config, "DRIVE_SUPPLY_PIN", None) is not None:
            self.supply = Pin(config.DRIVE_SUPPLY_PIN, Pin.OUT, value=0)
        self.outs = [Pin(p, Pin.OUT, value=0) for p in config.OUTPUT_PINS]

    # -- the core's hardware interface --------------------------------------------------
    def enable(self, on):
        if self.supply is not None:
            self.supply.value(1 if on else 0)
        for a in self.axes:
            a.enable(on)

    def write_counts(self, counts):
        for i in range(len(self.axes)):
            self.axes[i].write(counts[i])

    def write_outputs(self, bits):
        for i in range(len(self.outs)):
            self.outs[i].value((bits >> i) & 1)

    def estop_active(self):
        return self.estop.value() == 1

    def limit_active(self):
        for i in range(len(self.limits)):
            pin = self.limits[i]
            if pin is not None and pin.value() == 1:
                return i + 1
        return 0

    def home_active(self, i):
        pin = self.homes[i]
        return pin is not None and pin.value() == 1

    def reference(self, i, counts):
        a = self.axes[i]
        if hasattr(a, "set_position"):
            a.set_position(counts)

    def drive_fault(self):
        for i in range(len(self.axes)):
            if self.axes[i].lagging():
                return ("FOLLOWING", i + 1)
        return None


def _input(Pin, number):
    if number is None:
        return None
    return Pin(number, Pin.IN, Pin.PULL_UP)
