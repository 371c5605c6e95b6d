"""Detector calibration: the value every stage that converts pixels to 1/nm receives.

A calibration comes from options (``--scale``, or ``--camera-length`` +
``--pixel-pitch`` + ``--voltage``), or from a calibration file written by
``saed calibrate`` (JSON, see CONTRACT.md). Conversions happen in
:mod:`saed.physics`, nowhere else.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, replace
from pathlib import Path

from saed import physics
from saed.errors import InputError

__all__ = ["Ellipse", "Calibration", "calibration_from_options", "read_calibration_file", "read_calibration_document",
           "validate_calibration_dict", "parse_calibration_date", "write_calibration_file", "CALIBRATION_FORMAT"]

#: The ``format`` field of a saed calibration file.
CALIBRATION_FORMAT = "saed-calibration-1"

#: Plausible detector scales, 1/nm per pixel (outside: almost certainly a unit mix-up).
PLAUSIBLE_SCALE_INV_NM_PER_PX = (1e-4, 2.0)


@dataclass(frozen=True)
class Ellipse:
    """Elliptical distortion of the projector: ratio of longest to shortest ring radius (>= 1), long-axis angle from +x toward +y."""

    axis_ratio: float = 1.0
    major_axis_angle_deg: float = 0.0

    def __post_init__(self):
        r = float(self.axis_ratio)
        if not math.isfinite(r) or r < 1.0 or r > 1.5:
            raise InputError(f"ellipse axis ratio {self.axis_ratio!r} must lie between 1 and 1.5")
        a = float(self.major_axis_angle_deg)
        if not math.isfinite(a):
            raise InputError(f"ellipse long-axis angle {self.major_axis_angle_deg!r} must be a finite number of degrees")
        object.__setattr__(self, "axis_ratio", r)
        object.__setattr__(self, "major_axis_angle_deg", a % 180.0)

    def corrected_px(self, dx_px, dy_px):
        """Undo the distortion of offsets (dx, dy) from the pattern centre; returns (dx', dy') in px.

        Convention (area-preserving): a ring whose undistorted radius is R appears as an ellipse
        with semi-axes R*sqrt(q) along the major axis and R/sqrt(q) across it (q = axis_ratio),
        so the scale refers to the geometric-mean radius of a ring. Works on arrays.

        >>> e = Ellipse(1.02, 0.0)
        >>> [round(float(v), 6) for v in e.corrected_px(100 * 1.02 ** 0.5, 0.0)]
        [100.0, 0.0]
        """
        import numpy as np

        q = math.sqrt(self.axis_ratio)
        t = math.radians(self.major_axis_angle_deg)
        c, s = math.cos(t), math.sin(t)
        dx, dy = np.asarray(dx_px, dtype=float), np.asarray(dy_px, dtype=float)
        u = (c * dx + s * dy) / q
        v = (-s * dx + c * dy) * q
        return c * u - s * v, s * u + c * v


@dataclass(frozen=True)
class Calibration:
    """What turns detector pixels into reciprocal-space lengths.

    ``scale_inv_nm_per_px`` is None for an uncalibrated pattern (index by ratios alone).
    ``alpha_axis_deg``: direction of the holder's alpha tilt axis on the detector at this camera
    length (deg from +x toward +y), when measured; the image rotates with the camera length, so it
    belongs to the calibration of each one. It turns tilt advice into alpha/beta readings.
    """

    scale_inv_nm_per_px: float | None = None
    voltage_kv: float = 200.0
    center_px: tuple[float, float] | None = None
    ellipse: Ellipse | None = None
    camera_length_mm: float | None = None
    pixel_pitch_um: float | None = None
    standard: str | None = None
    date: str | None = None
    source: str = "options"
    alpha_axis_deg: float | None = None

    def __post_init__(self):
        object.__setattr__(self, "voltage_kv", physics.check_voltage_kv(self.voltage_kv))
        if self.scale_inv_nm_per_px is not None:
            s = float(self.scale_inv_nm_per_px)
            if not math.isfinite(s) or s <= 0:
                raise InputError(f"detector scale {self.scale_inv_nm_per_px!r} must be a positive number of 1/nm per px")
            lo, hi = PLAUSIBLE_SCALE_INV_NM_PER_PX
            if not lo <= s <= hi:
                raise InputError(
                    f"detector scale {s:g} 1/nm per px is outside the plausible {lo:g}-{hi:g}: "
                    "check the unit (1/nm per pixel, not 1/Angstrom or nm)"
                )
            object.__setattr__(self, "scale_inv_nm_per_px", s)
        if self.alpha_axis_deg is not None:
            try:
                a = float(self.alpha_axis_deg)
            except (TypeError, ValueError):
                a = float("nan")
            if not math.isfinite(a):
                raise InputError(f"alpha-axis direction {self.alpha_axis_deg!r} must be a finite number of degrees")
            object.__setattr__(self, "alpha_axis_deg", a % 360.0)
        if self.center_px is not None:
            c = tuple(float(v) for v in self.center_px)
            if len(c) != 2 or not all(math.isfinite(v) for v in c):
                raise InputError(f"centre {self.center_px!r} must be two finite pixel coordinates x y")
            object.__setattr__(self, "center_px", c)

    @property
    def is_calibrated(self) -> bool:
        return self.scale_inv_nm_per_px is not None

    @property
    def wavelength_nm(self) -> float:
        return physics.electron_wavelength_nm(self.voltage_kv)

    @property
    def camera_constant_nm_mm(self) -> float | None:
        """lambda * L in nm*mm, when the camera length is known (given, or implied by scale and pitch)."""
        length = self.implied_camera_length_mm
        return None if length is None else physics.camera_constant_nm_mm(length, self.voltage_kv)

    @property
    def implied_camera_length_mm(self) -> float | None:
        if self.camera_length_mm is not None:
            return self.camera_length_mm
        if self.scale_inv_nm_per_px is not None and self.pixel_pitch_um is not None:
            return physics.camera_length_from_scale_mm(self.scale_inv_nm_per_px, self.pixel_pitch_um, self.voltage_kv)
        return None

    def to_json(self) -> dict:
        return {
            "format": CALIBRATION_FORMAT,
            "scale_inv_nm_per_px": self.scale_inv_nm_per_px,
            "voltage_kv": self.voltage_kv,
            "wavelength_nm": self.wavelength_nm,
            "center_px": list(self.center_px) if self.center_px else None,
            "ellipse": asdict(self.ellipse) if self.ellipse else None,
            "camera_length_mm": self.implied_camera_length_mm,
            "camera_constant_nm_mm": self.camera_constant_nm_mm,
            "pixel_pitch_um": self.pixel_pitch_um,
            "standard": self.standard,
            "date": self.date,
            "alpha_axis_deg": self.alpha_axis_deg,
        }


def calibration_from_options(*, scale_inv_nm_per_px=None, camera_length_mm=None, pixel_pitch_um=None,
                             voltage_kv=None, calibration_file=None, center_px=None) -> Calibration:
    """Combine the calibration options of the command line; contradictions raise InputError.

    >>> round(calibration_from_options(camera_length_mm=100, pixel_pitch_um=14, voltage_kv=200).scale_inv_nm_per_px, 6)
    0.055823
    """
    base = read_calibration_file(calibration_file) if calibration_file else None
    if base is not None and scale_inv_nm_per_px is not None:
        raise InputError("give either --scale or --calibration, not both")
    if scale_inv_nm_per_px is not None and camera_length_mm is not None:
        raise InputError("give either --scale or --camera-length with --pixel-pitch, not both")
    if camera_length_mm is not None and pixel_pitch_um is None:
        raise InputError("--camera-length needs --pixel-pitch (detector pixel size in um) to give a scale")
    if base is not None and camera_length_mm is not None:
        raise InputError("give either --calibration or --camera-length, not both")
    if base is not None:
        if voltage_kv is not None and abs(float(voltage_kv) - base.voltage_kv) > 1e-6:
            raise InputError(
                f"--voltage {float(voltage_kv):g} kV contradicts the calibration file's {base.voltage_kv:g} kV"
            )
        if center_px is not None:
            return replace(base, center_px=tuple(center_px))
        return base
    v = 200.0 if voltage_kv is None else voltage_kv
    scale = scale_inv_nm_per_px
    if camera_length_mm is not None:
        scale = physics.scale_from_camera_inv_nm_per_px(camera_length_mm, pixel_pitch_um, v)
    return Calibration(scale, v, center_px=tuple(center_px) if center_px is not None else None,
                       camera_length_mm=camera_length_mm, pixel_pitch_um=pixel_pitch_um)


def read_calibration_file(path) -> Calibration:
    """Read a calibration file written by ``saed calibrate``; anything else is a one-line InputError."""
    return read_calibration_document(path)[0]


def read_calibration_document(path) -> tuple[Calibration, dict]:
    """(Calibration, the whole JSON object) of a calibration file, every field checked (:func:`validate_calibration_dict`)."""
    from saed.files import read_json_file

    p = Path(path)
    if not p.exists():
        raise InputError(f"{path}: no such calibration file")
    d = read_json_file(p, what="a saed calibration file")
    return validate_calibration_dict(d, where=str(path)), d


#: Fields of a calibration file (and its history extras) that hold one number: (lowest, highest, may be 0).
_NUMBER_FIELDS = {
    "voltage_kv": (None, None, False),  # range checked by physics.check_voltage_kv
    "wavelength_nm": (0.0, 1.0, False),
    "camera_length_mm": (0.0, 1e6, False),
    "camera_constant_nm_mm": (0.0, 1e6, False),
    "pixel_pitch_um": (0.0, 1e4, False),
    "nominal_camera_length_mm": (0.0, 1e6, False),
    "residual_pct": (0.0, 100.0, True),
    "scale_sigma_pct": (0.0, 100.0, True),
    "n_rings_used": (0.0, 1e4, True),
    "alpha_axis_deg": (-3600.0, 3600.0, True),  # the holder's alpha axis on the detector (issue 15.11)
}
_TEXT_FIELDS = ("standard", "date", "image", "kind")


def _number(d: dict, key: str, where: str):
    """d[key] as a float (None if absent or null); a bool, text, NaN, infinity or out-of-range value is refused."""
    v = d.get(key)
    if v is None:
        return None
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise InputError(f"{where}: field {key} is {v!r}, not a number")
    v = float(v)
    if not math.isfinite(v):
        raise InputError(f"{where}: field {key} is {v!r}, not a finite number")
    lo, hi, zero_ok = _NUMBER_FIELDS.get(key, (None, None, True))
    if lo is not None and (v < lo or (v == lo and not zero_ok) or v > hi):
        raise InputError(f"{where}: field {key} = {v:g} is outside {'[' if zero_ok else '('}{lo:g}, {hi:g}]")
    return v


def parse_calibration_date(text):
    """A calibration date (ISO 8601 text) as an aware datetime (a date without a UTC offset is local time).

    >>> parse_calibration_date("2026-03-01T10:00:00+02:00") < parse_calibration_date("2026-03-01T09:30:00+00:00")
    True
    """
    import datetime as _dt

    if not isinstance(text, str):
        raise InputError(f"date {text!r} is not ISO 8601 text (e.g. 2026-03-01T22:15:00+01:00)")
    try:
        t = _dt.datetime.fromisoformat(text.strip())
    except ValueError:
        raise InputError(f"date {text[:40]!r} is not an ISO 8601 date-time (e.g. 2026-03-01T22:15:00+01:00)") from None
    return t if t.tzinfo is not None else t.astimezone()


def validate_calibration_dict(d, *, where: str) -> Calibration:
    """The Calibration in a parsed calibration file; every field's type and range is checked.

    Each refusal is one InputError naming the file (`where`) and the field, e.g. ``scale: true``
    is not read as 1.0 and an infinite ellipse angle is not wrapped into NaN.
    """
    if not isinstance(d, dict) or d.get("format") != CALIBRATION_FORMAT:
        raise InputError(f"{where}: not a saed calibration file (no \"format\": \"{CALIBRATION_FORMAT}\")")
    if d.get("scale_inv_nm_per_px") is None:
        raise InputError(f"{where}: the calibration file has no scale_inv_nm_per_px")
    scale = _number(d, "scale_inv_nm_per_px", where)
    nums = {k: _number(d, k, where) for k in _NUMBER_FIELDS}
    for key in _TEXT_FIELDS:
        v = d.get(key)
        if v is not None and (not isinstance(v, str) or len(v) > 4096):
            raise InputError(f"{where}: field {key} is {str(v)[:40]!r}, not a text")
    if d.get("date") is not None:
        try:
            parse_calibration_date(d["date"])
        except InputError as exc:
            raise InputError(f"{where}: field date: {exc}") from None
    if d.get("n_rings_used") is not None and nums["n_rings_used"] != int(nums["n_rings_used"]):
        raise InputError(f"{where}: field n_rings_used = {nums['n_rings_used']:g} is not a whole number")
    centre = d.get("center_px")
    if centre is not None:
        if not isinstance(centre, list) or len(centre) != 2:
            raise InputError(f"{where}: field center_px is {str(centre)[:40]}, not two pixel coordinates [x, y]")
        centre = tuple(_number({"center_px": c}, "center_px", where) for c in centre)
        if any(c is None or abs(c) > 1e6 for c in centre):
            raise InputError(f"{where}: field center_px {list(centre)} is not two pixel coordinates within 1e6 px")
    ell = d.get("ellipse")
    ellipse = None
    if ell is not None:
        if not isinstance(ell, dict) or "axis_ratio" not in ell or "major_axis_angle_deg" not in ell:
            raise InputError(f"{where}: field ellipse is {str(ell)[:40]}, not {{axis_ratio, major_axis_angle_deg}}")
        ratio = _number({"ellipse.axis_ratio": ell["axis_ratio"]}, "ellipse.axis_ratio", where)
        angle = _number({"ellipse.major_axis_angle_deg": ell["major_axis_angle_deg"]}, "ellipse.major_axis_angle_deg", where)
        if ratio is None or angle is None:
            raise InputError(f"{where}: field ellipse needs both axis_ratio and major_axis_angle_deg")
        try:
            ellipse = Ellipse(ratio, angle)
        except InputError as exc:
            raise InputError(f"{where}: field ellipse: {exc}") from None
    zone = d.get("zone_axis")
    if zone is not None and (not isinstance(zone, list) or not 3 <= len(zone) <= 4
                             or any(_number({"zone_axis": z}, "zone_axis", where) is None for z in zone)):
        raise InputError(f"{where}: field zone_axis is {str(zone)[:40]}, not 3 or 4 indices")
    try:
        physics.check_voltage_kv(200.0 if nums["voltage_kv"] is None else nums["voltage_kv"])
        cal = Calibration(
            scale_inv_nm_per_px=scale,
            voltage_kv=200.0 if nums["voltage_kv"] is None else nums["voltage_kv"],
            center_px=centre,
            ellipse=ellipse,
            camera_length_mm=nums["camera_length_mm"],
            pixel_pitch_um=nums["pixel_pitch_um"],
            standard=d.get("standard"),
            date=d.get("date"),
            source=where,
            alpha_axis_deg=nums["alpha_axis_deg"],
        )
    except InputError as exc:
        field_ = "voltage_kv" if "voltage" in str(exc) else "scale_inv_nm_per_px"
        raise InputError(f"{where}: field {field_}: {exc}") from None
    if nums["wavelength_nm"] is not None and abs(nums["wavelength_nm"] / cal.wavelength_nm - 1) > 1e-3:
        raise InputError(f"{where}: field wavelength_nm = {nums['wavelength_nm']:g} contradicts voltage_kv = "
                         f"{cal.voltage_kv:g} (lambda {cal.wavelength_nm:.6f} nm)")
    return cal


def write_calibration_file(cal: Calibration, path, **extra) -> None:
    """Write `cal` as a saed calibration file (JSON), atomically (:func:`saed.files.atomic_write_text`)."""
    from saed.files import atomic_write_text

    d = cal.to_json()
    d.update(extra)
    atomic_write_text(path, json.dumps(d, indent=2, allow_nan=False) + "\n")
