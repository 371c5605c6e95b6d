"""Texts on a matplotlib axes that must not overlap: each is kept only where its box is free.

Used by the pictures meant to be read (atlas zone maps, ring strips): a label that would cover
another is left out rather than overprinted.
"""

from __future__ import annotations

__all__ = ["TextBoxes", "renderer_of"]


def renderer_of(fig):
    """A renderer to measure text with (an Agg canvas is attached to a bare Figure first)."""
    if not hasattr(fig.canvas, "get_renderer"):
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        FigureCanvasAgg(fig)
    return fig.canvas.get_renderer()


class TextBoxes:
    """Texts on an axes that must not overlap each other: each is kept only where its box is free (display px)."""

    def __init__(self, ax):
        self.ax = ax
        self.renderer = renderer_of(ax.figure)
        self.boxes: list = []

    def try_text(self, x, y, text, *, offset_pts=(0.0, 0.0), inside: bool = False, **kw) -> bool:
        """Draw `text` at data (x, y) + offset if it covers no text kept before (and, with `inside`, stays
        within the axes); True when drawn."""
        t = self.ax.annotate(text, (x, y), xytext=offset_pts, textcoords="offset points", annotation_clip=False, **kw)
        bb = t.get_window_extent(self.renderer)
        frame = self.ax.get_window_extent(self.renderer)
        outside = inside and (bb.x0 < frame.x0 or bb.x1 > frame.x1 or bb.y0 < frame.y0 or bb.y1 > frame.y1)
        if outside or any(bb.x0 < b.x1 and b.x0 < bb.x1 and bb.y0 < b.y1 and b.y0 < bb.y1 for b in self.boxes):
            t.remove()
            return False
        self.boxes.append(bb)
        return True
