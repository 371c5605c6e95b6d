"""Drawing a zone map: zones as labelled points, joints as great-circle arcs with their angle written on them."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.errors import InputError
from saed.files import atomic_write_bytes, check_writable
from saed.report.render_pattern import index_text
from saed.report.text_boxes import TextBoxes
from saed.simulate.zonemap import ZoneMap, great_circle_arc_xy

__all__ = ["draw_zone_map", "render_zone_map"]


def draw_zone_map(ax, zm: ZoneMap, *, font_size: float = 7.0, show_rows: bool = True) -> None:
    """Draw `zm` on a matplotlib axes (pole +z at the centre, x || a to the right, y up)."""
    hexa = zm.phase.is_hexagonal
    lab = [index_text(direction_to_4(z) if hexa else z) for z in zm.zones]
    if zm.region == "hemisphere":
        t = np.linspace(0, 2 * math.pi, 361)
        ax.plot(np.cos(t), np.sin(t), color="black", lw=0.8)
    arcs = [great_circle_arc_xy(zm.directions[a], zm.directions[b]) for a, b in zm.joints]
    for arc in arcs:
        ax.plot(arc[:, 0], arc[:, 1], color="#4d4d4d", lw=0.9, zorder=1)
    ax.scatter(zm.xy[:, 0], zm.xy[:, 1], s=28, marker="o", c="#1f3b73", edgecolors="black", linewidths=0.5, zorder=3)
    span = float(np.ptp(zm.xy, axis=0).max()) if len(zm.xy) > 1 else 1.0
    if zm.region == "hemisphere":
        ax.set_xlim(-1.12, 1.12)
        ax.set_ylim(-1.12, 1.12)
    else:
        pad = 0.12 * span
        ax.set_xlim(zm.xy[:, 0].min() - pad, zm.xy[:, 0].max() + pad)
        ax.set_ylim(zm.xy[:, 1].min() - pad, zm.xy[:, 1].max() + pad)
    ax.set_aspect("equal")
    ax.apply_aspect()  # the axes box as it will be drawn, so that text boxes measured now stay true
    # Zone labels first (above the point, else below / beside), then the joints' angle and row along their
    # arc where they cover no other text; a joint label that fits nowhere is left out, and counted.
    boxes = TextBoxes(ax)
    for (x, y), text in zip(zm.xy, lab):
        zl = "$[" + text.strip("$") + "]$"
        for dx, dy, ha, va in ((0, 1, "center", "bottom"), (0, -1, "center", "top"), (1, 0, "left", "center"),
                               (-1, 0, "right", "center")):
            if boxes.try_text(x, y, zl, offset_pts=(5 * dx, 5 * dy), fontsize=font_size, ha=ha, va=va, zorder=4):
                break
    left_out = 0
    for arc, h, ang in zip(arcs, zm.joint_hkl, zm.joint_angle_deg):
        txt = f"{ang:.1f}\N{DEGREE SIGN}"
        if show_rows:
            txt += "\n" + index_text(plane_to_4(h) if hexa else h)
        for f in (0.5, 0.38, 0.62, 0.27, 0.73):
            mid = arc[int(round(f * (len(arc) - 1)))]
            if boxes.try_text(mid[0], mid[1], txt, fontsize=font_size * 0.8, ha="center", va="center",
                              color="#7f2704", zorder=2,
                              bbox=dict(boxstyle="round,pad=0.12", fc="white", ec="none", alpha=0.85)):
                break
        else:
            left_out += 1
    ax._saed_joint_labels_left_out = left_out
    ax.set_xticks([])
    ax.set_yticks([])
    for s in ax.spines.values():
        s.set_visible(False)


def render_zone_map(zm: ZoneMap, path, *, size_in: float = 7.0, dpi: int = 150, title: str | None = None) -> None:
    """Write the zone map to PNG, PDF or SVG (atomically)."""
    p = Path(path)
    if p.suffix.lower() not in {".png", ".pdf", ".svg"}:
        raise InputError(f"{path}: the zone map must end in .png, .pdf or .svg")
    check_writable(p)
    from matplotlib.figure import Figure

    fig = Figure(figsize=(size_in, size_in))
    ax = fig.add_axes([0.03, 0.03, 0.94, 0.88])
    draw_zone_map(ax, zm, font_size=9.0)
    fig.suptitle(title or f"{zm.phase.name}: zone axes and tilt paths (stereographic, pole along c*)",
                 fontsize=11, y=0.97)
    buf = io.BytesIO()
    fig.savefig(buf, format=p.suffix.lower()[1:], dpi=dpi)
    atomic_write_bytes(p, buf.getvalue())
