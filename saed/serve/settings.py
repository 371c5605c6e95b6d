"""What the operator sets on the page: candidate phases, calibration, voltage, holder axis, units; remembered.

The settings live in one small JSON file (``serve-settings.json``) in the first folder that applies:

1. the environment variable ``SAED_SERVE_DIR``;
2. ``$XDG_CONFIG_HOME/saed`` or ``~/.config/saed`` (on Windows ``%APPDATA%\\saed``).

Options given on the command line win over the remembered ones at start; what is set on the page
afterwards is written back at once (atomically), so the next start begins where the operator left off.

Phases coming over HTTP are restricted to the built-in names and the phases given on the command
line (CIF files): a request can never make the server read a file of its choosing.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import sys
from dataclasses import dataclass
from pathlib import Path

from saed.calibration import Calibration, calibration_from_options
from saed.crystal.notation import units_named
from saed.crystal.phase import Phase, builtin_names, builtin_phase
from saed.errors import InputError, PhaseError
from saed.files import atomic_write_text

__all__ = ["Settings", "PhaseBook", "settings_folder", "load_settings", "save_settings", "settings_from_fields",
           "ENV_VAR", "DEFAULT_PHASES"]

#: Environment variable naming the folder of the remembered settings.
ENV_VAR = "SAED_SERVE_DIR"
FILE_NAME = "serve-settings.json"
FORMAT = "saed-serve-settings-1"

#: Candidate phases before anything is set: the Co-Cr coating's phases and common neighbours.
DEFAULT_PHASES = ("Co-fcc", "Co-hcp", "Cr", "Ni", "Ni3Al", "NiAl", "Fe-bcc", "Al", "Si", "Ti-hcp")

#: Most candidate phases one page may ask for (each costs table memory).
MAX_PHASES = 60


def settings_folder() -> Path:
    """The folder of the remembered settings (module notes); not created here."""
    env = os.environ.get(ENV_VAR)
    if env:
        return Path(env).expanduser()
    if sys.platform.startswith("win") and os.environ.get("APPDATA"):
        return Path(os.environ["APPDATA"]) / "saed"
    base = os.environ.get("XDG_CONFIG_HOME") or str(Path.home() / ".config")
    return Path(base) / "saed"


@dataclass(frozen=True)
class Settings:
    """The page's settings. ``origin`` says where the calibration part came from (shown on the page)."""

    phases: tuple[str, ...] = DEFAULT_PHASES
    scale_inv_nm_per_px: float | None = None
    camera_length_mm: float | None = None
    pixel_pitch_um: float | None = None
    voltage_kv: float = 200.0
    alpha_axis_deg: float | None = None
    calibration_file: str | None = None
    origin: str = "defaults"
    units: str = "nm"  # how the page writes lengths: "nm" or "angstrom" (saed.crystal.notation.UNITS)

    def calibration(self) -> Calibration:
        """The Calibration these settings give (uncalibrated when no scale is set); InputError on contradictions."""
        cal = calibration_from_options(scale_inv_nm_per_px=self.scale_inv_nm_per_px,
                                       camera_length_mm=self.camera_length_mm, pixel_pitch_um=self.pixel_pitch_um,
                                       voltage_kv=None if self.calibration_file else self.voltage_kv,
                                       calibration_file=self.calibration_file)
        if self.calibration_file:
            return cal
        if cal.is_calibrated:
            how = (f"camera length {self.camera_length_mm:g} mm, pixel {self.pixel_pitch_um:g} um"
                   if self.camera_length_mm is not None else "scale")
            return dataclasses.replace(cal, source=f"{how} ({self.origin})")
        return dataclasses.replace(cal, source="none")

    def to_json(self) -> dict:
        d = dataclasses.asdict(self)
        d["phases"] = list(self.phases)
        d["format"] = FORMAT
        return d


class PhaseBook:
    """The phases a request may name: built-in names and those given on the command line (CIF files)."""

    def __init__(self, extra: list[Phase] | tuple[Phase, ...] = ()):
        self._extra = {p.name: p for p in extra}

    def names(self) -> list[str]:
        return list(self._extra) + [n for n in builtin_names() if n not in self._extra]

    def phase(self, name: str) -> Phase:
        if name in self._extra:
            return self._extra[name]
        if any(c in name for c in "/\\") or name.lower().endswith(".cif"):
            raise PhaseError(f"phase {name!r}: only built-in names and the CIF files given to 'saed serve --phase' "
                             "can be chosen on the page")
        return builtin_phase(name)

    def check(self, names) -> tuple[str, ...]:
        out: list[str] = []
        for n in names:
            n = str(n).strip()
            if not n:
                continue
            canon = self.phase(n).name if n not in self._extra else n
            if canon not in out:
                out.append(canon)
        if not out:
            raise InputError("no candidate phases chosen: pick at least one")
        if len(out) > MAX_PHASES:
            raise InputError(f"{len(out)} candidate phases chosen: at most {MAX_PHASES}")
        return tuple(out)


def _opt_float(name: str, text, *, positive: bool = True) -> float | None:
    if text is None:
        return None
    s = str(text).strip()
    if not s:
        return None
    try:
        v = float(s)
    except ValueError:
        raise InputError(f"{name} {s[:40]!r} is not a number") from None
    if not math.isfinite(v):
        raise InputError(f"{name} {s[:40]!r} is not a finite number")
    if positive and v <= 0:
        raise InputError(f"{name} {v:g} must be positive")
    return v


def settings_from_fields(fields: dict, base: Settings, book: PhaseBook, *, origin: str = "set on the page") -> Settings:
    """New settings from request fields (strings; ``phase`` a list); absent fields keep `base`'s values.

    An empty calibration field clears it. Raises InputError with a one-line reason on a bad field.

    >>> s = settings_from_fields({"scale": "0.0558", "voltage": "200"}, Settings(), PhaseBook())
    >>> s.scale_inv_nm_per_px, s.calibration().is_calibrated
    (0.0558, True)
    >>> settings_from_fields({"voltage": "-3"}, Settings(), PhaseBook())
    Traceback (most recent call last):
    ...
    saed.errors.InputError: voltage -3 must be positive
    """
    known = {"phase", "scale", "camera_length", "pixel_pitch", "voltage", "alpha_axis", "units"}
    unknown = sorted(set(fields) - known)
    if unknown:
        raise InputError(f"unknown field {unknown[0]!r} (known: {', '.join(sorted(known))})")
    ch: dict = {}
    if "phase" in fields:
        ch["phases"] = book.check(fields["phase"])
    cal_keys = {"scale": "scale_inv_nm_per_px", "camera_length": "camera_length_mm", "pixel_pitch": "pixel_pitch_um"}
    if any(k in fields for k in cal_keys):
        for k, attr in cal_keys.items():
            ch[attr] = _opt_float(k.replace("_", " "), fields.get(k))
        ch["calibration_file"] = None
        ch["origin"] = origin
    if "voltage" in fields:
        v = _opt_float("voltage", fields["voltage"])
        ch["voltage_kv"] = 200.0 if v is None else v
        if base.calibration_file and "scale" not in fields:
            ch["calibration_file"] = None  # a calibration file carries its own voltage
            ch["scale_inv_nm_per_px"] = base.calibration().scale_inv_nm_per_px
            ch["origin"] = origin
    if "alpha_axis" in fields:
        ch["alpha_axis_deg"] = _opt_float("alpha axis", fields["alpha_axis"], positive=False)
    if "units" in fields and str(fields["units"]).strip():
        ch["units"] = units_named(str(fields["units"])[:40]).name
    new = dataclasses.replace(base, **ch)
    new.calibration()  # contradictions and implausible values fail here, before anything is kept
    return new


def load_settings(book: PhaseBook, folder: Path | None = None) -> Settings:
    """The remembered settings, or the defaults when there are none or they no longer make sense."""
    path = (folder or settings_folder()) / FILE_NAME
    try:
        d = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeError, json.JSONDecodeError):
        return Settings()
    if not isinstance(d, dict) or d.get("format") != FORMAT:
        return Settings()
    fields = {"phase": d.get("phases") or list(DEFAULT_PHASES)}
    for key, attr in (("scale", "scale_inv_nm_per_px"), ("camera_length", "camera_length_mm"),
                      ("pixel_pitch", "pixel_pitch_um"), ("voltage", "voltage_kv"), ("alpha_axis", "alpha_axis_deg"),
                      ("units", "units")):
        if d.get(attr) is not None:
            fields[key] = str(d[attr])
    try:
        s = settings_from_fields(fields, Settings(), book, origin="remembered from the last session")
        if d.get("calibration_file") and Path(d["calibration_file"]).is_file():
            s = dataclasses.replace(s, calibration_file=str(d["calibration_file"]),
                                    origin="remembered from the last session")
            s.calibration()
        return s
    except InputError:
        return Settings()


def save_settings(s: Settings, folder: Path | None = None) -> Path:
    """Write `s` to the settings file (folder created); returns its path."""
    d = folder or settings_folder()
    d.mkdir(parents=True, exist_ok=True)
    path = d / FILE_NAME
    atomic_write_text(path, json.dumps(s.to_json(), indent=2) + "\n")
    return path
