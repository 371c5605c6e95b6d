"""How far in reciprocal space the index tables reach (``max_g_inv_nm``): one policy for every caller.

The tables must hold every reflection a measured spot can be (or else that spot stays unexplained),
but each extra 1/nm of reach adds reflections and pairs to build and score. The policy: the
farthest spot's reciprocal length with a margin, never below the default reach and never above a cap.

Where the farthest spot comes from depends on the caller: ``saed index`` and the page measure the
pattern first and use its farthest spot (:func:`reach_for_pattern`); a batch prepares its tables
once, before any frame is measured, so it uses the farthest point a spot can reach on the frame,
the half-diagonal from the centre (:func:`reach_for_frame`).
"""

from __future__ import annotations

import math

import numpy as np

from saed.index.tables import DEFAULT_MAX_G_INV_NM

__all__ = ["REACH_MARGIN", "MAX_REACH_INV_NM", "table_reach_inv_nm", "reach_for_pattern", "reach_for_frame"]

#: Reach beyond the farthest spot, as a factor: a spot measured up to 5 % long (an uncertain camera
#: length) still finds its reflection in the tables.
REACH_MARGIN = 1.05

#: Largest reach ever prepared, 1/nm (d = 0.033 nm): beyond it the reflections of a large cell
#: multiply while no SAED spot is measured that far out.
MAX_REACH_INV_NM = 30.0


def table_reach_inv_nm(farthest_g_inv_nm: float, *, whole_inv_nm: bool = False) -> float:
    """Table reach for spots out to `farthest_g_inv_nm`: the margin, then clamped to default..cap.

    ``whole_inv_nm`` rounds the reach up to a whole 1/nm (before clamping), so that patterns of one
    session share tables.

    >>> table_reach_inv_nm(10.0), table_reach_inv_nm(20.0), table_reach_inv_nm(40.0)
    (16.0, 21.0, 30.0)
    >>> table_reach_inv_nm(20.5, whole_inv_nm=True)
    22.0
    """
    reach = REACH_MARGIN * float(farthest_g_inv_nm)
    if whole_inv_nm:
        reach = math.ceil(reach)
    return float(min(max(DEFAULT_MAX_G_INV_NM, reach), MAX_REACH_INV_NM))


def reach_for_pattern(measured, *, whole_inv_nm: bool = False) -> float | None:
    """Reach for a measured pattern, from its farthest spot; None when uncalibrated or without spots
    (the tables then take their default reach)."""
    cal = measured.calibration
    scale = None if cal is None else cal.scale_inv_nm_per_px
    if scale is None or len(measured.spots) == 0:
        return None
    farthest_px = float(np.max(np.linalg.norm(measured.corrected_spot_vectors_px(), axis=1)))
    return table_reach_inv_nm(farthest_px * scale, whole_inv_nm=whole_inv_nm)


def reach_for_frame(frame_shape, scale_inv_nm_per_px: float | None) -> float | None:
    """Reach for every frame of a batch: the farthest point a spot can have, the half-diagonal of the
    frame; None when uncalibrated.

    >>> reach_for_frame((256, 256), 0.08), reach_for_frame((2048, 2048), 0.0558), reach_for_frame((8, 8), None)
    (16.0, 30.0, None)
    """
    if scale_inv_nm_per_px is None:
        return None
    rows, cols = frame_shape
    return table_reach_inv_nm(0.5 * math.hypot(rows, cols) * scale_inv_nm_per_px)
