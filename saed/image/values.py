"""Values that leave the image stage (frozen; arrays read-only).

Pixel convention (CONTRACT.md): x = column, y = row, origin at the centre of
the top-left pixel.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from saed.calibration import Calibration
from saed.errors import InputError
from saed.readonly import frozen_array

__all__ = ["Spots", "LatticeBasis", "MeasuredPattern"]


@dataclass(frozen=True)
class Spots:
    """Detected spots in detector pixels; x = column, y = row.

    intensity: integrated counts above background; intensity_sigma its 1-sigma uncertainty;
    sigma_xy_px: 1-sigma position uncertainty; snr: peak signal over local noise;
    size_px: RMS radius of the spot.
    """

    x_px: np.ndarray
    y_px: np.ndarray
    intensity: np.ndarray
    intensity_sigma: np.ndarray = None
    sigma_xy_px: np.ndarray = None
    snr: np.ndarray = None
    size_px: np.ndarray = None
    saturated: np.ndarray = None

    def __post_init__(self):
        n = len(np.atleast_1d(self.x_px))
        for name in ("x_px", "y_px", "intensity", "intensity_sigma", "sigma_xy_px", "snr", "size_px"):
            v = getattr(self, name)
            a = frozen_array(np.zeros(n) if v is None else np.atleast_1d(v), np.float64)
            if a.shape != (n,):
                raise InputError(f"Spots: {name} has {a.shape} values, expected {n}")
            object.__setattr__(self, name, a)
        sat = np.zeros(n, bool) if self.saturated is None else np.atleast_1d(self.saturated)
        object.__setattr__(self, "saturated", frozen_array(sat, bool))

    def __len__(self) -> int:
        return len(self.x_px)

    @property
    def xy_px(self) -> np.ndarray:
        return np.stack([self.x_px, self.y_px], axis=-1)

    def subset(self, keep) -> "Spots":
        k = np.asarray(keep)
        return Spots(self.x_px[k], self.y_px[k], self.intensity[k], self.intensity_sigma[k],
                     self.sigma_xy_px[k], self.snr[k], self.size_px[k], self.saturated[k])


@dataclass(frozen=True)
class LatticeBasis:
    """Gauss-reduced 2-D basis of the spot lattice, in detector pixels (vectors from the centre).

    g1_px, g2_px: (2,) vectors, |g1| <= |g2|, angle between them in [60, 90] deg after reduction;
    indices: (n_spots, 2) integer (m, n) per spot with spot ~ centre + m g1 + n g2, or (0, 0)
    with ``on_lattice`` False for spots that do not belong; sigma_*: 1-sigma uncertainties.
    """

    g1_px: np.ndarray
    g2_px: np.ndarray
    indices: np.ndarray
    on_lattice: np.ndarray
    sigma_g1_px: float = 0.0
    sigma_g2_px: float = 0.0
    sigma_angle_deg: float = 0.0
    rms_residual_px: float = 0.0

    def __post_init__(self):
        object.__setattr__(self, "g1_px", frozen_array(self.g1_px, np.float64))
        object.__setattr__(self, "g2_px", frozen_array(self.g2_px, np.float64))
        object.__setattr__(self, "indices", frozen_array(np.reshape(self.indices, (-1, 2)), np.int64))
        object.__setattr__(self, "on_lattice", frozen_array(self.on_lattice, bool))

    @property
    def angle_deg(self) -> float:
        a, b = self.g1_px, self.g2_px
        c = float(np.dot(a, b) / (np.linalg.norm(a) * np.linalg.norm(b)))
        return float(np.degrees(np.arccos(np.clip(c, -1.0, 1.0))))


@dataclass(frozen=True)
class MeasuredPattern:
    """What the matcher consumes: centre, spots, basis and calibration of one recorded pattern.

    ``spots`` excludes the direct beam. ``basis`` is None when no 2-D lattice was found
    (fewer than three non-collinear spots); ``notes`` carries reasons for a microscopist.
    """

    image_shape: tuple[int, int]
    center_px: tuple[float, float]
    spots: Spots
    basis: LatticeBasis | None
    calibration: Calibration
    center_sigma_px: float = 0.0
    source: str = ""
    notes: tuple[str, ...] = field(default=())

    def spot_vectors_px(self) -> np.ndarray:
        """(n, 2) spot positions relative to the centre, pixels (ellipse correction not applied)."""
        return self.spots.xy_px - np.asarray(self.center_px)[None, :]

    def _undistort(self, v: np.ndarray) -> np.ndarray:
        v = np.asarray(v, dtype=np.float64).reshape(-1, 2)
        ell = self.calibration.ellipse
        if ell is None:
            return v.copy()
        x, y = ell.corrected_px(v[:, 0], v[:, 1])
        return np.stack([x, y], axis=-1)

    def corrected_spot_vectors_px(self) -> np.ndarray:
        """(n, 2) spot vectors from the centre with the calibration's ellipse undone (pixels).

        Equal to :meth:`spot_vectors_px` when the calibration has no ellipse.
        """
        return self._undistort(self.spot_vectors_px())

    def corrected_basis_px(self) -> tuple[np.ndarray, np.ndarray] | None:
        """(g1, g2) with the calibration's ellipse undone (pixels), or None without a basis.

        The ellipse is linear about the centre, so the corrected spots still lie on the lattice
        spanned by these two vectors with the same integer indices.
        """
        if self.basis is None:
            return None
        g = self._undistort(np.stack([self.basis.g1_px, self.basis.g2_px]))
        return g[0], g[1]
