"""Plausibility warnings for a new calibration: against the stated nominal camera length and the history.

A measured camera length far from the microscope's setting is nearly always a wrong pixel pitch
or binning, not a real lens change; a new calibration well off the history of the same setting
means either the lens state drifted (hysteresis, a different focus) or this calibration is wrong.
Neither is refused: the operator decides, but is told.
"""

from __future__ import annotations

import statistics

from saed.calibration import Calibration
from saed.units import percent_off

__all__ = ["NOMINAL_LIMIT_PCT", "HISTORY_LIMIT_PCT", "nominal_warning", "history_warning"]

#: Measured vs nominal camera length, percent, beyond which a wrong pixel pitch or binning is likely
#: (common practice: a projector setting reproduces its nominal length to a few percent).
NOMINAL_LIMIT_PCT = 10.0
#: New calibration vs the history of the same camera length, percent (common practice: a setting is
#: reproducible to well under 1 % when the lenses are normalised the same way).
HISTORY_LIMIT_PCT = 1.0


def nominal_warning(cal: Calibration, nominal_camera_length_mm: float | None) -> str | None:
    """A one-line warning when the measured camera length is more than 10 % off the nominal one.

    >>> c = Calibration(scale_inv_nm_per_px=0.0558, camera_length_mm=166.0, pixel_pitch_um=14.0)
    >>> nominal_warning(c, 100.0)[:48]
    'measured camera length 166.0 mm is +66.0 % from '
    >>> nominal_warning(c, 160.0) is None
    True
    """
    measured = cal.implied_camera_length_mm
    if nominal_camera_length_mm is None or measured is None:
        return None
    off = percent_off(measured, nominal_camera_length_mm)
    if abs(off) <= NOMINAL_LIMIT_PCT:
        return None
    return (f"measured camera length {measured:.1f} mm is {off:+.1f} % from the nominal {nominal_camera_length_mm:g} mm "
            f"(more than {NOMINAL_LIMIT_PCT:g} %): check --pixel-pitch and the detector binning")


def _comparable(new: Calibration, old: Calibration) -> tuple[float, float, str] | None:
    """(new value, old value, what) for two calibrations: camera lengths if both have one, else scales at one voltage."""
    a, b = new.implied_camera_length_mm, old.implied_camera_length_mm
    if a is not None and b is not None:
        return a, b, "camera length"
    same_detector = new.pixel_pitch_um == old.pixel_pitch_um
    if abs(new.voltage_kv - old.voltage_kv) < 1e-6 and same_detector and new.scale_inv_nm_per_px and old.scale_inv_nm_per_px:
        return new.scale_inv_nm_per_px, old.scale_inv_nm_per_px, "scale"
    return None


def history_warning(cal: Calibration, entries, *, nominal_camera_length_mm: float | None = None) -> str | None:
    """A one-line warning when `cal` differs by more than 1 % from the stored calibrations of its camera length.

    `entries` are :class:`saed.calibrate.history.HistoryEntry` items (the history before `cal` is
    filed). The camera length is the nominal one when given, else the measured one; stored entries
    count when their label is within 10 % of it. The reference is the median of the comparable
    stored values (camera length when both sides have one, else the scale at the same voltage and
    pixel pitch), so one odd old calibration does not set it.
    """
    label = nominal_camera_length_mm if nominal_camera_length_mm is not None else cal.implied_camera_length_mm
    pairs = []
    for e in entries:
        if label is not None:
            if e.label_mm is None or abs(percent_off(e.label_mm, label)) > NOMINAL_LIMIT_PCT:
                continue
            if nominal_camera_length_mm is not None and e.nominal_camera_length_mm is not None \
                    and round(e.nominal_camera_length_mm) != round(nominal_camera_length_mm):
                continue
        c = _comparable(cal, e.calibration)
        if c is not None:
            pairs.append((c, e))
    if not pairs:
        return None
    what = pairs[0][0][2]
    olds = [c[1] for c, _ in pairs if c[2] == what]
    ref = statistics.median(olds)
    new = pairs[0][0][0]
    off = percent_off(new, ref)
    if abs(off) <= HISTORY_LIMIT_PCT:
        return None
    where = f"camera length {label:g} mm" if label is not None else "this voltage and detector"
    fmt = ".1f" if what == "camera length" else ".5f"
    unit = " mm" if what == "camera length" else " 1/nm per px"
    return (f"this calibration's {what} {new:{fmt}}{unit} is {off:+.2f} % from the median {ref:{fmt}}{unit} of "
            f"{len(olds)} stored calibration{'s' if len(olds) != 1 else ''} at {where} (more than "
            f"{HISTORY_LIMIT_PCT:g} %): check the lens setting and focus, or the standard's pattern")
