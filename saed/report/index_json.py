"""The JSON document of ``saed index`` (CONTRACT.md: every listed field, plus more).

Contract fields: ``image``, ``center_px``, ``scale_inv_nm_per_px`` (the calibration's, null when
uncalibrated), ``voltage_kv``, ``spots`` [x, y, intensity], ``solutions`` [rank, phase,
zone_axis, zone_axis_4, score, orientation_matrix, in_plane_rotation_deg, scale_inv_nm_per_px
(refined or implied), indexed_spots [x, y, hkl, hkil, d_nm_measured, d_nm_calc],
mean_d_error_pct, mean_angle_error_deg]. Added: the message, notes, look-alikes with their
separating tilt, the mistilt, the parts of the figure of merit and the spots left unexplained.
"""

from __future__ import annotations

import numpy as np

from saed.index.values import IndexResult, Lookalike, Mistilt, Solution
from saed.report.json_numbers import json_float as _num, json_ints as _ints

__all__ = ["result_json", "solution_json", "FORMAT"]

#: Identifies the document (``"format"`` field); the contract fields never change within it.
FORMAT = "saed-index-1"


def _mistilt_json(m: Mistilt | None):
    if m is None:
        return None
    return {"tilt_deg": _num(m.tilt_deg, 3), "laue_center_azimuth_deg": _num(m.laue_center_azimuth_deg, 1),
            "laue_center_px": [_num(m.laue_center_px[0], 2), _num(m.laue_center_px[1], 2)],
            "laue_radius_px": _num(m.laue_radius_px, 2), "correction_axis_deg": _num(m.correction_axis_deg, 1),
            "alpha_deg": _num(m.alpha_deg, 2), "beta_deg": _num(m.beta_deg, 2), "reliable": m.reliable,
            "tilt_sigma_deg": _num(m.tilt_sigma_deg, 3),
            "advice": m.advice}


def _lookalike_json(lk: Lookalike) -> dict:
    t = lk.tilt
    return {
        "phase": lk.phase_name, "zone_axis": _ints(lk.zone_axis), "zone_axis_4": _ints(lk.zone_axis_4),
        "score": _num(lk.score, 4), "relation": lk.relation, "separating": lk.separating,
        "scale_inv_nm_per_px": _num(lk.scale_inv_nm_per_px, 7),
        "tilt": None if t is None else {
            "angle_deg": _num(t.angle_deg, 2), "about_hkl": _ints(t.about_hkl), "about_hkl_other": _ints(t.about_hkl_other),
            "about_azimuth_deg": _num(t.about_azimuth_deg, 1), "target_zone": _ints(t.target_zone),
            "other_target_zone": _ints(t.other_target_zone), "text": t.text,
            "sense_ambiguous_180": t.sense_ambiguous, "turned_target_zone": _ints(t.turned_target_zone),
            "turned_other_target_zone": _ints(t.turned_other_target_zone),
            "holder_readings_deg": None if t.holder_readings_deg is None else [_num(v, 2) for v in t.holder_readings_deg],
            "turned_holder_readings_deg": (None if t.turned_holder_readings_deg is None
                                           else [_num(v, 2) for v in t.turned_holder_readings_deg])},
    }


def solution_json(sol: Solution, rank: int) -> dict:
    """One entry of ``solutions``."""
    indexed, unexplained = [], []
    for s in sol.indexed:
        if s.hkl is None:
            unexplained.append({"x": _num(s.x_px, 3), "y": _num(s.y_px, 3), "intensity": _num(s.intensity, 1),
                                "d_nm_measured": _num(s.d_nm_measured, 5)})
            continue
        indexed.append({"x": _num(s.x_px, 3), "y": _num(s.y_px, 3), "hkl": _ints(s.hkl), "hkil": _ints(s.hkil),
                        "d_nm_measured": _num(s.d_nm_measured, 5), "d_nm_calc": _num(s.d_nm_calc, 5),
                        "kind": s.kind, "residual_px": _num(s.residual_px, 3), "d_error_pct": _num(s.d_error_pct, 3),
                        "intensity": _num(s.intensity, 1), "intensity_calc": _num(s.intensity_calc, 5),
                        "projected_hkl": _ints(s.projected_hkl),
                        "projected_denominator": None if s.projected_hkl is None else s.projected_denominator})
    return {
        "rank": rank,
        "phase": sol.phase_name,
        "structure_type": sol.structure_type,
        "zone_axis": _ints(sol.zone_axis),
        "zone_axis_4": _ints(sol.zone_axis_4),
        "score": _num(sol.score, 4),
        "orientation_matrix": [[_num(v, 6) for v in row] for row in np.asarray(sol.orientation_matrix)],
        "in_plane_rotation_deg": _num(sol.in_plane_rotation_deg, 3),
        "scale_inv_nm_per_px": _num(sol.scale_inv_nm_per_px, 7),
        "scale_error_pct": _num(sol.scale_error_pct, 3),
        "implied_camera_length_mm": _num(sol.implied_camera_length_mm, 2),
        "indexed_spots": indexed,
        "unexplained_spots": unexplained,
        "n_indexed": sol.n_indexed,
        "n_explained": sol.n_explained,
        "mean_d_error_pct": _num(sol.mean_d_error_pct, 4),
        "mean_angle_error_deg": _num(sol.mean_angle_error_deg, 4),
        "figure_of_merit": {k: _num(v, 4) for k, v in sol.terms},
        "mistilt": _mistilt_json(sol.mistilt),
        "sense_ambiguous_180": sol.sense_ambiguous_180,
        "notes": list(sol.notes),
        "lookalikes": [_lookalike_json(lk) for lk in sol.lookalikes],
    }


def result_json(result: IndexResult, *, image: str, frame: int | None = None) -> dict:
    """The whole ``saed index`` document for one pattern."""
    m = result.measured
    cal = m.calibration
    sp = m.spots
    return {
        "format": FORMAT,
        "image": image,
        "frame": frame,
        "image_shape": [int(v) for v in m.image_shape],
        "center_px": [_num(m.center_px[0], 3), _num(m.center_px[1], 3)],
        "scale_inv_nm_per_px": None if cal is None else cal.scale_inv_nm_per_px,
        "calibrated": bool(cal is not None and cal.is_calibrated),
        "voltage_kv": None if cal is None else cal.voltage_kv,
        "pixel_pitch_um": None if cal is None else cal.pixel_pitch_um,
        "phases": list(result.phases),
        "spots": [{"x": _num(sp.x_px[k], 3), "y": _num(sp.y_px[k], 3), "intensity": _num(sp.intensity[k], 1)}
                  for k in range(len(sp))],
        "solutions": [solution_json(s, i + 1) for i, s in enumerate(result.solutions)],
        "message": result.message,
        "near_miss": None if result.near_miss is None else solution_json(result.near_miss, 0),
        "implied_scale_inv_nm_per_px": _num(result.implied_scale_inv_nm_per_px, 7),
        "notes": list(m.notes) + list(result.notes),
        **_crystal_fields(result),
    }


def _crystal_fields(result: IndexResult) -> dict:
    """``crystals``, ``orientation_relationships`` and ``cross_double_diffraction`` (saed.report.crystals_json)."""
    from saed.report.crystals_json import cross_double_diffraction_json, crystals_json, relationships_json

    return {"crystals": crystals_json(result), "orientation_relationships": relationships_json(result),
            "cross_double_diffraction": cross_double_diffraction_json(result)}
