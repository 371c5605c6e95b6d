"""The picture of a scan: phase, zone-family, orientation and figure-of-merit maps, and the text summary.

Phase map: one fill colour *and* one hatch pattern per phase, so phases stay apart in
greyscale print and for colour-blind readers. Zone-family map: each phase keeps its colour,
its zone families are lighter and darker shades of it, still hatched by phase; the legend names
each family with its frame count. Orientation map: inverse-pole-figure colours of the beam
direction (:mod:`saed.index.orientmap`) with one colour key per phase. Figure of merit: the
score on a colour bar. Grain boundaries (misorientation above a threshold) and phase
boundaries are drawn as black lines on the phase and orientation maps; every map has a scale
bar. Frames with no solution are plain light grey, errors near-black, frames not yet indexed
are left white.
"""

from __future__ import annotations

import io
import math

import numpy as np

from saed.report.scan_values import ERROR, NO_SOLUTION, NOT_DONE, ScanMap, Summary
from saed.crystal.notation import person_text, zone_text
from saed.units import percent

__all__ = ["render_scan_map", "format_summary", "summary_csv", "PHASE_COLOURS", "PHASE_HATCHES",
           "MAX_FAMILIES_SHOWN"]

#: Fill colours of phases, in order (chosen to stay distinct for the common colour-vision deficiencies).
PHASE_COLOURS = ("#2c6fbb", "#e08a2c", "#3f9e5a", "#b8407a", "#7a5fb0", "#8d6a35", "#33a9b5", "#c7b22c")
#: Hatch patterns of phases, in the same order.
PHASE_HATCHES = ("///", "...", "xx", "\\\\\\", "oo", "++", "--", "||")
#: Zone families drawn in their own colour; rarer ones share a grey "other zones".
MAX_FAMILIES_SHOWN = 12

_NO_SOLUTION_STYLE = ("#cfcfcf", "", "#8a8a8a")
_ERROR_STYLE = ("#262626", "", "#262626")
_OTHER_ZONES = "#9e9e9e"

def _runs_path(mask: np.ndarray):
    """A compound Path of the cells where `mask` is True (one rectangle per horizontal run)."""
    from matplotlib.path import Path

    verts, codes = [], []
    for iy, row in enumerate(mask):
        if not row.any():
            continue
        padded = np.concatenate([[False], row, [False]])
        d = np.diff(padded.astype(np.int8))
        starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1)
        for x0, x1 in zip(starts, ends):
            a, b, top, bot = x0 - 0.5, x1 - 0.5, iy - 0.5, iy + 0.5
            verts += [(a, top), (b, top), (b, bot), (a, bot), (a, top)]
            codes += [Path.MOVETO, Path.LINETO, Path.LINETO, Path.LINETO, Path.CLOSEPOLY]
    return Path(verts, codes) if verts else None


def _fill(ax, mask, *, face, hatch, hatch_colour):
    from matplotlib.patches import PathPatch

    path = _runs_path(mask)
    if path is not None:
        ax.add_patch(PathPatch(path, facecolor=face, hatch=hatch, edgecolor="none", hatchcolor=hatch_colour,
                               linewidth=0))


def _darker(colour: str, f: float = 0.55) -> tuple:
    from matplotlib.colors import to_rgb

    return tuple(c * f for c in to_rgb(colour))


def _tex_escape(text: str) -> str:
    """Text shown literally next to mathtext: only a dollar sign would start math (underscores outside
    $...$ are printed as they are)."""
    return text.replace("$", r"\$")


def family_mathtext(family) -> str:
    """``<2-1-10>`` as mathtext with overbars (saed.crystal.notation, as every picture writes them)."""
    if family is None:
        return "(zone ?)"
    return zone_text(family, style="mathtext", family=True)


def _phase_style(i: int):
    face = PHASE_COLOURS[i % len(PHASE_COLOURS)]
    return face, PHASE_HATCHES[i % len(PHASE_HATCHES)], _darker(face)


def _setup_axes(ax, shape, title):
    ny, nx = shape
    ax.set_xlim(-0.5, nx - 0.5)
    ax.set_ylim(ny - 0.5, -0.5)
    ax.set_aspect("equal")
    ax.set_title(title, fontsize=11)
    ax.set_xlabel("scan x (position index)")
    ax.set_ylabel("scan y (position index)")
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_facecolor("white")


def _status_patches(ax, scan: ScanMap, counts):
    from matplotlib.patches import Patch

    handles = []
    for code, style, label in ((NO_SOLUTION, _NO_SOLUTION_STYLE, "no solution"), (ERROR, _ERROR_STYLE, "error")):
        m = scan.phase_index == code
        if m.any():
            _fill(ax, m, face=style[0], hatch=style[1], hatch_colour=style[2])
            handles.append(Patch(facecolor=style[0], hatch=style[1], edgecolor=style[2], label=f"{label} ({counts[code]})"))
    n_left = int(np.count_nonzero(scan.phase_index == NOT_DONE))
    if n_left:
        handles.append(Patch(facecolor="white", edgecolor="#999999", label=f"not indexed yet ({n_left})"))
    return handles


def _shade(colour: str, rank: int) -> tuple:
    """The phase colour itself (rank 0), then alternately lighter and darker versions of it."""
    from matplotlib.colors import to_rgb

    c = np.array(to_rgb(colour))
    if rank == 0:
        return tuple(c)
    step = (rank + 1) // 2
    f = min(0.35 * step, 0.8)
    return tuple(c + (1 - c) * f) if rank % 2 else tuple(c * (1 - 0.8 * f))


def _draw_boundaries(ax, scan: ScanMap, colour="black"):
    """Grain and phase boundaries as line segments between the cells they separate."""
    from matplotlib.collections import LineCollection

    segs = []
    iy, ix = np.nonzero(scan.boundary_right)
    segs += [((x + 0.5, y - 0.5), (x + 0.5, y + 0.5)) for y, x in zip(iy.tolist(), ix.tolist())]
    iy, ix = np.nonzero(scan.boundary_down)
    segs += [((x - 0.5, y + 0.5), (x + 0.5, y + 0.5)) for y, x in zip(iy.tolist(), ix.tolist())]
    if segs:
        ax.add_collection(LineCollection(segs, colors=colour, linewidths=1.2))
    return len(segs)


def _scale_bar(ax, shape, step_nm: float | None):
    """A bar of a round length in the lower left of a map (in nm with the scan step, else in positions)."""
    ny, nx = shape
    target = max(nx / 5.0, 1.0)
    if step_nm:
        length = target * step_nm
        nice = 10 ** math.floor(math.log10(length))
        nice *= max(m for m in (1, 2, 5) if m * nice <= length) if length >= nice else 1
        cells, label = nice / step_nm, (f"{nice / 1000:g} µm" if nice >= 1000 else f"{nice:g} nm")
    else:
        nice = 10 ** math.floor(math.log10(target))
        cells = nice * max(m for m in (1, 2, 5) if m * nice <= target)
        label = f"{cells:g} step" + ("" if cells == 1 else "s")
    x0, y0 = -0.5 + 0.04 * nx, ny - 0.5 - 0.05 * ny
    ax.plot([x0, x0 + cells], [y0, y0], color="white", lw=5, solid_capstyle="butt")
    ax.plot([x0, x0 + cells], [y0, y0], color="black", lw=2.5, solid_capstyle="butt")
    ax.text(x0 + cells / 2, y0 - 0.03 * ny, label, ha="center", va="bottom", fontsize=8,
            bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1))


def _ipf_key(fig, spec, phase, name: str):
    """The colour key of the orientation map for one phase: its standard triangle, filled, corners named."""
    from saed.index.orientmap import triangle_key

    key = triangle_key(phase) if phase is not None else None
    ax = fig.add_subplot(spec)
    ax.axis("off")
    if key is None:
        ax.text(0, 0.5, f"{_tex_escape(name)}: no colour key for this Laue class (grey)", fontsize=8)
        return
    rgba, (x0, x1, y0, y1), corners, labels = key
    ax.imshow(rgba, origin="lower", extent=(x0, x1, y0, y1), interpolation="nearest")
    ax.set_aspect("equal")
    for (x, y), lab in zip(corners, labels):
        ax.annotate(zone_text(_parse_label(lab), style="mathtext"),
                    (x, y), fontsize=8, ha="center", va="top" if y <= corners[:, 1].mean() else "bottom",
                    xytext=(0, -3 if y <= corners[:, 1].mean() else 3), textcoords="offset points")
    ax.set_title(f"{_tex_escape(name)}: beam direction", fontsize=8)
    pad = 0.12 * float((x1 - x0) or 1.0)
    ax.set_xlim(x0 - pad, x1 + pad)
    ax.set_ylim(y0 - 2 * pad, y1 + 2 * pad)


def _parse_label(lab: str) -> tuple[int, ...]:
    """'2-1-10' -> (2, -1, -1, 0)."""
    import re

    return tuple(int(t) for t in re.findall(r"-?\d", lab))


def render_scan_map(scan: ScanMap, path, *, title: str = "", dpi: int = 120, step_nm: float | None = None) -> None:
    """Draw `scan` to a PNG at `path`, atomically: phase, zone family, orientation and figure-of-merit maps.

    Phase map and orientation map carry the grain boundaries (black lines, above
    ``scan.boundary_deg`` or between phases); every map has a scale bar (in nm when `step_nm`,
    the scan step, is given, else in steps). Legends: phases with counts, zone families (shades of
    their phase's colour, hatched by phase), one inverse-pole-figure colour key per phase, and the
    figure-of-merit colour bar.
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    from saed.files import atomic_write_bytes

    ny, nx = scan.shape
    side = 4.2
    aspect = ny / nx
    w, h = (side, side * aspect) if aspect <= 1 else (side / aspect, side)
    n_entries = len(scan.phases) + min(len(scan.families), MAX_FAMILIES_SHOWN + 1) + 3
    fig = Figure(figsize=(2 * w + 5.6, max(2 * h + 2.2, 0.3 * n_entries + 2.5 + 1.6 * len(scan.phases))), dpi=dpi,
                 layout="constrained")
    grid = fig.add_gridspec(2, 3, width_ratios=[w, w, 3.8])
    ax_p, ax_z = fig.add_subplot(grid[0, 0]), fig.add_subplot(grid[0, 1])
    ax_o, ax_f = fig.add_subplot(grid[1, 0]), fig.add_subplot(grid[1, 1])
    total = ny * nx
    counts = {NO_SOLUTION: int(np.count_nonzero(scan.phase_index == NO_SOLUTION)),
              ERROR: int(np.count_nonzero(scan.phase_index == ERROR))}

    _setup_axes(ax_p, scan.shape, "phase (lines: boundaries)")
    phase_handles = []
    for i, name in enumerate(scan.phases):
        face, hatch, hc = _phase_style(i)
        m = scan.phase_index == i
        _fill(ax_p, m, face=face, hatch=hatch, hatch_colour=hc)
        n = int(np.count_nonzero(m))
        phase_handles.append(Patch(facecolor=face, hatch=hatch, edgecolor=hc,
                                   label=f"{_tex_escape(name)}  {n} ({percent(n / total):.0f} %)"))
    phase_handles += _status_patches(ax_p, scan, counts)
    n_seg = _draw_boundaries(ax_p, scan)

    _setup_axes(ax_z, scan.shape, "zone axis family")
    fam_counts = [int(np.count_nonzero(scan.family_index == j)) for j in range(len(scan.families))]
    shown = sorted(range(len(scan.families)), key=lambda j: -fam_counts[j])[:MAX_FAMILIES_SHOWN]
    zone_handles = []
    pindex = {p: i for i, p in enumerate(scan.phases)}
    rank_in_phase: dict = {}
    for j in sorted(shown, key=lambda j: (pindex.get(scan.families[j].phase, 99), -fam_counts[j])):
        fam = scan.families[j]
        pi = pindex.get(fam.phase, 0)
        base, hatch, _ = _phase_style(pi)
        rank = rank_in_phase.setdefault(pi, [0])
        face = _shade(base, rank[0])
        rank[0] += 1
        _fill(ax_z, scan.family_index == j, face=face, hatch=hatch, hatch_colour=_darker(base))
        zone_handles.append(Patch(facecolor=face, hatch=hatch, edgecolor=_darker(base),
                                  label=f"{_tex_escape(fam.phase)} {family_mathtext(fam.family)}  {fam_counts[j]}"))
    rest = [j for j in range(len(scan.families)) if j not in shown]
    for j in rest:
        _, hatch, _ = _phase_style(pindex.get(scan.families[j].phase, 0))
        _fill(ax_z, scan.family_index == j, face=_OTHER_ZONES, hatch=hatch, hatch_colour="#555555")
    if rest:
        n_rest = sum(fam_counts[j] for j in rest)
        zone_handles.append(Patch(facecolor=_OTHER_ZONES, edgecolor="#555555",
                                  label=f"{len(rest)} other zone families  {n_rest}"))
    _status_patches(ax_z, scan, counts)

    _setup_axes(ax_o, scan.shape, "orientation (beam direction, colour key right)")
    rgb = np.where(np.isnan(scan.ipf_rgb), 1.0, scan.ipf_rgb)
    rgb[scan.phase_index == ERROR] = to_rgb_tuple(_ERROR_STYLE[0])
    rgb[scan.phase_index == NO_SOLUTION] = to_rgb_tuple(_NO_SOLUTION_STYLE[0])
    ax_o.imshow(rgb, interpolation="nearest", extent=(-0.5, nx - 0.5, ny - 0.5, -0.5))
    _draw_boundaries(ax_o, scan)

    _setup_axes(ax_f, scan.shape, "figure of merit (score, 0-1)")
    from matplotlib import colormaps
    cmap = colormaps["viridis"].with_extremes(bad="white")
    im = ax_f.imshow(np.ma.masked_invalid(scan.score), cmap=cmap, vmin=0.0, vmax=1.0, interpolation="nearest",
                     extent=(-0.5, nx - 0.5, ny - 0.5, -0.5))
    fig.colorbar(im, ax=ax_f, shrink=0.8, label="score (white: not indexed)")
    for ax in (ax_p, ax_z, ax_o, ax_f):
        _scale_bar(ax, scan.shape, step_nm)

    leg_spec = grid[:, 2]
    parts = [(phase_handles, "phase (frames)")] + ([(zone_handles, "zone family (frames)")] if zone_handles else [])
    n_keys = len(scan.phases)
    sub = leg_spec.subgridspec(len(parts) + n_keys, 1,
                               height_ratios=[len(hh) + 1.5 for hh, _ in parts] + [4.5] * n_keys)
    for k, (handles, heading) in enumerate(parts):
        ax = fig.add_subplot(sub[k])
        ax.axis("off")
        ax.legend(handles=handles, title=heading, loc="upper left", fontsize=9, title_fontsize=10,
                  frameon=False, handlelength=2.4, handleheight=1.6, alignment="left")
    objs = scan.phase_objects or (None,) * len(scan.phases)
    for k, (name, ph) in enumerate(zip(scan.phases, objs)):
        _ipf_key(fig, sub[len(parts) + k], ph, name)
    s = scan.summary
    head = (f"scan {ny} x {nx}: {s.n_ok} indexed, {s.n_no_solution} no solution, {s.n_error} errors; "
            f"boundaries above {scan.boundary_deg:g} deg misorientation or between phases")
    fig.suptitle(f"{_tex_escape(title)}\n{head}" if title else head, fontsize=11)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    atomic_write_bytes(path, buf.getvalue())


def to_rgb_tuple(colour: str) -> tuple:
    from matplotlib.colors import to_rgb

    return to_rgb(colour)


def format_summary(summary: Summary, style: str = "plain") -> str:
    """The summary as an aligned text table for the terminal; ``style="unicode"`` writes the zone
    families with overbars (``crystal.notation.terminal_style`` says what the terminal can show)."""
    n = max(summary.n_frames, 1)
    width = max([len(p) for p, _ in summary.phases] + [len("no solution")])
    lines = [f"{'phase':<{width}}  {'frames':>7}  {'share':>6}  zone families (frames)"]
    fams: dict = {}
    for f in summary.families:
        fams.setdefault(f.phase, []).append(f)
    for name, count in summary.phases:
        top = ", ".join(f"{person_text(f.label, style)} {f.count}" for f in fams.get(name, [])[:6])
        more = len(fams.get(name, [])) - 6
        if more > 0:
            top += f", {more} more"
        lines.append(f"{name:<{width}}  {count:>7}  {percent(count / n):>5.1f}%  {top}")
    for label, count in (("no solution", summary.n_no_solution), ("error", summary.n_error)):
        if count:
            lines.append(f"{label:<{width}}  {count:>7}  {percent(count / n):>5.1f}%")
    return "\n".join(lines)


def summary_csv(summary: Summary) -> str:
    """The summary as CSV text: one line per (phase, zone family), then the no-solution and error counts."""
    import csv

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["phase", "zone_family", "frames", "share"])
    n = max(summary.n_frames, 1)
    for f in summary.families:
        fam = "" if f.family is None else " ".join(str(v) for v in f.family)
        w.writerow([f.phase, fam, f.count, f"{f.count / n:.4f}"])
    for label, count in (("no-solution", summary.n_no_solution), ("error", summary.n_error)):
        w.writerow([label, "", count, f"{count / n:.4f}"])
    return buf.getvalue()
