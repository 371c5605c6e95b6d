"""JSON of the crystals in one pattern and their orientation relationships (docs/contract.md).

``crystals``: one entry per crystal, crystals[0] the best solution (one entry for a single
crystal, none without a solution): phase, zone_axis, zone_axis_4, orientation_matrix, score,
indexed_spots (the spots it explains; ``shared`` when another crystal explains them too), plus its
role, in-plane rotation and the share of the spot intensity it explains.
``orientation_relationships``: crystals [0, k], name, parallel_planes, parallel_directions
([crystal 0 indices, crystal k indices], 3-index), deviation_deg, plus misorientation, twin
plane, the nearest standard when none matched, the source and one line of text.
``cross_double_diffraction``: spots explained as g_a + g_b of two crystals.
"""

from __future__ import annotations

import numpy as np

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.report.json_numbers import json_float as _num, json_ints as _ints

__all__ = ["crystals_json", "relationships_json", "cross_double_diffraction_json"]


def crystals_json(result) -> list[dict]:
    out = []
    for c in result.crystals:
        sol = c.solution
        shared = set(c.shared_spots)
        spots = []
        for s in sol.indexed:
            if s.kind not in ("allowed", "double-diffraction") or s.hkl is None:
                continue
            spots.append({"spot": s.spot_index, "x": _num(s.x_px, 3), "y": _num(s.y_px, 3), "hkl": _ints(s.hkl),
                          "hkil": _ints(s.hkil), "kind": s.kind, "d_nm_measured": _num(s.d_nm_measured, 5),
                          "d_nm_calc": _num(s.d_nm_calc, 5), "residual_px": _num(s.residual_px, 3),
                          "shared": s.spot_index in shared})
        out.append({
            "phase": sol.phase_name, "zone_axis": _ints(sol.zone_axis), "zone_axis_4": _ints(sol.zone_axis_4),
            "orientation_matrix": [[_num(v, 6) for v in row] for row in np.asarray(sol.orientation_matrix)],
            "score": _num(sol.score, 4), "indexed_spots": spots, "role": c.role,
            "in_plane_rotation_deg": _num(sol.in_plane_rotation_deg, 3),
            "intensity_share": _num(c.intensity_share, 3), "n_own_spots": len(c.own_spots),
            "n_shared_spots": len(c.shared_spots),
            # phases that fit this crystal's own spots as well: the pattern does not decide between them
            "undecided_with": list(c.undecided_with)})
    return out


def _pair4(pair, hex_flags, plane: bool):
    if pair is None:
        return None
    conv = plane_to_4 if plane else direction_to_4
    return [_ints(conv(np.array(p))) if h else None for p, h in zip(pair, hex_flags)]


def relationships_json(result) -> list[dict]:
    out = []
    hexes = [c.solution.zone_axis_4 is not None for c in result.crystals]
    for r in result.orientation_relationships:
        flags = (hexes[r.crystals[0]], hexes[r.crystals[1]]) if len(hexes) > max(r.crystals) else (False, False)
        out.append({
            "crystals": [int(v) for v in r.crystals], "name": r.name,
            "parallel_planes": None if r.parallel_planes is None else [_ints(p) for p in r.parallel_planes],
            "parallel_directions": None if r.parallel_directions is None else [_ints(p) for p in r.parallel_directions],
            "deviation_deg": _num(r.deviation_deg, 2), "kind": r.kind,
            "parallel_planes_4": _pair4(r.parallel_planes, flags, True),
            "parallel_directions_4": _pair4(r.parallel_directions, flags, False),
            "misorientation_deg": _num(r.misorientation_deg, 2),
            "misorientation_axis_uvw": [_num(v, 3) for v in r.misorientation_axis],
            "twin_plane": _ints(r.twin_plane), "nearest": r.nearest or None,
            "nearest_deviation_deg": _num(r.nearest_deviation_deg, 2), "source": r.source, "text": r.text})
    return out


def cross_double_diffraction_json(result) -> list[dict]:
    return [{"spot": d.spot_index, "crystal_a": d.crystal_a, "hkl_a": _ints(d.hkl_a), "crystal_b": d.crystal_b,
             "hkl_b": _ints(d.hkl_b)} for d in result.cross_double_diffraction]
