"""Symmetry-equivalent planes and directions from a space group (gemmi's operations).

Families are taken under the Laue group (point group plus inversion): diffraction
is centrosymmetric in the kinematic limit (Friedel's law), so {hkl} and <uvw>
include the inverted members.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from saed.errors import PhaseError
from saed.readonly import freeze_in_place

__all__ = ["point_group_rotations", "laue_rotations", "plane_family", "direction_family", "space_group",
           "has_twofold_axis"]


@lru_cache(maxsize=None)
def space_group(name: str):
    """The gemmi SpaceGroup for a Hermann-Mauguin symbol or number, or PhaseError."""
    import gemmi

    text = str(name).strip()
    try:
        if text.isdigit():  # gemmi reads '0' as P 1, so numbers are checked here
            sg = gemmi.find_spacegroup_by_number(int(text)) if 1 <= int(text) <= 230 else None
        else:
            sg = gemmi.find_spacegroup_by_name(text) if text else None
    except (RuntimeError, ValueError):
        sg = None
    if sg is None:
        raise PhaseError(f"unknown space group {name!r} (give a Hermann-Mauguin symbol such as 'F m -3 m' or a number 1-230)")
    return sg


@lru_cache(maxsize=None)
def point_group_rotations(space_group_name: str) -> np.ndarray:
    """Integer rotation matrices R (shape (n, 3, 3)) of the space group, acting on fractional coordinates."""
    sg = space_group(space_group_name)
    ops = sg.operations()
    rots = []
    seen = set()
    for op in ops.sym_ops:
        r = np.array(op.rot, dtype=np.int64) // op.DEN
        key = r.tobytes()
        if key not in seen:
            seen.add(key)
            rots.append(r)
    out = np.array(rots)
    freeze_in_place(out)
    return out


@lru_cache(maxsize=None)
def laue_rotations(space_group_name: str) -> np.ndarray:
    """Rotations of the Laue group (point group with inversion added), shape (n, 3, 3)."""
    r = point_group_rotations(space_group_name)
    both = np.concatenate([r, -r])
    uniq = np.unique(both.reshape(len(both), 9), axis=0).reshape(-1, 3, 3)
    freeze_in_place(uniq)
    return uniq


def plane_family(hkl, space_group_name: str) -> np.ndarray:
    """All distinct (hkl) equivalent to `hkl` under the Laue group, shape (m, 3).

    Plane indices transform as row vectors: h' = h R.
    """
    h = np.asarray(hkl, dtype=np.int64)
    out = np.einsum("i,nij->nj", h, laue_rotations(space_group_name))
    return np.unique(out, axis=0)


def direction_family(uvw, space_group_name: str) -> np.ndarray:
    """All distinct [uvw] equivalent to `uvw` under the Laue group, shape (m, 3).

    Directions transform as column vectors: u' = R u.
    """
    u = np.asarray(uvw, dtype=np.int64)
    out = np.einsum("nij,j->ni", laue_rotations(space_group_name), u)
    return np.unique(out, axis=0)


def has_twofold_axis(uvw, space_group_name: str) -> bool:
    """True when the Laue group has a two-fold rotation about the direction [uvw].

    The kinematic pattern of a crystal and of the same crystal turned 180 deg about the beam are
    the same (Friedel's law), so one zone-axis pattern fixes the orientation only up to that turn.
    The two readings are equivalent exactly when the turn is a symmetry of the diffraction, i.e. a
    two-fold axis of the Laue group lies along the zone (cubic <001>, <011>; hexagonal [0001],
    <2-1-10>, <01-10>), and differ otherwise (cubic <111>, <112>, <123>; hexagonal <2-1-13>).
    A two-fold axis is a proper rotation (det +1) of trace -1 that leaves [uvw] fixed.

    >>> has_twofold_axis([0, 1, 1], "F m -3 m"), has_twofold_axis([1, 1, 2], "F m -3 m")
    (True, False)
    """
    u = np.asarray(uvw, dtype=np.int64).reshape(3)
    for r in laue_rotations(space_group_name):
        if round(np.linalg.det(r)) == 1 and int(np.trace(r)) == -1 and np.array_equal(r @ u, u):
            return True
    return False
