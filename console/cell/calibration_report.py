"""The calibration report: one JSON document (``calibrate fit --json``) and its text, for
the command line and the console (docs/calibration.md)."""

from __future__ import annotations

import sys

import numpy as np

from benchjog.console.cell import calibration_files as cf
from benchjog.console.numbers import round_out
from benchjog.drivers.calibration import joints_from_counts
from benchjog.kinematics import identify as ident
from benchjog.kinematics.model import Arm


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
    w("nominal: the arm file's link lengths, each zero as a correction from 0, the base where "
      "a rigid fit lays it on the holes")
    w(f"{'parameter':16s} {'nominal':>12s} {'fitted':>12s} {'change':>10s} {'std error':>10s}")
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
