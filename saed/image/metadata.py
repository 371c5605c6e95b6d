"""What a recorded file says about itself, in saed's units: :class:`FileMetadata`.

Filled by the readers (:mod:`saed.image.microscope` for microscope formats, :mod:`saed.image.io`
for TIFF's resolution tags); used by the calibration resolution (:mod:`saed.calibrate.resolve`).

Binning is applied exactly once, here: ``pixel_pitch_um`` is the physical pitch of the sensor (as
acquisition software records it) and :attr:`FileMetadata.effective_pixel_pitch_um` multiplies it by
the binning. A reciprocal scale stored with the image (``scale_inv_nm_per_px``) is already per
stored (binned) pixel and is never multiplied again.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from saed import physics

__all__ = ["FileMetadata"]


def _opt_positive(value) -> float | None:
    if value is None:
        return None
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) and v > 0 else None


@dataclass(frozen=True)
class FileMetadata:
    """The calibration-relevant metadata of one image file, in saed's units (None = not recorded).

    Attributes
    ----------
    format : str
        The file format as named to the user ("DM4", "EMD (Berkeley layout)", "TIFF", ...).
    frame_shape : (int, int)
        (rows, cols) of one frame.
    n_frames : int
        Number of frames (product of ``scan_shape``; 1 for a single image).
    scan_shape : tuple of int
        Leading axes of a stack or scan, () for one image.
    scale_inv_nm_per_px : float or None
        A reciprocal-space scale stored with the image, per stored pixel (after any binning).
    scale_unit : str or None
        The unit the scale was stored in, as written in the file ("1/nm", "1 / m", ...).
    real_pixel_size_nm : float or None
        A real-space pixel size (an image-mode calibration), in nm.
    units_stated : bool
        Whether the format states whether its scale is real or reciprocal (False for MRC and for a
        SER read without its EMI: their scale unit is a guess and is never used).
    mode : str or None
        "diffraction" or "image" when the file says so.
    voltage_kv, camera_length_mm, pixel_pitch_um, binning, exposure_s : float or None
        Accelerating voltage (kV), nominal camera length (mm), physical sensor pixel pitch (µm, before
        binning), binning factor, exposure (s).
    acquired : str or None
        Acquisition date and time as recorded.
    instrument : str or None
        Microscope / detector name as recorded.
    image_name : str or None
        Which image of a file holding several is used (its title).
    notes : tuple of str
        What the reader noticed (several images in the file, unequal X/Y scales, ignored units...).
    """

    format: str
    frame_shape: tuple[int, int]
    n_frames: int = 1
    scan_shape: tuple[int, ...] = ()
    scale_inv_nm_per_px: float | None = None
    scale_unit: str | None = None
    real_pixel_size_nm: float | None = None
    units_stated: bool = True
    mode: str | None = None
    voltage_kv: float | None = None
    camera_length_mm: float | None = None
    pixel_pitch_um: float | None = None
    binning: int | None = None
    exposure_s: float | None = None
    acquired: str | None = None
    instrument: str | None = None
    image_name: str | None = None
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        for name in ("scale_inv_nm_per_px", "real_pixel_size_nm", "voltage_kv", "camera_length_mm",
                     "pixel_pitch_um", "exposure_s"):
            object.__setattr__(self, name, _opt_positive(getattr(self, name)))
        b = _opt_positive(self.binning)
        object.__setattr__(self, "binning", int(round(b)) if b is not None and abs(b - round(b)) < 1e-6 else None)
        object.__setattr__(self, "frame_shape", tuple(int(v) for v in self.frame_shape))
        object.__setattr__(self, "scan_shape", tuple(int(v) for v in self.scan_shape))
        object.__setattr__(self, "notes", tuple(self.notes))

    @property
    def effective_pixel_pitch_um(self) -> float | None:
        """Pitch of one stored pixel: the sensor pitch times the binning (binning applied here, once).

        >>> FileMetadata("DM4", (512, 512), pixel_pitch_um=15.0, binning=2).effective_pixel_pitch_um
        30.0
        """
        if self.pixel_pitch_um is None:
            return None
        return self.pixel_pitch_um * (self.binning or 1)

    @property
    def nominal_scale_inv_nm_per_px(self) -> float | None:
        """The scale implied by the recorded camera length, voltage and binned pixel pitch (or None).

        Worked example (docs/calibration.md): 200 kV, L = 120 mm, 15 µm pixels binned 2 give
        0.030 mm / (0.0025079 nm x 120 mm) = 0.09968 1/nm per px.

        >>> m = FileMetadata("DM4", (512, 512), voltage_kv=200, camera_length_mm=120, pixel_pitch_um=15, binning=2)
        >>> round(m.nominal_scale_inv_nm_per_px, 5)
        0.09968
        """
        pitch = self.effective_pixel_pitch_um
        if pitch is None or self.camera_length_mm is None or self.voltage_kv is None:
            return None
        return physics.scale_from_camera_inv_nm_per_px(self.camera_length_mm, pitch, self.voltage_kv)

    def to_json(self) -> dict:
        """The metadata as a JSON-ready dict (units in the names)."""
        return {
            "format": self.format, "frame_shape": list(self.frame_shape), "n_frames": self.n_frames,
            "scan_shape": list(self.scan_shape), "scale_inv_nm_per_px": self.scale_inv_nm_per_px,
            "scale_unit": self.scale_unit, "real_pixel_size_nm": self.real_pixel_size_nm, "mode": self.mode,
            "voltage_kv": self.voltage_kv, "camera_length_mm": self.camera_length_mm,
            "pixel_pitch_um": self.pixel_pitch_um, "binning": self.binning,
            "effective_pixel_pitch_um": self.effective_pixel_pitch_um, "exposure_s": self.exposure_s,
            "acquired": self.acquired, "instrument": self.instrument, "image_name": self.image_name,
        }
