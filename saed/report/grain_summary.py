"""The terminal summary of ``saed grain``.

Index groups follow :mod:`saed.crystal.notation`: overbars with ``style="unicode"`` (a UTF-8 terminal),
minus signs with ``"plain"`` (the fallback, and the JSON ``summary`` of the local web page); table
columns are padded in terminal columns, so an overbar never shifts one.
"""

from __future__ import annotations

from saed.crystal.notation import pad, person_text, zone_text
from saed.index.grain_values import GrainResult

__all__ = ["format_grain_summary", "lookalike_word"]


def lookalike_word(lk, res: GrainResult) -> str:
    """'ruled out' / 'NOT decided' for another phase; '180-degree sense settled' / 'NOT settled' for the answer's own."""
    own = res.best is not None and lk.phase_name == res.best.phase_name
    if own:
        return "180-degree sense settled" if lk.relation == "decided" else "180-degree sense NOT settled"
    return "ruled out" if lk.relation == "decided" else "NOT decided"


def _zone(p, style: str) -> str:
    """The zone of a pattern or solution as a person reads it: 4-index when it has one."""
    return zone_text(p.zone_axis_4 if p.zone_axis_4 is not None else p.zone_axis, False, style)


def format_grain_summary(res: GrainResult, *, alpha_axis_note: str = "", style: str = "plain") -> str:
    """Answer first, then each pattern's zone and misfit, the look-alikes and the next pattern to record.

    `style`: 'plain' (minus signs) or 'unicode' (overbars, for a UTF-8 terminal).
    """
    def say(text: str) -> str:
        return person_text(text, style)

    lines = []
    names = ", ".join(f"{gp.image} (alpha {gp.tilt_deg[0]:+.1f}, beta {gp.tilt_deg[1]:+.1f} deg)" for gp in res.patterns)
    lines.append(f"grain series: {names}")
    if alpha_axis_note:
        lines.append(say(alpha_axis_note))
    full = [s for s in res.solutions if not s.missing]
    if res.message:
        msg = say(res.message)
        lines.append(f"no joint solution: {msg}" if not res.message.startswith("no joint") else msg)
    if full:
        b = full[0]
        undecided = [lk for lk in res.lookalikes if lk.relation == "undecided"]
        lines.append("")
        lines.append(f"answer: {b.phase_name}, one orientation for all {len(b.patterns)} patterns  "
                     f"({'still open, see below' if undecided else 'settled by the series'}; joint score "
                     f"{b.score:.2f}, 1 = every spot fits)")
        lines.append("  Euler angles (Bunge Z X Z, deg): " + ", ".join(f"{v:.1f}" for v in b.euler_bunge_deg)
                     + "   (detector frame of the first pattern at readings 0, 0)")
        lines.append("  orientation matrix U0: " + "  ".join("[" + " ".join(f"{v:+.4f}" for v in row) + "]"
                                                          for row in b.orientation_matrix))
    shown = full[:1] if full else res.solutions[:1]
    for s in shown:
        lines.append("")
        lines.append(f"  {'pattern':<28} {'alpha':>7} {'beta':>7}  {'zone':<14} {'misfit':>10}  {'spots':>5}  note")
        for p in s.patterns:
            note = "180-degree reading of the single-pattern answer" if p.turned else ""
            lines.append((f"  {p.image[-28:]:<28} {p.tilt_deg[0]:+7.1f} {p.tilt_deg[1]:+7.1f}  {pad(_zone(p, style), 14)} "
                          f"{p.misfit_deg:6.2f} deg  {p.n_spots:>5}  {note}").rstrip())
        for m in s.missing:
            lines.append(f"  {m[-28:]:<28} fits no orientation the others share")
    if res.lookalikes:
        lines.append("")
        lines.append("look-alikes one pattern could not separate:")
        for lk in res.lookalikes:
            lines.append(f"  {lk.phase_name}: {lookalike_word(lk, res)} - {say(lk.evidence)}")
    if res.third_pattern is not None:
        lines.append("")
        lines.append(f"to settle it: {say(res.third_pattern.text)}")
    if not full:
        lines.append("")
        lines.append("per-pattern answers:")
        for gp in res.patterns:
            b = gp.result.best
            lines.append(f"  {gp.image}: " + (f"{b.phase_name} {_zone(b, style)} (score {b.score:.2f})" if b else
                                                 say(gp.result.message or "no solution")))
    return "\n".join(lines)
