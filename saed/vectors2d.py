"""Tests on 2-D vectors in the detector plane, shared by every layer that looks at spot directions.

One home for "do these spots span the plane?": the matcher's first guard
(:func:`saed.index.match.index_pattern`), the seed pairs of the candidate search
(:mod:`saed.index.candidates`) and the benchmark's choice of indexable frames all ask it with
the same threshold, so a pattern that passes the guard always yields at least one seed pair
(issue 16 item 7: with 8 deg in the guard and 12 deg for the pairs, spots spanning 8-12 deg were
told "no pair of measured spots matches" instead of "the spots lie on one line").
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["MIN_SPAN_ANGLE_DEG", "spans_plane"]

#: Two spot directions closer than this (deg, either sense) do not fix a zone axis: the zone is
#: h1 x h2, and with the seed-angle tolerance (2 deg) and sub-pixel position errors such a narrow
#: pair matches reflection pairs of many zones. The image stage's 2-D lattice search uses the same
#: angle for its basis pairs (saed/image/lattice2d.py).
MIN_SPAN_ANGLE_DEG = 12.0


def spans_plane(v, *, min_angle_deg: float = MIN_SPAN_ANGLE_DEG) -> bool:
    """True when two of the vectors `v` (n, 2) make an angle of at least `min_angle_deg` (mod 180 deg).

    Zero-length vectors carry no direction and are ignored; fewer than two directions never span.

    >>> spans_plane([[10.0, 0.0], [-20.0, 0.5]])
    False
    >>> spans_plane([[10.0, 0.0], [0.0, 3.0]])
    True
    >>> spans_plane([[10.0, 0.0], [10.0, 2.0]], min_angle_deg=8.0)
    True
    """
    a = np.asarray(v, dtype=float).reshape(-1, 2)
    r = np.hypot(a[:, 0], a[:, 1])
    keep = r > 0
    if np.count_nonzero(keep) < 2:
        return False
    u = a[keep] / r[keep, None]
    sin = np.abs(np.multiply.outer(u[:, 0], u[:, 1]) - np.multiply.outer(u[:, 1], u[:, 0]))  # |sin| of each pair
    return bool(np.any(sin >= math.sin(math.radians(min_angle_deg))))
