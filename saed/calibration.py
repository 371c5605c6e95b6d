"""Detector calibration: the value every stage that converts pixels to 1/nm receives.

A calibration comes from options (``--scale``, or ``--camera-length`` +
``--pixel-pitch`` + ``--voltage``), or from a calibration file written by
``saed calibrate`` (JSON, see CONTRACT.md). Conversions happen in
:mod:`saed.physics`, nowhere else.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

from saed import physics
from saed.errors import InputError

__all__ = ["Ellipse", "Calibration", "calibration_from_options", "read_calibration_file",
           "write_calibration_file", "CALIBRATION_FORMAT"]

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
        object.__setattr__(self, "axis_ratio", r)
        object.__setattr__(self, "major_axis_angle_deg", float(self.major_axis_angle_deg) % 180.0)

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
    extra: dict = field(default_factory=dict, compare=False, hash=False)

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
        d = {
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
        }
        d.update(self.extra)
        return d


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
            return Calibration(base.scale_inv_nm_per_px, base.voltage_kv, tuple(center_px), base.ellipse,
                               base.camera_length_mm, base.pixel_pitch_um, base.standard, base.date, base.source)
        return base
    v = 200.0 if voltage_kv is None else voltage_kv
    scale = scale_inv_nm_per_px
    if camera_length_mm is not None:
        scale = physics.scale_from_camera_inv_nm_per_px(camera_length_mm, pixel_pitch_um, v)
    return Calibration(scale, v, center_px=tuple(center_px) if center_px is not None else None,
                       camera_length_mm=camera_length_mm, pixel_pitch_um=pixel_pitch_um)


def read_calibration_file(path) -> Calibration:
    """Read a calibration file written by ``saed calibrate``; anything else is a one-line InputError."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such calibration file") from None
    except (OSError, UnicodeError) as exc:
        raise InputError(f"{path}: cannot read the calibration file ({exc.__class__.__name__})") from None
    try:
        d = json.loads(text)
    except json.JSONDecodeError:
        raise InputError(f"{path}: not a saed calibration file (not JSON)") from None
    if not isinstance(d, dict) or d.get("format") != CALIBRATION_FORMAT:
        raise InputError(f"{path}: not a saed calibration file (no \"format\": \"{CALIBRATION_FORMAT}\")")
    if d.get("scale_inv_nm_per_px") is None:
        raise InputError(f"{path}: the calibration file has no scale_inv_nm_per_px")
    try:
        ell = d.get("ellipse")
        return Calibration(
            scale_inv_nm_per_px=d["scale_inv_nm_per_px"],
            voltage_kv=d.get("voltage_kv", 200.0),
            center_px=tuple(d["center_px"]) if d.get("center_px") else None,
            ellipse=Ellipse(ell["axis_ratio"], ell["major_axis_angle_deg"]) if ell else None,
            camera_length_mm=d.get("camera_length_mm"),
            pixel_pitch_um=d.get("pixel_pitch_um"),
            standard=d.get("standard"),
            date=d.get("date"),
            source=str(p),
        )
    except (KeyError, TypeError, ValueError) as exc:
        if isinstance(exc, InputError):
            raise InputError(f"{path}: {exc}") from None
        raise InputError(f"{path}: malformed calibration file ({exc.__class__.__name__}: {exc})") from None


def write_calibration_file(cal: Calibration, path, **extra) -> None:
    """Write `cal` as a saed calibration file (JSON), atomically (temporary file then rename)."""
    p = Path(path)
    d = cal.to_json()
    d.update(extra)
    tmp = p.with_name(p.name + ".tmp")
    tmp.write_text(json.dumps(d, indent=2) + "\n", encoding="utf-8")
    tmp.replace(p)
