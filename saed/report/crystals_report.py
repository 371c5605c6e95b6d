"""The crystals of one pattern and their orientation relationship in the terminal summary, the HTML
report and the overlay (each crystal in its own colour, with a legend).

Crystal 1 keeps the overlay's usual colours (measured spots by kind, the simulated pattern in
cyan); crystals 2 and 3 get :data:`CRYSTAL_COLOURS` for their simulated pattern, their own spots
and their labels; spots two crystals share get a second, dashed ring in the further crystal's
colour; spots explained as double diffraction across two crystals are marked with a small plus.
"""

from __future__ import annotations

import html
import math

import numpy as np

from saed.crystal.notation import pad, person_text, zone_text
from saed.index.values import EXPLAINED_KINDS
from saed.report.terminal_text import wrapped

__all__ = ["CRYSTAL_COLOURS", "crystal_label", "crystals_lines", "crystals_html", "crystals_view", "draw_further_crystals",
           "spots_of_further_crystals", "further_crystals_text", "first_crystal_score"]

#: Colours of crystals 2 and 3 (crystal 1 keeps the overlay's own colours).
CRYSTAL_COLOURS = ("#ff9f0a", "#ff6ad5")
CROSS_DD_COLOUR = "#ffd60a"


def _zone(sol, style: str = "plain") -> str:
    """The zone of a solution through the one formatter (4-index on hexagonal axes, overbars per medium)."""
    return zone_text(sol.zone_axis_4 if sol.zone_axis_4 is not None else sol.zone_axis, False, style)


def crystal_label(result, k: int, style: str = "plain") -> str:
    """'crystal 2: Ni3Al [001], ordered precipitate' in `style` (names escaped for 'html')."""
    c = result.crystals[k]
    esc = html.escape if style == "html" else str
    role = "" if c.role in ("best", "second", "third") else f", {esc(c.role)}"
    return f"crystal {k + 1}: {esc(c.phase_name)} {_zone(c.solution, style)}{role}"


def _relationship_legend(rel) -> str:
    """'1-2: Sigma-3 twin, 0.4 deg off' (or the misorientation when no standard relationship fits)."""
    a, b = rel.crystals
    name = rel.name if rel.name != "none" else f"no standard relationship ({rel.misorientation_deg:.1f} deg)"
    dev = f", {rel.deviation_deg:.1f} deg off" if rel.deviation_deg is not None else ""
    return f"{a + 1}-{b + 1}: {name}{dev}"


def first_crystal_score(result) -> float | None:
    """Crystal 1's score over the spots the further crystals leave to it (None with one crystal: then the
    best solution's score is the answer's)."""
    return result.crystals[0].solution.score if len(result.crystals) > 1 else None


def further_crystals_text(result, style: str = "plain") -> str:
    """What the answer line adds for a pattern of several crystals: ' + Co-hcp [2-1-10] (2 crystals,
    Shoji-Nishiyama)'; '' for one crystal. A crystal whose phase the pattern does not decide carries its
    rivals: ' + Co-fcc [011] or Ni'."""
    if len(result.crystals) < 2:
        return ""
    rels = [r.name for r in result.orientation_relationships if r.name != "none"]
    esc = html.escape if style == "html" else str
    more = "".join(f" + {esc(c.phase_name)} {_zone(c.solution, style)}"
                   + "".join(f" or {esc(n)}" for n in c.undecided_with) for c in result.crystals[1:])
    return more + f" ({len(result.crystals)} crystals" + (f", {', '.join(rels)}" if rels else "") + ")"


def _lookalike_notes(result) -> list[str]:
    """Further crystals that the best solution's look-alike list names as competitors."""
    out = []
    if not result.crystals or result.best is None:
        return out
    for k, c in enumerate(result.crystals[1:], start=2):
        for lk in result.best.lookalikes:
            if lk.phase_name == c.phase_name and sorted(map(abs, lk.zone_axis)) == sorted(map(abs, c.solution.zone_axis)):
                out.append(f"the look-alike {lk.phase_name} {_zone(c.solution)} listed above is crystal {k} of this "
                           "pattern, not a competing explanation of the same spots")
                break
    return out


def crystals_lines(result, style: str = "plain") -> list[str]:
    """Lines for the terminal summary: the crystals, the relationships, the notes of the multi-crystal search
    (`style` 'unicode' draws overbars, as the rest of the summary)."""
    out: list[str] = []
    if len(result.crystals) > 1:
        out.append("")
        out.append(f"crystals in the pattern: {len(result.crystals)} (each score counts the spots the others leave to it)")
        for k, c in enumerate(result.crystals):
            out.append(f"  {k + 1}  {c.phase_name:<10} {pad(_zone(c.solution, style), 12)} score {c.solution.score:.2f}  "
                       f"{len(c.own_spots)} own spots, {len(c.shared_spots)} shared"
                       + ("" if c.role in ("best", "second", "third") else f"  ({c.role})")
                       + (f"  (or {', '.join(c.undecided_with)}: not decided, see the note)" if c.undecided_with else ""))
        for r in result.orientation_relationships:
            a, b = r.crystals
            out.append(wrapped(f"  relationship {a + 1}-{b + 1}: ", person_text(r.text, style)))
        if result.cross_double_diffraction:
            out.append(f"  {len(result.cross_double_diffraction)} spots are double diffraction across the crystals "
                       "(g1 + g2), not a further crystal")
    notes = list(result.notes) + _lookalike_notes(result)
    if notes:
        out.append("")
        out += [wrapped("note: ", person_text(n, style)) for n in notes]
    return out


def crystals_html(result, *, with_result_notes: bool = True) -> str:
    """A block for the HTML report ('' for a single crystal without notes); ``with_result_notes=False`` leaves out
    the result's own notes (for a page that lists them elsewhere) but keeps the look-alike notes."""
    e = html.escape
    parts = []
    if len(result.crystals) > 1:
        rows = ["<tr><th>#</th><th class='l'>phase</th><th class='l'>zone</th><th>score</th><th>own spots</th>"
                "<th>shared</th><th class='l'>role</th></tr>"]
        for k, c in enumerate(result.crystals):
            col = "" if k == 0 else f" style='color:{CRYSTAL_COLOURS[(k - 1) % len(CRYSTAL_COLOURS)]}'"
            rows.append(f"<tr><td{col}>{k + 1}</td><td class='l'>{e(c.phase_name)}</td><td class='l'>{_zone(c.solution, 'html')}"
                        f"</td><td>{c.solution.score:.2f}</td><td>{len(c.own_spots)}</td><td>{len(c.shared_spots)}</td>"
                        f"<td class='l'>{e(c.role)}</td></tr>")
        parts.append("<h3 style='font-size:14px;margin:14px 0 2px'>Crystals in the pattern</h3><table>"
                     + "".join(rows) + "</table>")
        for r in result.orientation_relationships:
            a, b = r.crystals
            parts.append(f"<p style='font-size:13px'><b>Relationship {a + 1}&ndash;{b + 1}: {e(r.name if r.name != 'none' else 'none of the standard ones')}"
                         f".</b> {person_text(r.text, 'html')}" + (f" <i>Source: {e(r.source)}</i>" if r.source else "")
                         + "</p>")
        if result.cross_double_diffraction:
            parts.append(f"<p style='font-size:13px'>{len(result.cross_double_diffraction)} spots are double diffraction across the crystals "
                         "(g<sub>1</sub> + g<sub>2</sub>), not a further crystal.</p>")
    notes = (list(result.notes) if with_result_notes else []) + _lookalike_notes(result)
    if notes:
        parts.append("<ul>" + "".join(f"<li>{person_text(n, 'html')}</li>" for n in notes) + "</ul>")
    return "".join(parts)


def spots_of_further_crystals(result) -> set[int]:
    """Spot indices explained by a crystal other than the first, or as double diffraction across crystals."""
    out: set[int] = set()
    for c in result.crystals[1:]:
        out.update(c.own_spots)
    out.update(d.spot_index for d in result.cross_double_diffraction)
    return out


def explained_text(result, best) -> str:
    """'16/43 spots explained' for one crystal; with further crystals the count over all of them, so a
    two-crystal answer does not read as a weak one: '38/43 spots explained by 2 crystals' (each crystal's
    own count is in the crystals block).
    """
    n = len(best.indexed)
    if len(result.crystals) < 2:
        return f"{best.n_explained}/{n} spots explained"
    first = {s.spot_index for s in best.indexed if s.kind in EXPLAINED_KINDS}
    every = first | spots_of_further_crystals(result)
    for c in result.crystals[1:]:
        every.update(c.shared_spots)
    return f"{len(every)}/{n} spots explained by {len(result.crystals)} crystals"


def draw_further_crystals(ax, result, *, bounds, unit: float, label_text) -> list[tuple[str, str]]:
    """Draw crystals 2 and 3 (simulated pattern, their spots, labels) on `ax`; legend entries (text, colour).

    `label_text(spot)` gives the label of an IndexedSpot as the overlay writes it.
    """
    from matplotlib.patches import Circle, Rectangle

    x0, x1, y0, y1 = bounds
    m = result.measured
    cx, cy = m.center_px
    legend: list[tuple[str, str]] = []
    if len(result.crystals) < 2:
        return legend
    legend.append((crystal_label(result, 0, "mathtext") + " (spot colours by kind, cyan squares)", "#64d2ff"))
    for k, c in enumerate(result.crystals[1:], start=1):
        col = CRYSTAL_COLOURS[(k - 1) % len(CRYSTAL_COLOURS)]
        sol = c.solution
        for (x, y), i, kind in zip(sol.predicted_xy_px, sol.predicted_intensity, sol.predicted_kind):
            if kind != "allowed" or not (x0 <= x <= x1 and y0 <= y <= y1):
                continue
            side = unit * (0.8 + 2.2 * math.sqrt(max(float(i), 0.0)))
            ax.add_patch(Rectangle((x - side / 2, y - side / 2), side, side, fill=False, ec=col, lw=0.9, alpha=0.8))
        rec = {s.spot_index: s for s in sol.indexed}
        for i in list(c.own_spots) + list(c.shared_spots):
            s = rec.get(i)
            if s is None:
                continue
            shared = i in c.shared_spots
            r = (2.3 if shared else 1.6) * unit
            ax.add_patch(Circle((s.x_px, s.y_px), r, fill=False, ec=col, lw=1.4, ls="--" if shared else "-"))
            if not shared and s.hkl is not None:
                rr = math.hypot(s.x_px - cx, s.y_px - cy) or 1.0
                ux, uy = (s.x_px - cx) / rr, (s.y_px - cy) / rr
                ax.annotate(label_text(s), (s.x_px, s.y_px),
                            xytext=(-ux * 15, uy * 15), textcoords="offset points", ha="center", va="center",
                            fontsize=7.5, color=col, bbox=dict(boxstyle="round,pad=0.1", fc=(0, 0, 0, 0.55), ec="none"))
        legend.append((crystal_label(result, k, "mathtext") + " (squares, rings, labels)", col))
    xs, ys = np.asarray(m.spots.x_px), np.asarray(m.spots.y_px)
    for d in result.cross_double_diffraction:
        ax.plot([xs[d.spot_index]], [ys[d.spot_index]], marker="+", ms=9, mew=1.6, color=CROSS_DD_COLOUR)
    if result.cross_double_diffraction:
        legend.append(("+ double diffraction across crystals", CROSS_DD_COLOUR))
    legend += [(_relationship_legend(r), "white") for r in result.orientation_relationships]
    return legend


def crystals_view(result) -> dict | None:
    """What the ``saed serve`` page needs to draw crystals 2 and 3 over crystal 1 as the overlay does (None for one
    crystal): per further crystal its colour, legend text, simulated allowed reflections and its own and shared
    spots with labels; the spots that are double diffraction across crystals; crystal 1's legend text.

    Crystal 1 is the first solution; the page uses this only while that solution is shown.
    """
    if len(result.crystals) < 2:
        return None

    def r(v, nd):
        return round(float(v), nd)

    further = []
    for k, c in enumerate(result.crystals[1:], start=1):
        sol = c.solution
        rec = {s.spot_index: s for s in sol.indexed}
        pred = [[r(x, 1), r(y, 1), r(i, 3)] for (x, y), i, kind in
                zip(sol.predicted_xy_px, sol.predicted_intensity, sol.predicted_kind) if kind == "allowed"]
        spots = []
        for i in list(c.own_spots) + list(c.shared_spots):
            s = rec.get(int(i))
            if s is None:
                continue
            shown = s.hkil if s.hkil is not None else s.hkl
            spots.append({"index": int(i), "shared": int(i) in c.shared_spots,
                          "hkl": None if shown is None else [int(v) for v in shown]})
        further.append({"colour": CRYSTAL_COLOURS[(k - 1) % len(CRYSTAL_COLOURS)],
                        "label_html": crystal_label(result, k, "html"), "predicted": pred, "spots": spots})
    rels = [html.escape(_relationship_legend(rel)) for rel in result.orientation_relationships]
    return {"first_label_html": crystal_label(result, 0, "html"), "further": further,
            "cross_double_diffraction": sorted(int(d.spot_index) for d in result.cross_double_diffraction),
            "cross_dd_colour": CROSS_DD_COLOUR, "relationships_html": rels}
