"""The JSON document of ``saed simulate`` (CONTRACT.md: keep every field; additions in docs/simulation.md).

One :class:`~saed.simulate.zone.ZonePattern`: the zone, beam and foil, the orientation matrix, the
Laue-circle geometry, the standard-pattern summary (g1, g2, ratio, angle) and every reflection with
its position on the detector (after the in-plane rotation), intensity, excitation error and
double-diffraction route.
"""

from __future__ import annotations

from saed.errors import InputError

__all__ = ["pattern_json"]


def pattern_json(zp, *, in_plane_rotation_deg: float = 0.0) -> dict:
    """The contract's simulate JSON for `zp`, with the additions documented in docs/simulation.md."""
    from saed.crystal.miller import plane_to_4
    from saed.simulate.families import pattern_summary
    from saed.simulate.geometry import in_plane_rotation
    from saed.simulate.zone import rotate_xy

    hexa = zp.is_hexagonal
    xy = zp.xy_rotated_inv_nm(in_plane_rotation_deg)
    hkil = zp.hkil
    refl = []
    for i in range(len(zp)):
        r = zp.dd_route[i]
        route = None if r[0] < 0 else [zp.hkl[r[0]].tolist(), zp.hkl[r[1]].tolist()]
        refl.append({
            "hkl": zp.hkl[i].tolist(),
            "hkil": hkil[i].tolist() if hexa else None,
            "g_inv_nm": round(float(zp.g_inv_nm[i]), 6),
            "d_nm": round(float(zp.d_nm[i]), 6),
            "x_inv_nm": round(float(xy[i, 0]), 6),
            "y_inv_nm": round(float(xy[i, 1]), 6),
            "intensity": float(f"{float(zp.intensity[i]):.6g}"),
            "kinematically_forbidden": bool(zp.kinematically_forbidden[i]),
            "double_diffraction": bool(zp.double_diffraction[i]),
            "double_diffraction_route": route,
            "laue_zone": int(zp.laue_zone[i]),
            "excitation_error_inv_nm": float(f"{float(zp.excitation_error_inv_nm[i]):.6g}"),
            "structure_factor_abs_nm": float(f"{float(zp.f_abs[i]):.6g}"),
        })
    try:
        s = pattern_summary(zp)
        summary = {"g1_hkl": list(s.g1_hkl), "g2_hkl": list(s.g2_hkl),
                   "g1_hkil": plane_to_4(s.g1_hkl).tolist() if hexa else None,
                   "g2_hkil": plane_to_4(s.g2_hkl).tolist() if hexa else None,
                   "d1_nm": round(s.d1_nm, 6), "d2_nm": round(s.d2_nm, 6),
                   "ratio": round(s.ratio, 5), "angle_deg": round(s.angle_deg, 3)}
    except InputError:
        summary = None
    u = in_plane_rotation(in_plane_rotation_deg) @ zp.orientation_matrix
    centre = rotate_xy(zp.laue_circle_center_xy_inv_nm, in_plane_rotation_deg)
    return {
        "phase": zp.phase.name,
        "zone_axis": zp.zone_axis.tolist(),
        "zone_axis_4": zp.zone_axis_4.tolist() if hexa else None,
        "voltage_kv": zp.voltage_kv,
        "wavelength_nm": round(zp.wavelength_nm, 9),
        "max_g_inv_nm": zp.max_g_inv_nm,
        "thickness_nm": zp.thickness_nm,
        "thickness_spread": zp.thickness_spread,
        "tilt_deg": zp.tilt_deg,
        "tilt_toward_hkl": None if zp.tilt_toward_hkl is None else zp.tilt_toward_hkl.tolist(),
        "in_plane_rotation_deg": in_plane_rotation_deg,
        "beam_direction_cart": [round(float(v), 9) for v in zp.beam_direction_cart],
        "orientation_matrix": [[round(float(v), 9) for v in row] for row in u],
        "layer_spacing_inv_nm": round(zp.layer_spacing_inv_nm, 6),
        "folz_ring_radius_inv_nm": round(zp.folz_ring_radius_inv_nm, 4),
        "laue_circle": {"center_x_inv_nm": round(float(centre[0]), 6), "center_y_inv_nm": round(float(centre[1]), 6),
                        "radius_inv_nm": round(zp.laue_circle_radius_inv_nm, 6)},
        "pattern": summary,
        "reflections": refl,
    }
