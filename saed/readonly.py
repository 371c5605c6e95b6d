"""Read-only numpy arrays for the frozen dataclasses passed between stages.

A frozen dataclass stops its fields being reassigned, but not the values inside an array field
being changed; every stage therefore stores its arrays through :func:`frozen_array`. This is
bottom-layer plumbing: it imports nothing of saed, so every layer may use it.
"""

from __future__ import annotations

import numpy as np

__all__ = ["frozen_array", "freeze_in_place"]


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


def freeze_in_place(*arrays: np.ndarray) -> None:
    """Make arrays the caller has just built read-only, without a copy (for hot paths such as the
    zone patterns scored for every candidate, where :func:`frozen_array`'s copy would cost).

    Only for arrays nobody else holds a writable reference to.

    >>> a, b = np.zeros(2), np.ones(3)
    >>> freeze_in_place(a, b)
    >>> a.flags.writeable, b.flags.writeable
    (False, False)
    """
    for a in arrays:
        a.flags.writeable = False
