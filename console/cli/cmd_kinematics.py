"""``benchjog solve`` and ``benchjog fk``: kinematics on the command line."""

from __future__ import annotations

import argparse
import math

TYPE_CHECKING = False  # typing.TYPE_CHECKING without importing typing at start-up

from benchjog.console import exit_codes
from benchjog.console.cli.commands import summary
from benchjog.console.cli.common import (add_arm_option, add_output_options, add_target_arguments,
                                         add_value_arguments, parse_number,
                                         print_json, round_out, text_console)
from benchjog.console.errors import UsageError

if TYPE_CHECKING:  # numpy (through the solver) and rich load only in the commands that use them
    from benchjog.kinematics.model import Arm
    from benchjog.kinematics.accuracy import Accuracy
    from benchjog.kinematics.solve import IKResult


def register(sub: argparse._SubParsersAction) -> None:
    solve = sub.add_parser("solve", help=summary("solve"),
                           description="Every IK branch for a tool target (mm, degrees), with "
                           "limit, reach and singularity findings.")
    add_target_arguments(solve)
    add_arm_option(solve)
    add_output_options(solve)
    solve.set_defaults(func=cmd_solve)

    fk = sub.add_parser("fk", help=summary("fk"),
                        description="The tool pose for joint values (degrees, mm for the quill).")
    add_value_arguments(fk, "values", (
        ("J1", "first joint (degrees)"), ("J2", "second joint (degrees)"),
        ("J3", "SCARA: the quill (mm; default: home)"), ("J4", "SCARA: the roll (degrees; default: home)")))
    add_arm_option(fk)
    add_output_options(fk)
    fk.set_defaults(func=cmd_fk)


def target_from_args(arm: Arm, coords: list[str]) -> tuple[float, ...]:
    """Command-line target (mm, deg) to an internal one (mm, rad). A SCARA target may
    leave out Z (the home height) and ROLL (0 degrees)."""
    names = ("X", "Y", "Z", "ROLL") if arm.is_scara else ("X", "Y")
    if not 2 <= len(coords) <= len(names):
        raise UsageError(f"a {arm.geometry} arm takes {' '.join(names)}"
                         f"{' (Z and ROLL optional)' if arm.is_scara else ''}, "
                         f"got {len(coords)} values")
    from benchjog.kinematics.solve import target_from_display

    return target_from_display(arm, [parse_number(text, name) for text, name in zip(coords, names)])


def num_text(value: float, places: int = 3) -> str:
    """A number for the text output: fixed places, or 4 significant digits when huge
    (``solve 1e308 1e308`` prints 1e+308, not 309 digits), never -0.000."""
    if abs(value) >= 1e7:
        return f"{value:.4g}"
    text = f"{value:.{places}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


def display_target(arm: Arm, target: tuple[float, ...]) -> list[float]:
    shown = list(target)
    if arm.is_scara:
        shown[3] = math.degrees(shown[3])
    return [round_out(v) for v in shown]


def display_joints(arm: Arm, values: tuple[float, ...]) -> list[float]:
    return [round_out(j.to_display(v)) for j, v in zip(arm.joints, values)]


def accuracy_dict(acc: Accuracy) -> dict:
    """The extra ``accuracy`` key of a ``solve --json`` solution (docs/calibration.md)."""
    return {"step_per_count_mm": [round_out(v) for v in acc.step_per_count_mm],
            "position_sigma_mm": None if acc.position_sigma_mm is None else round_out(acc.position_sigma_mm),
            "condition_number": None if acc.condition_number == math.inf else round_out(acc.condition_number),
            "conditioning": acc.conditioning}


def _accuracies(arm: Arm, result: IKResult, arm_spec) -> list[Accuracy]:
    from benchjog.console.cell.armfile import calibration_of
    from benchjog.kinematics.accuracy import accuracy_at

    cal = calibration_of(arm_spec)
    keys, cov = (cal.keys, cal.covariance) if cal else (None, None)
    return [accuracy_at(arm, s.joints, keys, cov) for s in result.solutions]


def solve_to_dict(arm: Arm, result: IKResult, accuracies: list[Accuracy] | None = None) -> dict:
    """The ``solve --json`` document of CONTRACT.md; with ``accuracies`` each solution
    also carries an ``accuracy`` key (more keys are allowed)."""
    doc = {
        "target": display_target(arm, result.target),
        "reachable": result.reachable,
        "solutions": [{"branch": s.branch.value, "joints": display_joints(arm, s.joints),
                       "usable": s.usable, "problems": list(s.problems)}
                      for s in result.solutions],
        "warnings": list(result.warnings),
    }
    for sol, acc in zip(doc["solutions"], accuracies or []):
        sol["accuracy"] = accuracy_dict(acc)
    return doc


def cmd_solve(args: argparse.Namespace) -> int:
    from benchjog.console.cell.armfile import load_arm
    from benchjog.kinematics.solve import joints_from_tool

    arm = load_arm(args.arm)
    result = joints_from_tool(arm, target_from_args(arm, args.coords))
    accuracies = _accuracies(arm, result, args.arm)
    if args.json:
        print_json(solve_to_dict(arm, result, accuracies))
    else:
        _print_solve(arm, result, accuracies)
    return exit_codes.OK if result.usable else exit_codes.REFUSED


def _print_solve(arm: Arm, result: IKResult, accuracies: list[Accuracy] | None = None) -> None:
    from rich.table import Table

    out = text_console()
    names = ["x", "y", "z", "roll"][: len(result.target)]
    units = ["mm", "mm", "mm", "deg"]
    target = ", ".join(f"{n} {num_text(v)} {u}" for n, v, u in
                       zip(names, display_target(arm, result.target), units))
    out.print(f"[bold]{arm.name}[/bold] ({arm.geometry}) target: {target}")
    if result.solutions:
        table = Table(show_header=True, header_style="bold")
        table.add_column("branch")
        for joint in arm.joints:
            table.add_column(f"{joint.name} ({joint.unit})", justify="right")
        table.add_column("usable")
        for sol in result.solutions:
            table.add_row(sol.branch.value, *(num_text(v) for v in display_joints(arm, sol.joints)),
                          "yes" if sol.usable else "[red]no[/red]")
        out.print(table)
        for sol in result.solutions:
            for problem in sol.problems:
                out.print(f"[red]{sol.branch.value}:[/red] {problem}")
        for sol, acc in zip(result.solutions, accuracies or []):
            steps = ", ".join(f"{j.name} {v:.4f}" for j, v in zip(arm.joints, acc.step_per_count_mm))
            sigma = ("" if acc.position_sigma_mm is None else
                     f"; position 1-sigma from the calibration {acc.position_sigma_mm:.4f} mm")
            out.print(f"{sol.branch.value}: tool step per count (mm): {steps}{sigma}")
            if acc.conditioning:
                out.print(f"[yellow]{sol.branch.value}:[/yellow] {acc.conditioning}")
    for warning in result.warnings:
        out.print(f"[yellow]warning:[/yellow] {warning}")


def cmd_fk(args: argparse.Namespace) -> int:
    from benchjog.kinematics.limits import wrap_pi
    from benchjog.console.cell.armfile import load_arm
    from benchjog.kinematics.solve import pose_warnings, tool_from_joints

    arm = load_arm(args.arm)
    names = [j.name for j in arm.joints]
    least = 2
    if not least <= len(args.values) <= arm.n_joints:
        raise UsageError(f"a {arm.geometry} arm takes {arm.n_joints} joint values "
                         f"({' '.join(names)}), got {len(args.values)}")
    shown = [parse_number(text, name) for text, name in zip(args.values, names)]
    values = [j.from_display(v) for j, v in zip(arm.joints, shown)]
    values += list(arm.home_joints[len(values):])  # SCARA: quill and roll default to home
    values = tuple(values)
    tool = list(tool_from_joints(arm, values))
    tool[-1] = math.degrees(wrap_pi(tool[-1]))
    warnings = pose_warnings(arm, values)
    if args.json:
        print_json({"joints": display_joints(arm, values), "tool": [round_out(v) for v in tool],
                    "warnings": warnings})
        return exit_codes.OK
    out = text_console()
    joints = ", ".join(f"{j.name} {num_text(j.to_display(v))} {j.unit}" for j, v in zip(arm.joints, values))
    labels = ("x", "y", "z", "roll") if arm.is_scara else ("x", "y", "heading")
    units = ("mm", "mm", "mm", "deg") if arm.is_scara else ("mm", "mm", "deg")
    out.print(f"[bold]{arm.name}[/bold] joints: {joints}")
    out.print("tool: " + ", ".join(f"{n} {num_text(v)} {u}" for n, v, u in zip(labels, tool, units)))
    for warning in warnings:
        out.print(f"[yellow]warning:[/yellow] {warning}")
    return exit_codes.OK
