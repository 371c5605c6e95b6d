"""An overlay picture of what the image stage measured, for a microscopist to check at a glance.

The pattern is shown on a square-root-of-asinh stretch (the haze and the weak spots both stay
visible), with the spots circled (on the lattice: green; off it: orange; saturated: a double
circle), the centre as a cross, g1 and g2 as arrows from the centre with their lengths, the
ignored regions (beam stop, mask, saturation) shaded, and a reciprocal-space scale bar when the
pattern is calibrated. matplotlib is imported here, inside the function.
"""

from __future__ import annotations

import io

import numpy as np

from saed.image.values import MeasuredPattern
from saed.files import atomic_write_bytes, check_writable

__all__ = ["display_stretch", "write_spots_overlay"]

ON_COLOUR = "#4cd964"
OFF_COLOUR = "#ff9f0a"
CENTRE_COLOUR = "#ff375f"
ARROW_COLOURS = ("#64d2ff", "#ffd60a")
MASK_COLOUR = (0.55, 0.35, 0.95)


def display_stretch(image: np.ndarray, *, background=None) -> np.ndarray:
    """Image values mapped to [0, 1] for display: asinh about the dark level, clipped at the 99.9th percentile."""
    img = np.asarray(image, np.float32)
    sample = img[:: max(1, img.shape[0] // 512), :: max(1, img.shape[1] // 512)]
    lo = float(np.percentile(sample, 1.0))
    med = float(np.percentile(sample, 50.0))
    hi = float(np.percentile(sample, 99.9))
    soft = max(med - lo, 1e-6)
    a = np.arcsinh(np.clip(img - lo, 0.0, None) / soft)
    top = max(float(np.arcsinh(max(hi - lo, 1e-6) / soft)), 1e-6)
    return np.clip(a / top, 0.0, 1.0)


def write_spots_overlay(image: np.ndarray, measured: MeasuredPattern, path, *, ignored: np.ndarray | None = None,
                        title: str | None = None, dpi: int = 110, size_in: float = 9.0, units=None) -> None:
    """Write the overlay of `measured` on `image` to `path` (PNG, PDF or SVG by suffix), atomically;
    lengths in `units` (:data:`saed.crystal.notation.UNITS`, nm by default).

    Parameters
    ----------
    image : (rows, cols) the pattern as measured
    measured : MeasuredPattern
    path : output file; its folder must exist
    ignored : (rows, cols) bool, pixels that were left out (shaded)
    title : first line of the title (default: the source file name)
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Circle, FancyArrowPatch

    from saed.crystal.notation import UNITS

    u = units or UNITS["nm"]
    p = check_writable(path)
    fmt = (p.suffix.lower().lstrip(".") or "png")
    if fmt not in ("png", "pdf", "svg"):
        fmt = "png"
    rows, cols = image.shape
    fig = Figure(figsize=(size_in, size_in * rows / cols + 0.6), dpi=dpi)
    ax = fig.add_axes([0.0, 0.0, 1.0, rows / cols * size_in / (size_in * rows / cols + 0.6)])
    ax.imshow(display_stretch(image), cmap="gray", vmin=0, vmax=1, interpolation="antialiased")
    if ignored is not None and ignored.any():
        shade = np.zeros((rows, cols, 4), np.float32)
        shade[..., 0], shade[..., 1], shade[..., 2] = MASK_COLOUR
        shade[..., 3] = np.where(ignored, 0.35, 0.0)
        ax.imshow(shade, interpolation="nearest")
    sp = measured.spots
    b = measured.basis
    on = b.on_lattice if b is not None else np.zeros(len(sp), bool)
    r_disp = max(6.0, 0.008 * max(rows, cols))
    lw = max(0.8, 0.0007 * max(rows, cols))
    for k in range(len(sp)):
        x, y = float(sp.x_px[k]), float(sp.y_px[k])
        r = max(r_disp, 2.5 * float(sp.size_px[k]))
        col = ON_COLOUR if on[k] else OFF_COLOUR
        ax.add_patch(Circle((x, y), r, fill=False, ec=col, lw=lw, alpha=0.9))
        if sp.saturated[k]:
            ax.add_patch(Circle((x, y), 1.4 * r, fill=False, ec=col, lw=lw, ls=":"))
    cx, cy = measured.center_px
    arm = 2.5 * r_disp
    ax.plot([cx - arm, cx + arm], [cy, cy], color=CENTRE_COLOUR, lw=1.5 * lw)
    ax.plot([cx, cx], [cy - arm, cy + arm], color=CENTRE_COLOUR, lw=1.5 * lw)
    cal = measured.calibration
    if b is not None:
        corr = measured.corrected_basis_px()
        legend = []
        for name, g, gc, col in (("g1", b.g1_px, corr[0], ARROW_COLOURS[0]), ("g2", b.g2_px, corr[1], ARROW_COLOURS[1])):
            ax.add_patch(FancyArrowPatch((cx, cy), (cx + g[0], cy + g[1]), arrowstyle="-|>", mutation_scale=16,
                                         color=col, lw=2.2 * lw, shrinkA=0, shrinkB=0))
            ux, uy = g / max(np.hypot(*g), 1e-9)
            ax.annotate(name, (cx + g[0], cy + g[1]), xytext=(9 * ux, -9 * uy), textcoords="offset points",
                        color=col, fontsize=10, fontweight="bold", ha="center", va="center")
            length = float(np.hypot(*gc))
            text = f"{name}  {length:.2f} px"
            if cal.is_calibrated:
                g_inv = length * cal.scale_inv_nm_per_px
                text += (f"   {u.reciprocal_text(g_inv, 4)} {u.inverse_label()}   "
                         f"d {u.length_text(1.0 / g_inv)} {u.label()}")
            legend.append((text, col))
        legend.append((f"angle {b.angle_deg:.2f}\N{DEGREE SIGN}   |g2|/|g1| {np.hypot(*corr[1]) / np.hypot(*corr[0]):.4f}", "white"))
        for i, (text, col) in enumerate(legend):
            ax.text(0.985, 0.985 - 0.035 * i, text, transform=ax.transAxes, ha="right", va="top", color=col,
                    fontsize=9.5, fontweight="bold", family="monospace",
                    bbox=dict(boxstyle="round,pad=0.25", fc=(0, 0, 0, 0.6), ec="none"))
    if cal.is_calibrated:
        from saed.report.render_pattern import nice_scale_bar_inv_nm

        bar_shown = nice_scale_bar_inv_nm(u.reciprocal(cols * cal.scale_inv_nm_per_px))  # round, display unit
        bar_px = bar_shown * u.per_nm / cal.scale_inv_nm_per_px
        x0, y0 = 0.05 * cols, 0.94 * rows
        ax.plot([x0, x0 + bar_px], [y0, y0], color="white", lw=4 * lw, solid_capstyle="butt")
        ax.text(x0 + bar_px / 2, y0 - 0.015 * rows, f"{bar_shown:g} {u.inverse_label()}", color="white", ha="center", va="bottom",
                fontsize=10, fontweight="bold", bbox=dict(boxstyle="round,pad=0.2", fc=(0, 0, 0, 0.55), ec="none"))
    ax.set_xlim(-0.5, cols - 0.5)
    ax.set_ylim(rows - 0.5, -0.5)
    ax.set_axis_off()
    n_off = int((~on).sum()) if b is not None else len(sp)
    head = title or (measured.source or "pattern")
    line2 = f"{len(sp)} spots" + (f" ({n_off} off the lattice, orange)" if b is not None and n_off else "")
    line2 += f"; centre ({cx:.1f}, {cy:.1f}) px"
    if b is not None:
        line2 += f"; angle g1^g2 {b.angle_deg:.2f}\N{DEGREE SIGN}"
    if not cal.is_calibrated:
        line2 += "; uncalibrated"
    fig.text(0.01, 1.0 - 0.15 / (size_in * rows / cols + 0.6), head, fontsize=11, fontweight="bold", va="top")
    fig.text(0.01, 1.0 - 0.42 / (size_in * rows / cols + 0.6), line2, fontsize=9.5, va="top")
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi)
    atomic_write_bytes(p, buf.getvalue())
