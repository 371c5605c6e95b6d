"""The picture of a scan: phase map and zone-family map, plus the text summary of a batch.

Left panel: one fill colour *and* one hatch pattern per phase, so phases stay apart in
greyscale print and for colour-blind readers. Right panel: one colour per (phase, zone
family), still hatched by phase; the legend names each family with its frame count.
Frames with no solution are plain light grey, errors near-black, frames not yet indexed
are left white.
"""

from __future__ import annotations

import io

import numpy as np

from saed.batch.scan import ERROR, NO_SOLUTION, NOT_DONE, ScanMap, Summary

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
#: Zone-family colours: matplotlib's tab20 without its two greys (kept for "other", "no solution", "error").
_ZONE_COLOUR_ORDER = (0, 2, 4, 6, 8, 10, 12, 16, 18, 1, 3, 5, 7, 9, 11, 13, 17, 19)


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
    return text.replace("\\", "/").replace("$", r"\$").replace("_", r"\_")


def family_mathtext(family) -> str:
    """``<2-1-10>`` as mathtext with overbars: ``$\\langle 2\\bar{1}\\bar{1}0\\rangle$``."""
    if family is None:
        return "(zone ?)"
    sep = r"\," if any(abs(int(v)) >= 10 for v in family) else ""
    parts = [rf"\bar{{{-int(v)}}}" if int(v) < 0 else str(int(v)) for v in family]
    return r"$\langle " + sep.join(parts) + r"\rangle$"


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


def render_scan_map(scan: ScanMap, path, *, title: str = "", dpi: int = 120) -> None:
    """Draw `scan` (phase map and zone-family map with legends) to a PNG at `path`, atomically."""
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    from saed.report.files import atomic_write_bytes

    ny, nx = scan.shape
    side = 5.2
    aspect = ny / nx
    w, h = (side, side * aspect) if aspect <= 1 else (side / aspect, side)
    n_entries = len(scan.phases) + min(len(scan.families), MAX_FAMILIES_SHOWN + 1) + 3
    fig = Figure(figsize=(2 * w + 5.4, max(h + 1.3, 0.32 * n_entries + 1.8)), dpi=dpi, layout="constrained")
    ax_p, ax_z, ax_leg = fig.subplots(1, 3, width_ratios=[w, w, 3.6])
    total = ny * nx
    counts = {NO_SOLUTION: int(np.count_nonzero(scan.phase_index == NO_SOLUTION)),
              ERROR: int(np.count_nonzero(scan.phase_index == ERROR))}

    _setup_axes(ax_p, scan.shape, "phase")
    phase_handles = []
    for i, name in enumerate(scan.phases):
        face, hatch, hc = _phase_style(i)
        m = scan.phase_index == i
        _fill(ax_p, m, face=face, hatch=hatch, hatch_colour=hc)
        n = int(np.count_nonzero(m))
        phase_handles.append(Patch(facecolor=face, hatch=hatch, edgecolor=hc,
                                   label=f"{_tex_escape(name)}  {n} ({100 * n / total:.0f} %)"))
    phase_handles += _status_patches(ax_p, scan, counts)

    _setup_axes(ax_z, scan.shape, "zone axis family")
    from matplotlib import colormaps

    palette = colormaps["tab20"].colors
    fam_counts = [int(np.count_nonzero(scan.family_index == j)) for j in range(len(scan.families))]
    shown = sorted(range(len(scan.families)), key=lambda j: -fam_counts[j])[:MAX_FAMILIES_SHOWN]
    zone_handles = []
    pindex = {p: i for i, p in enumerate(scan.phases)}
    for rank, j in enumerate(sorted(shown, key=lambda j: (pindex.get(scan.families[j].phase, 99), -fam_counts[j]))):
        fam = scan.families[j]
        _, hatch, _ = _phase_style(pindex.get(fam.phase, 0))
        face = palette[_ZONE_COLOUR_ORDER[rank % len(_ZONE_COLOUR_ORDER)]]
        _fill(ax_z, scan.family_index == j, face=face, hatch=hatch, hatch_colour=_darker(face))
        zone_handles.append(Patch(facecolor=face, hatch=hatch, edgecolor=_darker(face),
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

    leg_spec = ax_leg.get_subplotspec()
    ax_leg.remove()
    parts = [(phase_handles, "phase (frames)")] + ([(zone_handles, "zone family (frames)")] if zone_handles else [])
    sub = leg_spec.subgridspec(len(parts), 1, height_ratios=[len(h) + 1.5 for h, _ in parts])
    for k, (handles, heading) in enumerate(parts):
        ax = fig.add_subplot(sub[k])
        ax.axis("off")
        ax.legend(handles=handles, title=heading, loc="upper left", fontsize=9, title_fontsize=10,
                  frameon=False, handlelength=2.4, handleheight=1.6, alignment="left")
    s = scan.summary
    head = f"scan {ny} x {nx}: {s.n_ok} indexed, {s.n_no_solution} no solution, {s.n_error} errors"
    fig.suptitle(f"{_tex_escape(title)}\n{head}" if title else head, fontsize=12)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    atomic_write_bytes(path, buf.getvalue())


def format_summary(summary: Summary) -> str:
    """The summary as an aligned text table for the terminal."""
    n = max(summary.n_frames, 1)
    width = max([len(p) for p, _ in summary.phases] + [len("no solution")])
    lines = [f"{'phase':<{width}}  {'frames':>7}  {'share':>6}  zone families (frames)"]
    fams: dict = {}
    for f in summary.families:
        fams.setdefault(f.phase, []).append(f)
    for name, count in summary.phases:
        top = ", ".join(f"{f.label} {f.count}" for f in fams.get(name, [])[:6])
        more = len(fams.get(name, [])) - 6
        if more > 0:
            top += f", {more} more"
        lines.append(f"{name:<{width}}  {count:>7}  {100 * count / n:>5.1f}%  {top}")
    for label, count in (("no solution", summary.n_no_solution), ("error", summary.n_error)):
        if count:
            lines.append(f"{label:<{width}}  {count:>7}  {100 * count / n:>5.1f}%")
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
