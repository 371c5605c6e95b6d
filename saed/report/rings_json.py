"""The JSON document of ``saed rings`` (docs/contract.md, section "saed rings"; CONTRACT.md: keep every field).

The refined centre and ellipse, every measured ring (radius, and d-spacing once calibrated), every
ranked phase or mixture solution with the rings it explains, leaves unexplained and the lines it
misses, the notes, and the calibration source.
"""

from __future__ import annotations

from saed.crystal.miller import plane_to_4
from saed.report.json_numbers import json_float, json_ints
from saed.units import percent, percent_off

__all__ = ["rings_json", "solution_json"]


def _hkl_json(phase, hkl):
    h = json_ints(hkl)
    return h, (json_ints(plane_to_4(h)) if phase.is_hexagonal else None)


def solution_json(rank: int, m, obs, scale) -> dict:
    """One ranked solution: phase(s), score, every matched ring with its hkl, rings unexplained, lines missing."""
    s = m.scale_inv_nm_per_px
    matched, unexplained = [], []
    for i, a in enumerate(m.ring_lines):
        r = float(obs.radius_px[i])
        if not a:
            unexplained.append({"ring": i + 1, "radius_px": json_float(r, 3), "d_nm": json_float(1 / (r * s))})
            continue
        p_idx, j = max(a, key=lambda t: m.lines[t[0]].intensity[t[1]] * m.amounts[t[0]])
        ln = m.lines[p_idx]
        hkl, hkil = _hkl_json(ln.phase, ln.hkl[j])
        matched.append({"ring": i + 1, "d_nm": json_float(1 / (r * s)), "d_nm_calc": json_float(ln.d_nm[j]),
                        "hkl": hkl, "hkil": hkil, "families": [ln.hkl_label(jj) for pp, jj in a if pp == p_idx],
                        "phase": ln.phase.name, "error_pct": json_float(percent(float(m.ring_delta_rel[i])), 4),
                        "also": [f"{m.lines[pp].phase.name} {m.lines[pp].hkl_label(jj)}" for pp, jj in a if pp != p_idx]})
    missing = []
    for p_idx, j, v in m.missing:
        ln = m.lines[p_idx]
        hkl, hkil = _hkl_json(ln.phase, ln.hkl[j])
        missing.append({"phase": ln.phase.name, "hkl": hkl, "hkil": hkil, "d_nm": json_float(ln.d_nm[j]),
                        "radius_px": json_float(ln.g_inv_nm[j] / s, 2), "expected_intensity": json_float(v, 4)})
    total = sum(m.amounts) or 1.0
    return {
        "rank": rank,
        "phase": m.name,
        "phases": [p.name for p in m.phases],
        "fractions": [json_float(a / total, 4) for a in m.amounts],
        "score": json_float(m.score, 4),
        "scale_inv_nm_per_px": s,
        "scale_change_pct": None if scale is None else json_float(percent_off(s, scale), 4),
        "r_factor": json_float(m.r_factor, 4),
        "position_agreement": json_float(m.position_quality, 4),
        "rings_matched": matched,
        "rings_unexplained": unexplained,
        "lines_missing": missing,
    }


def _ring_json(measured, obs, i: int, s) -> dict:
    rings = measured.rings
    r = float(rings.radius_px[i])
    g = None if s is None else r * s
    return {"radius_px": json_float(r, 3), "radius_sigma_px": json_float(rings.radius_sigma_px[i], 4),
            "g_inv_nm": None if g is None else json_float(g, 5), "d_nm": None if g is None else json_float(1 / g),
            "d_sigma_nm": None if g is None else json_float(float(rings.radius_sigma_px[i]) / r / g, 7),
            "intensity": json_float(obs.intensity[i], 5), "width_px": json_float(rings.width_px[i], 3),
            "snr": json_float(rings.snr[i], 1), "coverage": json_float(measured.coverage[i], 3)}


def rings_json(image: str, measured, obs, ident, resolved, *, scale_tolerance_pct) -> dict:
    """The whole ``saed rings`` document.

    `measured` is the ring measurement, `obs` its observed rings, `ident` the phase identification and
    `resolved` the resolved calibration (its source fields are merged in); the tolerance is written
    only when there is a scale.
    """
    cal = resolved.calibration
    s = cal.scale_inv_nm_per_px
    return {
        "image": image,
        "center_px": [json_float(v, 3) for v in measured.center_px],
        "ellipse": {"axis_ratio": json_float(measured.ellipse.axis_ratio),
                    "major_axis_angle_deg": json_float(measured.ellipse.major_axis_angle_deg, 2),
                    "source": "calibration" if cal.ellipse is not None else "fitted"},
        "scale_inv_nm_per_px": s,
        "scale_tolerance_pct": scale_tolerance_pct if s is not None else None,
        "voltage_kv": cal.voltage_kv,
        "rings": [_ring_json(measured, obs, i, s) for i in range(len(measured.rings))],
        "solutions": [solution_json(k + 1, m, obs, s) for k, m in enumerate(ident.solutions)],
        "notes": list(measured.notes) + list(ident.notes),
        **resolved.to_json(),
    }
