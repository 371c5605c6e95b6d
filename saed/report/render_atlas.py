"""Reference sheets for a microscope session: one or two A4 pages per phase, readable when printed.

Each sheet has the phase's standard zone-axis patterns side by side at one common scale (so the
eye compares spacings between panels directly), each with its two shortest reflections, their
d-spacings, the ratio R2/R1 and the angle, and the zone map of the orientation triangle with the
tilt angles between neighbouring zones.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from saed.crystal.miller import plane_to_4
from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.files import atomic_write_bytes, check_writable
from saed.report.render_pattern import draw_pattern, index_text
from saed.report.render_zonemap import draw_zone_map

__all__ = ["atlas_pages", "write_atlas", "MAX_PANELS", "PANELS_PER_PAGE", "CAPTION_PT", "SPOT_PT"]

#: Patterns per phase (on up to two sheets); families beyond these are on the zone map only.
MAX_PANELS = 9
#: Patterns per sheet, in ROWS x COLS: large enough that the spot labels fit at a printable size.
ROWS, COLS = 2, 3
PANELS_PER_PAGE = ROWS * COLS

_PAGE_IN = (11.69, 8.27)  # A4 landscape

#: Type sizes, points. A printed A4 page is read at arm's length: 7.5 pt is the smallest size used
#: (common practice for figure labels in print: 7-8 pt and up).
TITLE_PT = 11.0
CAPTION_PT = 8.5
SPOT_PT = 7.5
ZONE_MAP_PT = 9.5
#: Caption lines under a pattern: g1, g2, ratio and angle, double-diffraction spots.
CAPTION_LINES = 4
#: Double-diffraction spots listed per caption line (the rest are counted).
DD_SHOWN = 3


def _hkl_text(phase: Phase, hkl) -> str:
    return index_text(plane_to_4(hkl) if phase.is_hexagonal else hkl)


def _zone_text(phase: Phase, uvw) -> str:
    from saed.crystal.miller import direction_to_4

    return "$[" + index_text(direction_to_4(uvw) if phase.is_hexagonal else uvw).strip("$") + "]$"


def _caption_lines(phase: Phase, summ, u) -> list[str]:
    """g1 / g2 with d, ratio and angle, and the DD spots (at most DD_SHOWN, the rest counted), each line short."""
    lines = [f"g1 {_hkl_text(phase, summ.g1_hkl)}   d {u.length_text(summ.d1_nm)} {u.label()}",
             f"g2 {_hkl_text(phase, summ.g2_hkl)}   d {u.length_text(summ.d2_nm)} {u.label()}",
             f"R2/R1 = {summ.ratio:.3f}   angle {summ.angle_deg:.1f}\N{DEGREE SIGN}"]
    dd = list(summ.double_diffraction_hkl)
    if dd:
        shown = ", ".join(_hkl_text(phase, h) for h in dd[:DD_SHOWN])
        more = f" +{len(dd) - DD_SHOWN} more" if len(dd) > DD_SHOWN else ""
        lines.append(f"DD: {shown}{more}")
    return lines


def atlas_pages(phase: Phase, *, max_index: int = 2, voltage_kv: float = 200.0, thickness_nm: float = 50.0,
                progress=None, units=None) -> list:
    """matplotlib Figures: the reference sheets of `phase`, PANELS_PER_PAGE patterns per page (module notes)."""
    from saed.simulate.families import shortest_allowed_g_inv_nm, standard_patterns

    std = standard_patterns(phase, max_index=max_index, voltage_kv=voltage_kv)
    if not std:
        raise InputError(f"{phase.name}: no zone with two independent reflections up to index {max_index}")
    shown = std[:MAX_PANELS]
    g_min = shortest_allowed_g_inv_nm(phase)
    ext = max(2.2 * g_min, 1.15 * max(s.g2_inv_nm for _, _, s in shown))
    chunks = [shown[i:i + PANELS_PER_PAGE] for i in range(0, len(shown), PANELS_PER_PAGE)]
    total = len(shown) + len(chunks)
    done = [0]

    def tick(text):
        done[0] += 1
        if progress:
            progress(done[0], total, text)

    figs = []
    for n, chunk in enumerate(chunks):
        rest = std[len(shown):] if n == len(chunks) - 1 else []
        figs.append(_page(phase, chunk, rest, ext=ext, max_index=max_index, voltage_kv=voltage_kv,
                          thickness_nm=thickness_nm, page=(n + 1, len(chunks)), tick=tick, units=units))
    return figs


def _page(phase: Phase, panels, rest, *, ext: float, max_index: int, voltage_kv: float, thickness_nm: float,
          page: tuple[int, int], tick, units=None):
    from matplotlib.figure import Figure

    from saed.crystal.notation import UNITS
    from saed.crystal.phase import space_group_in_cell

    from saed.simulate.families import zone_label
    from saed.simulate.zone import zone_pattern
    from saed.simulate.zonemap import zone_map

    fig = Figure(figsize=_PAGE_IN)
    lat = phase.lattice
    u = units or UNITS["nm"]
    cell = f"a = {u.length_text(lat.a_nm, 5)} {u.label()}" + (
        f", c = {u.length_text(lat.c_nm, 5)} {u.label()}" if abs(lat.c_nm - lat.a_nm) > 1e-9 else "")
    head = fig.text(0.015, 0.965, f"{phase.name}", fontsize=16, weight="bold", va="center")
    sheet = f"   sheet {page[0]} of {page[1]}" if page[1] > 1 else ""
    fig.text(0.015, 0.925, f"{phase.structure_type or ''}   {space_group_in_cell(phase)} ({phase.space_group_number})   "
             f"{cell}   kinematic, {voltage_kv:g} kV, foil {u.length(thickness_nm):g} {u.label()}, all patterns at one "
             f"scale{sheet}",
             fontsize=CAPTION_PT + 1, va="center")
    del head
    fig.text(0.015, 0.045, "g1 points to the right in every pattern.   Filled disc: allowed (area grows with "
             "intensity).   Open square: forbidden, present only by double diffraction (DD).",
             fontsize=CAPTION_PT, color="#333333", va="center")
    fig.text(0.015, 0.02, "Spots are labelled where the label fits.   Numbers on the zone map: tilt between "
             "neighbouring zones, and the row of spots both share (the tilt axis).",
             fontsize=CAPTION_PT, color="#333333", va="center")

    zm_ax = fig.add_axes([0.015, 0.10, 0.27, 0.74])
    draw_zone_map(zm_ax, zone_map(phase, max_index=max(max_index, 2), region="triangle"), font_size=ZONE_MAP_PT)
    zm_ax.set_title("zone map (stereographic, orientation triangle)", fontsize=CAPTION_PT)
    left_out = getattr(zm_ax, "_saed_joint_labels_left_out", 0)
    if left_out:
        fig.text(0.015, 0.085, f"{left_out} tilt label{'s' if left_out != 1 else ''} on the map left out for room",
                 fontsize=CAPTION_PT, color="#333333", va="center")
    tick(f"{phase.name} zone map")

    # A grid of ROWS x COLS right of the map, laid out in inches so that the type sizes stay printable:
    # per row a title, a square pattern and a caption of up to CAPTION_LINES lines.
    page_w, page_h = _PAGE_IN
    grid_left_in, grid_right_in = 0.30 * page_w, 0.995 * page_w
    grid_top_in, grid_bottom_in = 0.895 * page_h, 0.085 * page_h
    col_w_in = (grid_right_in - grid_left_in) / COLS
    row_h_in = (grid_top_in - grid_bottom_in) / ROWS
    line_in = CAPTION_PT * 1.25 / 72
    title_in = TITLE_PT * 1.6 / 72
    side_in = min(row_h_in - title_in - CAPTION_LINES * line_in - 0.1, col_w_in - 0.15)
    for k, (fam, _zp0, summ) in enumerate(panels):
        r, c = divmod(k, COLS)
        cx_in = grid_left_in + (c + 0.5) * col_w_in
        top_in = grid_top_in - r * row_h_in
        ax = fig.add_axes([(cx_in - side_in / 2) / page_w, (top_in - title_in - side_in) / page_h,
                           side_in / page_w, side_in / page_h])
        zp = zone_pattern(phase, fam.representative, voltage_kv=voltage_kv, max_g_inv_nm=ext * 1.45,
                          thickness_nm=thickness_nm, include_holz=False)
        i1 = int(np.flatnonzero(np.all(zp.hkl == np.array(summ.g1_hkl), axis=1))[0])
        turn = -math.degrees(math.atan2(zp.xy_inv_nm[i1, 1], zp.xy_inv_nm[i1, 0]))  # g1 to the right
        draw_pattern(ax, zp, in_plane_rotation_deg=turn, extent_inv_nm=ext, label_max_g_inv_nm=1.02 * summ.g2_inv_nm,
                     font_size=SPOT_PT, legend=False, scale_bar=(k == 0), marker_scale=0.7, label_centre=False, units=u)
        ax.set_title(_zone_text(phase, fam.representative), fontsize=TITLE_PT, pad=3)
        fig.text(cx_in / page_w, (top_in - title_in - side_in - 0.05) / page_h, "\n".join(_caption_lines(phase, summ, u)),
                 fontsize=CAPTION_PT, ha="center", va="top", linespacing=1.25)
        tick(f"{phase.name} {zone_label(phase, fam.representative)}")
    if rest:
        more = ", ".join(zone_label(phase, f.representative) for f, _, _ in rest)
        fig.text(0.985, 0.925, f"also on the map: {more}", fontsize=CAPTION_PT, ha="right", va="center", color="#333333")
    return fig


def write_atlas(phases, path, *, max_index: int = 2, voltage_kv: float = 200.0, thickness_nm: float = 50.0,
                progress=None, units=None) -> int:
    """Write the sheets of every phase (one or two pages each) to the PDF `path` (atomically); returns the page count."""
    p = Path(path)
    if p.suffix.lower() != ".pdf":
        raise InputError(f"{path}: the atlas is a PDF: give a file name ending in .pdf")
    check_writable(p)
    from matplotlib.backends.backend_pdf import PdfPages

    buf = io.BytesIO()
    n = 0
    with PdfPages(buf) as pdf:
        for i, phase in enumerate(phases):
            def sub(done, total, text, _i=i):
                if progress:
                    progress(_i * 100 + int(100 * done / max(total, 1)), 100 * len(phases), text)
            for fig in atlas_pages(phase, max_index=max_index, voltage_kv=voltage_kv, thickness_nm=thickness_nm,
                                   progress=sub, units=units):
                pdf.savefig(fig)
                n += 1
    atomic_write_bytes(p, buf.getvalue())
    return n
