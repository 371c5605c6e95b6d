"""The terminal summary of ``saed index``: a ranked table, the best solution's spots, its notes.

Written for a tired microscopist: the answer first (phase, zone, how sure), then what to check.
"""

from __future__ import annotations

import math

from saed.crystal.miller import format_indices
from saed.index.values import IndexResult, Solution

__all__ = ["format_summary", "zone_text", "confidence_word", "plain_notes", "other_lookalikes", "SHOWN_SPOTS"]

#: Spots of the best solution listed in the summary (all of them are in the JSON).
SHOWN_SPOTS = 14


def zone_text(sol) -> str:
    z = sol.zone_axis_4 if sol.zone_axis_4 is not None else sol.zone_axis
    return f"[{format_indices(z)}]"


def _hkl_text(spot) -> str:
    h = spot.hkil if spot.hkil is not None else spot.hkl
    return "-" if h is None else format_indices(h)


def plain_notes(best: Solution) -> list[str]:
    """The best solution's notes without the mistilt advice (which is shown on its own line)."""
    return [n for n in best.notes if best.mistilt is None or n != best.mistilt.advice]


def other_lookalikes(best: Solution) -> list[tuple[str, str, str]]:
    """(heading, what separates them, tilt text) for the look-alikes not already in the notes."""
    out = []
    for lk in best.lookalikes:
        if lk.relation == "ambiguous":
            continue  # already in the notes
        z = format_indices(lk.zone_axis_4 if lk.zone_axis_4 is not None else lk.zone_axis)
        out.append((f"{lk.relation}: {lk.phase_name} [{z}] ({lk.score:.2f})", lk.separating,
                    lk.tilt.text if lk.tilt else ""))
    return out


def confidence_word(result: IndexResult) -> str:
    """'clear', 'likely' or 'ambiguous' for the best solution, from its score and the look-alikes."""
    best = result.best
    if best is None:
        return "none"
    if any(lk.relation == "ambiguous" for lk in best.lookalikes):
        return "ambiguous"
    second = result.solutions[1].score if len(result.solutions) > 1 else 0.0
    if best.score >= 0.8 and best.score - second >= 0.05:
        return "clear"
    if best.score >= 0.6:
        return "likely"
    return "weak"


def _fmt(v, spec: str, dash: str = "-") -> str:
    return dash if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def format_summary(result: IndexResult, *, image: str, frame: int | None = None, top: int = 5) -> str:
    """A plain-text summary (no colours; fits 100 columns)."""
    m = result.measured
    cal = m.calibration
    rows, cols = m.image_shape
    lines = [f"{image}  ({cols} x {rows} px" + (f", frame {frame}" if frame is not None else "") + f"), "
             f"{len(m.spots)} spots, centre {m.center_px[0]:.1f} {m.center_px[1]:.1f} px"]
    if cal is not None and cal.is_calibrated:
        lines.append(f"calibrated: {cal.scale_inv_nm_per_px:.5g} 1/nm per px at {cal.voltage_kv:g} kV"
                     + ("  (ellipse corrected)" if cal.ellipse is not None else ""))
    else:
        lines.append("uncalibrated: indexed by spacing ratios and angles; the scale below is implied by the solution")
    if not result.solutions:
        lines.append("")
        lines.append(f"no solution: {result.message}")
        return "\n".join(lines)
    best = result.best
    lines.append("")
    lines.append(f"answer: {best.phase_name} {zone_text(best)}  ({confidence_word(result)}, score {best.score:.2f})")
    lines.append("")
    head = f"{'rank':>4}  {'phase':<12} {'zone':<12} {'score':>5}  {'spots':>7}  {'d err %':>7}  {'angle err':>9}  {'scale 1/nm/px':>13}"
    lines.append(head)
    for i, s in enumerate(result.solutions[:top]):
        spots = f"{s.n_explained}/{len(s.indexed)}"
        scale = f"{s.scale_inv_nm_per_px:.5g}"
        if s.scale_error_pct is not None:
            scale += f" ({s.scale_error_pct:+.1f}%)"
        lines.append(f"{i + 1:>4}  {s.phase_name:<12} {zone_text(s):<12} {s.score:5.2f}  {spots:>7}  "
                     f"{_fmt(s.mean_d_error_pct, '.2f'):>7}  {_fmt(s.mean_angle_error_deg, '.2f') + ' deg':>9}  {scale:>13}")
    lines.append("")
    lines += _best_block(best, calibrated=cal is not None and cal.is_calibrated)
    if result.message:
        lines.append(f"note: {result.message}")
    return "\n".join(lines)


def _best_block(best: Solution, *, calibrated: bool) -> list[str]:
    out = [f"best: {best.phase_name} {zone_text(best)}, in-plane rotation {best.in_plane_rotation_deg:.1f} deg"]
    if not calibrated:
        txt = f"  implied scale {best.scale_inv_nm_per_px:.5g} 1/nm per px"
        if best.implied_camera_length_mm is not None:
            txt += f", camera length {best.implied_camera_length_mm:.0f} mm"
        out.append(txt)
    if best.mistilt is not None:
        out.append(f"  mistilt: {best.mistilt.advice}")
    out += [f"  note: {n}" for n in plain_notes(best)]
    for head, sep, tilt in other_lookalikes(best):
        out.append(f"  {head}: {sep}" + (f"; {tilt}" if tilt else ""))
    shown = sorted((s for s in best.indexed), key=lambda s: (s.hkl is None, s.d_nm_measured * -1))
    out.append("")
    out.append(f"  {'hkl':<10} {'x':>8} {'y':>8} {'d meas nm':>10} {'d calc nm':>10} {'err %':>6}  kind")
    for s in shown[:SHOWN_SPOTS]:
        out.append(f"  {_hkl_text(s):<10} {s.x_px:8.1f} {s.y_px:8.1f} {s.d_nm_measured:10.4f} "
                   f"{_fmt(s.d_nm_calc, '10.4f'):>10} {_fmt(s.d_error_pct, '+6.2f'):>6}  {s.kind}")
    if len(shown) > SHOWN_SPOTS:
        out.append(f"  ... {len(shown) - SHOWN_SPOTS} more spots (all in --json)")
    return out
