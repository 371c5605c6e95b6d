"""Where a pattern's calibration comes from: the resolution order, strongest first.

1. **option** - ``--scale``, or ``--camera-length`` with ``--pixel-pitch`` (the file's binned pixel
   pitch is used when ``--pixel-pitch`` is not given);
2. **calibration file** - ``--calibration CAL.json``;
3. **sidecar** - a saed calibration file next to the image, named like it: ``NAME.json`` for
   ``NAME.tif`` (the demo ships these). A ``NAME.json`` that is not a calibration file (e.g. a
   result written with ``--json``) is passed over with a note;
4. **file metadata** - a reciprocal-space scale stored in the file (used as it is: it is per stored,
   already binned, pixel), else the camera length, voltage and binned pixel pitch it records;
5. **calibration history** - the newest calibration filed (``saed calibrate``) for the camera length
   and voltage the file records; its scale is carried over to this file's binning when both pixel
   pitches are known;
6. **none (uncalibrated)** - index by spacing ratios and angles.

Whatever wins, the result says which (``calibration_source``), and notes what disagrees: an option
that contradicts the file's metadata (the option wins), a file whose metadata and the lab's measured
calibration for that camera length differ by more than 1 % (:data:`WARN_DIFFERENCE_PCT`), a voltage
that differs. A real-space pixel size (an image-mode file) is refused as a diffraction calibration.
"""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass, replace
from pathlib import Path

from saed.calibration import (CALIBRATION_FORMAT, PLAUSIBLE_SCALE_INV_NM_PER_PX, Calibration, calibration_from_options,
                              read_calibration_file)
from saed.errors import InputError
from saed.image.metadata import FileMetadata
from saed.units import percent_off

__all__ = ["ResolvedCalibration", "resolve_calibration", "sidecar_path", "SOURCES", "WARN_DIFFERENCE_PCT"]

logger = logging.getLogger(__name__)

#: The values of ``calibration_source``, strongest first (docs/contract.md).
SOURCES = ("option", "calibration file", "sidecar", "file metadata", "calibration history", "none (uncalibrated)")

#: Metadata and a measured calibration that differ by more than this (percent) are warned about.
WARN_DIFFERENCE_PCT = 1.0

#: A history entry is for the file's camera length when its label is within this (percent).
_SAME_CAMERA_LENGTH_PCT = 0.5


@dataclass(frozen=True)
class ResolvedCalibration:
    """The calibration used for one image, where it came from, and what disagreed.

    ``source`` is one of :data:`SOURCES`; ``detail`` names the file or values (one line);
    ``notes`` are remarks, ``warnings`` disagreements the user must see.
    """

    calibration: Calibration
    source: str
    detail: str = ""
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()
    metadata: FileMetadata | None = None

    def line(self, *, per_nm: float = 1.0, inverse_label: str = "1/nm") -> str:
        """'calibration  0.04984 1/nm per px at 200 kV  (sidecar: p.json)'; `per_nm` and `inverse_label`
        give the scale in another display unit (10 and '1/Å' for Ångström)."""
        cal = self.calibration
        where = f"{self.source}: {self.detail}" if self.detail else self.source
        if cal.scale_inv_nm_per_px is None:
            return f"calibration  none: uncalibrated, indexed by spacing ratios and angles at {cal.voltage_kv:g} kV ({where})"
        return (f"calibration  {cal.scale_inv_nm_per_px / per_nm:.5g} {inverse_label} per px at {cal.voltage_kv:g} kV"
                f"  ({where})")

    def to_json(self) -> dict:
        """``calibration_source``, its detail and notes, and ``file_metadata`` (what the file says, saed units)."""
        return {"calibration_source": self.source, "calibration_source_detail": self.detail,
                "calibration_notes": list(self.warnings) + list(self.notes),
                "file_metadata": self.metadata.to_json() if self.metadata is not None else None}


def sidecar_path(image_path) -> Path:
    """``NAME.json`` next to ``NAME.ext``.

    >>> sidecar_path("example_images/grain_A_fcc.tif").as_posix()
    'example_images/grain_A_fcc.json'
    """
    return Path(image_path).with_suffix(".json")


def _pct(a: float, b: float) -> float:
    return abs(percent_off(a, b))


def _metadata_scale(meta: FileMetadata | None, notes: list[str]) -> tuple[float | None, str]:
    """The scale the file's metadata give, and how: stored reciprocal scale, else camera length + pitch.

    A scale outside the plausible range (a unit mix-up in the file) is not used; `notes` says so.
    """
    if meta is None:
        return None, ""
    scale, how = None, ""
    if meta.scale_inv_nm_per_px is not None:
        scale, how = meta.scale_inv_nm_per_px, f"{meta.format} scale {meta.scale_inv_nm_per_px:.5g} 1/nm per px"
    elif meta.nominal_scale_inv_nm_per_px is not None:
        bin_text = f" binned {meta.binning}" if meta.binning and meta.binning > 1 else ""
        scale, how = meta.nominal_scale_inv_nm_per_px, (f"{meta.format} L = {meta.camera_length_mm:g} mm, "
                                                        f"{meta.voltage_kv:g} kV, {meta.pixel_pitch_um:g} um pixels{bin_text}")
    lo, hi = PLAUSIBLE_SCALE_INV_NM_PER_PX
    if scale is not None and not lo <= scale <= hi:
        notes.append(f"the file's metadata give {scale:.4g} 1/nm per px ({how}), outside the plausible {lo:g}-{hi:g}; "
                     "not used")
        return None, ""
    return scale, how


def _refuse_real_space(image, meta: FileMetadata) -> None:
    if meta.real_pixel_size_nm is not None and meta.units_stated:
        raise InputError(f"{image}: the file is calibrated in real space ({meta.real_pixel_size_nm:.4g} nm per px"
                         f"{', image mode' if meta.mode == 'image' else ''}): an image, not a diffraction pattern; "
                         "if it is a pattern, give --scale or --calibration")
    if meta.mode == "image":
        raise InputError(f"{image}: the file's metadata say it was recorded in image mode, not diffraction; "
                         "if it is a pattern, give --scale or --calibration")


def _history_match(meta: FileMetadata | None, folder):
    """The newest history entry for the file's camera length and voltage, or None."""
    if meta is None or meta.camera_length_mm is None or meta.voltage_kv is None:
        return None
    from saed.calibrate.history import history_folder, list_calibrations

    try:
        entries, _problems = list_calibrations(history_folder(folder))
    except InputError as exc:
        logger.info("calibration history not read: %s", exc)
        return None
    for e in entries:  # newest first within a camera length
        label = e.label_mm
        if label is None or abs(e.calibration.voltage_kv - meta.voltage_kv) > 0.5:
            continue
        if _pct(label, meta.camera_length_mm) <= _SAME_CAMERA_LENGTH_PCT:
            return e
    return None


def _history_scale(entry, meta: FileMetadata) -> tuple[float, str]:
    """The entry's scale carried over to this file's binned pixel pitch (binning applied once)."""
    cal = entry.calibration
    scale = cal.scale_inv_nm_per_px
    pitch_now = meta.effective_pixel_pitch_um
    text = f"{entry.path.name} (L = {entry.label_mm:g} mm, {cal.voltage_kv:g} kV, {cal.date or 'undated'})"
    if cal.pixel_pitch_um is not None and pitch_now is not None and _pct(pitch_now, cal.pixel_pitch_um) > 1e-6:
        scale = scale * pitch_now / cal.pixel_pitch_um
        text += f", rescaled from {cal.pixel_pitch_um:g} to {pitch_now:g} um pixels"
    return scale, text


def _read_sidecar(path: Path) -> Calibration | None:
    """The sidecar's calibration; None (with a log note) for a JSON that is not a calibration file."""
    try:
        with open(path, encoding="utf-8") as fh:
            head = fh.read(1 << 16)
        doc = json.loads(head) if len(head) < (1 << 16) else None
    except (OSError, UnicodeError, ValueError, RecursionError):
        doc = None
    if not isinstance(doc, dict) or doc.get("format") != CALIBRATION_FORMAT:
        return None
    try:
        return read_calibration_file(path)
    except InputError as exc:
        raise InputError(f"sidecar {exc}") from None


def resolve_calibration(image, metadata: FileMetadata | None, *, scale_inv_nm_per_px=None, camera_length_mm=None,
                        pixel_pitch_um=None, voltage_kv=None, calibration_file=None, center_px=None,
                        history_folder=None, use_sidecar: bool = True, use_history: bool = True) -> ResolvedCalibration:
    """Resolve the calibration of `image` (module notes for the order).

    Parameters
    ----------
    image : str or Path
        The image file (its sidecar is looked for next to it).
    metadata : FileMetadata or None
        What the file says about itself (:func:`saed.image.io.read_pattern`).
    scale_inv_nm_per_px, camera_length_mm, pixel_pitch_um, voltage_kv, calibration_file, center_px
        The command-line options (None when not given).
    history_folder : path, optional
        The calibration history (default: :func:`saed.calibrate.history.history_folder`).

    Raises
    ------
    InputError
        Contradicting options, an unreadable calibration file or sidecar, or a real-space (image-mode)
        file with nothing else to calibrate it.
    """
    meta = metadata
    notes: list[str] = []
    warns: list[str] = []
    meta_scale, meta_how = _metadata_scale(meta, warns)
    center = tuple(center_px) if center_px is not None else None
    if meta is not None:
        notes.extend(meta.notes)

    def note_voltage(used_kv: float, what: str) -> None:
        if meta is not None and meta.voltage_kv is not None and abs(meta.voltage_kv - used_kv) > 0.5:
            warns.append(f"{what} {used_kv:g} kV differs from the {meta.voltage_kv:g} kV the file records")

    def note_metadata_differs(scale: float, what: str) -> None:
        if meta_scale is not None and _pct(meta_scale, scale) > WARN_DIFFERENCE_PCT:
            warns.append(f"the file's metadata give {meta_scale:.5g} 1/nm per px ({meta_how}), "
                         f"{_pct(meta_scale, scale):.1f} % from the {what} used")

    def mode_note() -> None:
        if meta is not None and (meta.mode == "image" or (meta.real_pixel_size_nm is not None and meta.units_stated)):
            warns.append("the file's metadata say image mode (a real-space pixel size); read as a diffraction "
                         "pattern because a calibration was given")

    # 1. options
    if scale_inv_nm_per_px is not None or camera_length_mm is not None:
        how = "--scale" if scale_inv_nm_per_px is not None else "--camera-length"
        pitch = pixel_pitch_um
        if camera_length_mm is not None and pitch is None and meta is not None and meta.effective_pixel_pitch_um:
            pitch = meta.effective_pixel_pitch_um
            notes.append(f"pixel pitch {pitch:g} um from the file's metadata"
                         + (f" (sensor {meta.pixel_pitch_um:g} um, binned {meta.binning})" if meta.binning and meta.binning > 1 else ""))
        v = voltage_kv if voltage_kv is not None else (meta.voltage_kv if meta is not None and meta.voltage_kv else None)
        cal = calibration_from_options(scale_inv_nm_per_px=scale_inv_nm_per_px, camera_length_mm=camera_length_mm,
                                       pixel_pitch_um=pitch, voltage_kv=v, calibration_file=calibration_file,
                                       center_px=center)
        if voltage_kv is not None:
            note_voltage(cal.voltage_kv, "--voltage")
        note_metadata_differs(cal.scale_inv_nm_per_px, how)
        mode_note()
        detail = (f"--scale {scale_inv_nm_per_px:g}" if scale_inv_nm_per_px is not None
                  else f"--camera-length {camera_length_mm:g} mm, {pitch:g} um pixels")
        return ResolvedCalibration(replace(cal, source=f"option {detail}"), "option", detail, tuple(notes), tuple(warns), meta)

    # 2. calibration file
    if calibration_file is not None:
        cal = calibration_from_options(voltage_kv=voltage_kv, calibration_file=calibration_file, center_px=center)
        note_voltage(cal.voltage_kv, "the calibration file's")
        note_metadata_differs(cal.scale_inv_nm_per_px, "calibration file")
        mode_note()
        return ResolvedCalibration(cal, "calibration file", str(calibration_file), tuple(notes), tuple(warns), meta)

    # 3. sidecar
    side = sidecar_path(image)
    if use_sidecar and side.is_file() and side.resolve() != Path(image).resolve():
        base = _read_sidecar(side)
        if base is None:
            notes.append(f"{side.name} next to the image is not a saed calibration file; not used")
        else:
            if voltage_kv is not None and abs(float(voltage_kv) - base.voltage_kv) > 1e-6:
                raise InputError(f"--voltage {float(voltage_kv):g} kV contradicts the sidecar {side}'s "
                                 f"{base.voltage_kv:g} kV")
            cal = replace(base, center_px=center) if center is not None else base
            note_voltage(cal.voltage_kv, "the sidecar's")
            note_metadata_differs(cal.scale_inv_nm_per_px, "sidecar")
            mode_note()
            return ResolvedCalibration(cal, "sidecar", str(side), tuple(notes), tuple(warns), meta)

    v_used = float(voltage_kv) if voltage_kv is not None else (
        meta.voltage_kv if meta is not None and meta.voltage_kv is not None else 200.0)
    if voltage_kv is not None:
        note_voltage(v_used, "--voltage")
    pitch_meta = meta.effective_pixel_pitch_um if meta is not None else None
    pitch = pixel_pitch_um if pixel_pitch_um is not None else pitch_meta

    # 4. file metadata
    if meta is not None and meta_scale is None:
        _refuse_real_space(image, meta)
    entry = _history_match(meta, history_folder) if use_history else None
    if meta_scale is not None:
        cal = Calibration(meta_scale, v_used, center_px=center, pixel_pitch_um=pitch,
                          camera_length_mm=meta.camera_length_mm if meta.scale_inv_nm_per_px is None else None,
                          source=f"{image} ({meta_how})")
        if entry is not None:
            h_scale, h_text = _history_scale(entry, meta)
            diff = _pct(meta_scale, h_scale)
            if diff > WARN_DIFFERENCE_PCT:
                warns.append(f"the calibration history's {h_text} gives {h_scale:.5g} 1/nm per px, {diff:.1f} % from the "
                             f"file's metadata used here; give --calibration {entry.path} to use the measured one")
            else:
                notes.append(f"the calibration history's {h_text} agrees within {diff:.2f} %")
            if entry.calibration.alpha_axis_deg is not None:  # the holder axis belongs to the camera length
                cal = replace(cal, alpha_axis_deg=entry.calibration.alpha_axis_deg)
                notes.append(f"alpha tilt axis at {entry.calibration.alpha_axis_deg:g} deg on the detector, "
                             f"from the calibration history's {h_text}")
        return ResolvedCalibration(cal, "file metadata", meta_how, tuple(notes), tuple(warns), meta)

    # 5. calibration history
    if entry is not None:
        h_scale, h_text = _history_scale(entry, meta)
        base = entry.calibration
        # everything the entry measured at this camera length (ellipse, alpha axis, camera length) stays
        cal = replace(base, scale_inv_nm_per_px=h_scale, voltage_kv=base.voltage_kv if voltage_kv is None else v_used,
                      center_px=center if center is not None else base.center_px, pixel_pitch_um=pitch,
                      source=str(entry.path))
        return ResolvedCalibration(cal, "calibration history", h_text, tuple(notes), tuple(warns), meta)

    # 6. none
    cal = Calibration(None, v_used, center_px=center, pixel_pitch_um=pitch)
    return ResolvedCalibration(cal, "none (uncalibrated)", "", tuple(notes), tuple(warns), meta)
