"""Scans: frames on an (ny, nx) grid, zone families, and the summary of what was found.

A zone axis is reduced to its family under the phase's Laue group (point group plus
inversion: Friedel's law makes every kinematic pattern centrosymmetric). The family is shown
by the representative the rest of saed uses (:func:`saed.simulate.families.canonical_zone`,
the member in the standard triangle), in 4-index Miller-Bravais form for hexagonal axes -- so
<001>, <011>, <111>, <112> for a cubic phase and <0001>, <11-20>, <01-10> for a hexagonal one.
"""

from __future__ import annotations

from collections import Counter
from functools import lru_cache

import numpy as np

from saed.batch.inputs import FrameSource
from saed.batch.results import Row
from saed.errors import InputError
from saed.report.scan_values import ERROR, NO_SOLUTION, NOT_DONE, FamilyCount, ScanMap, Summary, family_label

__all__ = ["zone_family", "family_label", "FamilyCount", "Summary", "summarize", "ScanMap", "build_scan_map",
           "check_scan_shape", "rows_for_sources", "NOT_DONE", "NO_SOLUTION", "ERROR"]



@lru_cache(maxsize=4096)
def _family(uvw: tuple[int, ...], phase) -> tuple[int, ...]:
    from saed.crystal.miller import direction_to_4
    from saed.simulate.families import canonical_zone

    rep = canonical_zone(phase, uvw)
    return tuple(int(v) for v in (direction_to_4(rep) if phase.is_hexagonal else rep))


def zone_family(uvw, phase) -> tuple[int, ...]:
    """The representative of the family of zone axis `uvw` (3-index) of `phase`.

    Returns 3 indices, or 4 (Miller-Bravais) for a phase on hexagonal axes.

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> zone_family((0, -1, 1), builtin_phase("Al")), zone_family((1, -2, 1), builtin_phase("Al"))
    ((0, 1, 1), (1, 1, 2))
    >>> zone_family((0, 0, -1), builtin_phase("Co-hcp")), zone_family((0, 1, 0), builtin_phase("Co-hcp"))
    ((0, 0, 0, 1), (1, 1, -2, 0))
    """
    u = tuple(int(v) for v in uvw)
    if not any(u):
        raise InputError(f"zone axis {list(u)} is all zeros")
    return _family(u, phase)


def _phase_family(row: Row, phases: dict) -> tuple[str, tuple[int, ...] | None]:
    ph = phases.get(row.phase)
    if ph is None or row.zone_axis is None:
        return row.phase, None
    return row.phase, zone_family(row.zone_axis, ph)


class _Tally:
    """Counts rows by status, phase and (phase, zone family) in one pass."""

    def __init__(self, phases: dict):
        self.phases = phases
        self.status: Counter = Counter()
        self.by_phase: Counter = Counter()
        self.by_family: Counter = Counter()

    def add(self, row: Row):
        """Count `row`; returns its (phase, family) when it is indexed, else None."""
        if row.status == "ok" and row.phase:
            self.status["ok"] += 1
            pf = _phase_family(row, self.phases)
            self.by_phase[pf[0]] += 1
            self.by_family[pf] += 1
            return pf
        self.status["error" if row.is_error else row.status] += 1
        return None

    def summary(self) -> Summary:
        order = {name: i for i, (name, _) in enumerate(self.by_phase.most_common())}
        fams = sorted(self.by_family.items(), key=lambda kv: (order[kv[0][0]], -kv[1], str(kv[0][1])))
        return Summary(sum(self.status.values()), self.status["ok"], self.status["no-solution"], self.status["error"],
                       tuple(self.by_phase.most_common()), tuple(FamilyCount(p, f, c) for (p, f), c in fams))


def summarize(rows, *, phases: dict) -> Summary:
    """Count `rows` (any iterable, read once) by status, phase and zone family.

    `phases` maps phase names to Phase objects. Phases are listed by frame count (most first),
    families within a phase likewise. A row whose phase is not in `phases` is counted under
    its phase with family None; an indexed row with another status than ``ok`` does not occur.
    """
    tally = _Tally(phases)
    for r in rows:
        tally.add(r)
    return tally.summary()


def check_scan_shape(scan_shape, sources) -> tuple[int, int]:
    """The scan shape to use: `scan_shape` if given (must match the frame count), else that of a lone 4-axis stack.

    Raises InputError when the shape does not match the inputs or none is known.
    """
    n = sum(s.n_frames for s in sources)
    if scan_shape is None:
        own = [s.scan_shape for s in sources]
        if len(sources) == 1 and own[0] is not None:
            return own[0]
        raise InputError("a scan map needs --scan-shape NY NX (or a single 4-axis .npy stack, which carries its own)")
    ny, nx = (int(v) for v in scan_shape)
    if ny < 1 or nx < 1:
        raise InputError(f"--scan-shape {ny} {nx}: both must be at least 1")
    if ny * nx != n:
        raise InputError(f"--scan-shape {ny} {nx} has {ny * nx} positions, but the inputs hold {n} frames")
    return ny, nx


def sequenced(rows, sources):
    """(sequence number over all frames of `sources`, row) for the rows that belong to `sources` (lazy)."""
    offset, start = {}, 0
    for s in sources:
        offset.setdefault((s.path, s.file_id), (start, s.n_frames))
        start += s.n_frames
    for r in rows:
        path, fid, k = r.key
        at = offset.get((path, fid))
        if at is not None and 0 <= k < at[1]:
            yield at[0] + k, r


def rows_for_sources(rows, sources):
    """The rows that belong to frames of `sources` (a CSV may hold rows of earlier, other inputs); lazy."""
    return (r for _, r in sequenced(rows, sources))


def build_scan_map(rows, sources: tuple[FrameSource, ...], scan_shape, *, phases: dict,
                   phase_order=(), boundary_deg: float = 5.0) -> ScanMap:
    """Place `rows` (any iterable, read once) on the scan grid of `sources` (frames in input order, row-major).

    Rows of frames not in `sources` are ignored; positions with no row are NOT_DONE.
    `phase_order` fixes the order (and so the colours) of the phases; phases found but not
    listed follow, by name. Grain boundaries are drawn above `boundary_deg` of misorientation.
    """
    ny, nx = check_scan_shape(scan_shape, sources)
    tally = _Tally(phases)
    status_grid = np.full(ny * nx, NOT_DONE, np.int32)
    found: dict = {}                           # (phase, family) -> id in the order first seen
    pf_grid = np.full(ny * nx, -1, np.int32)
    score = np.full(ny * nx, np.nan)
    zones = np.zeros((ny * nx, 3), np.int64)
    phi = np.zeros(ny * nx)
    for seq, r in sequenced(rows, sources):
        pf = tally.add(r)
        if pf is None:
            status_grid[seq] = ERROR if r.is_error else NO_SOLUTION
        else:
            pf_grid[seq] = found.setdefault(pf, len(found))
            status_grid[seq] = 0
            score[seq] = np.nan if r.score is None else r.score
            if r.zone_axis is not None and len(r.zone_axis) == 3:
                zones[seq] = r.zone_axis
                phi[seq] = r.in_plane_rotation_deg or 0.0
    summary = tally.summary()
    names = [p for p in phase_order if p in dict(summary.phases)]
    names += sorted(q for q, _ in summary.phases if q not in names)
    pidx = {p: i for i, p in enumerate(names)}
    fidx = {(f.phase, f.family): i for i, f in enumerate(summary.families)}
    keys = sorted(found, key=found.get)
    to_phase = np.array([pidx[p] for p, _ in keys] or [0], np.int32)
    to_family = np.array([fidx[k] for k in keys] or [0], np.int32)
    indexed = pf_grid >= 0
    phase_grid = np.where(indexed, to_phase[np.maximum(pf_grid, 0)], status_grid)
    fam_grid = np.where(indexed, to_family[np.maximum(pf_grid, 0)], -1)
    rgb, right, down, objs = _orientation_layers(phase_grid, zones, phi, names, phases, (ny, nx), boundary_deg)
    return ScanMap((ny, nx), phase_grid.reshape(ny, nx), fam_grid.reshape(ny, nx), tuple(names),
                   summary.families, summary, score.reshape(ny, nx), rgb, right, down, float(boundary_deg), objs)


def _orientation_layers(phase_grid, zones, phi, names, phases: dict, shape, boundary_deg: float):
    """IPF colours (ny, nx, 3) and boundaries from the rows' zones and in-plane rotations."""
    from saed.index.orientmap import boundaries, ipf_colours, orientations

    ny, nx = shape
    rgb = np.full((ny * nx, 3), np.nan)
    u = np.tile(np.eye(3), (ny * nx, 1, 1))
    pidx = np.full(ny * nx, -1, np.int32)
    objs = []
    for k, name in enumerate(names):
        ph = phases.get(name)
        objs.append(ph)
        sel = (phase_grid == k) & np.any(zones != 0, axis=1)
        if ph is None or not sel.any():
            continue
        u[sel] = orientations(ph, zones[sel], phi[sel])
        rgb[sel] = ipf_colours(ph, u[sel][:, 2, :])          # U^T z: the beam direction in the crystal
        pidx[sel] = k
    pidx = pidx.reshape(ny, nx)
    right, down = boundaries(pidx, u.reshape(ny, nx, 3, 3), objs, threshold_deg=boundary_deg) if ny * nx else (None, None)
    return rgb.reshape(ny, nx, 3), right, down, tuple(objs)
