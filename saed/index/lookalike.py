"""Look-alikes: which solutions cannot be told apart, what separates them, and which tilt decides."""

from __future__ import annotations

from dataclasses import replace

from saed.index.mistilt import with_mistilt
from saed.index.values import Lookalike, Solution

__all__ = ["annotate"]


def annotate(solutions: list[Solution], measured, tables, spots, *, holder_alpha_axis_deg=None) -> list[Solution]:
    """Add mistilt and look-alike notes to ranked solutions (best first)."""
    out = [with_mistilt(s, measured, tables, holder_alpha_axis_deg=holder_alpha_axis_deg) for s in solutions]
    if len(out) < 2:
        return out
    best = out[0]
    looks = []
    for other in out[1:]:
        if other.score >= best.score - 0.1:
            rel = "ambiguous" if other.score >= best.score - 0.03 else "close"
            looks.append(Lookalike(other.phase_name, other.zone_axis, other.zone_axis_4, other.score, rel, "",
                                   scale_inv_nm_per_px=other.scale_inv_nm_per_px))
    out[0] = replace(best, lookalikes=tuple(looks))
    return out
