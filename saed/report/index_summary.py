"""The terminal summary of ``saed index``: a ranked table, the best solution's spots, its notes.

Written for a tired microscopist: the answer first (phase, zone, how sure), then what to check.
"""

from __future__ import annotations

import html
import math
import textwrap

from saed.crystal.notation import (UNITS, Units, degrees_text, fraction_text, indices_text, person_text,
                                   shown_plane, signed_text, table_lines)
from saed.crystal.notation import zone_text as _zone
from saed.index.values import IndexResult, Solution
from saed.report.terminal_text import wrapped

__all__ = ["format_summary", "zone_text", "confidence_word", "plain_notes", "other_lookalikes", "spot_label",
           "kind_text", "SHOWN_SPOTS", "SCORE_MEANING", "SCORE_SHORT", "CONFIDENCE_MEANING", "legend_lines"]

#: Spots of the best solution listed in the summary (all of them are in the JSON).
SHOWN_SPOTS = 14

#: What "score" means, said wherever a score is shown (terminal legend, HTML tooltip and legend).
SCORE_MEANING = ("score: how well the simulated pattern explains the measured spots, 0 to 1 (1 = every spot on a "
                 "predicted position and no strong predicted spot missing); it ranks solutions, it is not a "
                 "probability")
#: The same in a few words, for pictures.
SCORE_SHORT = "score: how well the simulated pattern explains the spots, 0 to 1; a ranking, not a probability"
#: Confidence tags (:func:`confidence_word`): "clear" needs at least this score ...
CLEAR_MIN_SCORE = 0.80
#: ... and at least this lead over the runner-up's score;
CLEAR_MIN_LEAD = 0.05
#: "likely" needs at least this score; below it the answer is "weak".
LIKELY_MIN_SCORE = 0.60
#: What each confidence tag means (the rule in :func:`confidence_word`).
CONFIDENCE_MEANING = {
    "clear": (f"score at least {CLEAR_MIN_SCORE:.2f}, at least {CLEAR_MIN_LEAD:.2f} above the runner-up, and no "
              "look-alike that fits as well"),
    "likely": f"score at least {LIKELY_MIN_SCORE:.2f}, but close to the runner-up or below {CLEAR_MIN_SCORE:.2f}",
    "weak": f"score below {LIKELY_MIN_SCORE:.2f}: check the calibration and the phase list",
    "ambiguous": "a look-alike fits as well: this one pattern cannot decide (the note says what would)",
    "none": "nothing fits within the tolerances",
}


def legend_lines(word: str | None = None) -> list[str]:
    """The score legend and the meaning of `word` (or of every tag), one line each."""
    tags = [word] if word in CONFIDENCE_MEANING else [w for w in CONFIDENCE_MEANING if w != "none"]
    return [SCORE_MEANING + "."] + [f"{w}: {CONFIDENCE_MEANING[w]}." for w in tags]


def zone_text(sol, style: str = "plain") -> str:
    """``[10-10]``: the zone as a person reads it (4-index for hexagonal axes)."""
    z = sol.zone_axis_4 if sol.zone_axis_4 is not None else sol.zone_axis
    return _zone(z, False, style)


def spot_label(spot, style: str = "plain") -> str:
    """The label of a spot: its reflection (4-index on hexagonal axes); for a projected higher-order
    Laue-zone spot the fractional zero-layer position it sits on, e.g. ``1/3(-422)`` (fcc [111])."""
    hexagonal = spot.hkil is not None
    if spot.kind == "holz-projection" and spot.projected_hkl is not None:
        body = indices_text(shown_plane(spot.projected_hkl, hexagonal), style).strip("$")
        text = fraction_text(spot.projected_denominator, style).strip("$") + "(" + body + ")"
        return "$" + text + "$" if style == "mathtext" else text
    h = spot.hkil if hexagonal else spot.hkl
    return "-" if h is None else indices_text(h, style)


def kind_text(spot, style: str = "plain") -> str:
    """What a spot was explained as, in words; a projection names the reflection it comes from."""
    if spot.kind == "holz-projection" and spot.hkl is not None:
        src = spot.hkil if spot.hkil is not None else spot.hkl
        return f"projected HOLZ (from {indices_text(src, style).strip('$')})"
    return {"double-diffraction": "double diffraction"}.get(spot.kind, spot.kind)


def plain_notes(best: Solution, units: Units = UNITS["nm"], style: str = "plain") -> list[str]:
    """The best solution's notes without the mistilt advice (which is shown on its own line).

    A look-alike note quotes its separating text (stored in 1/nm): it is written in `units` (unit
    labels for `style`).
    """
    notes = [n for n in best.notes if best.mistilt is None or n != best.mistilt.advice]
    for lk in best.lookalikes:
        shown = lk.separating_in(units, style)
        if shown != lk.separating:
            notes = [n.replace(f": {lk.separating}", f": {shown}") for n in notes]
    return notes


def other_lookalikes(best: Solution, style: str = "plain", units: Units = UNITS["nm"]) -> list[tuple[str, str, str]]:
    """(heading, what separates them (in `units`), tilt text) for the look-alikes not already in the notes."""
    out = []
    for lk in best.lookalikes:
        if lk.relation == "ambiguous":
            continue  # already in the notes
        z = indices_text(lk.zone_axis_4 if lk.zone_axis_4 is not None else lk.zone_axis, style)
        name = html.escape(lk.phase_name) if style == "html" else lk.phase_name
        out.append((f"{lk.relation}: {name} [{z}] (score {lk.score:.2f})", lk.separating_in(units, style),
                    lk.tilt.text if lk.tilt else ""))
    return out


def confidence_word(result: IndexResult) -> str:
    """'clear', 'likely', 'weak' or 'ambiguous' for the best solution, from its score and the look-alikes
    (:data:`CONFIDENCE_MEANING` says each in words)."""
    best = result.best
    if best is None:
        return "none"
    if any(lk.relation == "ambiguous" for lk in best.lookalikes):
        return "ambiguous"
    from saed.report.crystals_report import first_crystal_score

    # several crystals: crystal 1's score over the spots the others leave to it (the others' spots are not misfits)
    score = first_crystal_score(result) or best.score
    second = result.solutions[1].score if len(result.solutions) > 1 else 0.0
    if score >= CLEAR_MIN_SCORE and score - second >= CLEAR_MIN_LEAD:
        return "clear"
    if score >= LIKELY_MIN_SCORE:
        return "likely"
    return "weak"


def _fmt(v, spec: str, dash: str = "-") -> str:
    return dash if v is None or (isinstance(v, float) and not math.isfinite(v)) else format(v, spec)


def format_summary(result: IndexResult, *, image: str, frame: int | None = None, top: int = 5,
                   style: str = "plain", units: Units = UNITS["nm"]) -> str:
    """A plain-text summary (no colours; fits 100 columns). `style` 'unicode' draws overbars (UTF-8
    terminals); `units` sets the length unit of every spacing and scale."""
    m = result.measured
    cal = m.calibration
    rows, cols = m.image_shape
    inv = units.inverse_label(style)
    lines = [f"{image}  ({cols} x {rows} px" + (f", frame {frame}" if frame is not None else "") + f"), "
             f"{len(m.spots)} spots, centre {m.center_px[0]:.1f} {m.center_px[1]:.1f} px"]
    if cal is not None and cal.is_calibrated:
        lines.append(f"calibrated: {units.reciprocal(cal.scale_inv_nm_per_px):.5g} {inv} per px at {cal.voltage_kv:g} kV"
                     + ("  (ellipse corrected)" if cal.ellipse is not None else ""))
    else:
        lines.append("uncalibrated: indexed by spacing ratios and angles; the scale below is implied by the solution")
    if not result.solutions:
        lines.append("")
        lines.append(f"no solution: {person_text(result.message, style)}")
        return "\n".join(lines)
    best = result.best
    word = confidence_word(result)
    lines.append("")
    from saed.report.crystals_report import first_crystal_score, further_crystals_text

    lines.append(f"answer: {best.phase_name} {zone_text(best, style)}{further_crystals_text(result, style)}  ({word}, "
                 f"score {first_crystal_score(result) or best.score:.2f})")
    lines.append("")
    header = [("rank", ">"), ("phase", "<"), ("zone", "<"), ("score", ">"), ("spots", ">"), ("d err %", ">"),
              ("angle err deg", ">"), (f"scale {inv}/px", ">")]
    table = []
    for i, s in enumerate(result.solutions[:top]):
        scale = f"{units.reciprocal(s.scale_inv_nm_per_px):.5g}"
        if s.scale_error_pct is not None:
            scale += f" ({signed_text(s.scale_error_pct, 1)} %)"
        table.append([str(i + 1), s.phase_name, zone_text(s, style), f"{s.score:.2f}",
                      f"{s.n_explained}/{len(s.indexed)}", _fmt(s.mean_d_error_pct, ".2f"),
                      _fmt(s.mean_angle_error_deg, ".2f"), scale])
    lines += table_lines(header, table)
    lines.append("")
    lines += _best_block(best, calibrated=cal is not None and cal.is_calibrated, style=style, units=units)
    from saed.report.crystals_report import crystals_lines

    lines += crystals_lines(result, style)  # further crystals, their relationship, the result's notes
    if result.message:
        lines.append(wrapped("note: ", person_text(result.message, style)))
    lines.append("")
    lines += [textwrap.fill(t, 100, subsequent_indent="  ") for t in legend_lines(word)]
    return "\n".join(lines)


def _best_block(best: Solution, *, calibrated: bool, style: str, units: Units) -> list[str]:
    rot = degrees_text(best.in_plane_rotation_deg, style=style)
    out = [f"best: {best.phase_name} {zone_text(best, style)}, in-plane rotation {rot}"]
    if not calibrated:
        txt = f"  implied scale {units.reciprocal(best.scale_inv_nm_per_px):.5g} {units.inverse_label(style)} per px"
        if best.implied_camera_length_mm is not None:
            txt += f", camera length {best.implied_camera_length_mm:.0f} mm"
        out.append(txt)
    if best.mistilt is not None:
        out.append(wrapped("  mistilt: ", person_text(best.mistilt.advice, style)))
    out += [wrapped("  note: ", person_text(n, style)) for n in plain_notes(best, units, style)]
    for head, sep, tilt in other_lookalikes(best, style, units):
        out.append(wrapped(f"  {head}: ", person_text(sep, style) + (f"; {person_text(tilt, style)}" if tilt else "")))
    shown = sorted((s for s in best.indexed), key=lambda s: (s.hkl is None, s.d_nm_measured * -1))
    out.append("")
    u = units.label(style)
    header = [("hkl", "<"), ("x px", ">"), ("y px", ">"), (f"d meas {u}", ">"), (f"d calc {u}", ">"),
              ("err %", ">"), ("explained as", "<")]
    rows = [[spot_label(s, style), f"{s.x_px:.1f}", f"{s.y_px:.1f}", units.length_text(s.d_nm_measured),
             units.length_text(s.d_nm_calc), signed_text(s.d_error_pct), kind_text(s, style)]
            for s in shown[:SHOWN_SPOTS]]
    out += table_lines(header, rows, indent="  ")
    if len(shown) > SHOWN_SPOTS:
        out.append(f"  ... {len(shown) - SHOWN_SPOTS} more spots (all in --json)")
    if any(s.kind == "holz-projection" for s in shown[:SHOWN_SPOTS]):
        out.append("  projected HOLZ: a higher-order Laue-zone reflection seen at its projection onto the zero "
                   "layer (thin or faulted foil); d calc is the spacing of that projected position")
    return out
