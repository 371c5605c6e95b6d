"""Unit spellings of detector calibrations, and the one place where they are converted.

A diffraction pattern's calibration comes in one of three kinds, and they must never be mixed up:

* a **per-pixel reciprocal scale**: a reciprocal length per detector pixel (``1/nm``, ``nm^-1``,
  ``nm⁻¹``, ``1/Å``, ``1/A``, ``1/m``, ``1/um``, ``1/pm``; ``1 / nm`` as rosettasciio prints it).
  It is saed's ``scale_inv_nm_per_px`` after multiplying by :func:`reciprocal_factor_inv_nm`;
* a **camera constant** λL, a length times a length (``nm mm``, ``nm·mm``, ``Å cm``, ``Å mm``,
  ``m m``...): a spot at radius R on the detector has d = λL / R. It needs the pixel pitch to
  become a per-pixel scale: scale = pitch / λL (:func:`scale_from_camera_constant_inv_nm_per_px`);
* a **real-space pixel size** (``nm``, ``Å``, ``µm``, ``m``): the calibration of an *image*, not of a
  diffraction pattern. :func:`unit_kind` names it so callers can refuse it.

Only the spellings below are accepted; anything else is "unknown" (never guessed).
"""

from __future__ import annotations

import math
import re

from saed.errors import InputError

__all__ = ["reciprocal_factor_inv_nm", "real_length_factor_nm", "camera_constant_factor_nm_mm", "unit_kind",
           "normalise_unit", "scale_from_camera_constant_inv_nm_per_px", "parse_scale_text", "RECIPROCAL_UNITS_INV_NM",
           "percent", "fraction", "percent_off"]

#: Lengths in nm of the length units accepted (after :func:`normalise_unit`).
_LENGTH_NM = {"nm": 1.0, "a": 0.1, "å": 0.1, "um": 1e3, "µm": 1e3, "pm": 1e-3, "m": 1e9, "mm": 1e6, "cm": 1e7}

#: Reciprocal-length units accepted, with their size in 1/nm (used for TIFF ``unit=`` entries as well).
RECIPROCAL_UNITS_INV_NM = {f"1/{u}": 1.0 / f for u, f in _LENGTH_NM.items() if u not in ("mm", "cm")}
RECIPROCAL_UNITS_INV_NM.update({f"{u}^-1": v for u, v in ((k[2:], v) for k, v in RECIPROCAL_UNITS_INV_NM.items())})
RECIPROCAL_UNITS_INV_NM.update({f"{u}-1": v for u, v in ((k[2:], v) for k, v in list(RECIPROCAL_UNITS_INV_NM.items())
                                                          if k.startswith("1/"))})
RECIPROCAL_UNITS_INV_NM.update({"1/nanometer": 1.0, "1/nanometre": 1.0, "1/angstrom": 10.0, "1/meter": 1e-9,
                                "1/metre": 1e-9, "1/meters": 1e-9})


def normalise_unit(text: str) -> str:
    """Lower case, no spaces, superscript and escaped spellings folded: ``'nm⁻¹'`` -> ``'nm^-1'``.

    >>> [normalise_unit(u) for u in ("1 / nm", "nm⁻¹", "1/Å", "Angstrom^-1", "1/μm", "nm**-1")]
    ['1/nm', 'nm^-1', '1/å', 'a^-1', '1/µm', 'nm^-1']
    """
    t = str(text).strip().lower().replace(" ", "").replace("\\u00c5", "å").replace("\\u00b5", "µ")
    t = t.replace("⁻¹", "^-1").replace("^(-1)", "^-1").replace("**-1", "^-1").replace("μ", "µ")
    t = t.replace("\u212b", "å")  # the Angstrom sign
    t = t.replace("angstroms", "a").replace("angstrom", "a").replace("microns", "um").replace("micron", "um")
    t = t.replace("nanometers", "nm").replace("nanometres", "nm")
    return t


def reciprocal_factor_inv_nm(unit: str) -> float | None:
    """Size in 1/nm of one `unit` of reciprocal length, or None when `unit` is not one.

    >>> [reciprocal_factor_inv_nm(u) for u in ("1/nm", "nm^-1", "nm⁻¹", "1/Å", "1 / m", "nm")]
    [1.0, 1.0, 1.0, 10.0, 1e-09, None]
    """
    return RECIPROCAL_UNITS_INV_NM.get(normalise_unit(unit))


def real_length_factor_nm(unit: str) -> float | None:
    """Size in nm of one `unit` of (real-space) length, or None when `unit` is not a length.

    >>> [real_length_factor_nm(u) for u in ("nm", "Å", "um", "µm", "m", "1/nm")]
    [1.0, 0.1, 1000.0, 1000.0, 1000000000.0, None]
    """
    t = normalise_unit(unit)
    if t in ("meters", "metres", "meter", "metre"):
        t = "m"
    return _LENGTH_NM.get(t)


_PRODUCT_SEPARATORS = re.compile(r"[*·.\u00d7\u22c5]")


def camera_constant_factor_nm_mm(unit: str) -> float | None:
    """Size in nm·mm of one `unit` of camera constant (a length times a length), or None.

    >>> [camera_constant_factor_nm_mm(u) for u in ("nm mm", "nm·mm", "Å cm", "A*mm", "nm", "mm")]
    [1.0, 1.0, 1.0, 0.1, None, None]
    """
    t = _PRODUCT_SEPARATORS.sub("", normalise_unit(unit))
    if real_length_factor_nm(t) is not None:  # "mm" is a length, not m times m
        return None
    for k in range(1, len(t)):  # "nmmm" = nm mm: try every split into two lengths
        a, b = real_length_factor_nm(t[:k]), real_length_factor_nm(t[k:])
        if a is not None and b is not None:
            return a * b / 1e6
    return None


def unit_kind(unit) -> str:
    """``'reciprocal'``, ``'camera constant'``, ``'real'`` (a real-space length) or ``'unknown'``.

    >>> [unit_kind(u) for u in ("1/nm", "Å cm", "nm", "", None, "px")]
    ['reciprocal', 'camera constant', 'real', 'unknown', 'unknown', 'unknown']
    """
    if unit is None or not str(unit).strip():
        return "unknown"
    if reciprocal_factor_inv_nm(unit) is not None:
        return "reciprocal"
    if camera_constant_factor_nm_mm(unit) is not None:
        return "camera constant"
    if real_length_factor_nm(unit) is not None:
        return "real"
    return "unknown"


def scale_from_camera_constant_inv_nm_per_px(camera_constant_nm_mm: float, pixel_pitch_um: float) -> float:
    """Per-pixel scale (1/nm per px) from a camera constant λL (nm·mm) and the pixel pitch (µm).

    A spot at R mm from the centre has d = λL / R, i.e. g = R / λL; one pixel is pitch/1000 mm.
    Worked example (CONTRACT.md convention, 200 kV, L = 100 mm, 14 µm): λL = 0.25079 nm·mm, so
    0.014 / 0.25079 = 0.055823 1/nm per px.

    >>> round(scale_from_camera_constant_inv_nm_per_px(0.25079, 14.0), 5)
    0.05582
    """
    lam_l = float(camera_constant_nm_mm)
    pitch = float(pixel_pitch_um)
    if not (math.isfinite(lam_l) and lam_l > 0 and math.isfinite(pitch) and pitch > 0):
        raise InputError(f"camera constant {camera_constant_nm_mm!r} nm mm and pixel pitch {pixel_pitch_um!r} um "
                         "must be positive numbers")
    return pitch * 1e-3 / lam_l


_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*)$")


def parse_scale_text(text: str) -> tuple[float, str]:
    """A scale typed with an optional unit -> (value in 1/nm per px, the unit as typed or '1/nm').

    A bare number is 1/nm per pixel. A camera constant or a real-space length is refused here (the
    caller does not know the pixel pitch, and a real-space size is not a diffraction calibration).

    >>> parse_scale_text("0.0498")
    (0.0498, '1/nm')
    >>> round(parse_scale_text("0.00498 1/Å")[0], 6), round(parse_scale_text("4.98e7 1/m")[0], 6)
    (0.0498, 0.0498)
    """
    m = _NUMBER.match(str(text))
    if not m:
        raise InputError(f"scale {text!r} is not a number (1/nm per pixel, or a number and a unit such as 1/Å)")
    value = float(m.group(1))
    unit = m.group(2).strip()
    if not unit:
        return value, "1/nm"
    if unit.lower().endswith(("/px", "/pixel", "perpx", "per px", "per pixel")):
        unit = re.sub(r"\s*(/px|/pixel|per\s*px|per\s*pixel)\s*$", "", unit, flags=re.I)
    factor = reciprocal_factor_inv_nm(unit)
    if factor is not None:
        return value * factor, unit
    kind = unit_kind(unit)
    if kind == "real":
        raise InputError(f"scale {text!r} is a real-space pixel size (an image calibration), not a diffraction "
                         "calibration: give 1/nm per pixel")
    if kind == "camera constant":
        raise InputError(f"scale {text!r} is a camera constant (lambda L), not a per-pixel scale: give "
                         "--camera-length with --pixel-pitch, or the scale in 1/nm per pixel")
    raise InputError(f"scale {text!r}: unknown unit {unit!r} (use 1/nm, nm^-1, 1/Å or 1/m per pixel)")


# ---------------------------------------------------------------- percent and fraction
# saed computes with fractions (names ending ``_frac`` or ``_rel``) and shows and stores percent
# (names ending ``_pct``); these three are the only places where one becomes the other.


def percent(fraction_value):
    """A fraction as percent.

    >>> percent(0.0125)
    1.25
    """
    return 100.0 * fraction_value


def fraction(percent_value):
    """A percent value as a fraction.

    >>> fraction(2.5)
    0.025
    """
    return percent_value / 100.0


def percent_off(value, reference):
    """How far `value` lies from `reference`, in percent of `reference` (signed).

    >>> round(percent_off(101.5, 100.0), 9), round(percent_off(0.98, 1.0), 9)
    (1.5, -2.0)
    """
    return 100.0 * (value / reference - 1.0)
