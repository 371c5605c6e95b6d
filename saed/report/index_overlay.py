"""The overlay of an indexed pattern: what was measured, what the best solution predicts, the labels.

Drawn on the recorded pattern (asinh stretch, :func:`saed.report.spots_overlay.display_stretch`):

* measured spots as circles, by what they were explained as: allowed reflection (green),
  double diffraction (yellow, dashed), projected higher-order Laue-zone reflection (violet, dotted),
  forbidden or unexplained (red, with a cross);
* the best solution's simulated zero-order pattern as hollow squares (cyan; bigger = stronger) and its
  double-diffraction positions as small diamonds; the masked pixels shaded violet; a legend in plain words;
* when the answer is ambiguous, the runner-up it cannot be told from in a second panel beside it;
* the indices of the indexed spots (overbars for negatives; 4-index for hexagonal phases);
* the phase, zone axis, score and errors in the title, a scale bar in 1/nm (the implied scale
  when uncalibrated), the Laue-circle centre when the fit found a mistilt.

matplotlib is imported inside the functions.
"""

from __future__ import annotations

import io
import math

import numpy as np

from saed.report.spots_overlay import display_stretch
from saed.index.values import IndexResult
from saed.files import atomic_write_bytes, check_writable
from saed.report.index_summary import CONFIDENCE_MEANING, SCORE_SHORT, confidence_word, spot_label, zone_text
from saed.report.crystals_report import (draw_further_crystals, explained_text, further_crystals_text,
                                         spots_of_further_crystals)
from saed.report.render_pattern import nice_scale_bar_inv_nm

__all__ = ["overlay_figure_bytes", "write_index_overlay", "runner_up_to_show", "KIND_STYLE", "DEFAULT_DPI"]

#: Colour, line style and label of each spot kind.
KIND_STYLE = {
    "allowed": ("#4cd964", "-", "indexed"),
    "double-diffraction": ("#ffd60a", "--", "double diffraction"),
    "holz-projection": ("#bf5af2", ":", "projected HOLZ (thin foil / faults)"),
    "forbidden": ("#ff453a", "-", "forbidden, no route"),
    "unindexed": ("#ff453a", "-", "not explained"),
}
PRED_COLOUR = "#64d2ff"
MAX_LABELS = 36
#: Height of one legend line in the strip under the pattern (inches), and the strip's colour.
LEGEND_LINE_IN = 0.19
LEGEND_STRIP = "#16161a"

#: The shade over masked pixels (beam stop, saturation, --mask), and its legend text colour.
MASK_RGB = (0.55, 0.35, 0.95)
MASK_LEGEND_COLOUR = "#c4a7ff"
#: Overlay resolution, dots per inch (an 8-inch panel at 150 dpi is 1200 px wide).
DEFAULT_DPI = 150


def runner_up_to_show(result: IndexResult):
    """The solution to draw beside the best one: the one it is ambiguous with, when the answer is ambiguous."""
    best = result.best
    if best is None or confidence_word(result) != "ambiguous":
        return None
    amb = [lk for lk in best.lookalikes if lk.relation == "ambiguous"]
    for lk in amb:
        for s in result.solutions[1:]:
            if s.phase_name == lk.phase_name and tuple(s.zone_axis) == tuple(lk.zone_axis):
                return s
    return result.solutions[1] if len(result.solutions) > 1 else None


def overlay_figure_bytes(image: np.ndarray, result: IndexResult, *, title: str | None = None, fmt: str = "png",
                         dpi: int = DEFAULT_DPI, size_in: float = 8.0, ignored: np.ndarray | None = None,
                         units=None) -> bytes:
    """Render the overlay and return the file bytes (PNG, PDF or SVG); `units` (nm default) for the scale."""
    fig = overlay_figure(image, result, title=title, dpi=dpi, size_in=size_in, ignored=ignored, units=units)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi)
    return buf.getvalue()


def overlay_figure(image: np.ndarray, result: IndexResult, *, title: str | None = None, dpi: int = DEFAULT_DPI,
                   size_in: float = 8.0, ignored: np.ndarray | None = None, units=None):
    """The overlay as a matplotlib Figure (see :func:`overlay_figure_bytes`).

    When the answer is ambiguous, the solution it cannot be told from is drawn in a second panel beside the
    best one, on the same pattern, so the two predictions can be compared spot by spot.
    """
    from matplotlib.figure import Figure

    from saed.crystal.notation import UNITS

    units = units or UNITS["nm"]

    img = np.asarray(image)
    rows, cols = img.shape[:2]
    m = result.measured
    best = result.best or result.near_miss
    runner = runner_up_to_show(result)
    cx, cy = m.center_px
    # crop to the pattern when it fills only the middle of a large frame
    r_spots = float(np.max(np.hypot(m.spots.x_px - cx, m.spots.y_px - cy), initial=0.0)) if len(m.spots) else 0.0
    half = max(r_spots * 1.18, 60.0)
    x0, x1 = max(cx - half, -0.5), min(cx + half, cols - 0.5)
    y0, y1 = max(cy - half, -0.5), min(cy + half, rows - 0.5)
    if (x1 - x0) > 0.8 * cols and (y1 - y0) > 0.8 * rows:
        x0, x1, y0, y1 = -0.5, cols - 0.5, -0.5, rows - 0.5
    box = (x0, x1, y0, y1)
    panels = [best] + ([runner] if runner is not None else [])
    n = len(panels)
    head_in = 0.85 + (0.3 if n > 1 else 0.0)
    panel_h_in = size_in * (y1 - y0) / (x1 - x0)
    fig = Figure(figsize=(size_in * n, panel_h_in + head_in), dpi=dpi)
    cal = m.calibration
    axes, legends = [], []
    for k, sol in enumerate(panels):
        ax = fig.add_axes([k / n, 0.0, 1.0 / n, 1.0])  # placed below, once the legend's height is known
        legends.append(_panel(ax, img, m, sol, box=box, ignored=ignored, cal=cal, units=units,
                              legend=(k == n - 1) or n == 1 or (k == 0 and len(result.crystals) > 1),
                              result=result if k == 0 else None))
        axes.append(ax)
        if n > 1:
            role = "best" if k == 0 else "runner-up: one pattern cannot decide between them"
            ax.set_title(f"{sol.phase_name} {zone_text(sol, 'mathtext')} ({role})", fontsize=10, color="black", pad=4)
    # The legend goes in a dark strip under the pattern, never over spots (it covered the outer spots
    # of a pattern that fills the frame); the strip is dark so the colours read as on the pattern.
    lines = max((len(leg) for leg in legends), default=0)
    foot_in = 0.1 + LEGEND_LINE_IN * lines if lines else 0.0
    fig.set_size_inches(size_in * n, panel_h_in + head_in + foot_in)
    fh = fig.get_figheight()
    for k, ax in enumerate(axes):
        ax.set_position([k / n, foot_in / fh, 1.0 / n, panel_h_in / fh])
    if lines:
        from matplotlib.patches import Rectangle

        fig.add_artist(Rectangle((0.0, 0.0), 1.0, foot_in / fh, transform=fig.transFigure, fc=LEGEND_STRIP,
                                 ec="none", zorder=0))
        for k, leg in enumerate(legends):
            for i, (text, col) in enumerate(leg):
                fig.text(k / n + 0.012, (foot_in - 0.05 - LEGEND_LINE_IN * (i + 0.5)) / fh, text, color=col,
                         fontsize=8.5, va="center", ha="left")
    src = title or m.source or "pattern"
    if best is None:
        line1 = f"{src}: no solution"
        line2 = result.message
    else:
        word = confidence_word(result) if result.best is not None else "near miss"
        line1 = f"{best.phase_name} {zone_text(best, 'mathtext')}   score {best.score:.2f} ({word})   -   {src}"
        if len(result.crystals) > 1:  # further crystals and their relationship, as the answer line says them
            line1 = (f"{best.phase_name} {zone_text(best, 'mathtext')}{further_crystals_text(result, 'mathtext')}"
                     f"   -   {src}")
        line2 = (f"{explained_text(result, best)}, d error {best.mean_d_error_pct:.2f} %, "
                 f"angle error {best.mean_angle_error_deg:.2f}\N{DEGREE SIGN}, in-plane rotation {best.in_plane_rotation_deg:.1f}\N{DEGREE SIGN}, "
                 f"{units.reciprocal(best.scale_inv_nm_per_px):.5g} {units.inverse_label('mathtext')} per px" + ("" if cal is not None and cal.is_calibrated else " (implied)"))
    fig.text(0.01, 1.0 - 0.12 / fh, line1, fontsize=11.5, fontweight="bold", va="top")
    fig.text(0.01, 1.0 - 0.45 / fh, line2[:150 * n], fontsize=8.5, va="top")
    if best is not None:
        legend = SCORE_SHORT + (f"   {word}: {CONFIDENCE_MEANING[word]}" if word in CONFIDENCE_MEANING else "")
        fig.text(0.01, 1.0 - 0.66 / fh, legend if len(legend) <= 140 * n else SCORE_SHORT, fontsize=7.5, va="top",
                 color="#444444")
    return fig


def _panel(ax, img, m, best, *, box, ignored, cal, legend: bool, units,
           result: IndexResult | None = None) -> list[tuple[str, str]]:
    """One solution's prediction and the measured spots on the pattern (the whole overlay when unambiguous).

    With `result`, the further crystals it found (crystals 2 and 3) are drawn too, each in its own colour.
    Returns the legend lines (text, colour) of what was drawn when `legend` is set, else [].
    """
    from matplotlib.patches import Circle, Rectangle

    x0, x1, y0, y1 = box
    rows, cols = img.shape[:2]
    cx, cy = m.center_px
    span = max(x1 - x0, y1 - y0)
    ax.imshow(display_stretch(img), cmap="gray", vmin=0, vmax=1, interpolation="antialiased")
    masked = ignored is not None and bool(np.any(ignored))
    if masked:
        shade = np.zeros((rows, cols, 4), np.float32)
        shade[..., 0], shade[..., 1], shade[..., 2] = MASK_RGB
        shade[..., 3] = np.where(ignored, 0.3, 0.0)
        ax.imshow(shade, interpolation="nearest")
    unit = span / 100.0  # drawing unit: 1 % of the shown width
    lw = 1.1
    scale = best.scale_inv_nm_per_px if best is not None else (cal.scale_inv_nm_per_px if cal else None)
    if best is not None:
        px = best.predicted_xy_px
        inten = best.predicted_intensity
        for (x, y), i, kind in zip(px, inten, best.predicted_kind):
            if not (x0 <= x <= x1 and y0 <= y <= y1):
                continue
            if kind == "double-diffraction":
                ax.plot([x], [y], marker="D", ms=4, mfc="none", mec=PRED_COLOUR, mew=0.9, alpha=0.8)
                continue
            side = unit * (0.8 + 2.2 * math.sqrt(max(float(i), 0.0)))
            ax.add_patch(Rectangle((x - side / 2, y - side / 2), side, side, fill=False, ec=PRED_COLOUR, lw=0.9,
                                   alpha=0.75))
    rec = {s.spot_index: s for s in best.indexed} if best is not None else {}
    # explained by crystal 2 or 3: no red cross for crystal 1
    elsewhere = spots_of_further_crystals(result) if result is not None else set()

    def kind_of(k):
        return rec[k].kind if k in rec else "unindexed"

    shown = [k for k in range(len(m.spots)) if not (k in elsewhere and kind_of(k) in ("forbidden", "unindexed"))]
    r_circ = 1.6 * unit
    labels = []
    for k in shown:
        x, y = float(m.spots.x_px[k]), float(m.spots.y_px[k])
        s = rec.get(k)
        kind = s.kind if s is not None else "unindexed"
        col, ls, _ = KIND_STYLE[kind]
        ax.add_patch(Circle((x, y), r_circ, fill=False, ec=col, lw=1.4 * lw, ls=ls))
        if kind in ("forbidden", "unindexed"):
            d = 0.7 * r_circ
            ax.plot([x - d, x + d], [y - d, y + d], color=col, lw=lw)
            ax.plot([x - d, x + d], [y + d, y - d], color=col, lw=lw)
        if s is not None and s.hkl is not None:
            labels.append((math.hypot(x - cx, y - cy), x, y, spot_label(s, "mathtext"), col))
    labels.sort(key=lambda t: t[0])
    for r, x, y, idx, col in labels[:MAX_LABELS]:
        ux, uy = ((x - cx) / r, (y - cy) / r) if r > 0 else (0.0, -1.0)
        ax.annotate(idx, (x, y), xytext=(ux * 15, -uy * 15), textcoords="offset points", ha="center",
                    va="center", fontsize=8, color="white",
                    bbox=dict(boxstyle="round,pad=0.12", fc=(0, 0, 0, 0.55), ec="none"))
    arm = 2.5 * unit
    ax.plot([cx - arm, cx + arm], [cy, cy], color="#ff375f", lw=1.5 * lw)
    ax.plot([cx, cx], [cy - arm, cy + arm], color="#ff375f", lw=1.5 * lw)
    if best is not None and best.mistilt is not None and best.mistilt.reliable and best.mistilt.tilt_deg >= 0.15:
        lx, ly = best.mistilt.laue_center_px
        if x0 <= lx <= x1 and y0 <= ly <= y1:
            ax.plot([lx], [ly], marker="x", ms=9, color="#ff9f0a", mew=2)
            ax.annotate("Laue-circle centre", (lx, ly), xytext=(8, 8), textcoords="offset points", color="#ff9f0a",
                        fontsize=8)
    if scale:
        bar = nice_scale_bar_inv_nm(units.reciprocal(span * scale))  # a round length in the display unit
        bar_px = bar * units.per_nm / scale
        bx, by = x0 + 0.05 * (x1 - x0), y0 + 0.95 * (y1 - y0)
        ax.plot([bx, bx + bar_px], [by, by], color="white", lw=4, solid_capstyle="butt")
        lab = f"{bar:g} {units.inverse_label('mathtext')}" + ("" if cal is not None and cal.is_calibrated else " (implied)")
        ax.text(bx + bar_px / 2, by - 0.015 * (y1 - y0), lab, color="white", ha="center", va="bottom", fontsize=9,
                fontweight="bold", bbox=dict(boxstyle="round,pad=0.2", fc=(0, 0, 0, 0.55), ec="none"))
    further = []
    if result is not None:
        further = draw_further_crystals(ax, result, bounds=(x0, x1, y0, y1), unit=unit,
                                        label_text=lambda spot: spot_label(spot, "mathtext"))
    if legend:
        kinds_here = sorted({kind_of(k) for k in shown}, key=lambda k: list(KIND_STYLE).index(k))
        leg = [(f"circle: measured spot, {KIND_STYLE[k][2]}", KIND_STYLE[k][0]) for k in kinds_here]
        if best is not None:
            leg.append(("square: where this solution puts a spot (bigger = stronger)", PRED_COLOUR))
            if any(k == "double-diffraction" for k in best.predicted_kind):
                leg.append(("diamond: spot only by double diffraction", PRED_COLOUR))
        leg += further
        if masked:
            leg.append(("violet shade: masked (beam stop, saturation, --mask), not searched", MASK_LEGEND_COLOUR))
    ax.set_xlim(x0, x1)
    ax.set_ylim(y1, y0)
    ax.set_axis_off()
    return leg if legend else []


def write_index_overlay(image: np.ndarray, result: IndexResult, path, *, title: str | None = None,
                        ignored: np.ndarray | None = None, dpi: int = DEFAULT_DPI, units=None) -> None:
    """Write the overlay to `path` (.png, .pdf or .svg), atomically."""
    p = check_writable(path)
    fmt = p.suffix.lower().lstrip(".")
    if fmt not in ("png", "pdf", "svg"):
        fmt = "png"
    atomic_write_bytes(p, overlay_figure_bytes(image, result, title=title, fmt=fmt, dpi=dpi, ignored=ignored,
                                               units=units))
