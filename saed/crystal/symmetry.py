"""Symmetry-equivalent planes and directions from a space group (gemmi's operations).

Families are taken under the Laue group (point group plus inversion): diffraction
is centrosymmetric in the kinematic limit (Friedel's law), so {hkl} and <uvw>
include the inverted members.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from saed.errors import PhaseError

__all__ = ["point_group_rotations", "laue_rotations", "plane_family", "direction_family", "space_group"]


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
    out.flags.writeable = False
    return out


@lru_cache(maxsize=None)
def laue_rotations(space_group_name: str) -> np.ndarray:
    """Rotations of the Laue group (point group with inversion added), shape (n, 3, 3)."""
    r = point_group_rotations(space_group_name)
    both = np.concatenate([r, -r])
    uniq = np.unique(both.reshape(len(both), 9), axis=0).reshape(-1, 3, 3)
    uniq.flags.writeable = False
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
