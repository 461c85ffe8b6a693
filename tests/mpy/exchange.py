"""A scripted protocol exchange with the controller core: plain Python that runs on
MicroPython and on CPython alike, so both logs can be compared line by line.

``run(core, script)`` takes a dict ``{"settings": {...}, "steps": [...]}``; each step is
``[kind, t_us, arg]``: ``line`` (a host body, framed here), ``raw`` (bytes as latin-1
text, sent as they are), ``tick``, ``estop`` (input 1/0), ``limit`` (axis or 0),
``home`` (axis 0-based whose home switch closes at or below count ``arg[1]``), ``fault``
([code, axis]). It returns the log: every line the controller sent as
``"<t_us> <line>"``, and after every ``tick`` ``"<t_us> @ <c1>,<c2>,..."`` (the
setpoints the hardware got).
"""


class ScriptedHardware:
    def __init__(self, n):
        self.on = False
        self.counts = [0] * n
        self.outputs = 0
        self.estop = False
        self.limit = 0
        self.home_below = [None] * n

    def enable(self, on):
        self.on = on

    def write_counts(self, counts):
        self.counts = list(counts)

    def write_outputs(self, bits):
        self.outputs = bits

    def estop_active(self):
        return self.estop

    def limit_active(self):
        return self.limit

    def home_active(self, i):
        at = self.home_below[i]
        return at is not None and self.counts[i] <= at

    def reference(self, i, counts):
        self.counts[i] = counts

    def drive_fault(self):
        return None


def run(core, script):
    st = script["settings"]
    settings = core.Settings(st["axes"], queue=st.get("queue", 8), name=st.get("name", "bench"),
                             home_ms=st.get("home_ms", 0))
    hw = ScriptedHardware(settings.n)
    ctrl = core.Controller(settings, hw, 0)
    out = []
    for step in script["steps"]:
        kind, t = step[0], step[1]
        if kind == "line":
            ctrl.feed(core.frame(step[2]), t)
        elif kind == "raw":
            ctrl.feed(step[2].encode("latin-1") if hasattr(step[2], "encode") else step[2], t)
        elif kind == "tick":
            ctrl.tick(t)
        elif kind == "estop":
            hw.estop = bool(step[2])
            ctrl.tick(t)
        elif kind == "limit":
            hw.limit = step[2]
            ctrl.tick(t)
        elif kind == "home":
            hw.home_below[step[2][0]] = step[2][1]
        elif kind == "fault":
            ctrl.tick(t)
            ctrl.fault(step[2][0], step[2][1])
        for _, line in ctrl.take():
            out.append("%d %s" % (t, line.decode().rstrip("\n")))
        if kind == "tick":
            out.append("%d @ %s" % (t, ",".join([str(c) for c in hw.counts])))
    return out
