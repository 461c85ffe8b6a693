"""benchjog controller firmware: the board's entry. MicroPython runs ``main.py`` after
boot; it reads ``config.py``, builds the board's hardware layer (``hw_io.py``) and runs
the controller core (``core.py``) on the USB serial link or a UART, one tick every
``TICK_US`` microseconds.

ctrl+c on the USB link (``mpremote`` sends it too) ends the loop and switches the drives
off, so the files can be replaced. The software e-stop input is NOT a safety function:
wire the e-stop contact in series with the drives' supply as well.
"""


def settings_from_config(config, core):
    """The core's settings from the user's config module."""
    axes = []
    for ax in config.AXES:
        axes.append({
            "min_counts": ax["min_counts"], "max_counts": ax["max_counts"],
            "home_switch": ax.get("home_pin") is not None,
            "home_dir": ax.get("home_dir", -1), "home_speed": ax.get("home_speed", 1000),
            "home_at": ax.get("home_at", 0),
            "home_travel": ax.get("home_travel", ax["max_counts"] - ax["min_counts"]),
        })
    return core.Settings(axes, queue=config.QUEUE, name=config.NAME, home_ms=config.HOME_MS)


class UsbLink:
    """The board's USB serial port (MicroPython's stdin/stdout), raw bytes."""

    def __init__(self, sys, select):
        self.rx = sys.stdin.buffer
        self.tx = sys.stdout.buffer
        self.poll = select.poll()
        self.poll.register(sys.stdin, select.POLLIN)

    def read(self):
        data = b""
        while len(data) < 64 and self.poll.poll(0):
            data += self.rx.read(1)
        return data

    def write(self, line):
        self.tx.write(line)


class UartLink:
    def __init__(self, machine, link):
        self.uart = machine.UART(link["id"], baudrate=link.get("baud", 115200),
                                 tx=machine.Pin(link["tx"]), rx=machine.Pin(link["rx"]))

    def read(self):
        n = self.uart.any()
        return self.uart.read(n) if n else b""

    def write(self, line):
        self.uart.write(line)


def serve(ctrl, link, clock, tick_us, rounds=None):
    """The board's loop: bytes from ``link`` to the controller, a tick every ``tick_us``,
    the controller's lines back to ``link``. ``clock`` is MicroPython's ``time`` (its
    ``ticks_us`` wraps; ``ticks_diff`` measures across the wrap), from which a
    microsecond count that never wraps is kept. ``rounds``: stop after that many
    passes (tests); None runs for ever."""
    now = 0
    last = clock.ticks_us()
    next_tick = 0
    while rounds is None or rounds > 0:
        if rounds is not None:
            rounds -= 1
        t = clock.ticks_us()
        now += clock.ticks_diff(t, last)
        last = t
        data = link.read()
        if data:
            ctrl.feed(data, now)
        if now >= next_tick:
            ctrl.tick(now)
            next_tick += tick_us
            if next_tick <= now:            # fell behind: no burst of catch-up ticks
                next_tick = now + tick_us
        for _, line in ctrl.take():
            link.write(line)
    return now


def run():
    import select
    import sys
    import time

    import machine

    import config
    import core
    from hw_io import Board

    board = Board(config, machine, time.sleep_us)
    ctrl = core.Controller(settings_from_config(config, core), board)
    link_cfg = getattr(config, "LINK", {"kind": "usb"})
    if link_cfg["kind"] == "uart":
        link = UartLink(machine, link_cfg)
    else:
        link = UsbLink(sys, select)
    try:
        serve(ctrl, link, time, config.TICK_US)
    finally:
        board.enable(False)


if __name__ == "__main__":
    run()
