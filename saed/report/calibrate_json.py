"""The JSON documents of ``saed calibrate`` (docs/contract.md, section "saed calibrate"; CONTRACT.md: keep every
field).

:func:`calibrate_json` is the result of one calibration (scale, centre, ellipse, camera constant, the
rings or spots used, where the calibration the other commands would have used came from, warnings and,
once filed, the history file); :func:`history_list_json` is ``saed calibrate --list``.
"""

from __future__ import annotations

from saed.report.json_numbers import json_float
from saed.units import percent, percent_off

__all__ = ["calibrate_json", "calibration_file_extras", "history_list_json"]


def _result_json(res, *, image: str, zone=None) -> dict:
    """The contract's calibrate fields (plus rings, voltage, date, ...)."""
    cal = res.calibration
    ex = calibration_file_extras(res, image=image, zone=zone)
    return {
        "standard": cal.standard,
        "scale_inv_nm_per_px": cal.scale_inv_nm_per_px,
        "center_px": [json_float(v, 3) for v in cal.center_px] if cal.center_px else None,
        "ellipse": ({"axis_ratio": json_float(cal.ellipse.axis_ratio),
                     "major_axis_angle_deg": json_float(cal.ellipse.major_axis_angle_deg, 2)} if cal.ellipse else None),
        "camera_constant_nm_mm": cal.camera_constant_nm_mm,
        "camera_length_mm": cal.implied_camera_length_mm,
        "residual_pct": ex["residual_pct"],
        "image": image,
        "kind": ex["kind"],
        "zone_axis": ex["zone_axis"],
        "voltage_kv": cal.voltage_kv,
        "wavelength_nm": cal.wavelength_nm,
        "pixel_pitch_um": cal.pixel_pitch_um,
        "scale_sigma_pct": ex["scale_sigma_pct"],
        "date": cal.date,
        "alpha_axis_deg": cal.alpha_axis_deg,
        "notes": list(res.notes),
        "rings": [{"radius_px": json_float(r[0], 3), "hkl": r[1], "d_nm_standard": r[2],
                   "d_nm_measured": json_float(r[3]), "misfit_pct": json_float(r[4], 4)} for r in res.ring_rows],
    }


def calibration_file_extras(res, *, image: str, zone=None) -> dict:
    """The fields a calibration file and a history entry carry beside the calibration (the same values as
    the document's)."""
    return {"residual_pct": json_float(res.residual_pct, 5), "scale_sigma_pct": json_float(percent(res.scale_sigma_rel), 5),
            "image": image, "kind": "zone" if zone is not None else "rings",
            "zone_axis": list(zone) if zone is not None else None,
            "n_rings_used": sum(r[1] is not None for r in res.ring_rows)}


def calibrate_json(res, *, image: str, zone=None, prior, warnings: list[str], history_file=None) -> dict:
    """The whole ``saed calibrate`` document.

    `prior` is the resolved calibration the other commands would have used for this image (its source
    fields are merged in; when it had a scale, the change is given, and a note when it is over 1 %);
    `history_file` is where the calibration was filed (absent when it was not).
    """
    doc = _result_json(res, image=image, zone=zone)
    doc.update(prior.to_json())
    doc["warnings"] = list(warnings)
    cal = res.calibration
    before = prior.calibration.scale_inv_nm_per_px
    if before is not None:
        diff = abs(percent_off(cal.scale_inv_nm_per_px, before))
        doc["scale_change_from_source_pct"] = json_float(percent_off(cal.scale_inv_nm_per_px, before), 4)
        if diff > 1.0:
            doc["notes"].append(f"the measured scale differs by {diff:.1f} % from the {prior.source} "
                                f"({before:.6g} 1/nm per px, {prior.detail})")
    if history_file is not None:
        doc["history_file"] = str(history_file)
    return doc


def history_list_json(folder, entries, problems) -> dict:
    """``saed calibrate --list``: every stored calibration (newest first per camera length) and the files skipped."""
    return {"folder": str(folder), "calibrations": [
        {"file": str(e.path), "camera_length_label_mm": e.label_mm, **e.calibration.to_json(),
         "residual_pct": e.residual_pct} for e in entries], "skipped": problems}
