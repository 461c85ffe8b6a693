"""Random sequences of host lines, clock ticks, e-stop presses, limit switch hits and
drive faults against the firmware core, each run judged by a checker written here from
PROTOCOL.md alone (it never looks inside the core's state):

- the setpoints never change while the drives are off, or after an e-stop or fault until
  RESET and ENABLE; they never leave the hard range;
- between two ticks an axis moves no further than the fastest accepted segment allows;
- every reply answers the line just sent (its seq, or 0 for a line without one);
- a MOVE is accepted only with the drives on, after a HOME's DONE, inside the hard range;
- a DONE comes only for an accepted MOVE (or HOME), once, in order; none for a segment
  flushed by STOP, DISABLE, an e-stop or a fault;
- ``moves``/``last`` in STATE count exactly the MOVEs answered ``OK`` since HELLO.
"""

from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st

from benchjog.drivers import protocol as P
from benchjog.drivers.firmware import core

LO, HI = -2000, 2000
AXES = [{"min_counts": LO, "max_counts": HI}, {"min_counts": LO, "max_counts": HI}]

counts = st.one_of(st.integers(LO - 50, HI + 50), st.sampled_from([LO - 1, LO, HI, HI + 1]))
host_line = st.one_of(
    st.tuples(st.just("MOVE"), st.integers(1, 400), counts, counts),
    st.sampled_from([("ENABLE",), ("DISABLE",), ("HOME",), ("STOP",), ("STATE",), ("RESET",),
                     ("OUT", "3", "1")]),
)
move = st.tuples(st.just("line"), st.tuples(st.just("MOVE"), st.integers(1, 400), counts, counts))
short_tick = st.tuples(st.just("tick"), st.integers(1, 60_000))
trouble = st.one_of(st.tuples(st.just("estop"), st.booleans()),
                    st.tuples(st.just("limit"), st.integers(0, 2)),
                    st.just(("fault",)))
recover = st.just(("recover",))     # the host's RESET then ENABLE
step = st.one_of(       # motion-heavy: MOVEs, heartbeats and short ticks most of the time
    move, move, move, short_tick, short_tick, short_tick, recover,
    st.tuples(st.just("line"), st.just(("STATE",))),
    st.tuples(st.just("line"), host_line),
    st.tuples(st.just("tick"), st.integers(1, 1_500_000)),
    trouble,
    st.just(("garbage",)),
)


class Hw:
    def __init__(self):
        self.on = False
        self.counts = [0, 0]
        self.estop = False
        self.limit = 0

    def enable(self, on):
        self.on = on

    def write_counts(self, c):
        self.counts = list(c)

    def write_outputs(self, bits):
        pass

    def estop_active(self):
        return self.estop

    def limit_active(self):
        return self.limit

    def home_active(self, i):
        return False

    def reference(self, i, c):
        pass

    def drive_fault(self):
        return None


@settings(max_examples=200, deadline=None)
@given(st.lists(step, min_size=10, max_size=60), st.sampled_from([True, True, True, False]))
def test_random_sequences_keep_the_protocols_promises(steps, ready):
    hw = Hw()
    ctrl = core.Controller(core.Settings(AXES, queue=3, home_ms=50), hw, 0)
    t = 0
    # the checker's own view, from the lines on the wire and the inputs it set
    view = {"on": False, "homed": False, "pending": [], "moves": 0, "last": 0, "fastest": 0.0,
            "end": [0, 0]}   # end: where the last accepted segment ends
    prev = list(hw.counts)

    def read(expect_seq=None):
        replies = []
        for _, line in ctrl.take():
            body = P.parse_line(line)
            assert body is not None, line                      # every line framed right
            msg = P.parse_reply(body)
            assert msg is not None, body
            if isinstance(msg, P.Event):
                if msg.name in ("ESTOP", "FAULT"):
                    view["on"], view["pending"] = False, []
                continue
            if msg.kind == "DONE":
                pending = view["pending"]
                assert pending and pending[0][0] == msg.seq, (body, pending)
                if pending.pop(0)[1] == "HOME":
                    view["homed"] = True
                continue
            replies.append(msg)
        if expect_seq is not None:
            assert len(replies) == 1 and replies[0].seq == expect_seq, replies
        return replies[0] if replies else None

    def send(data, expect_seq):
        ctrl.feed(data, t)
        return read(expect_seq)

    seq = 1
    send(P.frame(f"{seq} HELLO"), seq)
    # most runs start ready to move (enabled, homed), so MOVEs get accepted
    prologue = [("line", ("ENABLE",)), ("line", ("HOME",)), ("tick", 60_000)] if ready else []
    for item in prologue + steps:
        if item[0] == "recover":
            for verb in ("RESET", "ENABLE"):
                seq += 1
                r = send(P.frame(f"{seq} {verb}"), seq)
                if verb == "ENABLE":
                    view["on"] = r.kind == "OK"
            continue
        kind = item[0]
        if kind == "tick":
            was_on = view["on"]
            t += item[1]
            ctrl.tick(t)
            read()
            for a in range(2):
                assert LO <= hw.counts[a] <= HI
                if was_on:
                    assert abs(hw.counts[a] - prev[a]) <= math.ceil(view["fastest"] * item[1]) + 1
                else:
                    assert hw.counts[a] == prev[a], "moved with the drives off or latched"
            prev = list(hw.counts)
            if not view["pending"]:
                view["fastest"] = 0.0
        elif kind == "estop":
            hw.estop = item[1]
        elif kind == "limit":
            hw.limit = item[1]
        elif kind == "fault":
            ctrl.fault("DRIVE", 1)
            read()
        elif kind == "garbage":
            assert send(b"7 MOVE 10 5 5*0000\n", 0).code == "BAD_CRC"
        else:
            line = item[1]
            verb = line[0]
            seq += 1
            if not view["pending"]:
                view["end"] = list(hw.counts)
            r = send(P.frame(" ".join([str(seq), *(str(x) for x in line)])), seq)
            if verb == "MOVE" and r.kind == "OK":
                ms, target = line[1], line[2:]
                assert view["on"] and view["homed"] and all(LO <= c <= HI for c in target)
                view["moves"], view["last"] = view["moves"] + 1, seq
                start = view["end"] if view["pending"] else hw.counts
                speed = max(abs(c - s0) for c, s0 in zip(target, start)) / (ms * 1000.0)
                view["fastest"] = max(view["fastest"], speed)
                view["pending"].append((seq, "MOVE"))
                view["end"] = list(target)
            elif verb == "ENABLE":
                view["on"] = r.kind == "OK"
            elif verb == "DISABLE":
                assert r.kind == "OK"
                view["on"], view["pending"] = False, []
            elif verb == "STOP":
                assert r.kind == "OK"
                view["pending"] = []
            elif verb == "HOME" and r.kind == "OK":
                view["pending"] = [(seq, "HOME")]
                view["homed"] = False
                view["fastest"] = max(abs(c) for c in hw.counts) / 50_000.0
            elif verb == "STATE":
                assert r.kind == "OK"
                assert (r.get("moves"), r.get("last")) == (str(view["moves"]), str(view["last"]))
                queued = sum(1 for _, k in view["pending"] if k == "MOVE")
                assert r.get("queued") == str(queued)
                assert r.get("pos") == f"{hw.counts[0]},{hw.counts[1]}"
            if r.kind == "ERR" and verb in ("MOVE", "HOME", "ENABLE"):
                assert r.code in ("NOT_ENABLED", "NOT_HOMED", "RANGE", "QUEUE_FULL",
                                  "ESTOP", "FAULT", "SYNTAX")
            assert hw.counts == prev        # a line moves nothing by itself: ticks do
