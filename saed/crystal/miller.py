"""Miller <-> Miller-Bravais (4-index) notation for hexagonal axes.

Planes: (hkl) -> (h k i l) with i = -(h + k).
Directions: [uvw] -> [UVTW] with U = (2u - v)/3, V = (2v - u)/3, T = -(u + v)/3, W = w,
scaled to the smallest integers; back: u = U - T, v = V - T, w = W.
(The standard relations, e.g. Frank (1965), Acta Cryst. 18, 862.)
"""

from __future__ import annotations

import numpy as np

from saed.crystal.lattice import reduce_indices
from saed.errors import InputError

__all__ = ["plane_to_4", "plane_from_4", "direction_to_4", "direction_from_4", "format_indices"]


def _rows(idx, n: int, what: str) -> np.ndarray:
    a = np.asarray(idx)
    if a.shape[-1:] != (n,):
        raise InputError(f"{what} needs {n} indices, got {np.asarray(idx).tolist()}")
    if a.dtype.kind == "f":
        if not np.all(np.isfinite(a)) or not np.allclose(a, np.rint(a)):
            raise InputError(f"{what} indices must be integers, got {a.tolist()}")
        a = np.rint(a)
    return a.astype(np.int64)


def plane_to_4(hkl) -> np.ndarray:
    """(hkl) -> (hkil).

    >>> plane_to_4([1, 0, 0]).tolist()
    [1, 0, -1, 0]
    """
    h = _rows(hkl, 3, "plane (hkl)")
    return np.stack([h[..., 0], h[..., 1], -(h[..., 0] + h[..., 1]), h[..., 2]], axis=-1)


def plane_from_4(hkil) -> np.ndarray:
    """(hkil) -> (hkl); raises if i != -(h + k).

    >>> plane_from_4([1, 0, -1, 1]).tolist()
    [1, 0, 1]
    """
    h = _rows(hkil, 4, "plane (hkil)")
    if np.any(h[..., 2] != -(h[..., 0] + h[..., 1])):
        raise InputError(f"Miller-Bravais plane {h.tolist()}: i must equal -(h+k)")
    return h[..., [0, 1, 3]]


def direction_to_4(uvw) -> np.ndarray:
    """[uvw] -> [UVTW], smallest integers.

    >>> direction_to_4([1, 0, 0]).tolist()
    [2, -1, -1, 0]
    >>> direction_to_4([0, 0, 1]).tolist()
    [0, 0, 0, 1]
    """
    u = _rows(uvw, 3, "direction [uvw]")
    big = np.stack([2 * u[..., 0] - u[..., 1], 2 * u[..., 1] - u[..., 0], -(u[..., 0] + u[..., 1]), 3 * u[..., 2]], axis=-1)
    return reduce_indices(big)


def direction_from_4(uvtw) -> np.ndarray:
    """[UVTW] -> [uvw], smallest integers; raises if U + V + T != 0.

    >>> direction_from_4([2, -1, -1, 0]).tolist()
    [1, 0, 0]
    """
    d = _rows(uvtw, 4, "direction [UVTW]")
    if np.any(d[..., 0] + d[..., 1] + d[..., 2] != 0):
        raise InputError(f"4-index direction {d.tolist()}: U+V+T must be 0")
    return reduce_indices(np.stack([d[..., 0] - d[..., 2], d[..., 1] - d[..., 2], d[..., 3]], axis=-1))


def format_indices(idx) -> str:
    """Compact index string with minus signs, e.g. ``1-10`` or ``2-1-10``; spaces when an index has two digits
    (the plain style of :func:`saed.crystal.notation.indices_text`).

    >>> format_indices([1, -1, 0])
    '1-10'
    >>> format_indices([10, 0, -2])
    '10 0 -2'
    """
    from saed.crystal.notation import indices_text  # the one place indices are written for people

    return indices_text(idx)
