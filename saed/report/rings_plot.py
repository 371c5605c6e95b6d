"""Pictures of a ring analysis: the pattern with its fitted rings, the radial profile with each candidate's lines.

Left: the recorded pattern (logarithmic display) with every measured ring drawn as the fitted
ellipse over the upper half of the pattern (the lower half is left bare to compare), solid in the colour of the phase that explains it in the best solution, dashed grey when
unexplained, with a legend of the phase colours; a cross marks the centre. Right, top: the azimuthally
averaged profile (distortion undone) with the SNIP background, a triangle at each measured ring and a
d-spacing axis on top; below it one strip per
candidate solution with a stick at every ring line of each phase (height: predicted intensity,
shape of the tip tells the phases of a mixture apart), the stronger ones labelled with their hkl
(4-index hkil for hexagonal phases, overbars for negative indices) where the label covers no other;
a g = 1/d axis under the strips. Lengths are in the display units (:class:`saed.crystal.notation.Units`,
``--units``: nm by default, or Å), as in every other output.

The ring outlines come from :func:`saed.simulate.rings.ring_outline_px` and the index labels from
:mod:`saed.crystal.notation`: this module draws, it holds no ring geometry or index format of its own.
"""

from __future__ import annotations

import io
import math

import numpy as np

from saed.crystal.notation import UNITS, degrees_text, indices_text, plane_text
from saed.files import atomic_write_bytes, check_writable
from saed.report.text_boxes import TextBoxes
from saed.simulate.rings import ring_outline_px

__all__ = ["plot_rings", "plot_calibration", "line_label", "rings_figure", "zone_calibration_figure"]

#: Colours given to the phases in order of appearance (best solution first), and to unexplained rings.
PHASE_COLOURS = ("#d62728", "#1f77b4", "#2ca02c", "#9467bd", "#8c564b", "#e377c2")
UNEXPLAINED_COLOUR = "#7f7f7f"
#: Tip markers of the sticks, per phase as the colours (shape, not only colour).
PHASE_MARKERS = ("o", "^", "s", "D", "v", "P")


def line_label(lines, j: int, style: str = "mathtext") -> str:
    """hkl of ring line j (strongest family only), 4-index on hexagonal axes, through the one formatter.

    >>> from saed.crystal import builtin_phase
    >>> from saed.simulate.rings import ring_lines
    >>> line_label(ring_lines(builtin_phase("Co-hcp"), 6.0), 2, "plain")
    '10-11'
    """
    return plane_text(lines.families[j][0], lines.phase.is_hexagonal, style)


def _d_ticks_nm(g_lo: float, g_hi: float) -> list[float]:
    """Round d values (nm) between 1/g_hi and 1/g_lo for the d-spacing axis: 0.5, 0.4, 0.3, 0.25, 0.2, 0.15, 0.1, ...

    >>> _d_ticks_nm(4.0, 12.0)
    [0.25, 0.2, 0.15, 0.12, 0.1, 0.09]
    """
    nice = [1.0, 0.8, 0.6, 0.5, 0.4, 0.3, 0.25, 0.2, 0.15, 0.12, 0.1, 0.09, 0.08, 0.07, 0.06, 0.05, 0.04, 0.03, 0.025, 0.02]
    lo_d, hi_d = 1.0 / max(g_hi, 1e-9), 1.0 / max(g_lo, 1e-9)
    return [d for d in nice if lo_d <= d <= hi_d]


def _display(image) -> np.ndarray:
    img = np.asarray(image, dtype=np.float64)
    lo, hi = np.percentile(img[np.isfinite(img)], [1, 99.8])
    v = np.log1p(np.clip(img - lo, 0, None)) / math.log1p(max(hi - lo, 1e-9))
    return np.clip(v, 0, 1)


def _draw(measured, solutions, image, path, *, scale_inv_nm_per_px, title, max_strips=3, units=None):
    check_writable(path)
    fig = rings_figure(measured, solutions, image, scale_inv_nm_per_px=scale_inv_nm_per_px, title=title,
                       max_strips=max_strips, units=units)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    atomic_write_bytes(path, buf.getvalue())


def rings_figure(measured, solutions, image, *, scale_inv_nm_per_px=None, title="", max_strips=3, units=None):
    """The matplotlib Figure of the ring analysis (module notes); `units` (:class:`Units`, nm default) for
    the d-spacing and g axes."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Arc

    units = units or UNITS["nm"]
    per_nm = units.per_nm
    sols = list(solutions)[:max_strips]
    n_strips = max(len(sols), 1)
    fig = Figure(figsize=(15, 8.2), dpi=100)
    FigureCanvasAgg(fig)
    gs = fig.add_gridspec(2 + n_strips, 2, width_ratios=[1, 1.35], height_ratios=[3, 0.15] + [1] * n_strips,
                          hspace=0.08, wspace=0.12, left=0.04, right=0.98, top=0.87, bottom=0.14)
    ax_img = fig.add_subplot(gs[:, 0])
    ax_prof = fig.add_subplot(gs[0, 1])
    strips = [fig.add_subplot(gs[2 + k, 1], sharex=ax_prof) for k in range(n_strips)]
    fig.suptitle(title, fontsize=11, x=0.02, ha="left")

    # ---- image with fitted rings
    ax_img.imshow(_display(image), cmap="gray", interpolation="nearest")
    cx, cy = measured.center_px
    ell = measured.ellipse
    rings = measured.rings
    best = sols[0] if sols else None
    style_of = {}
    for m in sols:
        for ph in m.phases:
            style_of.setdefault(ph.name, len(style_of) % len(PHASE_COLOURS))
    for i, r in enumerate(rings.radius_px):
        colour, style = UNEXPLAINED_COLOUR, "--"
        if best is not None and best.ring_lines[i]:
            phases = {p for p, _ in best.ring_lines[i]}
            colour, style = PHASE_COLOURS[style_of[best.phases[min(phases)].name]], "-"
        # Upper half only (detector rows above the centre), so the recorded rings show in the other half.
        width, height, angle = ring_outline_px(r, ell)
        ax_img.add_patch(Arc((cx, cy), width, height, angle=angle, theta1=180 - angle, theta2=360 - angle,
                             edgecolor=colour, linestyle=style, linewidth=0.8, alpha=0.9))
    ax_img.plot([cx], [cy], marker="+", color="yellow", markersize=14, mew=1.5)
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=PHASE_COLOURS[k], lw=1.6, marker=PHASE_MARKERS[k], ms=5, label=name)
               for name, k in style_of.items() if best is not None and any(p.name == name for p in best.phases)]
    if any(not lines for lines in (best.ring_lines if best is not None else [])) or best is None:
        handles.append(Line2D([], [], color=UNEXPLAINED_COLOUR, lw=1.2, ls="--", label="not explained"))
    if handles:
        ax_img.legend(handles=handles, loc="lower right", fontsize=8.5, framealpha=0.9,
                      title="rings (upper half), by the phase that explains them", title_fontsize=8.5)
    ax_img.set_xlim(-0.5, image.shape[1] - 0.5)
    ax_img.set_ylim(image.shape[0] - 0.5, -0.5)
    ax_img.set_title(f"centre ({cx:.1f}, {cy:.1f}) px, ellipse {ell.axis_ratio:.4f} at "
                     f"{degrees_text(ell.major_axis_angle_deg, '.0f', 'mathtext')}",
                     fontsize=9)
    ax_img.set_xticks([])
    ax_img.set_yticks([])

    # ---- profile
    prof = measured.profile
    lo, hi = rings.r_min_px, rings.r_max_px
    sel = (prof.radius_px >= lo) & (prof.radius_px <= hi)
    x = prof.radius_px[sel]
    ax_prof.plot(x, prof.mean[sel], color="black", linewidth=0.8, label="azimuthal average")
    ax_prof.plot(x, rings.background[sel], color="#2ca02c", linewidth=0.8, linestyle="--", label="background (SNIP)")
    peak_y = np.interp(rings.radius_px, prof.radius_px, np.nan_to_num(prof.mean))
    ax_prof.plot(rings.radius_px, peak_y, linestyle="none", marker="v", color="#ff7f0e", markersize=5,
                 label="measured rings")
    ax_prof.set_yscale("log")
    ax_prof.set_ylabel("mean counts / px")
    ax_prof.tick_params(labelbottom=False)
    ax_prof.set_xlim(lo, hi)
    leg = ax_prof.legend(fontsize=8, loc="upper right")
    numbers = TextBoxes(ax_prof)
    numbers.boxes.append(leg.get_window_extent(numbers.renderer))
    for k, (r, yv) in enumerate(zip(rings.radius_px, peak_y), 1):  # ring numbers, where they fit
        for dy in (5, 14, 23):
            if numbers.try_text(r, yv, str(k), offset_pts=(0, dy), ha="center", va="bottom", fontsize=7.5):
                break
    if scale_inv_nm_per_px:
        s = scale_inv_nm_per_px
        # d in the display unit: d = per_nm / (r s) with s in 1/nm per px, and back r = per_nm / (d s).
        # (s bound now: the strips below reuse the name for each candidate's own scale)
        top = ax_prof.secondary_xaxis("top", functions=(
            lambda r, s=s: np.where(r > 0, per_nm / (np.maximum(r, 1e-9) * s), np.inf),
            lambda d, s=s: per_nm / (np.maximum(d, 1e-9) * s)))
        top.set_xlabel(f"d-spacing ({units.label('mathtext')})", fontsize=9)
        ticks = []
        for d in sorted(_d_ticks_nm(lo * s, hi * s)):  # from the outer (small d) end; ticks at least 4 % apart
            if not ticks or abs(1.0 / (d * s) - 1.0 / (ticks[-1] * s)) >= 0.04 * (hi - lo):
                ticks.append(d)
        top.set_xticks([d * per_nm for d in ticks])
        top.tick_params(labelsize=8)

    # ---- one strip per candidate
    for k, ax in enumerate(strips):
        ax.set_yticks([])
        ax.set_ylim(0, 2.1)  # sticks reach 1; the room above is for their labels
        for r in rings.radius_px:
            ax.axvline(r, color="#ff7f0e", linewidth=0.5, alpha=0.5)
        if k >= len(sols):
            ax.text(0.5, 0.5, "no candidate phase", transform=ax.transAxes, ha="center", va="center")
            continue
        m = sols[k]
        s = m.scale_inv_nm_per_px
        boxes = TextBoxes(ax)
        # The candidate's name first, so that no line label is drawn over it.
        name = ax.text(0.005, 0.95, f"#{k + 1} {m.name}  score {m.score:.2f}", transform=ax.transAxes, fontsize=8.5,
                       va="top", ha="left", zorder=5, bbox=dict(facecolor="white", edgecolor="none", alpha=0.9, pad=1))
        boxes.boxes.append(name.get_window_extent(boxes.renderer))
        tops = [max(float(a) * float(ln.intensity.max()), 1e-12) for a, ln in zip(m.amounts, m.lines)]
        ref = max(tops)
        for p, ln in enumerate(m.lines):
            rr = ln.g_inv_nm / s
            keep = (rr >= lo) & (rr <= hi)
            h = np.sqrt(ln.intensity * m.amounts[p] / ref)  # sqrt so that weak lines show
            k_style = style_of[ln.phase.name]
            colour = PHASE_COLOURS[k_style]
            ax.vlines(rr[keep], 0, h[keep], color=colour, linewidth=1.2)
            ax.plot(rr[keep], h[keep], linestyle="none", marker=PHASE_MARKERS[k_style], color=colour, markersize=3)
            strong = np.nonzero(keep & (h >= 0.12))[0]
            for j in strong[np.argsort(-h[strong], kind="stable")][:40]:  # strongest first; skip what would overprint
                boxes.try_text(rr[j], h[j], line_label(ln, j), offset_pts=(0, 2), rotation=90, fontsize=7.5,
                               ha="center", va="bottom", color=colour, inside=True)
        if k < n_strips - 1:
            ax.tick_params(labelbottom=False)
    strips[-1].set_xlabel("corrected radius (px)")
    if scale_inv_nm_per_px:
        s = scale_inv_nm_per_px
        bottom = strips[-1].secondary_xaxis(-0.55, functions=(lambda r, s=s: r * s / per_nm, lambda g, s=s: g * per_nm / s))
        bottom.set_xlabel(f"g = 1/d ({units.inverse_label('mathtext')})", fontsize=9)
        bottom.tick_params(labelsize=8)
    return fig


def plot_rings(measured, identification, image, path, *, scale_inv_nm_per_px=None, title="", units=None) -> None:
    """Write the ring-analysis picture (module notes) of `measured` with the top candidates of `identification`."""
    _draw(measured, identification.solutions, image, path, scale_inv_nm_per_px=scale_inv_nm_per_px, title=title,
          units=units)


def plot_calibration(result, image, path, *, title="", units=None) -> None:
    """Write the picture of a calibration: for rings the standard's lines at the fitted scale, for a zone
    pattern the lattice spots used with their hkl; lengths in `units` (nm default)."""
    if hasattr(result, "match"):
        _draw(result.measurement, [result.match], image, path,
              scale_inv_nm_per_px=result.calibration.scale_inv_nm_per_px, title=title, units=units)
    else:
        check_writable(path)
        buf = io.BytesIO()
        zone_calibration_figure(result, image, title=title, units=units).savefig(buf, format="png")
        atomic_write_bytes(path, buf.getvalue())


def zone_calibration_figure(result, image, *, title="", units=None):
    """The matplotlib Figure of a zone-pattern calibration: the lattice spots used, with their hkl."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    units = units or UNITS["nm"]
    fig = Figure(figsize=(8, 8.4), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_axes([0.02, 0.02, 0.96, 0.9])
    ax.imshow(_display(image), cmap="gray", interpolation="nearest")
    mp = result.measured
    cx, cy = mp.center_px
    on = mp.basis.on_lattice
    xy = mp.spots.xy_px[on]
    idx = mp.basis.indices[on]
    h1, h2 = (np.asarray(h) for h in result.basis_hkl)
    ax.plot(xy[:, 0], xy[:, 1], linestyle="none", marker="o", markersize=11, markerfacecolor="none",
            markeredgecolor=PHASE_COLOURS[0], mew=1.0)
    for (x, y), (m, n) in zip(xy, idx):
        lab = m * h1 + n * h2
        ax.annotate(indices_text(lab, "mathtext"), (x, y), textcoords="offset points",
                    xytext=(0, 9), ha="center", fontsize=7, color="yellow")
    ax.plot([cx], [cy], marker="+", color="yellow", markersize=14, mew=1.5)
    c = result.calibration
    ax.set_title(f"{title}\nscale {units.reciprocal_text(c.scale_inv_nm_per_px, 6)} {units.inverse_label('mathtext')}/px, "
                 f"ellipse {c.ellipse.axis_ratio:.4f} at {degrees_text(c.ellipse.major_axis_angle_deg, '.0f', 'mathtext')}, "
                 f"residual {result.residual_pct:.3f} %", fontsize=9)
    ax.set_xticks([])
    ax.set_yticks([])
    return fig
