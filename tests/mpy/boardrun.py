"""The board's own files (main.py's loop, hw_io.py, hw_servo.py, hw_stepdir.py, a
config.py) run against recorded pins, a scripted host and a clock whose microsecond
ticks wrap, as MicroPython's do. Plain Python for MicroPython and CPython alike.

``run(config, core, hw_io, main)`` returns a log: what the host received, and
the pins' state at a few moments.
"""

TICKS_PERIOD = 1 << 30     # MicroPython's ticks_us() wraps here on most ports


class Pin:
    IN = 0
    OUT = 1
    PULL_UP = 2

    def __init__(self, number, mode=None, pull=None, value=None):
        self.number = number
        self.mode = mode
        self.level = 0 if value is None else value
        self.rises = 0
        Machine.pins[number] = self

    def value(self, v=None):
        if v is None:
            if self.mode == Pin.IN:
                return Machine.inputs.get(self.number, 0)
            return self.level
        if v and not self.level:
            self.rises += 1
        self.level = v


class PWM:
    def __init__(self, pin):
        self.pin = pin
        self.hz = None
        self.ns = None
        Machine.pwms[pin.number] = self

    def freq(self, hz):
        self.hz = hz

    def duty_ns(self, ns):
        self.ns = ns


class Machine:
    """Stands in for MicroPython's ``machine`` module: pins that record."""
    Pin = Pin
    PWM = PWM
    pins = {}
    pwms = {}
    inputs = {}


class Clock:
    """``time.ticks_us``/``ticks_diff`` of a board, starting just before the wrap;
    every reading advances ``step_us``."""

    def __init__(self, start, step_us):
        self.t = start
        self.step = step_us
        self.elapsed = 0

    def ticks_us(self):
        self.t = (self.t + self.step) % TICKS_PERIOD
        self.elapsed += self.step
        return self.t

    def ticks_diff(self, a, b):
        half = TICKS_PERIOD // 2
        return ((a - b + half) % TICKS_PERIOD) - half


class Host:
    """The host side of the link: lines sent at given elapsed times, lines received,
    and the pins looked at (``look()``) at given elapsed times."""

    def __init__(self, clock, core, script, look_at, look):
        self.clock = clock
        self.core = core
        self.script = list(script)     # (elapsed_us, body)
        self.look_at = list(look_at)
        self.look = look
        self.got = []

    def read(self):
        if self.look_at and self.clock.elapsed >= self.look_at[0]:
            self.got.append("%d %s" % (self.look_at.pop(0) // 1000, self.look()))
        if self.script and self.clock.elapsed >= self.script[0][0]:
            return self.core.frame(self.script.pop(0)[1])
        return b""

    def write(self, line):
        self.got.append("%d %s" % (self.clock.elapsed // 1000, line.decode().rstrip("\n")))


def run(config, core, hw_io, main):
    Machine.pins.clear()
    Machine.pwms.clear()
    Machine.inputs.clear()
    board = hw_io.Board(config, Machine, lambda us: None)
    ctrl = core.Controller(main.settings_from_config(config, core), board)
    clock = Clock(TICKS_PERIOD - 1500000, 100)   # the ticks wrap 1.5 s in
    script = [(0, "1 HELLO"), (0, "2 ENABLE"), (0, "3 HOME")]
    seq = 4
    for k in range(1, 20):                        # heartbeats every 200 ms, to 3.8 s
        if k == 17:
            script.append((k * 200000, "%d MOVE 200 2250 0 1000 0" % seq))
        else:
            script.append((k * 200000, "%d STATE" % seq))
        seq += 1
    servo_pin = config.AXES[0]["pin"]
    quill = config.AXES[2]

    def look():
        return "mode=%s servo_ns=%s steps=%d enable_pin=%d" % (
            ctrl.mode(), Machine.pwms[servo_pin].ns, Machine.pins[quill["step_pin"]].rises,
            Machine.pins[quill["enable_pin"]].level)

    # then quiet: the watchdog fires 1000 ms after the last line (at 3.8 s)
    host = Host(clock, core, script, [1000000, 3700000, 4700000, 4900000], look)
    main.serve(ctrl, host, clock, config.TICK_US, rounds=50000)    # 5.0 s of 100 us
    return host.got
