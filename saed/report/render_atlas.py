"""Reference sheets for a microscope session: one PDF page per phase.

Each page has the phase's standard zone-axis patterns side by side at one common scale (so the
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
from saed.report.files import atomic_write_bytes, check_writable
from saed.report.render_pattern import draw_pattern, index_text
from saed.report.render_zonemap import draw_zone_map

__all__ = ["atlas_page", "write_atlas", "MAX_PANELS"]

#: Patterns per page (3 x 3 grid); families beyond these are on the zone map only.
MAX_PANELS = 9

_PAGE_IN = (11.69, 8.27)  # A4 landscape


def _hkl_text(phase: Phase, hkl) -> str:
    return index_text(plane_to_4(hkl) if phase.is_hexagonal else hkl)


def _zone_text(phase: Phase, uvw) -> str:
    from saed.crystal.miller import direction_to_4

    return "$[" + index_text(direction_to_4(uvw) if phase.is_hexagonal else uvw).strip("$") + "]$"


def atlas_page(phase: Phase, *, max_index: int = 2, voltage_kv: float = 200.0, thickness_nm: float = 50.0,
               progress=None, units=None):
    """A matplotlib Figure: the reference sheet of `phase` (see the module notes); lengths in `units` (nm)."""
    from matplotlib.figure import Figure

    from saed.crystal.notation import UNITS
    from saed.crystal.phase import space_group_in_cell
    from saed.simulate.families import shortest_allowed_g_inv_nm, standard_patterns, zone_label
    from saed.simulate.zone import zone_pattern
    from saed.simulate.zonemap import zone_map

    std = standard_patterns(phase, max_index=max_index, voltage_kv=voltage_kv)
    if not std:
        raise InputError(f"{phase.name}: no zone with two independent reflections up to index {max_index}")
    shown = std[:MAX_PANELS]
    g_min = shortest_allowed_g_inv_nm(phase)
    ext = max(2.2 * g_min, 1.15 * max(s.g2_inv_nm for _, _, s in shown))
    fig = Figure(figsize=_PAGE_IN)
    lat = phase.lattice
    u = units or UNITS["nm"]
    cell = f"a = {u.length_text(lat.a_nm, 5)} {u.label()}" + (
        f", c = {u.length_text(lat.c_nm, 5)} {u.label()}" if abs(lat.c_nm - lat.a_nm) > 1e-9 else "")
    fig.text(0.02, 0.965, f"{phase.name}", fontsize=16, weight="bold", va="center")
    fig.text(0.02 + 0.012 * (len(phase.name) + 2), 0.965,
             f"{phase.structure_type or ''}   {space_group_in_cell(phase)} ({phase.space_group_number})   {cell}   "
             f"kinematic, {voltage_kv:g} kV, foil {u.length(thickness_nm):g} {u.label()}, all patterns at one scale",
             fontsize=9.5, va="center")
    fig.text(0.02, 0.03, "g1 drawn to the right in every pattern   filled disc: allowed (area ~ intensity)   open square: forbidden, present only by double "
             "diffraction   angles on the map: tilt between neighbouring zones about the row written under it",
             fontsize=7.5, color="#333333")

    total = len(shown) + 1
    zm_ax = fig.add_axes([0.015, 0.07, 0.3, 0.84])
    draw_zone_map(zm_ax, zone_map(phase, max_index=max(max_index, 2), region="triangle"), font_size=7.0)
    zm_ax.set_title("zone map (stereographic, orientation triangle)", fontsize=8.5)
    if progress:
        progress(1, total, f"{phase.name} zone map")

    x0, w, gap = 0.33, 0.215, 0.007
    h_plot, h_txt = 0.23, 0.065
    for k, (fam, zp0, summ) in enumerate(shown):
        r, c = divmod(k, 3)
        left = x0 + c * (w + gap)
        bottom = 0.93 - (r + 1) * (h_plot + h_txt) + h_txt
        ax = fig.add_axes([left, bottom, w, h_plot])
        zp = zone_pattern(phase, fam.representative, voltage_kv=voltage_kv, max_g_inv_nm=ext * 1.45,
                          thickness_nm=thickness_nm, include_holz=False)
        i1 = int(np.flatnonzero(np.all(zp.hkl == np.array(summ.g1_hkl), axis=1))[0])
        turn = -math.degrees(math.atan2(zp.xy_inv_nm[i1, 1], zp.xy_inv_nm[i1, 0]))  # g1 to the right
        draw_pattern(ax, zp, in_plane_rotation_deg=turn, extent_inv_nm=ext, label_max_g_inv_nm=1.02 * summ.g2_inv_nm,
                     font_size=5.5, legend=False, scale_bar=(k == 0), marker_scale=0.55, label_centre=False, units=u)
        ax.set_title(_zone_text(phase, fam.representative), fontsize=9, pad=2)
        line1 = (f"g1 {_hkl_text(phase, summ.g1_hkl)}  d {u.length_text(summ.d1_nm)} {u.label()}     "
                 f"g2 {_hkl_text(phase, summ.g2_hkl)}  d {u.length_text(summ.d2_nm)} {u.label()}")
        line2 = f"R2/R1 = {summ.ratio:.3f}     angle {summ.angle_deg:.1f}\N{DEGREE SIGN}"
        if summ.double_diffraction_hkl:
            line2 += "     DD: " + ", ".join(_hkl_text(phase, h) for h in summ.double_diffraction_hkl[:3])
        fig.text(left + w / 2, bottom - 0.012, line1, fontsize=6.5, ha="center", va="top")
        fig.text(left + w / 2, bottom - 0.036, line2, fontsize=6.5, ha="center", va="top")
        if progress:
            progress(k + 2, total, f"{phase.name} {zone_label(phase, fam.representative)}")
    if len(std) > len(shown):
        more = ", ".join(zone_label(phase, f.representative) for f, _, _ in std[len(shown):])
        fig.text(0.98, 0.03, f"also on the map: {more}", fontsize=7, ha="right", color="#333333")
    return fig


def write_atlas(phases, path, *, max_index: int = 2, voltage_kv: float = 200.0, thickness_nm: float = 50.0,
                progress=None, units=None) -> int:
    """Write one page per phase to the PDF `path` (atomically); returns the number of pages."""
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
            fig = atlas_page(phase, max_index=max_index, voltage_kv=voltage_kv, thickness_nm=thickness_nm,
                             progress=sub, units=units)
            pdf.savefig(fig)
            n += 1
    atomic_write_bytes(p, buf.getvalue())
    return n
