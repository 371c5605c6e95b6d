"""The JSON document of ``saed spots`` (docs/contract.md, section "saed spots"; CONTRACT.md: keep every field).

Centre, every spot (position, intensity, signal-to-noise, size, lattice index; reciprocal length and
d-spacing when calibrated) and the 2-D basis g1, g2 of a :class:`~saed.image.values.MeasuredPattern`.
The command adds the calibration's own fields (:meth:`saed.calibrate.resolve.Resolved.to_json`).
"""

from __future__ import annotations

import math

from saed.report.json_numbers import json_float as _num

__all__ = ["spots_json", "basis_angle_deg"]


def spots_json(measured, *, image: str, frame: int | None) -> dict:
    """The JSON document of ``saed spots`` for a MeasuredPattern."""
    cal = measured.calibration
    scale = cal.scale_inv_nm_per_px
    sp = measured.spots
    b = measured.basis
    vec = measured.corrected_spot_vectors_px()
    spots = []
    for k in range(len(sp)):
        length = float(math.hypot(*vec[k]))
        d = {"x": _num(sp.x_px[k], 3), "y": _num(sp.y_px[k], 3), "intensity": _num(sp.intensity[k], 1),
             "intensity_sigma": _num(sp.intensity_sigma[k], 1), "snr": _num(sp.snr[k], 2),
             "sigma_xy_px": _num(sp.sigma_xy_px[k], 4), "size_px": _num(sp.size_px[k], 3),
             "saturated": bool(sp.saturated[k]), "g_px": _num(length, 3)}
        if b is not None:
            d["on_lattice"] = bool(b.on_lattice[k])
            d["index"] = [int(v) for v in b.indices[k]] if b.on_lattice[k] else None
        if scale is not None and length > 0:
            d["g_inv_nm"] = _num(length * scale, 5)
            d["d_nm"] = _num(1.0 / (length * scale), 5)
        spots.append(d)
    basis = None
    if b is not None:
        g1c, g2c = measured.corrected_basis_px()
        l1, l2 = float(math.hypot(*g1c)), float(math.hypot(*g2c))
        basis = {"g1_px": [_num(v, 4) for v in b.g1_px], "g2_px": [_num(v, 4) for v in b.g2_px],
                 "g1_length_px": _num(l1, 4), "g2_length_px": _num(l2, 4),
                 "sigma_g1_px": _num(b.sigma_g1_px, 5), "sigma_g2_px": _num(b.sigma_g2_px, 5),
                 "angle_deg": _num(basis_angle_deg(g1c, g2c), 4), "sigma_angle_deg": _num(b.sigma_angle_deg, 4),
                 "ratio_g2_g1": _num(l2 / l1, 5), "rms_residual_px": _num(b.rms_residual_px, 4),
                 "n_on_lattice": int(b.on_lattice.sum()), "ellipse_corrected": cal.ellipse is not None}
        if scale is not None:
            basis.update({"g1_inv_nm": _num(l1 * scale, 5), "g2_inv_nm": _num(l2 * scale, 5),
                          "d1_nm": _num(1.0 / (l1 * scale), 5), "d2_nm": _num(1.0 / (l2 * scale), 5)})
    return {
        "image": image,
        "frame": frame,
        "image_shape": list(measured.image_shape),
        "center_px": [_num(measured.center_px[0], 3), _num(measured.center_px[1], 3)],
        "center_sigma_px": _num(measured.center_sigma_px, 4),
        "scale_inv_nm_per_px": scale,
        "voltage_kv": cal.voltage_kv,
        "ellipse": None if cal.ellipse is None else {"axis_ratio": cal.ellipse.axis_ratio,
                                                     "major_axis_angle_deg": cal.ellipse.major_axis_angle_deg},
        "n_spots": len(sp),
        "spots": spots,
        "basis": basis,
        "notes": list(measured.notes),
    }


def basis_angle_deg(a, b) -> float:
    """Angle between two 2-D vectors, degrees (0 to 180)."""
    c = float((a @ b) / (math.hypot(*a) * math.hypot(*b)))
    return math.degrees(math.acos(max(-1.0, min(1.0, c))))
