"""The JSON document of ``saed ratio`` (docs/contract.md, section "saed ratio"; CONTRACT.md: keep every field).

The measurement as given (with the tolerances), the phases searched and every ranked solution: the
reflection pair with its zone axis (3- and, for hexagonal phases, 4-index), calculated values and
differences, the spot g1+g2 the solution predicts, and the look-alikes.
"""

from __future__ import annotations

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.report.json_numbers import json_float

__all__ = ["ratio_json", "solution_json"]


def solution_json(s) -> dict:
    """One ranked :class:`saed.index.ratio_method` solution."""
    hexa = s.phase.is_hexagonal
    r = json_float
    return {
        "rank": s.rank, "phase": s.phase.name, "zone_axis": list(s.zone_axis),
        "zone_axis_4": direction_to_4(s.zone_axis).tolist() if hexa else None,
        "hkl1": list(s.hkl1), "hkl2": list(s.hkl2),
        "hkl1_4": plane_to_4(s.hkl1).tolist() if hexa else None,
        "hkl2_4": plane_to_4(s.hkl2).tolist() if hexa else None,
        "d1_nm_calc": r(s.d1_nm_calc, 6), "d2_nm_calc": r(s.d2_nm_calc, 6), "angle_deg_calc": r(s.angle_deg_calc, 3),
        "ratio_calc": r(s.ratio_calc, 5), "d1_diff_pct": r(s.d1_diff_pct, 3), "d2_diff_pct": r(s.d2_diff_pct, 3),
        "ratio_diff_pct": r(s.ratio_diff_pct, 3), "angle_diff_deg": r(s.angle_diff_deg, 3), "misfit": r(s.misfit, 4),
        "g_sum": {"hkl": list(s.hkl_sum), "hkl_4": plane_to_4(s.hkl_sum).tolist() if hexa else None,
                  "d_nm": r(s.d_sum_nm, 6), "allowed": s.sum_allowed},
        "same_geometry": list(s.same_geometry), "lookalikes": list(s.lookalikes),
        "other_pairs": [[list(a), list(b)] for a, b in s.other_pairs],
    }


def ratio_json(meas, phases, solutions, *, camera_constant_nm_mm, length_tol_pct, angle_tol_deg) -> dict:
    """The whole ``saed ratio`` document (the measurement, the phases searched, the solutions)."""
    return {"measured": {"d1_nm": meas.d1_nm, "d2_nm": meas.d2_nm, "angle_deg": meas.angle_deg,
                         "ratio": json_float(meas.ratio),
                         "radii_mm": list(meas.radii_mm) if meas.radii_mm else None,
                         "camera_constant_nm_mm": camera_constant_nm_mm,
                         "length_tol_pct": length_tol_pct, "angle_tol_deg": angle_tol_deg},
            "phases": [p.name for p in phases],
            "solutions": [solution_json(s) for s in solutions]}
