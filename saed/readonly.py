"""Read-only numpy arrays for the frozen dataclasses passed between stages.

A frozen dataclass stops its fields being reassigned, but not the values inside an array field
being changed; every stage therefore stores its arrays through :func:`frozen_array`. This is
bottom-layer plumbing: it imports nothing of saed, so every layer may use it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["frozen_array"]


def frozen_array(a, dtype=None) -> np.ndarray:
    """A C-ordered copy of ``a`` (converted to ``dtype`` when given) that cannot be written to.

    The copy means the caller's own array is never frozen behind its back.

    >>> src = np.array([1, 2, 3])
    >>> out = frozen_array(src, float)
    >>> out.dtype, out.flags.writeable, src.flags.writeable
    (dtype('float64'), False, True)
    >>> out[0] = 5.0
    Traceback (most recent call last):
    ...
    ValueError: assignment destination is read-only
    """
    out = np.array(a, dtype=dtype, order="C")
    out.flags.writeable = False
    return out
