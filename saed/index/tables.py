"""Per-phase lookup tables for the matcher, built once and shared (picklable, read-only).

For each candidate phase the table holds every reflection up to ``max_g_inv_nm`` (from the
cached :func:`saed.crystal.reflection_table`) and the table of allowed *reflection pairs*
(h1, h2): h1 runs over one representative of each allowed family {hkl} (Laue group), h2 over
every allowed reflection not parallel to h1. Each pair is keyed by |g1|, |g2|, the angle between
them and the ratio |g2|/|g1|, and sorted twice (by |g1| for calibrated patterns, by the ratio for
uncalibrated ones), so a measured spot pair is matched by a binary search plus a vectorised
filter: the cost grows with the number of matching pairs, not with the number of zone axes.
Fixing h1 to a family representative removes the Laue-group copies of every candidate at the
source; the zone axis of a pair is h1 x h2 reduced to the smallest integers.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from saed.crystal.phase import Phase
from saed.crystal.reflections import reflection_table
from saed.crystal.symmetry import laue_rotations
from saed.errors import InputError
from saed.physics import check_voltage_kv
from saed.readonly import frozen_array

__all__ = ["PhaseIndexTable", "IndexTables", "prepare_phases", "DEFAULT_MAX_G_INV_NM", "hkl_keys",
           "first_lexicographic_min"]

logger = logging.getLogger(__name__)

#: Largest |g| the tables cover by default, 1/nm (d = 0.0625 nm): beyond the spots of most SAED patterns.
DEFAULT_MAX_G_INV_NM = 16.0

#: Pair tables are capped so that a very large cell cannot exhaust memory (pairs per phase).
MAX_PAIRS = 1_500_000

#: |F| of an allowed reflection relative to the strongest below which it is too weak to seed a pair.
SEED_MIN_RELATIVE_F = 0.02


#: The dense row lookup of a phase (:meth:`PhaseIndexTable.rows_of`) is kept up to this many entries (8 MiB).
DENSE_LOOKUP_MAX = 2 ** 20


def hkl_keys(hkl: np.ndarray, span: int) -> np.ndarray:
    """One int64 per hkl row for sorted lookups (indices must lie in -span..span)."""
    base = 2 * span + 1
    h = np.asarray(hkl, dtype=np.int64) + span
    return (h[..., 0] * base + h[..., 1]) * base + h[..., 2]


@dataclass(frozen=True, eq=False)
class PhaseIndexTable:
    """Everything the matcher needs about one phase (arrays read-only).

    Reflections (all hkl up to max_g except lattice-centring absences):
        ``hkl`` (N, 3), ``g_cart_inv_nm`` (N, 3), ``g_inv_nm`` (N,), ``f_rel`` (N,) |F| / max |F|,
        ``allowed`` (N,), ``keys`` (N,) sorted lookup keys with ``key_order``, ``span``.
    Pairs (allowed h1 family representative, allowed h2), stored sorted by |g1|:
        ``pair_i1``, ``pair_i2`` rows into the reflections; ``pair_g1``, ``pair_g2`` (1/nm, float32);
        ``pair_angle_deg`` (0..180); ``by_ratio`` the order by |g2|/|g1|, with the sorted
        ratios ``ratio_sorted``.
    """

    phase: Phase
    max_g_inv_nm: float
    hkl: np.ndarray
    g_cart_inv_nm: np.ndarray
    g_inv_nm: np.ndarray
    f_rel: np.ndarray
    allowed: np.ndarray
    keys_sorted: np.ndarray
    key_order: np.ndarray
    span: int
    pair_i1: np.ndarray
    pair_i2: np.ndarray
    pair_g1: np.ndarray
    pair_g2: np.ndarray
    pair_angle_deg: np.ndarray
    by_ratio: np.ndarray
    ratio_sorted: np.ndarray
    laue: np.ndarray

    @property
    def name(self) -> str:
        return self.phase.name

    @property
    def n_pairs(self) -> int:
        return len(self.pair_i1)

    @cached_property
    def _row_lookup(self) -> np.ndarray | None:
        """Row number by hkl key over the whole -span..span cube (-1: not a row), or None when the cube is large."""
        size = (2 * self.span + 1) ** 3
        if size > DENSE_LOOKUP_MAX or len(self.keys_sorted) == 0:
            return None
        table = np.full(size, -1, dtype=np.int64)
        table[self.keys_sorted] = self.key_order
        return table

    def rows_of(self, hkl) -> np.ndarray:
        """Row numbers of integer `hkl` rows (shape (..., 3)); -1 where not in the table."""
        h = np.asarray(hkl, dtype=np.int64)
        inside = np.all(np.abs(h) <= self.span, axis=-1)
        dense = self._row_lookup
        if dense is not None:
            # one read of a table over the index cube instead of a sorted search (the scan's warm start
            # asks for one candidate's 10-60 spots per frame, where the search's set-up was most of it)
            return np.where(inside, dense[hkl_keys(np.clip(h, -self.span, self.span), self.span)], -1)
        out = np.full(h.shape[:-1], -1, dtype=np.int64)
        if not np.any(inside) or len(self.keys_sorted) == 0:
            return out
        k = hkl_keys(np.clip(h, -self.span, self.span), self.span)
        at = np.minimum(np.searchsorted(self.keys_sorted, k), len(self.keys_sorted) - 1)
        hit = inside & (self.keys_sorted[at] == k)
        out[hit] = self.key_order[at[hit]]
        return out

    def canonical_orientation(self, uvw, u_matrix: np.ndarray) -> tuple[tuple[int, int, int], np.ndarray]:
        """The same crystal orientation described with the most readable equivalent zone axis.

        Among the proper rotations S of the Laue group, take the one that turns [uvw] into the
        form found in the tables ([011] rather than [1-10], [2-1-10] rather than [-12-10]); the description changes
        (uvw' = S uvw, hkl' = hkl S^-1), the crystal does not: U' = U A S^-1 A^-1 with A the direct
        matrix, so U' A uvw' = U A uvw stays on +z and every reflection lands where it did.
        """
        u = np.asarray(uvw, dtype=np.int64)
        rots = self.proper_laue
        cand = np.einsum("nij,j->ni", rots, u)
        if self.phase.is_hexagonal:
            from saed.crystal.miller import direction_to_4

            four = direction_to_4(cand)
            # [2-1-10], [10-10], [0001]: the largest 4-index tuple with W >= 0
            best = first_lexicographic_min(-np.column_stack([four[:, 3] >= 0, four]))
        else:
            # [001], [011], [112], [123]: fewest negative indices, then ascending order
            best = first_lexicographic_min(np.column_stack([np.sum(cand < 0, axis=1), cand]))
        s_mat = rots[best].astype(float)
        a = self.phase.lattice.direct_matrix_nm
        m_inv = a @ np.linalg.inv(s_mat) @ np.linalg.inv(a)
        return tuple(int(v) for v in cand[best]), np.asarray(u_matrix) @ m_inv

    def canonical_zone(self, uvw) -> tuple[int, int, int]:
        """The representative of the Laue-group family <uvw> (largest tuple), for merging duplicates."""
        u = np.asarray(uvw, dtype=np.int64)
        fam = np.einsum("nij,j->ni", self.laue, u)
        return tuple(int(v) for v in fam[first_lexicographic_min(-fam)])

    @cached_property
    def proper_laue(self) -> np.ndarray:
        """The proper rotations (det +1) of the Laue group, (n, 3, 3) integer matrices."""
        return frozen_array(self.laue[np.rint(np.linalg.det(self.laue)).astype(int) == 1])


def first_lexicographic_min(keys: np.ndarray) -> int:
    """Row of the lexicographically smallest row of integer `keys` (n, k); the first of equal rows.

    ``np.lexsort`` (stable, last key primary) in place of ``min(range(n), key=lambda i: tuple(keys[i]))``.

    >>> first_lexicographic_min(np.array([[1, 2], [0, 5], [0, 3], [0, 3]]))
    2
    """
    k = np.asarray(keys).reshape(len(keys), -1)
    return int(np.lexsort(k.T[::-1])[0])


@dataclass(frozen=True, eq=False)
class IndexTables:
    """The prepared candidate phases: one :class:`PhaseIndexTable` each, for one voltage and max_g."""

    phases: tuple[PhaseIndexTable, ...]
    voltage_kv: float
    max_g_inv_nm: float

    def __len__(self) -> int:
        return len(self.phases)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.phases)

    def table(self, name: str) -> PhaseIndexTable:
        for p in self.phases:
            if p.name == name:
                return p
        raise InputError(f"phase {name!r} is not among the prepared candidates ({', '.join(self.names)})")


def _phase_table(phase: Phase, max_g_inv_nm: float) -> PhaseIndexTable:
    tbl = reflection_table(phase, max_g_inv_nm)
    from saed.simulate.zone import centring_translations

    cen = centring_translations(phase.space_group)
    hkl = tbl.hkl
    if len(cen) > 1 and len(hkl):
        lattice_point = np.abs(np.exp(2j * np.pi * (hkl @ cen.T)).sum(axis=1)) > 1e-6
    else:
        lattice_point = np.ones(len(hkl), bool)
    hkl = hkl[lattice_point]
    g_cart = tbl.g_cart_inv_nm[lattice_point]
    g = tbl.g_inv_nm[lattice_point]
    f_abs = np.abs(tbl.f_nm[lattice_point])
    allowed = tbl.allowed[lattice_point].copy()
    if not np.any(allowed):
        raise InputError(f"{phase.name}: no allowed reflection up to {max_g_inv_nm:g} 1/nm")
    f_rel = f_abs / f_abs[allowed].max()
    span = int(np.abs(hkl).max()) if len(hkl) else 1
    keys = hkl_keys(hkl, span)
    key_order = np.argsort(keys, kind="stable")
    keys_sorted = keys[key_order]

    laue = laue_rotations(phase.space_group)
    # Family representatives: for every allowed reflection, the largest member (as a tuple) of {hkl}.
    seedable = allowed & (f_rel >= SEED_MIN_RELATIVE_F)
    rows_allowed = np.flatnonzero(seedable)
    members = np.einsum("rj,njk->rnk", hkl[rows_allowed], laue)  # (r, n_ops, 3): h' = h R
    code = hkl_keys(np.clip(members, -span, span), span)
    rep_code = code.max(axis=1)
    own = hkl_keys(hkl[rows_allowed], span)
    reps = rows_allowed[own == rep_code]

    i2_all = rows_allowed
    n_pairs = len(reps) * len(i2_all)
    if n_pairs > MAX_PAIRS:
        # keep the shortest representatives: seeds are the shortest measured spots
        keep = max(1, MAX_PAIRS // max(len(i2_all), 1))
        reps = reps[np.argsort(g[reps], kind="stable")[:keep]]
        logger.info("%s: pair table capped at %d families", phase.name, keep)
    i1 = np.repeat(reps, len(i2_all))
    i2 = np.tile(i2_all, len(reps))
    c1, c2 = g_cart[i1], g_cart[i2]
    g1, g2 = g[i1], g[i2]
    cosang = np.einsum("ij,ij->i", c1, c2) / (g1 * g2)
    cross = np.linalg.norm(np.cross(c1, c2), axis=1) / (g1 * g2)
    ok = cross > 1e-6
    i1, i2, g1, g2 = i1[ok], i2[ok], g1[ok], g2[ok]
    ang = np.degrees(np.arccos(np.clip(cosang[ok], -1.0, 1.0)))
    order = np.argsort(g1, kind="stable")  # pairs are stored sorted by |g1|
    i1, i2, g1, g2, ang = i1[order], i2[order], g1[order], g2[order], ang[order]
    ratio = g2 / g1
    by_ratio = np.argsort(ratio, kind="stable")
    f32 = np.float32
    return PhaseIndexTable(
        phase=phase, max_g_inv_nm=float(max_g_inv_nm), hkl=frozen_array(hkl), g_cart_inv_nm=frozen_array(g_cart),
        g_inv_nm=frozen_array(g), f_rel=frozen_array(f_rel), allowed=frozen_array(allowed),
        keys_sorted=frozen_array(keys_sorted), key_order=frozen_array(key_order), span=span,
        pair_i1=frozen_array(i1, np.int32), pair_i2=frozen_array(i2, np.int32), pair_g1=frozen_array(g1, f32),
        pair_g2=frozen_array(g2, f32), pair_angle_deg=frozen_array(ang, f32),
        by_ratio=frozen_array(by_ratio, np.int32), ratio_sorted=frozen_array(ratio[by_ratio], f32),
        laue=frozen_array(laue),
    )


def prepare_phases(phases, *, voltage_kv: float = 200.0, max_g_inv_nm: float | None = None) -> IndexTables:
    """Do all per-phase work of the matcher once: reflections, structure factors, pair tables.

    Parameters
    ----------
    phases : iterable of :class:`saed.crystal.Phase`
    voltage_kv : accelerating voltage, kV
    max_g_inv_nm : largest |g| (1/nm) considered; default :data:`DEFAULT_MAX_G_INV_NM`

    Returns
    -------
    IndexTables
        Frozen and picklable, so it can be built once and shipped to parallel workers.

    Raises
    ------
    InputError
        No phases, a duplicate-free list that is empty, or a bad voltage / max_g.

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> t = prepare_phases([builtin_phase("Co-fcc"), builtin_phase("Co-hcp")])
    >>> t.names
    ('Co-fcc', 'Co-hcp')
    """
    v = check_voltage_kv(voltage_kv)
    g_max = DEFAULT_MAX_G_INV_NM if max_g_inv_nm is None else float(max_g_inv_nm)
    if not math.isfinite(g_max) or g_max <= 0:
        raise InputError(f"max_g must be a positive number of 1/nm, got {max_g_inv_nm!r}")
    out, seen = [], set()
    for ph in phases:
        if not isinstance(ph, Phase):
            raise InputError(f"prepare_phases needs Phase objects, got {type(ph).__name__} ({ph!r}); "
                             "use saed.crystal.load_phase(name_or_cif)")
        if ph.name in seen:
            continue
        seen.add(ph.name)
        out.append(_phase_table(ph, g_max))
    if not out:
        raise InputError("no candidate phases to index against")
    return IndexTables(phases=tuple(out), voltage_kv=v, max_g_inv_nm=g_max)
