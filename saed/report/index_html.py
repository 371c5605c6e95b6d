"""A self-contained HTML report of indexed patterns: overlay, solution table, spot table, look-alikes.

One file (``index.html``) with the overlays embedded as base64 PNG and the style inline, so it
can be mailed or archived as it is. Text is escaped; nothing is fetched from the network.
"""

from __future__ import annotations

import base64
import html
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from saed.crystal.notation import UNITS, Units, person_text, signed_text
from saed.errors import InputError
from saed.index.values import IndexResult
from saed.files import atomic_write_text
from saed.report.index_overlay import overlay_figure_bytes
from saed.report.index_summary import (CONFIDENCE_MEANING, SCORE_MEANING, confidence_word, kind_text, other_lookalikes,
                                      plain_notes, spot_label, zone_text)

__all__ = ["ReportEntry", "report_html", "write_report"]

_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',Roboto,Helvetica,Arial,sans-serif;margin:24px auto;
max-width:1180px;color:#1d1d1f;background:#fafafa;line-height:1.4}
h1{font-size:22px;margin:0 0 4px} h2{font-size:18px;margin:28px 0 6px;border-bottom:1px solid #ddd;padding-bottom:4px}
.sub{color:#555;font-size:13px;margin-bottom:14px}
.card{background:#fff;border:1px solid #e2e2e2;border-radius:8px;padding:14px 16px;margin:14px 0}
.grid{display:grid;grid-template-columns:minmax(0,1.15fr) minmax(0,1fr);gap:16px;align-items:start}
img{max-width:100%;border-radius:4px;border:1px solid #ccc}
table{border-collapse:collapse;font-size:12.5px;width:100%}
th,td{padding:3px 7px;border-bottom:1px solid #eee;text-align:right;white-space:nowrap}
th{background:#f3f3f3;font-weight:600} td.l,th.l{text-align:left;white-space:normal}
.answer{font-size:17px;font-weight:600;margin:2px 0 8px}
.tag{display:inline-block;border-radius:10px;padding:1px 9px;font-size:12px;font-weight:600;margin-left:6px}
.clear{background:#d8f5dd;color:#146c2e} .likely{background:#fff1cc;color:#7a5400}
.ambiguous,.weak{background:#ffe0dd;color:#9b1c12} .none{background:#eee;color:#555}
ul{margin:4px 0 4px 18px;padding:0} li{margin:3px 0;font-size:13.5px}
.k-allowed{color:#146c2e} .k-double-diffraction{color:#8a6d00} .k-holz-projection{color:#6b2fa0}
.k-forbidden,.k-unindexed{color:#b3261e}
.foot{color:#777;font-size:12px;margin-top:30px}
.grid table td:last-child{white-space:normal}
.ob{text-decoration:overline} abbr{text-decoration:underline dotted;cursor:help}
.legend{color:#555;font-size:12px;margin:6px 0 0}
"""


@dataclass(frozen=True, eq=False)
class ReportEntry:
    """One pattern of a report: its name, the image, the result and the pixels the image stage ignored."""

    name: str
    image: np.ndarray
    result: IndexResult
    ignored: np.ndarray | None = None
    caption: str = ""
    overlay_png: bytes | None = None  # reused when already rendered


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _f(v, spec: str) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "&ndash;"
    return format(v, spec)


def _hkl(s) -> str:
    return "&ndash;" if s.hkl is None else spot_label(s, "html")


_SCORE_HEAD = f'<abbr title="{html.escape(SCORE_MEANING, quote=True)}">score</abbr>'


def _tag(word: str) -> str:
    return (f'<span class="tag {word}" title="{html.escape(CONFIDENCE_MEANING.get(word, ""), quote=True)}">'
            f'{word}</span>')


def _entry_html(entry: ReportEntry, k: int, units: Units = UNITS["nm"]) -> str:
    r = entry.result
    m = r.measured
    cal = m.calibration
    png = entry.overlay_png or overlay_figure_bytes(entry.image, r, title=entry.name, dpi=90, size_in=7.5,
                                                    ignored=entry.ignored, units=units)
    img = f'<img alt="overlay of {_e(entry.name)}" src="data:image/png;base64,{base64.b64encode(png).decode()}">'
    best = r.best
    word = confidence_word(r)
    parts = [f'<h2 id="p{k}">{_e(entry.name)}</h2>']
    if entry.caption:  # the caption's indices get overbars like the rest of the page
        parts.append(f'<div class="sub">{person_text(entry.caption, "html")}</div>')
    inv = units.inverse_label("html")
    u = units.label("html")
    calib = (f"calibrated {units.reciprocal(cal.scale_inv_nm_per_px):.5g} {inv} per px" if cal is not None and cal.is_calibrated
             else "uncalibrated (indexed by ratios and angles)")
    parts.append(f'<div class="sub">{m.image_shape[1]} &times; {m.image_shape[0]} px, {len(m.spots)} spots, centre '
                 f'({m.center_px[0]:.1f}, {m.center_px[1]:.1f}) px, {calib}, {cal.voltage_kv:g} kV</div>')
    right = []
    if best is None:
        right.append(f'<div class="answer">No solution {_tag("none")}</div>'
                     f'<p>{person_text(r.message, "html")}</p>')
    else:
        from saed.report.crystals_report import explained_text, further_crystals_text

        right.append(f'<div class="answer">{_e(best.phase_name)} {zone_text(best, "html")}'
                     f'{further_crystals_text(r, "html")}{_tag(word)}</div>')
        right.append(f'<div class="sub">{_SCORE_HEAD} {best.score:.2f}; {explained_text(r, best)}; '
                     f'd error {_f(best.mean_d_error_pct, ".2f")} %; angle error {_f(best.mean_angle_error_deg, ".2f")}&deg;; '
                     f'in-plane rotation {best.in_plane_rotation_deg:.1f}&deg;</div>')
        rows = ['<tr><th>rank</th><th class="l">phase</th><th class="l">zone</th>'
                f'<th>{_SCORE_HEAD}</th><th>spots</th>'
                f'<th>d err %</th><th>angle err &deg;</th><th>scale {inv}/px</th></tr>']
        for i, s in enumerate(r.solutions):
            sc = f"{units.reciprocal(s.scale_inv_nm_per_px):.5g}" + (f" ({signed_text(s.scale_error_pct, 1)}&nbsp;%)" if s.scale_error_pct is not None else "")
            if s.implied_camera_length_mm is not None and not (cal is not None and cal.is_calibrated):
                sc += f", L = {s.implied_camera_length_mm:.0f} mm"
            rows.append(f"<tr><td>{i + 1}</td><td class='l' style='white-space:nowrap'>{_e(s.phase_name)}</td><td class='l' style='white-space:nowrap'>{zone_text(s, 'html')}</td>"
                        f"<td>{s.score:.2f}</td><td>{s.n_explained}/{len(s.indexed)}</td>"
                        f"<td>{_f(s.mean_d_error_pct, '.2f')}</td><td>{_f(s.mean_angle_error_deg, '.2f')}</td><td>{sc}</td></tr>")
        right.append("<table>" + "".join(rows) + "</table>")
        right.append(f'<p class="legend">{_e(SCORE_MEANING)}. {_e(word)}: {_e(CONFIDENCE_MEANING[word])}.</p>')
        notes = []
        if best.mistilt is not None:
            notes.append(f"<li><b>Mistilt.</b> {person_text(best.mistilt.advice, 'html')}</li>")
        notes += [f"<li>{person_text(n, 'html')}</li>" for n in plain_notes(best, units, 'html')]
        for head, sep, tilt in other_lookalikes(best, "html", units):
            notes.append(f"<li><b>{head[0].upper() + head[1:]}.</b> {person_text(sep, 'html')}"
                         + (f" <i>{person_text(tilt, 'html')}</i>" if tilt else "") + "</li>")
        if r.message:
            notes.append(f"<li>{person_text(r.message, 'html')}</li>")
        if notes:
            right.append("<h3 style='font-size:14px;margin:14px 0 2px'>Notes and look-alikes</h3><ul>"
                         + "".join(notes) + "</ul>")
        from saed.report.crystals_report import crystals_html

        right.append(crystals_html(r))  # further crystals and their relationship
    parts.append(f'<div class="card grid"><div>{img}</div><div>{"".join(right)}</div></div>')
    if best is not None:
        rows = ['<tr><th class="l">hkl</th><th>x px</th><th>y px</th>'
                f'<th>d meas {u}</th><th>d calc {u}</th>'
                '<th>err %</th><th>residual px</th><th>intensity</th><th class="l">explained as</th></tr>']
        for s in sorted(best.indexed, key=lambda s: -s.d_nm_measured):
            rows.append(f"<tr><td class='l'>{_hkl(s)}</td><td>{s.x_px:.1f}</td><td>{s.y_px:.1f}</td>"
                        f"<td>{units.length_text(s.d_nm_measured)}</td>"
                        f"<td>{units.length_text(s.d_nm_calc).replace('-', '&ndash;')}</td><td>{signed_text(s.d_error_pct) if s.d_error_pct is not None else '&ndash;'}</td>"
                        f"<td>{_f(s.residual_px, '.2f')}</td><td>{s.intensity:.0f}</td>"
                        f"<td class='l k-{s.kind}'>{kind_text(s, 'html')}</td></tr>")
        holz = ("<p class='legend'>projected HOLZ: a higher-order Laue-zone reflection seen at its projection onto "
                "the zero layer (thin or faulted foil); d calc is the spacing of that projected position.</p>"
                if any(s.kind == "holz-projection" for s in best.indexed) else "")
        parts.append(f'<div class="card"><b>Spots of the best solution</b><table>{"".join(rows)}</table>{holz}</div>')
    return "".join(parts)


def report_html(entries: list[ReportEntry], *, title: str = "saed report", intro: str = "",
                units: Units = UNITS["nm"]) -> str:
    """The HTML text of a report."""
    from saed import __version__

    toc = ""
    if len(entries) > 1:
        items = []
        for k, e in enumerate(entries):
            b = e.result.best
            ans = (f"{_e(b.phase_name)} {zone_text(b, 'html')} ({confidence_word(e.result)})" if b is not None
                   else "no solution")
            items.append(f'<li><a href="#p{k}">{_e(e.name)}</a>: {ans}</li>')
        toc = '<div class="card"><b>Patterns</b><ul>' + "".join(items) + "</ul></div>"
    body = "".join(_entry_html(e, k, units) for k, e in enumerate(entries))
    return (f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{_e(title)}</title>"
            f"<style>{_STYLE}</style></head><body><h1>{_e(title)}</h1>"
            + (f'<div class="sub">{_e(intro)}</div>' if intro else "") + toc + body
            + f'<div class="foot">Written by saed {_e(__version__)}. Kinematic simulation; an indexed pattern is '
              'evidence, not proof: confirm important identifications with a second zone axis.</div></body></html>')


def write_report(folder, entries: list[ReportEntry], *, title: str = "saed report", intro: str = "",
                 units: Units = UNITS["nm"]) -> Path:
    """Write ``index.html`` into `folder` (created if needed); returns its path."""
    d = Path(folder)
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{folder}: cannot make the report folder ({exc.strerror or exc})") from None
    path = d / "index.html"
    atomic_write_text(path, report_html(entries, title=title, intro=intro, units=units))
    return path
