"""The orientation relationship between two indexed crystals, and the standard relationships it matches.

Frames: a crystal's orientation matrix U maps its Cartesian frame (x || a, z || c*) to the detector
frame (:mod:`saed.simulate.geometry`). Two crystals seen in one pattern share the detector frame, so
the rotation that carries crystal-1 Cartesian vectors into crystal-2 Cartesian vectors is
Delta = U2^T U1. Its symmetry-equivalent descriptions are s2 Delta s1 with s1, s2 proper rotations of
the two Laue groups.

* The misorientation is the smallest rotation angle among those descriptions (for two phases of
  different symmetry the same rule, the "disorientation" in the wider sense).
* Parallel planes and directions: the lowest-index pairs (indices up to 3, 4-index form counted for
  hexagonal axes) whose normals / directions lie within :data:`PARALLEL_TOL_DEG` of each other.
* Standard relationships (``saed/data/orientation_relationships.json``, each with its source) are
  rotations R fixed by one parallel plane pair and one parallel direction pair; the deviation is the
  smallest angle of Delta^T s2 R s1. The closest one within :data:`NAME_TOL_DEG` names the
  relationship; Kurdjumov-Sachs and Nishiyama-Wassermann lie 5.26 deg apart (Nolze, Cryst. Res.
  Technol. 41, 2006, 72; from memory), so the tolerance keeps them apart.

The orientations come from zone-axis patterns and so carry the beam's mistilt off each zone (up to a
degree or two, :mod:`saed.index.mistilt`): deviations below about 2 deg do not distinguish anything.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.crystal.symmetry import laue_rotations
from saed.errors import InputError
from saed.readonly import frozen_array

__all__ = ["StandardRelationship", "OrientationRelationship", "standard_relationships", "structure_class",
           "proper_rotations_cart", "relationship_rotation", "misorientation", "parallel_pairs",
           "describe_relationship", "variant_count", "PARALLEL_TOL_DEG", "NAME_TOL_DEG"]

#: Planes / directions count as parallel within this angle (the issue's 2 deg).
PARALLEL_TOL_DEG = 2.0

#: A standard relationship names the pair when the deviation is below this angle.
NAME_TOL_DEG = 2.5

#: Largest index searched for parallel planes and directions.
MAX_PAIR_INDEX = 3


@dataclass(frozen=True)
class StandardRelationship:
    """One entry of the data file (planes and directions in 3-index form of each conventional cell)."""

    name: str
    kind: str
    structures: tuple[str, str]
    same_phase: bool
    planes: tuple[tuple[int, int, int], tuple[int, int, int]]
    directions: tuple[tuple[int, int, int], tuple[int, int, int]]
    variants: int
    source: str
    text: str = ""
    twin_plane: tuple[tuple[str, tuple[int, int, int]], ...] = ()


@dataclass(frozen=True)
class OrientationRelationship:
    """The relationship between crystals ``crystals[0]`` and ``crystals[1]`` of one pattern.

    ``name``: the standard relationship matched within :data:`NAME_TOL_DEG` (``deviation_deg`` from
    it), or ``"none"`` (then ``nearest``/``nearest_deviation_deg`` say what came closest).
    ``parallel_planes`` / ``parallel_directions``: [crystal 1 indices, crystal 2 indices], 3-index;
    None when no low-index pair lies within 2 deg. ``twin_plane``: for a twin, the twin plane in
    crystal-1 indices. ``text``: one line for the microscopist.
    """

    crystals: tuple[int, int]
    name: str
    kind: str
    deviation_deg: float | None
    misorientation_deg: float
    misorientation_axis: tuple[float, float, float]
    parallel_planes: tuple[tuple[int, ...], tuple[int, ...]] | None
    parallel_directions: tuple[tuple[int, ...], tuple[int, ...]] | None
    nearest: str = ""
    nearest_deviation_deg: float | None = None
    twin_plane: tuple[int, int, int] | None = None
    source: str = ""
    text: str = ""


@lru_cache(maxsize=1)
def standard_relationships() -> tuple[StandardRelationship, ...]:
    """The standard relationships of ``saed/data/orientation_relationships.json``."""
    raw = json.loads(resources.files("saed").joinpath("data/orientation_relationships.json").read_text(encoding="utf-8"))
    out = []
    for r in raw["relationships"]:
        out.append(StandardRelationship(
            name=r["name"], kind=r["kind"], structures=tuple(r["structures"]), same_phase=bool(r["same_phase"]),
            planes=tuple(tuple(int(v) for v in p) for p in r["planes"]),
            directions=tuple(tuple(int(v) for v in p) for p in r["directions"]), variants=int(r["variants"]),
            source=r["source"], text=r.get("text", r.get("misorientation", "")),
            twin_plane=tuple((k, tuple(int(x) for x in v)) for k, v in r.get("twin_plane", {}).items())))
    return tuple(out)


def structure_class(phase) -> str:
    """'fcc' (cubic F), 'bcc' (cubic I), 'cubic' (other cubic), 'hcp' (hexagonal axes) or 'other'."""
    lat = phase.lattice
    if phase.is_hexagonal:
        return "hcp"
    if lat.crystal_system == "cubic":
        c = phase.space_group.strip()[:1].upper()
        return {"F": "fcc", "I": "bcc"}.get(c, "cubic")
    return "other"


def _fits(cls: str, wanted: str) -> bool:
    return cls == wanted or (wanted == "cubic" and cls in ("fcc", "bcc", "cubic"))


@lru_cache(maxsize=64)
def _rotations_cached(space_group: str, a_bytes: bytes) -> np.ndarray:
    a = np.frombuffer(a_bytes).reshape(3, 3)
    laue = laue_rotations(space_group).astype(float)
    proper = laue[np.rint(np.linalg.det(laue)).astype(int) == 1]
    return frozen_array(np.einsum("ij,njk,kl->nil", a, proper, np.linalg.inv(a)))


def proper_rotations_cart(phase) -> np.ndarray:
    """(n, 3, 3) proper rotations of the phase's Laue group in its Cartesian frame (A R A^-1)."""
    a = np.ascontiguousarray(phase.lattice.direct_matrix_nm, float)
    return _rotations_cached(phase.space_group, a.tobytes())


def _unit(v) -> np.ndarray:
    v = np.asarray(v, float)
    return v / np.linalg.norm(v)


def _plane_cart(lattice, hkl) -> np.ndarray:
    return _unit(lattice.reciprocal_matrix_inv_nm @ np.asarray(hkl, float))


def _dir_cart(lattice, uvw) -> np.ndarray:
    return _unit(lattice.direct_matrix_nm @ np.asarray(uvw, float))


def relationship_rotation(lattice1, lattice2, plane1, plane2, dir1, dir2) -> np.ndarray:
    """R (crystal-1 Cartesian -> crystal-2 Cartesian) with plane1 || plane2 and dir1 || dir2.

    The directions must lie in the planes (checked to 1 deg); raises InputError otherwise.
    """
    n1, n2 = _plane_cart(lattice1, plane1), _plane_cart(lattice2, plane2)
    d1, d2 = _dir_cart(lattice1, dir1), _dir_cart(lattice2, dir2)
    if abs(float(n1 @ d1)) > math.sin(math.radians(1.0)) or abs(float(n2 @ d2)) > math.sin(math.radians(1.0)):
        raise InputError(f"orientation relationship: direction {list(dir1)} / {list(dir2)} does not lie in plane "
                         f"({list(plane1)}) / ({list(plane2)})")
    t1 = np.stack([n1, d1, np.cross(n1, d1)], axis=1)
    t2 = np.stack([n2, d2, np.cross(n2, d2)], axis=1)
    return t2 @ t1.T


def _angles_deg(m: np.ndarray) -> np.ndarray:
    tr = np.trace(m, axis1=-2, axis2=-1)
    return np.degrees(np.arccos(np.clip((tr - 1.0) / 2.0, -1.0, 1.0)))


def _axis(m: np.ndarray) -> np.ndarray:
    w = np.array([m[2, 1] - m[1, 2], m[0, 2] - m[2, 0], m[1, 0] - m[0, 1]])
    if np.linalg.norm(w) > 1e-6:
        return w / np.linalg.norm(w)
    # 0 or 180 deg: the eigenvector of eigenvalue +1
    vals, vecs = np.linalg.eig(m)
    k = int(np.argmin(np.abs(vals - 1.0)))
    v = np.real(vecs[:, k])
    return v / np.linalg.norm(v)


def misorientation(delta: np.ndarray, sym1: np.ndarray, sym2: np.ndarray) -> tuple[float, np.ndarray]:
    """Smallest rotation angle (deg) among s2 delta s1 and its axis in crystal-1 Cartesian coordinates."""
    cands = np.einsum("aij,jk,bkl->abil", sym2, delta, sym1).reshape(-1, 3, 3)
    ang = _angles_deg(cands)
    k = int(np.argmin(ang))
    # the axis of s2 D s1 in crystal-2 terms; expressed in crystal-1 Cartesian: M^T maps back
    m = cands[k]
    axis = _axis(m)
    return float(ang[k]), axis


def deviation_deg(delta: np.ndarray, rot: np.ndarray, sym1: np.ndarray, sym2: np.ndarray) -> float:
    """Smallest angle of delta^T s2 rot s1 over the symmetry of both crystals."""
    cands = np.einsum("aij,jk,bkl->abil", sym2, rot, sym1).reshape(-1, 3, 3)
    m = np.einsum("ji,njk->nik", delta, cands)
    return float(_angles_deg(m).min())


@lru_cache(maxsize=8)
def _index_triples(n: int) -> np.ndarray:
    r = np.arange(-n, n + 1)
    t = np.stack(np.meshgrid(r, r, r, indexing="ij"), axis=-1).reshape(-1, 3)
    t = t[np.any(t != 0, axis=1)]
    t = t[np.gcd.reduce(np.abs(t), axis=1) == 1]
    return frozen_array(t)


def _complexity(idx: np.ndarray, hexagonal: bool, plane: bool) -> np.ndarray:
    """Sort key: the sum of |indices| (4-index form on hexagonal axes), then a tie-break on the largest."""
    if hexagonal:
        four = plane_to_4(idx) if plane else direction_to_4(idx)
        four = np.asarray(four)
        return np.abs(four).sum(axis=1) + 0.01 * np.abs(four).max(axis=1) + 0.001 * np.sum(four < 0, axis=1)
    return np.abs(idx).sum(axis=1) + 0.01 * np.abs(idx).max(axis=1) + 0.001 * np.sum(idx < 0, axis=1)


def parallel_pairs(phase1, phase2, delta: np.ndarray, *, tol_deg: float = PARALLEL_TOL_DEG,
                   max_index: int = MAX_PAIR_INDEX, plane_normal: np.ndarray | None = None,
                   planes: bool = True) -> list[tuple[tuple[int, int, int], tuple[int, int, int], float]]:
    """Parallel low-index pairs (crystal-1 indices, crystal-2 indices, angle deg), lowest index first.

    Planes (``planes=True``) compare plane normals, directions compare lattice directions, with
    delta (crystal-1 -> crystal-2 Cartesian). With `plane_normal` (crystal-1 Cartesian, unit) only
    directions within `tol_deg` of perpendicular to it are kept (directions lying in the plane).
    """
    t = _index_triples(max_index)
    to_cart = (lambda lat: lat.reciprocal_matrix_inv_nm) if planes else (lambda lat: lat.direct_matrix_nm)
    v1 = t @ to_cart(phase1.lattice).T
    v1 /= np.linalg.norm(v1, axis=1, keepdims=True)
    v2 = t @ to_cart(phase2.lattice).T
    v2 /= np.linalg.norm(v2, axis=1, keepdims=True)
    keep1 = np.ones(len(t), bool)
    if plane_normal is not None:
        keep1 = np.abs(v1 @ plane_normal) <= math.sin(math.radians(tol_deg))
    dots = (v1 @ delta.T) @ v2.T  # cos of the angle between Delta v1 and v2
    cos_tol = math.cos(math.radians(tol_deg))
    i, j = np.nonzero((dots >= cos_tol) & keep1[:, None])
    if len(i) == 0:
        return []
    c1 = _complexity(t[i], phase1.is_hexagonal, planes)
    c2 = _complexity(t[j], phase2.is_hexagonal, planes)
    order = np.lexsort((np.arange(len(i)), c1 + c2))
    out = []
    for k in order[:40]:
        ang = math.degrees(math.acos(min(1.0, float(dots[i[k], j[k]]))))
        out.append((tuple(int(x) for x in t[i[k]]), tuple(int(x) for x in t[j[k]]), ang))
    return out


def _oriented_standards(cls1: str, cls2: str, same_phase: bool):
    """(standard, swapped) pairs that apply to structure classes (cls1, cls2)."""
    out = []
    for s in standard_relationships():
        if s.same_phase != same_phase:
            continue
        if _fits(cls1, s.structures[0]) and _fits(cls2, s.structures[1]):
            out.append((s, False))
        elif _fits(cls2, s.structures[0]) and _fits(cls1, s.structures[1]):
            out.append((s, True))
    return out


def standard_rotation(std: StandardRelationship, phase1, phase2, *, swapped: bool = False) -> np.ndarray:
    """The standard's R as crystal-1 -> crystal-2 Cartesian (swapped: the standard's first structure is crystal 2)."""
    if not swapped:
        return relationship_rotation(phase1.lattice, phase2.lattice, std.planes[0], std.planes[1], std.directions[0],
                                     std.directions[1])
    return relationship_rotation(phase2.lattice, phase1.lattice, std.planes[0], std.planes[1], std.directions[0],
                                 std.directions[1]).T


def _same_lattice(phase1, phase2, tol: float = 0.03) -> bool:
    l1, l2 = phase1.lattice, phase2.lattice
    return (l1.crystal_system == l2.crystal_system and abs(l1.a_nm / l2.a_nm - 1) <= tol
            and abs(l1.c_nm / l2.c_nm - 1) <= tol)


def ordered_pair(phase1, phase2) -> tuple[str, str] | None:
    """(ordered, disordered) names when one phase is a superlattice of the other (primitive cubic on an
    F or I cubic cell of nearly the same size, e.g. L1_2 Ni3Al on fcc Ni, B2 NiAl on bcc Fe); else None."""
    c1, c2 = structure_class(phase1), structure_class(phase2)
    if not _same_lattice(phase1, phase2):
        return None
    if c1 == "cubic" and c2 in ("fcc", "bcc"):
        return phase1.name, phase2.name
    if c2 == "cubic" and c1 in ("fcc", "bcc"):
        return phase2.name, phase1.name
    return None


def _twin_plane(std: StandardRelationship, phase1, delta, sym1, sym2) -> tuple[int, int, int] | None:
    """The twin plane (crystal-1 indices) whose 180 deg rotation best describes delta."""
    cls = structure_class(phase1)
    base = dict(std.twin_plane).get(cls) or dict(std.twin_plane).get("cubic")
    if base is None:
        return None
    from saed.crystal.symmetry import plane_family

    best, best_dev = None, 1e9
    for h in plane_family(base, phase1.space_group):
        if next((int(v) for v in h if v != 0), 0) < 0:
            continue
        n = _plane_cart(phase1.lattice, h)
        rot = 2.0 * np.outer(n, n) - np.eye(3)  # 180 deg about n
        dev = float(_angles_deg(np.einsum("ji,njk->nik", delta, np.einsum("aij,jk->aik", sym2, rot))).min())
        if dev < best_dev - 1e-9:
            best, best_dev = tuple(int(v) for v in h), dev
    return best


def describe_relationship(phase1, phase2, u1: np.ndarray, u2: np.ndarray, *, crystals=(0, 1)) -> OrientationRelationship:
    """Misorientation, lowest-index parallel planes and directions, and the standard matched, for two crystals.

    `u1`, `u2`: orientation matrices (crystal Cartesian -> detector) of the two crystals.
    """
    delta = np.asarray(u2, float).T @ np.asarray(u1, float)
    sym1, sym2 = proper_rotations_cart(phase1), proper_rotations_cart(phase2)
    mis, axis_c = misorientation(delta, sym1, sym2)
    # express the axis in crystal-1 direction indices (largest |component| = 1)
    ax = np.linalg.solve(phase1.lattice.direct_matrix_nm, axis_c)
    ax = ax / np.max(np.abs(ax))
    same = phase1.name == phase2.name
    cls1, cls2 = structure_class(phase1), structure_class(phase2)
    results = []
    for std, swapped in _oriented_standards(cls1, cls2, same):
        rot = standard_rotation(std, phase1, phase2, swapped=swapped)
        results.append((deviation_deg(delta, rot, sym1, sym2), std, swapped))
    results.sort(key=lambda t: t[0])
    name, kind, dev, nearest, ndev, twin, source = "none", "general", None, "", None, None, ""
    std, swapped = None, False
    if results:
        ndev, nstd, nswap = results[0]
        nearest = nstd.name
        if ndev <= NAME_TOL_DEG:
            name, kind, dev, source, std, swapped = nstd.name, nstd.kind, ndev, nstd.source, nstd, nswap
    planes = parallel_pairs(phase1, phase2, delta, planes=True)
    if std is not None and kind == "twin":
        twin = _twin_plane(std, phase1, delta, sym1, sym2)
    pp = _pick(planes, phase1, phase2, std, True, swapped)
    if twin is not None:
        pp = next(((a, b) for a, b, _ in planes if a == twin), pp)
    dirs = []
    if pp is not None:  # directions lying in the reported plane, as relationships are written
        dirs = parallel_pairs(phase1, phase2, delta, planes=False, plane_normal=_plane_cart(phase1.lattice, pp[0]))
    if not dirs:
        dirs = parallel_pairs(phase1, phase2, delta, planes=False)
    pd = _pick(dirs, phase1, phase2, std, False, swapped)
    text = _text(phase1, phase2, name, kind, dev, nearest, ndev, mis, twin, pp, pd)
    return OrientationRelationship(
        crystals=tuple(int(c) for c in crystals), name=name, kind=kind, deviation_deg=dev, misorientation_deg=mis,
        misorientation_axis=tuple(round(float(v), 3) for v in ax), parallel_planes=pp, parallel_directions=pd,
        nearest=nearest, nearest_deviation_deg=ndev, twin_plane=twin, source=source, text=text)


def _family(idx, phase, plane: bool) -> set:
    from saed.crystal.symmetry import direction_family, plane_family

    fam = plane_family(idx, phase.space_group) if plane else direction_family(idx, phase.space_group)
    return {tuple(int(v) for v in r) for r in fam}


def _pick(pairs, phase1, phase2, std: StandardRelationship | None, plane: bool, swapped: bool = False):
    """The pair to report: of the named standard's families when present among `pairs`, else the lowest-index."""
    if not pairs:
        return None
    if std is not None:
        ref = std.planes if plane else std.directions
        f1 = _family(ref[1 if swapped else 0], phase1, plane)
        f2 = _family(ref[0 if swapped else 1], phase2, plane)
        for a, b, _ in pairs:
            if a in f1 and b in f2:
                return a, b
    return pairs[0][0], pairs[0][1]


def _fmt(idx, phase, plane: bool) -> str:
    from saed.crystal.miller import format_indices

    if phase.is_hexagonal:
        idx = plane_to_4(np.array(idx)) if plane else direction_to_4(np.array(idx))
    s = format_indices(idx)
    return f"({s})" if plane else f"[{s}]"


def _text(phase1, phase2, name, kind, dev, nearest, ndev, mis, twin, pp, pd) -> str:
    a, b = phase1.name, phase2.name
    par = []
    if pp is not None:
        par.append(f"{_fmt(pp[0], phase1, True)}{a} || {_fmt(pp[1], phase2, True)}{b}")
    if pd is not None:
        par.append(f"{_fmt(pd[0], phase1, False)}{a} || {_fmt(pd[1], phase2, False)}{b}")
    tail = (", " + ", ".join(par)) if par else ""
    if name == "none":
        near = f" (nearest: {nearest}, {ndev:.1f} deg off)" if nearest else ""
        return f"misorientation {mis:.1f} deg, no standard relationship{near}{tail}"
    if kind == "twin":
        plane = f" on {_fmt(twin, phase1, True)}" if twin else ""
        return f"{name}{plane}: misorientation {mis:.1f} deg, {dev:.1f} deg from the ideal twin{tail}"
    return f"{name} relationship, {dev:.1f} deg from ideal (misorientation {mis:.1f} deg){tail}"


def variant_count(std: StandardRelationship, phase1, phase2) -> int:
    """Distinct orientations of crystal 2 that one crystal 1 can take under `std` (phase1 = first structure).

    Variants are R s1 for s1 in the first crystal's rotation group; two are the same when they differ
    by a rotation of the second crystal's group (R s1 = s2 R s1').
    """
    rot = standard_rotation(std, phase1, phase2)
    sym1, sym2 = proper_rotations_cart(phase1), proper_rotations_cart(phase2)
    reps: list[np.ndarray] = []
    for s1 in sym1:
        m = rot @ s1
        same = False
        for r in reps:
            # m = s2 r  <=>  m r^T in sym2
            x = m @ r.T
            if np.any(np.all(np.abs(sym2 - x[None]) < 1e-6, axis=(1, 2))):
                same = True
                break
        if not same:
            reps.append(m)
    return len(reps)
