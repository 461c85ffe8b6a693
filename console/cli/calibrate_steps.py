"""The steps of ``benchjog calibrate plan|touch|fit|apply`` and ``benchjog commission``
(their options: console/cli/cmd_calibrate.py): kinematic calibration from touched
fixture-plate holes (docs/calibration.md).

- ``plan``: which holes to touch, on which branch (pose selection, O1).
- ``touch``: visit them through the interlock at reduced speed, record the counts.
- ``fit``: identify link lengths, joint zeros and the base pose; the report (or JSON).
- ``apply``: the corrected arm file, shown as a diff, written after confirmation with a
  backup of the previous version.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

from benchjog.console import exit_codes
from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell import touching
from benchjog.console.cell.commissioning import AXIS_STEP_MAX, CommissionError, step_from_text
from benchjog.console.cell.calibration_report import print_report, report_dict
from benchjog.console.cell.armfile import load_arm
from benchjog.console.cell.safe_files import read_text
from benchjog.console.cli.cmd_calibrate import DEFAULT_COUNT, _wants_json
from benchjog.console.cli.common import drives_off, open_gate, print_json, round_out
from benchjog.console.cli.confirm import PromptConfirmer, is_yes
from benchjog.console.errors import Refused, UsageError
from benchjog.kinematics import identify as ident
from benchjog.kinematics.model import Arm

REHEARSAL_TIME_SCALE = 100.0  # a rehearsal on the simulated arm runs this much faster


def _count(args: argparse.Namespace) -> int:
    if not 1 <= args.count <= 500:
        raise UsageError(f"--count: must be 1..500 ({args.count})")
    return args.count


def cmd_plan(args: argparse.Namespace) -> int:
    arm = load_arm(args.arm)
    plate = cf.load_plate(args.plate, arm)
    chosen = touching.planned_visits(arm, plate, _count(args))
    rows = np.array([c.joints for c in chosen])
    sv = np.linalg.svd(ident._scaled_rows(arm, ident.nominal_vector(arm, plate.base), rows),
                       compute_uv=False)
    enough = len(chosen) >= ident.min_touches(arm)
    doc = {"touches": [{"hole": c.label, "at": [round_out(v) for v in c.hole_mm],
                        "branch": c.branch.value} for c in chosen],
           "o1": round_out(ident.observability_o1(sv, len(chosen))) if enough else None,
           "o4": round_out(ident.noise_amplification_o4(sv)) if enough else None,
           "condition_number": round_out(ident.condition_number(sv)) if enough else None}
    if _wants_json(args):
        print_json(doc)
    else:
        print(f"{arm.name}: touch these {len(chosen)} holes (chosen for observability):")
        for i, c in enumerate(chosen, start=1):
            print(f"  {i:2d}. {c.label:8s} {', '.join(f'{v:.1f}' for v in c.hole_mm)} mm  {c.branch.value}")
        if enough:
            print(f"expected: condition number {doc['condition_number']:.1f}, O1 {doc['o1']:.3f}, "
                  f"O4 {doc['o4']:.3f}")
    if not enough:
        print(f"benchjog: {len(chosen)} touches are too few: at least {ident.min_touches(arm)}",
              file=sys.stderr)
        return exit_codes.REFUSED
    return exit_codes.OK


def _sim_errors(arm: Arm, args: argparse.Namespace) -> dict[str, float] | None:
    """The rehearsal's true-arm errors, checked before anything opens (exit 2 if bad)."""
    if args.sim_errors is None:
        return None
    if getattr(args, "port", None):
        raise UsageError("--sim-errors: only for a rehearsal on the simulated arm (leave out --port)")
    try:
        errors = ident.parse_errors(args.sim_errors)
        ident.true_vector_from_errors(arm, errors)
    except ident.IdentifyError as exc:
        raise UsageError(f"--sim-errors: {exc}") from None
    return errors


def _open_touch_gate(arm: Arm, args: argparse.Namespace, errors: dict[str, float] | None):
    if errors is None:
        return open_gate(arm, args)
    from benchjog.drivers.interlock import Interlock

    return Interlock.open(arm, "sim", journal=getattr(args, "journal", None) or None,
                          true_errors=errors, time_scale=REHEARSAL_TIME_SCALE)


def cmd_touch(args: argparse.Namespace) -> int:
    arm = load_arm(args.arm)
    plate = cf.load_plate(args.plate, arm)
    if not 0 < args.speed <= 100:
        raise UsageError(f"--speed: must be in (0, 100] ({args.speed:g})")
    if not (math.isfinite(args.sim_noise) and 0 <= args.sim_noise <= 5):
        raise UsageError(f"--sim-noise: must be 0..5 mm ({args.sim_noise:g})")
    out_path = Path(args.out)
    if out_path.is_dir():
        raise UsageError(f"--out: {args.out} is a directory")
    errors = _sim_errors(arm, args)
    visits = touching.planned_visits(arm, plate, _count(args))
    rng = np.random.default_rng(args.seed)
    print(f"benchjog: {len(visits)} touches at {args.speed:g} % speed; keep clear of the arm, "
          "hand on the e-stop", file=sys.stderr)
    with _open_touch_gate(arm, args, errors) as gate:
        if args.sim_errors is not None:
            def finish(name: str, hole: tuple[float, ...]) -> str:
                aim = np.asarray(hole) + rng.normal(0.0, args.sim_noise, len(hole))
                touching.finish_simulated(gate, arm, plate, aim, args.speed)
                return "ok"
        else:
            def finish(name: str, hole: tuple[float, ...]) -> str:
                return touching.finish_by_hand(gate, arm, name, sys.stdin, sys.stderr, args.speed)

        def save(records: list[cf.TouchRecord]) -> None:
            cf.save_touches(out_path, arm, args.plate, records)

        gate.enable()
        try:
            records = touching.capture(
                gate, arm, plate, [(c.label, c.hole_mm, c.branch) for c in visits],
                PromptConfirmer(arm, question="Approach this hole?"), finish=finish,
                on_record=save, speed_pct=args.speed, out=sys.stderr)
        finally:
            drives_off(gate)
    print(f"benchjog: {len(records)} touches recorded in {out_path}", file=sys.stderr)
    if _wants_json(args):
        print_json({"touches": len(records), "file": str(out_path)})
    return exit_codes.OK if len(records) >= ident.min_touches(arm) else exit_codes.REFUSED


def _fit(args: argparse.Namespace) -> tuple[Arm, ident.Identification, list[cf.TouchRecord], cf.Plate | None]:
    arm = load_arm(args.arm)
    records = cf.load_touches(args.touches, arm)
    plate = cf.load_plate(args.plate, arm) if args.plate else None
    base = plate.base if plate else ()
    return arm, ident.identify(arm, cf.touches_for_fit(arm, records), base), records, plate


def cmd_fit(args: argparse.Namespace) -> int:
    arm, result, records, plate = _fit(args)
    doc = report_dict(arm, result, records, plate)
    if _wants_json(args):
        print_json(doc)
    else:
        print_report(doc)
    return exit_codes.OK


def cmd_apply(args: argparse.Namespace) -> int:
    arm, result, records, plate = _fit(args)
    print_report(report_dict(arm, result, records, plate), sys.stderr)
    out = Path(args.out)
    if out.is_dir():
        raise UsageError(f"--out: {args.out} is a directory")
    new = cf.corrected_text(cf.arm_text(arm), result)
    cf.check_arm_text(new, str(out))   # the corrected file must load as an arm, or nothing is written
    old = read_text(out) if out.exists() else cf.arm_text(arm)
    print(cf.diff_text(old, new, out.name), file=sys.stderr, end="")
    print(f"Write {out}{' (the previous version kept as ' + out.name + '.bak)' if out.exists() else ''}? "
          "[y/N] ", end="", file=sys.stderr, flush=True)
    answer = sys.stdin.readline()
    if not answer:
        print("", file=sys.stderr)
    if not is_yes(answer):
        raise Refused("cancelled: nothing written")
    cf.write_arm_file(out, new)
    print(f"benchjog: wrote {out}", file=sys.stderr)
    if _wants_json(args):
        print_json({"written": str(out)})
    return exit_codes.OK


# -- commissioning ------------------------------------------------------------------------



def _axis_index(arm: Arm, text: str) -> int:
    names = [j.name for j in arm.joints]
    if text in names:
        return names.index(text)
    if text.isdigit() and 1 <= int(text) <= arm.n_joints:
        return int(text) - 1
    raise UsageError(f"AXIS: no joint {text!r} ({', '.join(names)}, or 1..{arm.n_joints})")


class _Session:
    """The walk-through's dialogue on stdin/stderr; ``quit`` or end of input ends it."""

    def __init__(self, arm: Arm, gate, index: int, speed: float):
        self.arm, self.gate, self.index, self.speed = arm, gate, index, speed
        self.joint = arm.joints[index]
        self.out = sys.stderr

    def say(self, text: str) -> None:
        print(text, file=self.out)

    def ask(self, question: str) -> str:
        print(f"{question} ", end="", file=self.out, flush=True)
        line = sys.stdin.readline()
        if not line or line.strip().lower() in ("q", "quit"):
            if not line:
                print("", file=self.out)
            raise Refused("commissioning ended: nothing written")
        return line.strip()

    def number(self, question: str, default: float | None = None) -> float:
        while True:
            text = self.ask(question)
            if not text and default is not None:
                return default
            try:
                value = float(text)
                if math.isfinite(value):
                    return value
            except ValueError:
                pass
            self.say(f"benchjog: not a number ({text!r}); again, or quit")

    def counts(self) -> int:
        from benchjog.drivers.calibration import counts_from_joint

        return counts_from_joint(self.joint, self.gate.state().joints[self.index])

    def jog(self, delta_display: float, question: str) -> None:
        proposal = self.gate.propose_jog(f"j{self.index + 1}", self.joint.from_display(delta_display),
                                         speed_pct=self.speed)
        result = self.gate.execute(proposal, PromptConfirmer(self.arm, question=question))
        if not result.completed:
            raise Refused(f"{result.detail}: nothing written")

    def steps_until_ok(self, what: str, keep: bool = False) -> str:
        unit = self.joint.unit
        extra = ", or keep (the file's limits)" if keep else ""
        while True:
            text = self.ask(f"{what}: a step in {unit} (+0.5, -2; at most {AXIS_STEP_MAX:g}), ok{extra}>")
            if text.lower() == "ok" or (keep and text.lower() == "keep"):
                return text.lower()
            try:
                delta = step_from_text(text, unit)
            except CommissionError as exc:
                self.say(f"benchjog: {exc}")
                continue
            proposal = self.gate.propose_jog(f"j{self.index + 1}", self.joint.from_display(delta),
                                             speed_pct=self.speed)
            result = self.gate.execute(proposal, touching.AcceptShown(self.arm, self.out))
            if not result.completed:
                self.say(f"benchjog: {result.detail}")


def cmd_commission(args: argparse.Namespace) -> int:
    from benchjog.console.cell import commissioning as cm

    arm = load_arm(args.arm)
    index = _axis_index(arm, args.axis)
    joint = arm.joints[index]
    for name, value, top in (("--step", args.step, 5.0), ("--test", args.test, AXIS_STEP_MAX),
                             ("--margin", args.margin, 20.0)):
        if not (math.isfinite(value) and 0 < value <= top):
            raise UsageError(f"{name}: must be in (0, {top:g}] ({value:g})")
    if not 0 < args.speed <= 100:
        raise UsageError(f"--speed: must be in (0, 100] ({args.speed:g})")
    out = Path(args.out)
    if out.is_dir():
        raise UsageError(f"--out: {args.out} is a directory")
    original = cf.arm_text(arm)
    found = cm.AxisFindings(joint.direction, joint.counts_per_unit, joint.zero)
    unit = joint.unit
    print(f"benchjog: commissioning {joint.name} at {args.speed:g} % speed; keep clear of the arm, "
          "hand on the e-stop", file=sys.stderr)
    with open_gate(arm, args) as gate:
        gate.enable()
        s = _Session(arm, gate, index, args.speed)
        try:
            s.say(f"1/5 direction: {joint.name} jogs {args.step:+g} {unit} by the arm file")
            s.jog(args.step, "Jog?")
            if not is_yes(s.ask(f"Did {joint.name} move {cm.sense_words(joint)}? [y/n]")):
                found.direction = -joint.direction
            s.jog(-args.step, "Back?")

            s.say(f"2/5 counts per unit: {joint.name} moves {args.test:g} {unit} by the arm file")
            c0 = s.counts()
            s.jog(args.test, "Move?")
            moved = s.counts() - c0
            measured = s.number(f"How far did it move, measured ({unit})?")
            found.counts_per_unit = cm.counts_per_unit_from_measure(moved, measured)
            s.jog(-args.test, "Back?")

            s.say(f"3/5 zero: jog {joint.name} onto its reference mark")
            s.steps_until_ok("to the mark")
            mark = s.number(f"The mark's value ({unit}) [0]:", default=0.0)
            found.zero = cm.zero_from_mark(s.counts(), mark, found.counts_per_unit, found.direction)

            s.say(f"4/5 travel: jog {joint.name} to each end of its safe travel (within the arm "
                  "file's limits)")
            if s.steps_until_ok("to one end", keep=True) == "ok":
                end_a = cm.value_from_counts(s.counts(), found.zero, found.counts_per_unit, found.direction)
                s.steps_until_ok("to the other end")
                end_b = cm.value_from_counts(s.counts(), found.zero, found.counts_per_unit, found.direction)
                found.min, found.max = cm.soft_limits_from_travel(end_a, end_b, args.margin)
            else:
                s.say("the soft limits stay as the arm file has them")

            s.say("5/5 homing: the controller's homing cycle; afterwards the axis should be at count 0")
            result = gate.home(PromptConfirmer(arm, question="Home?"))
            found.homing = cm.homing_words(joint.name, result.completed,
                                           s.counts() if result.completed else 0, result.detail)
        except cm.CommissionError as exc:
            raise Refused(f"{exc}: nothing written") from None
        finally:
            drives_off(gate)
    changes = found.changes(joint)
    print(cm.findings_line(joint, found, args.margin), file=sys.stderr)

    def result(outcome: str, written: Path | None) -> None:
        if _wants_json(args):   # docs/cli-json.md: one document, whatever the outcome
            print_json({"outcome": outcome, "written": None if written is None else str(written),
                        "axis": joint.name, "direction": found.direction,
                        "counts_per_unit": round_out(found.counts_per_unit),
                        "zero": round_out(found.zero),
                        "min": None if found.min is None else round_out(found.min),
                        "max": None if found.max is None else round_out(found.max),
                        "homing": found.homing})

    if not changes:
        print("benchjog: the arm file already says all this: nothing to write", file=sys.stderr)
        result("unchanged", None)
        return exit_codes.OK
    new = cm.commissioned_text(original, index, changes)
    cf.check_arm_text(new, str(out))
    old = read_text(out) if out.exists() else original
    print(cf.diff_text(old, new, out.name, "commissioned"), file=sys.stderr, end="")
    print(f"Write {out}{' (the previous version kept as ' + out.name + '.bak)' if out.exists() else ''}? "
          "[y/N] ", end="", file=sys.stderr, flush=True)
    answer = sys.stdin.readline()
    if not is_yes(answer):
        result("cancelled", None)
        raise Refused("cancelled: nothing written")
    cf.write_arm_file(out, new)
    print(f"benchjog: wrote {out}; home the arm again before relying on it", file=sys.stderr)
    result("written", out)
    return exit_codes.OK


__all__ = ["register"]
