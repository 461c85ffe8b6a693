"""The command line's confirmation: print the plan, ask, read one answer from stdin.

CONTRACT.md: only ``y`` or ``yes`` (any case) goes ahead; anything else, or end of
input, cancels and nothing moves. There is no flag that skips the question. The plan
and the question go to stderr, so stdout carries only results.
"""

from __future__ import annotations

import sys
from typing import TextIO

from benchjog.drivers.interlock import Confirmer, Proposal
from benchjog.kinematics.model import Arm

YES = ("y", "yes")


def is_yes(answer: str | None) -> bool:
    """True only for ``y`` or ``yes`` in any case (surrounding blanks ignored).

    >>> [is_yes(a) for a in ("y", "YES", " Yes\\n", "", "n", "yess", "ok", None)]
    [True, True, True, False, False, False, False, False]
    """
    return answer is not None and answer.strip().lower() in YES


class PromptConfirmer(Confirmer):
    """Prints ``proposal.lines(arm)`` and ``question [y/N]`` to ``out`` (stderr), reads a
    line from ``stdin``. A refused proposal is shown but never asked about."""

    def __init__(self, arm: Arm, question: str = "Go ahead?", *,
                 stdin: TextIO | None = None, out: TextIO | None = None):
        self.arm = arm
        self.question = question
        self._stdin = stdin
        self._out = out
        self.asked = 0

    def confirm(self, proposal: Proposal) -> bool:
        out = self._out or sys.stderr
        for line in proposal.lines(self.arm):
            print(line, file=out)
        if not proposal.ok:
            return False
        self.asked += 1
        print(f"{self.question} [y/N] ", end="", file=out, flush=True)
        try:
            answer = (self._stdin or sys.stdin).readline()
        except (OSError, ValueError):  # stdin closed or not readable: no answer is no
            answer = ""
        if not answer:
            print("", file=out)  # end of input: finish the prompt's line
        return is_yes(answer)


__all__ = ["PromptConfirmer", "is_yes"]
