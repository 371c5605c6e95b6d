"""The ``saed grain`` HTML report: the joint answer on top, then every pattern as ``saed index`` shows it."""

from __future__ import annotations

import html
from pathlib import Path

from saed.crystal.notation import UNITS, Units, person_text, zone_text
from saed.index.grain_values import GrainResult
from saed.files import atomic_write_text
from saed.report.grain_summary import lookalike_word
from saed.report.index_html import ReportEntry, report_html

__all__ = ["grain_card_html", "write_grain_report"]


def _e(t) -> str:
    return html.escape(str(t))


def _zone(p) -> str:
    """The zone with overbars (4-index when it has one), as HTML."""
    return zone_text(p.zone_axis_4 if p.zone_axis_4 is not None else p.zone_axis, False, "html")


def _text(t) -> str:
    """A stored plain note as HTML: escaped, index groups with overbars, 'deg' as a degree sign."""
    return person_text(str(t), "html")


def grain_card_html(res: GrainResult) -> str:
    full = [s for s in res.solutions if not s.missing]
    parts = ['<div class="card">']
    if full:
        b = full[0]
        open_ = any(lk.relation == "undecided" for lk in res.lookalikes)
        parts.append(f'<div class="answer">Grain: {_e(b.phase_name)}, one orientation for all {len(b.patterns)} patterns'
                     f'<span class="tag {"ambiguous" if open_ else "clear"}" title="joint score: mean single-pattern '
                     f'figure of merit, lowered by the misfit between patterns; 1 = every spot fits">'
                     f'{"still open" if open_ else "settled"}, joint score {b.score:.2f}</span></div>')
        parts.append("<div>Euler angles (Bunge Z X Z): " + ", ".join(f"{v:.1f}&deg;" for v in b.euler_bunge_deg)
                     + " &mdash; detector frame of the first pattern at holder readings 0, 0</div>")
        rows = "".join(f"<tr><td class='l'>{_e(p.image)}</td><td>{p.tilt_deg[0]:+.1f}</td><td>{p.tilt_deg[1]:+.1f}</td>"
                       f"<td class='l'>{_zone(p)}</td><td>{p.misfit_deg:.2f}&deg;</td><td>{p.n_spots}</td></tr>"
                       for p in b.patterns)
        parts.append("<table><tr><th class='l'>pattern</th><th>&alpha; (&deg;)</th><th>&beta; (&deg;)</th>"
                     f"<th class='l'>zone</th><th>misfit</th><th>spots</th></tr>{rows}</table>")
    if res.message:
        parts.append(f"<div class='answer'>{_text(res.message)}</div>")
    if res.lookalikes:
        items = "".join(f"<li><b>{_e(lk.phase_name)}</b>: {_e(lookalike_word(lk, res))}"
                        f" &mdash; {_text(lk.evidence)}</li>" for lk in res.lookalikes)
        parts.append(f"<div><b>Look-alikes one pattern could not separate</b><ul>{items}</ul></div>")
    if res.third_pattern is not None:
        parts.append(f"<div><b>To settle it:</b> {_text(res.third_pattern.text)}</div>")
    parts.append("</div>")
    return "".join(parts)


def write_grain_report(folder, res: GrainResult, images, *, ignored=None, title: str = "saed grain",
                       units: Units = UNITS["nm"]) -> Path:
    """Write ``index.html`` into `folder`: the grain card, then one section per pattern (lengths in `units`)."""
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    ign = ignored or [None] * len(images)
    entries = [ReportEntry(gp.image, img, gp.result, ignored=ig,
                           caption=f"holder alpha {gp.tilt_deg[0]:+.1f}, beta {gp.tilt_deg[1]:+.1f} deg")
               for gp, img, ig in zip(res.patterns, images, ign)]
    text = report_html(entries, title=title, units=units)
    text = text.replace("</h1>", "</h1>" + grain_card_html(res), 1)
    path = d / "index.html"
    atomic_write_text(path, text)
    return path
