"""Pictures of simulated zone patterns: a detector-like frame (PNG / 16-bit TIFF) and a labelled diagram.

Both are drawn in the detector frame (x = column to the right, y = row downward), so a diagram and
a recorded pattern with the same in-plane rotation look the same on screen.

Diagram marks (shape and fill, not only colour, tell the kinds apart):

* filled disc: allowed reflection of the zero-order Laue zone, area growing with intensity;
* open square: kinematically forbidden, present only by double diffraction;
* filled triangle: higher-order Laue-zone (HOLZ) reflection near the Ewald sphere;
* large black disc: the central beam 000.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from saed.errors import InputError
from saed.files import atomic_write_bytes, check_writable
from saed.report.text_boxes import renderer_of as _renderer
from saed.synth.zone import FULL_WELL_COUNTS, DetectorImage
from saed.simulate.zone import ZonePattern, rotate_xy

__all__ = ["write_detector_image", "display_8bit", "render_diagram", "diagram_figure", "draw_pattern", "index_text",
           "nice_scale_bar_inv_nm", "pattern_title"]

_IMAGE_SUFFIXES = {".png": "png", ".tif": "tiff", ".tiff": "tiff"}
_FIGURE_SUFFIXES = {".png", ".pdf", ".svg"}


# ---------------------------------------------------------------------- detector frame to file
def display_8bit(image: np.ndarray, *, dark_counts: float | None = None, soft_counts: float = 1.5) -> np.ndarray:
    """8-bit grey for a screen: a logarithmic stretch from the dark level to the brightest pixel.

    v = log(1 + (I - dark) / soft) / log(1 + (max - dark) / soft); a diffraction pattern spans four
    or more decades, and a log display (as on the microscope's camera viewer) shows the weak spots
    next to a saturated central beam.
    """
    img = np.asarray(image, dtype=np.float32)
    dark = float(np.percentile(img, 5)) if dark_counts is None else float(dark_counts)
    top = float(img.max())
    if top <= dark:
        return np.zeros(img.shape, np.uint8)
    v = np.log1p(np.maximum(img - dark, 0) / soft_counts) / math.log1p((top - dark) / soft_counts)
    return np.clip(np.rint(255.0 * v), 0, 255).astype(np.uint8)


def write_detector_image(det: DetectorImage, path) -> None:
    """Write the frame: PNG as an 8-bit log display, TIFF as 16-bit counts with the scale stored.

    The TIFF carries ImageJ resolution tags (unit 1/nm, pixels per 1/nm) so that reading it back with
    :func:`saed.image.io.read_image_calibration` gives ``det.scale_inv_nm_per_px``.
    """
    p = Path(path)
    kind = _IMAGE_SUFFIXES.get(p.suffix.lower())
    if kind is None:
        raise InputError(f"{path}: the pattern image must end in .png, .tif or .tiff")
    check_writable(p)
    buf = io.BytesIO()
    if kind == "png":
        from PIL import Image

        Image.fromarray(display_8bit(det.image), mode="L").save(buf, format="PNG")
    else:
        import tifffile

        counts = np.clip(np.rint(det.image), 0, FULL_WELL_COUNTS).astype(np.uint16)
        px_per_inv_nm = 1.0 / det.scale_inv_nm_per_px
        tifffile.imwrite(buf, counts, imagej=True, resolution=(px_per_inv_nm, px_per_inv_nm),
                         metadata={"unit": "1/nm"})
    atomic_write_bytes(p, buf.getvalue())


# ---------------------------------------------------------------------- labels
def index_text(idx, *, math_text: bool = True) -> str:
    """Indices with overbars for negatives (mathtext), e.g. 1-1 1 -> 1 bar-1 1; plain '1-11' if not math."""
    from saed.crystal.notation import indices_text

    return indices_text(idx, "mathtext" if math_text else "plain")


def pattern_title(zp: ZonePattern, units=None) -> str:
    z = zp.zone_axis_4 if zp.is_hexagonal else zp.zone_axis
    t = f"{zp.phase.name}  [{index_text(z)}]"
    t += f"   {zp.voltage_kv:g} kV, t = {zp.thickness_nm * (units.per_nm if units else 1):g} {units.label() if units else 'nm'}"
    if zp.tilted:
        lab = index_text(_plane_shown(zp, zp.tilt_toward_hkl))
        t += f", beam tilted {zp.tilt_deg:g}\N{DEGREE SIGN} toward {lab}"
    return t


def _plane_shown(zp: ZonePattern, hkl) -> np.ndarray:
    from saed.crystal.miller import plane_to_4

    return plane_to_4(hkl) if zp.is_hexagonal else np.asarray(hkl)


def nice_scale_bar_inv_nm(span_inv_nm: float) -> float:
    """A round length (1, 2 or 5 x 10^n 1/nm) of about a fifth of `span_inv_nm`.

    >>> nice_scale_bar_inv_nm(20.0)
    5.0
    """
    target = max(span_inv_nm, 1e-9) / 5.0
    e = math.floor(math.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * 10**e <= target * 1.3:
            return m * 10**e
    return 10**e


# ---------------------------------------------------------------------- the diagram
def draw_pattern(ax, zp: ZonePattern, *, in_plane_rotation_deg: float = 0.0, extent_inv_nm: float | None = None,
                 label_max_g_inv_nm: float | None = None, font_size: float = 7.0, legend: bool = True,
                 scale_bar: bool = True, marker_scale: float = 1.0, label_centre: bool = True,
                 first_labels=(), units=None) -> None:
    """Draw the labelled diagram of `zp` on a matplotlib axes (detector frame, y downward).

    Parameters
    ----------
    extent_inv_nm : half-width of the view (default max_g); several panels share a scale when it is equal
    label_max_g_inv_nm : label spots with |g| up to this (default: 2.3 |g1| or the view, the smaller)
    first_labels : (xy_inv_nm, text, colour, direction) placed before the spot labels (e.g. 'g1' beside its arrow)
    """
    from matplotlib.lines import Line2D

    ext = float(extent_inv_nm or zp.max_g_inv_nm)
    xy = zp.xy_rotated_inv_nm(in_plane_rotation_deg)
    inside = (np.abs(xy) <= ext * 1.02).all(axis=1)
    zolz = zp.zolz
    allowed = zp.allowed
    kind_allowed = zolz & allowed & inside
    kind_dd = zolz & zp.double_diffraction & inside
    kind_holz = (~zolz) & allowed & inside

    base = 120.0 * marker_scale * (10.0 / max(ext, 1e-6)) ** 0.5
    size = base * (0.08 + 0.92 * np.sqrt(np.clip(zp.intensity, 0, 1)))
    ax.scatter(xy[kind_allowed, 0], xy[kind_allowed, 1], s=size[kind_allowed], marker="o", c="#1f3b73",
               edgecolors="black", linewidths=0.4, zorder=3)
    ax.scatter(xy[kind_dd, 0], xy[kind_dd, 1], s=0.5 * base, marker="s", facecolors="none",
               edgecolors="#b2182b", linewidths=1.0, zorder=3)
    ax.scatter(xy[kind_holz, 0], xy[kind_holz, 1], s=0.4 * base + size[kind_holz] * 0.5, marker="^",
               c="#1b7837", edgecolors="black", linewidths=0.3, zorder=3)
    ax.scatter([0.0], [0.0], s=2.2 * base, marker="o", c="black", zorder=4)

    # Laue circle of a tilted beam, and the FOLZ ring when it is in view.
    if zp.laue_circle_radius_inv_nm > 0:
        pts = zp.laue_circle_xy_inv_nm()
        pts = rotate_xy(pts, in_plane_rotation_deg)
        ax.plot(pts[:, 0], pts[:, 1], ls="--", lw=0.8, color="#7a7a7a", zorder=1)
    r = zp.folz_ring_radius_inv_nm
    if 0 < r < ext * 1.4:
        t = np.linspace(0, 2 * math.pi, 361)
        ax.plot(r * np.cos(t), r * np.sin(t), ls=":", lw=0.8, color="#1b7837", zorder=1)

    ax.set_xlim(-ext, ext)
    ax.set_ylim(ext, -ext)  # rows increase downward, as on the detector
    ax.set_aspect("equal")
    ax.apply_aspect()  # the axes box as it will be drawn, so that text boxes measured now stay true
    ax.set_xticks([])
    ax.set_yticks([])

    if scale_bar:
        from saed.crystal.notation import UNITS

        u = units or UNITS["nm"]
        bar_shown = nice_scale_bar_inv_nm(u.reciprocal(2 * ext))  # a round length in the display unit
        bar = bar_shown * u.per_nm
        x0, y0 = -0.92 * ext, 0.9 * ext
        ax.plot([x0, x0 + bar], [y0, y0], color="black", lw=2.5, solid_capstyle="butt", zorder=6)
        bar_text = ax.text(x0 + bar / 2, y0 - 0.045 * ext, f"{bar_shown:g} {u.label()}$^{{-1}}$", ha="center",
                           va="bottom", fontsize=font_size, zorder=6)
    if legend:
        handles = [Line2D([], [], ls="", marker="o", color="#1f3b73", markeredgecolor="black", label="allowed (ZOLZ)")]
        if kind_dd.any():
            handles.append(Line2D([], [], ls="", marker="s", markerfacecolor="none", markeredgecolor="#b2182b",
                                  label="double diffraction only"))
        if kind_holz.any():
            handles.append(Line2D([], [], ls="", marker="^", color="#1b7837", markeredgecolor="black",
                                  label="HOLZ"))
        if zp.laue_circle_radius_inv_nm > 0:
            handles.append(Line2D([], [], ls="--", color="#7a7a7a", label="Laue circle"))
        if 0 < r < ext * 1.4:
            handles.append(Line2D([], [], ls=":", color="#1b7837", label="FOLZ ring"))
        leg = ax.legend(handles=handles, loc="upper right", fontsize=font_size, framealpha=0.9)
    # Labels beside spots: every spot up to lab_max whose label fits without covering another label or spot
    # (shortest first, so the spots one measures are labelled before the crowded outer ones).
    i1 = None
    try:
        i1, _ = zp.shortest_allowed_pair()
    except InputError:
        pass
    g1 = float(zp.g_inv_nm[i1]) if i1 is not None else ext
    lab_max = label_max_g_inv_nm if label_max_g_inv_nm is not None else min(2.3 * g1, ext)
    hkls = zp.hkil if zp.is_hexagonal else zp.hkl
    in_frame = (np.abs(xy) <= 0.92 * ext).all(axis=1)
    shown = np.flatnonzero(kind_allowed | kind_dd | kind_holz)
    r_marker = np.where(kind_dd, 0.5 * np.sqrt(0.5 * base), 0.5 * np.sqrt(size))  # marker radius, points
    r_marker[kind_holz] = 0.5 * np.sqrt(0.4 * base + size[kind_holz] * 0.5)
    todo = np.flatnonzero((kind_allowed | kind_dd) & in_frame & (zp.g_inv_nm <= lab_max * (1 + 1e-9)))
    todo = todo[np.argsort(zp.g_inv_nm[todo], kind="stable")]
    placer = _LabelPlacer(ax, xy[shown], r_marker[shown], centre_r_pts=0.5 * math.sqrt(2.2 * base))
    if scale_bar:
        placer.reserve(bar_text.get_window_extent(placer.renderer))
    if legend:
        placer.reserve(leg.get_window_extent(placer.renderer))
    for lxy, text, colour, direction in first_labels:
        placer.place(np.asarray(lxy, float), 4.0, text, font_size + 1.5, colour, direction=direction, own_spot=False,
                     weight="bold")
    for i in todo:
        placer.place(xy[i], float(r_marker[i]) + 1.5, index_text(hkls[i]), font_size, "#b2182b" if kind_dd[i] else "black")
    if label_centre:
        placer.place(np.zeros(2), 0.5 * math.sqrt(2.2 * base) + 1.5, "0000" if zp.is_hexagonal else "000", font_size,
                     "black")
    ax._saed_labels = [p for p in placer.placed if p[0]]  # (text, bbox) of the labels drawn, for tests



class _LabelPlacer:
    """Puts each label beside its spot where it covers no label placed before, no other spot and stays in the axes.

    Tried in turn: radially outward, then the other seven compass directions, then a little farther out;
    a label that fits nowhere is left out (the spot stays drawn). Boxes are in display pixels.
    """

    def __init__(self, ax, spots_xy, spots_r_pts, *, centre_r_pts: float):
        self.ax = ax
        self.renderer = _renderer(ax.figure)
        self.pt_px = ax.figure.dpi / 72.0
        centres = ax.transData.transform(np.vstack([np.reshape(spots_xy, (-1, 2)), [[0.0, 0.0]]]))
        radii = np.append(np.asarray(spots_r_pts, float), centre_r_pts) * self.pt_px
        self.spots = np.column_stack([centres - radii[:, None], centres + radii[:, None]])  # x0 y0 x1 y1
        self.frame = ax.get_window_extent(self.renderer)
        self.placed: list[tuple[str, tuple[float, float, float, float]]] = []

    def reserve(self, bbox) -> None:
        """Keep labels off this display box (a scale bar, a legend)."""
        self.placed.append(("", (bbox.x0, bbox.y0, bbox.x1, bbox.y1)))

    def _free(self, box, anchor, own_spot: bool = True) -> bool:
        x0, y0, x1, y1 = box
        f = self.frame
        if x0 < f.x0 or x1 > f.x1 or y0 < f.y0 or y1 > f.y1:
            return False
        for _, (a0, b0, a1, b1) in self.placed:
            if x0 < a1 and a0 < x1 and y0 < b1 and b0 < y1:
                return False
        s = self.spots
        hit = (x0 < s[:, 2]) & (s[:, 0] < x1) & (y0 < s[:, 3]) & (s[:, 1] < y1)
        own = np.hypot((s[:, 0] + s[:, 2]) / 2 - anchor[0], (s[:, 1] + s[:, 3]) / 2 - anchor[1]) < 0.5
        return not np.any(hit & ~own) if own_spot else not np.any(hit)

    def place(self, xy, off_pts, text, font_size, color, *, direction=None, own_spot: bool = True, **kw) -> bool:
        anchor = self.ax.transData.transform([xy])[0]
        d = xy if direction is None else direction
        rr = math.hypot(*d)
        out = (d[0] / rr, -d[1] / rr) if rr > 0 else (0.0, 1.0)  # display y grows upward, data y downward
        base = math.degrees(math.atan2(out[1], out[0]))
        tries = [(turn, 1.0) for turn in (0, 45, -45, 90, -90, 135, -135, 180)] + [(0, 2.5), (45, 2.5), (-45, 2.5)]
        for turn, far in tries:
            t = math.radians(base + turn)
            ux, uy = far * math.cos(t), far * math.sin(t)
            ha = "left" if ux > 0.35 * far else "right" if ux < -0.35 * far else "center"
            va = "bottom" if uy > 0.35 * far else "top" if uy < -0.35 * far else "center"
            ann = self.ax.annotate(text, tuple(xy), xytext=(ux * off_pts, uy * off_pts), textcoords="offset points",
                                   ha=ha, va=va, fontsize=font_size, color=color, zorder=5, annotation_clip=False, **kw)
            bb = ann.get_window_extent(self.renderer)
            box = (bb.x0 - 0.5, bb.y0 - 0.5, bb.x1 + 0.5, bb.y1 + 0.5)
            if self._free(box, anchor, own_spot):
                self.placed.append((text, box))
                return True
            ann.remove()
        return False


def render_diagram(zp: ZonePattern, path, *, in_plane_rotation_deg: float = 0.0,
                   extent_inv_nm: float | None = None, label_max_g_inv_nm: float | None = None,
                   size_in: float = 7.0, dpi: int = 150, units=None) -> None:
    """Write the labelled diagram of `zp` to PNG, PDF or SVG (atomically); lengths in `units` (nm).

    Every spot in view whose label fits is labelled (up to `label_max_g_inv_nm` if given); the +x / +y
    directions of the detector frame are marked, g1 and g2 drawn as arrows, and their d-spacings, the
    ratio R2/R1 and the angle written under the pattern.
    """
    p = Path(path)
    if p.suffix.lower() not in _FIGURE_SUFFIXES:
        raise InputError(f"{path}: the diagram must end in .png, .pdf or .svg")
    check_writable(p)
    fig = diagram_figure(zp, in_plane_rotation_deg=in_plane_rotation_deg, extent_inv_nm=extent_inv_nm,
                         label_max_g_inv_nm=label_max_g_inv_nm, size_in=size_in, units=units)
    buf = io.BytesIO()
    fig.savefig(buf, format=p.suffix.lower()[1:], dpi=dpi)
    atomic_write_bytes(p, buf.getvalue())


def diagram_figure(zp: ZonePattern, *, in_plane_rotation_deg: float = 0.0, extent_inv_nm: float | None = None,
                   label_max_g_inv_nm: float | None = None, size_in: float = 7.0, units=None):
    """The matplotlib Figure of :func:`render_diagram`."""
    from matplotlib.figure import Figure

    from saed.crystal.notation import UNITS

    u = units or UNITS["nm"]

    h = size_in + 0.9
    fig = Figure(figsize=(size_in, h))
    ax = fig.add_axes([0.04, 0.8 / h, 0.92, 0.92 * size_in / h])
    ext = float(extent_inv_nm or zp.max_g_inv_nm)
    pair = None
    try:
        pair = zp.shortest_allowed_pair()
    except InputError:
        pass
    first = []
    if pair is not None:  # g1 and g2 as arrows from the centre; their names beside the arrows, placed first
        xy = zp.xy_rotated_inv_nm(in_plane_rotation_deg)
        for k, i in enumerate(pair, start=1):
            ax.annotate("", xy=tuple(xy[i]), xytext=(0.0, 0.0), zorder=2,
                        arrowprops=dict(arrowstyle="-|>", color="#e08214", lw=1.6, shrinkA=0, shrinkB=4))
            first.append((0.42 * xy[i], f"g{k}", "#b35806", (-xy[i][1], xy[i][0]) if k == 1 else (xy[i][1], -xy[i][0])))
    draw_pattern(ax, zp, in_plane_rotation_deg=in_plane_rotation_deg, extent_inv_nm=ext,
                 label_max_g_inv_nm=label_max_g_inv_nm if label_max_g_inv_nm is not None else ext * 1.5,
                 font_size=8.0, first_labels=first, units=u)
    _frame_arrows(ax)
    fig.suptitle(pattern_title(zp, units), fontsize=11, y=1 - 0.2 / h)
    if pair is not None:
        i1, i2 = pair
        hk = zp.hkil if zp.is_hexagonal else zp.hkl
        v1, v2 = zp.xy_inv_nm[i1], zp.xy_inv_nm[i2]
        ang = math.degrees(math.acos(max(-1.0, min(1.0, float(v1 @ v2) / (np.linalg.norm(v1) * np.linalg.norm(v2))))))
        d1, d2 = 1.0 / float(zp.g_inv_nm[i1]), 1.0 / float(zp.g_inv_nm[i2])
        fig.text(0.5, 0.5 / h, f"g1 = {index_text(hk[i1])}   d1 = {u.length_text(d1)} {u.label()}        "
                 f"g2 = {index_text(hk[i2])}   d2 = {u.length_text(d2)} {u.label()}\nR2/R1 = d1/d2 = {d1 / d2:.3f}        angle between g1 and g2 = "
                 f"{ang:.1f}\N{DEGREE SIGN}", ha="center", va="center", fontsize=9.5, linespacing=1.4)
    fig.text(0.5, 0.15 / h, "Spots are labelled where the label fits.   x: detector columns (right), y: rows "
             "(down), as on the recorded image.", ha="center", va="center", fontsize=8, color="#333333")
    return fig


def _frame_arrows(ax) -> None:
    """+x (right) and +y (down, detector rows) arrows in the lower-right corner of the axes."""
    x0, y0, n = 0.9, 0.06, 0.07  # axes fraction; axes y grows upward, detector y downward
    kw = dict(xycoords="axes fraction", textcoords="axes fraction", zorder=7)
    ax.annotate("", xy=(x0 + n, y0 + n), xytext=(x0, y0 + n), arrowprops=dict(arrowstyle="-|>", color="black", lw=1.2), **kw)
    ax.annotate("", xy=(x0, y0), xytext=(x0, y0 + n), arrowprops=dict(arrowstyle="-|>", color="black", lw=1.2), **kw)
    ax.annotate("+x", xy=(x0 + n, y0 + n), xytext=(x0 + n, y0 + n + 0.012), ha="center", va="bottom", fontsize=8, **kw)
    ax.annotate("+y", xy=(x0, y0), xytext=(x0 - 0.012, y0), ha="right", va="center", fontsize=8, **kw)
