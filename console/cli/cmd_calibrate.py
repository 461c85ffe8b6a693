"""``benchjog calibrate plan|touch|fit|apply``: kinematic calibration from touched
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
from importlib import resources
from pathlib import Path

import numpy as np

from benchjog.console import exit_codes
from benchjog.console.cell import calibration_files as cf
from benchjog.console.cell import touching
from benchjog.console.cell.armfile import load_arm
from benchjog.console.cell.safe_files import read_text
from benchjog.console.cli.common import (add_arm_option, add_journal_option, add_port_options,
                                         drives_off, open_gate, print_json, round_out)
from benchjog.console.cli.confirm import PromptConfirmer, is_yes
from benchjog.console.errors import Refused, UsageError
from benchjog.kinematics import identify as ident
from benchjog.drivers.calibration import joints_from_counts
from benchjog.kinematics.model import Arm

DEFAULT_COUNT = 12
REHEARSAL_TIME_SCALE = 100.0  # a rehearsal on the simulated arm runs this much faster


def register(sub: argparse._SubParsersAction) -> None:
    cal = sub.add_parser("calibrate", help="calibrate the arm file from touched fixture-plate holes",
                         description="Kinematic calibration: touch holes of a fixture plate with "
                         "the tool tip, fit link lengths, joint zeros and the base pose, write "
                         "the corrected arm file. See docs/calibration.md.")
    steps = cal.add_subparsers(dest="step", metavar="STEP", parser_class=type(cal), required=True)

    plan = steps.add_parser("plan", help="which holes to touch, on which branch")
    _plate_options(plan, required=True)
    plan.add_argument("--count", type=int, default=DEFAULT_COUNT, help=f"touches (default {DEFAULT_COUNT})")
    plan.add_argument("--json", action="store_true", help="machine-readable output")
    add_arm_option(plan)
    plan.set_defaults(func=cmd_plan)

    touch = steps.add_parser("touch", help="touch the planned holes and record the counts",
                             description="Visit the planned holes through the interlock at reduced "
                             "speed (each approach after confirmation), finish each touch with "
                             "typed jog steps (or, on the simulated arm with --sim-errors, a "
                             "simulated hand), record the counts.")
    _plate_options(touch, required=True)
    touch.add_argument("--out", required=True, metavar="FILE", help="touches file to write")
    touch.add_argument("--count", type=int, default=DEFAULT_COUNT, help=f"touches (default {DEFAULT_COUNT})")
    touch.add_argument("--speed", type=float, default=touching.REDUCED_SPEED_PCT, metavar="PCT",
                       help=f"speed override, percent (default {touching.REDUCED_SPEED_PCT:g})")
    touch.add_argument("--sim-errors", metavar="KEY=V,...", default=None,
                       help="rehearsal: the simulated arm really differs from the arm file by "
                       "these (e.g. shoulder.a=1.5,elbow.zero=-0.4,base.x=200; mm and deg)")
    touch.add_argument("--sim-noise", type=float, default=0.05, metavar="MM",
                       help="rehearsal: the simulated hand's touching scatter, mm (default 0.05)")
    touch.add_argument("--seed", type=int, default=None, help="rehearsal: random seed")
    add_arm_option(touch)
    add_port_options(touch)
    add_journal_option(touch)
    touch.set_defaults(func=cmd_touch)

    fit = steps.add_parser("fit", help="identify the arm from a touches file; the report")
    fit.add_argument("touches", metavar="TOUCHES", help="touches file")
    _plate_options(fit, required=False)
    fit.add_argument("--json", action="store_true", help="machine-readable output")
    add_arm_option(fit)
    fit.set_defaults(func=cmd_fit)

    apply = steps.add_parser("apply", help="write the corrected arm file (diff, confirm, backup)")
    apply.add_argument("touches", metavar="TOUCHES", help="touches file")
    apply.add_argument("--out", required=True, metavar="FILE",
                       help="the arm file to write (the arm file itself, or a new one)")
    _plate_options(apply, required=False)
    add_arm_option(apply)
    apply.set_defaults(func=cmd_apply)


def _plate_options(parser: argparse.ArgumentParser, required: bool) -> None:
    parser.add_argument("--plate", required=required, metavar="FILE",
                        help="plate file: the holes in the plate's frame" +
                        ("" if required else " (for the next-touch suggestion)"))


def _count(args: argparse.Namespace) -> int:
    if not 1 <= args.count <= 500:
        raise UsageError(f"--count: must be 1..500 ({args.count})")
    return args.count


def planned_visits(arm: Arm, plate: cf.Plate, count: int) -> list[ident.Candidate]:
    """The touches to make: chosen for observability (O1), then ordered by branch and
    around the base so the arm does not sweep back and forth."""
    vector = ident.nominal_vector(arm, plate.base)
    cands = ident.candidates_for(arm, plate.holes, vector)
    if not cands:
        raise Refused("the arm can reach none of the plate's holes within its limits "
                      "(check the plate's base = [...] in the plate file)")
    chosen = ident.plan_touches(arm, cands, count, vector)
    return sorted(chosen, key=lambda c: (c.branch.value, c.joints[0]))


def cmd_plan(args: argparse.Namespace) -> int:
    arm = load_arm(args.arm)
    plate = cf.load_plate(args.plate, arm)
    chosen = planned_visits(arm, plate, _count(args))
    rows = np.array([c.joints for c in chosen])
    sv = np.linalg.svd(ident._scaled_rows(arm, ident.nominal_vector(arm, plate.base), rows),
                       compute_uv=False)
    enough = len(chosen) >= ident.min_touches(arm)
    doc = {"touches": [{"hole": c.label, "at": [round_out(v) for v in c.hole_mm],
                        "branch": c.branch.value} for c in chosen],
           "o1": round_out(ident.observability_o1(sv, len(chosen))) if enough else None,
           "o4": round_out(ident.noise_amplification_o4(sv)) if enough else None,
           "condition_number": round_out(ident.condition_number(sv)) if enough else None}
    if args.json:
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
    visits = planned_visits(arm, plate, _count(args))
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
    return exit_codes.OK if len(records) >= ident.min_touches(arm) else exit_codes.REFUSED


def _fit(args: argparse.Namespace) -> tuple[Arm, ident.Identification, list[cf.TouchRecord], cf.Plate | None]:
    arm = load_arm(args.arm)
    records = cf.load_touches(args.touches, arm)
    plate = cf.load_plate(args.plate, arm) if args.plate else None
    base = plate.base if plate else ()
    return arm, ident.identify(arm, cf.touches_for_fit(arm, records), base), records, plate


def report_dict(arm: Arm, result: ident.Identification, records: list[cf.TouchRecord],
                plate: cf.Plate | None) -> dict:
    """The calibration report as a JSON document (docs/calibration.md)."""
    before, after = result.residuals_before_mm, result.residuals_after_mm
    keys, cov = result.covariance_display(ident.arm_param_keys(arm))
    accuracy = []
    for i, rec in enumerate(records):
        fixed_joints = joints_from_counts(result.corrected, rec.counts)
        cond, words = ident.task_conditioning(result.corrected, fixed_joints)
        accuracy.append({
            "hole": rec.hole, "branch": rec.branch,
            "residual_mm": round_out(float(after[i])),
            "step_per_count_mm": [round_out(v) for v in ident.steps_per_count_mm(result.corrected, fixed_joints)],
            "position_sigma_mm": round_out(ident.position_sigma_mm(result.corrected, fixed_joints, keys, cov)),
            "condition_number": round_out(cond), "conditioning": words})
    suggestion = None
    if plate is not None:
        done = {(r.hole, r.branch) for r in records}
        cands = [c for c in ident.candidates_for(arm, plate.holes, result.vector)
                 if (c.label, c.branch.value) not in done]
        touched = np.array([t.joints for t in cf.touches_for_fit(arm, records)])
        best = ident.next_touch(arm, touched, cands, result.vector)
        if best is not None:
            cand, now, then = best
            suggestion = {"hole": cand.label, "branch": cand.branch.value,
                          "o4_now": round_out(now), "o4_with_it": round_out(then)}
    return {
        "arm": arm.name, "touches": result.n_touches,
        "before": {"rms_mm": round_out(ident.rms_mm(before)), "max_mm": round_out(float(before.max()))},
        "after": {"rms_mm": round_out(ident.rms_mm(after)), "max_mm": round_out(float(after.max()))},
        "sigma_mm": round_out(result.sigma_mm),
        "parameters": [{"key": e.key, "unit": e.unit, "file": round_out(e.nominal),
                        "fitted": round_out(e.value), "change": round_out(e.change),
                        "std_error": round_out(e.std_error)} for e in result.estimates],
        "lumped": result.lumped,
        "condition_number": round_out(result.condition),
        "o1": round_out(result.o1), "o4": round_out(result.o4),
        "warnings": list(result.warnings),
        "next_touch": suggestion,
        "accuracy": accuracy,
    }


def print_report(doc: dict, out=None) -> None:
    out = out or sys.stdout
    w = lambda s="": print(s, file=out)  # noqa: E731
    branches = {}
    for a in doc["accuracy"]:
        branches[a["branch"]] = branches.get(a["branch"], 0) + 1
    w(f"calibration of {doc['arm']} from {doc['touches']} touches "
      f"({', '.join(f'{k} {v}' for k, v in sorted(branches.items()))})")
    b, a = doc["before"], doc["after"]
    w(f"residuals before: RMS {b['rms_mm']:.3f} mm, max {b['max_mm']:.3f} mm "
      "(the arm file as it is, its base laid on the holes by a rigid fit)")
    w(f"residuals after:  RMS {a['rms_mm']:.3f} mm, max {a['max_mm']:.3f} mm "
      f"(residual sigma {doc['sigma_mm']:.3f} mm per coordinate)")
    w(f"{'parameter':16s} {'arm file':>12s} {'fitted':>12s} {'change':>10s} {'std error':>10s}")
    for p in doc["parameters"]:
        w(f"{p['key']:16s} {p['file']:12.4f} {p['fitted']:12.4f} {p['change']:+10.4f} "
          f"{p['std_error']:10.4f} {p['unit']}")
    for lumped, taker in doc["lumped"].items():
        w(f"not separable: {lumped} is folded into {taker} (touches of the tool point cannot "
          "tell them apart); the base's " + lumped.split(".")[1] + " stays as the plate file gives it")
    w(f"identification Jacobian (scaled): condition number {doc['condition_number']:.1f}, "
      f"O1 {doc['o1']:.4f} (Borm & Menq 1991), O4 {doc['o4']:.4f} (Nahvi & Hollerbach 1996)")
    worst = max(doc["accuracy"], key=lambda r: r["position_sigma_mm"])
    w(f"accuracy at the touched poses: tool step per count up to "
      f"{max(max(r['step_per_count_mm']) for r in doc['accuracy']):.4f} mm; position 1-sigma "
      f"from the fit up to {worst['position_sigma_mm']:.4f} mm (at {worst['hole']})")
    for r in doc["accuracy"]:
        if r["conditioning"]:
            w(f"  {r['hole']} ({r['branch']}): {r['conditioning']}")
    for warning in doc["warnings"]:
        w(f"warning: {warning}")
    if doc["next_touch"]:
        n = doc["next_touch"]
        w(f"next touch: {n['hole']} on {n['branch']} raises O4 from {n['o4_now']:.4f} to "
          f"{n['o4_with_it']:.4f}")


def cmd_fit(args: argparse.Namespace) -> int:
    arm, result, records, plate = _fit(args)
    doc = report_dict(arm, result, records, plate)
    if args.json:
        print_json(doc)
    else:
        print_report(doc)
    return exit_codes.OK


def arm_text(arm: Arm) -> str:
    """The arm file's text: the file it came from, or the built-in arm's."""
    if Path(arm.source).is_file():
        return read_text(arm.source)
    return resources.files("benchjog.console.cell.arms").joinpath(f"{arm.source}.toml").read_text(
        encoding="utf-8")


def cmd_apply(args: argparse.Namespace) -> int:
    arm, result, records, plate = _fit(args)
    print_report(report_dict(arm, result, records, plate), sys.stderr)
    out = Path(args.out)
    if out.is_dir():
        raise UsageError(f"--out: {args.out} is a directory")
    new = cf.corrected_text(arm_text(arm), result)
    cf.check_arm_text(new, str(out))   # the corrected file must load as an arm, or nothing is written
    old = read_text(out) if out.exists() else arm_text(arm)
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
    return exit_codes.OK


__all__ = ["register", "report_dict", "print_report", "planned_visits"]
