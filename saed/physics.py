"""Electron physics: wavelength, interaction constant, detector scale.

The constants are CODATA 2022, pinned here (the values :mod:`scipy.constants` 1.15+ carries; the
tests compare them) rather than imported: importing scipy.constants loads scipy's array-API layer,
a few tenths of a second of start-up for commands that need no other part of scipy. Units are in the names; radians never leave a function body.
"""

from __future__ import annotations

import math

from types import SimpleNamespace

from saed.errors import InputError

#: CODATA version of the constants below.
CODATA_VERSION = "2022"
#: h, e and c are exact in the SI since 2019; m_e is CODATA 2022 (NIST, https://physics.nist.gov/cuu/Constants/).
_c = SimpleNamespace(h=6.62607015e-34, e=1.602176634e-19, c=299792458.0, m_e=9.1093837139e-31)

#: Highest accelerating voltage accepted, kV (the largest TEMs run at 3 MV).
MAX_VOLTAGE_KV = 3000.0

#: Electron rest energy m0 c^2 in keV (CODATA 2022).
REST_ENERGY_KEV = _c.m_e * _c.c**2 / _c.e / 1e3


def check_voltage_kv(voltage_kv: float) -> float:
    """Return `voltage_kv` as float, or raise :class:`InputError` if it is not a TEM voltage.

    >>> check_voltage_kv(200)
    200.0
    """
    try:
        v = float(voltage_kv)
    except (TypeError, ValueError):
        raise InputError(f"accelerating voltage {voltage_kv!r} is not a number (give kV, e.g. 200)") from None
    if not math.isfinite(v) or v <= 0:
        raise InputError(f"accelerating voltage {voltage_kv!r} kV must be a positive number of kV (e.g. 200)")
    if v > MAX_VOLTAGE_KV:
        raise InputError(
            f"accelerating voltage {v:g} kV is above {MAX_VOLTAGE_KV:g} kV: "
            "give the voltage in kV, not V (e.g. 200, not 200000)"
        )
    return v


def lorentz_gamma(voltage_kv: float) -> float:
    """Relativistic factor gamma = 1 + eV / (m0 c^2) for electrons accelerated through `voltage_kv`.

    >>> round(lorentz_gamma(200.0), 5)
    1.39139
    """
    v = check_voltage_kv(voltage_kv)
    return 1.0 + v / REST_ENERGY_KEV


def electron_wavelength_nm(voltage_kv: float) -> float:
    """Relativistic electron wavelength in nm for `voltage_kv` (kV, > 0).

    lambda = h / sqrt(2 m0 e V (1 + e V / (2 m0 c^2))), with scipy.constants.
    Returns a plain float so doctests print plainly under numpy 2.

    >>> round(electron_wavelength_nm(200.0), 7)
    0.0025079
    """
    v_volt = check_voltage_kv(voltage_kv) * 1e3
    e_v = _c.e * v_volt
    p = math.sqrt(2.0 * _c.m_e * e_v * (1.0 + e_v / (2.0 * _c.m_e * _c.c**2)))
    return _c.h / p * 1e9


def interaction_constant_rad_per_v_nm(voltage_kv: float) -> float:
    """Relativistic interaction constant sigma = 2 pi gamma m0 e lambda / h^2, rad/(V nm).

    References: Kirkland, *Advanced Computing in Electron Microscopy* (2010), eq. 5.6.

    >>> round(interaction_constant_rad_per_v_nm(200.0), 6)
    0.007288
    """
    gamma = lorentz_gamma(voltage_kv)
    lam_m = electron_wavelength_nm(voltage_kv) * 1e-9
    sigma_rad_per_v_m = 2.0 * math.pi * gamma * _c.m_e * _c.e * lam_m / _c.h**2
    return sigma_rad_per_v_m * 1e-9


def camera_constant_nm_mm(camera_length_mm: float, voltage_kv: float) -> float:
    """Camera constant lambda*L in nm*mm: a spot at radius R (mm) on the detector has d = lambda*L / R.

    >>> round(camera_constant_nm_mm(100.0, 200.0), 5)
    0.25079
    """
    length = _positive(camera_length_mm, "camera length", "mm")
    return electron_wavelength_nm(voltage_kv) * length


def scale_from_camera_inv_nm_per_px(camera_length_mm: float, pixel_pitch_um: float, voltage_kv: float) -> float:
    """Detector scale in 1/nm per pixel = pixel pitch / (lambda * camera length).

    Small-angle geometry (tan 2theta ~ 2theta), as for every SAED camera length.

    >>> round(scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0), 6)
    0.055823
    """
    pitch_mm = _positive(pixel_pitch_um, "pixel pitch", "um") * 1e-3
    return pitch_mm / camera_constant_nm_mm(camera_length_mm, voltage_kv)


def camera_length_from_scale_mm(scale_inv_nm_per_px: float, pixel_pitch_um: float, voltage_kv: float) -> float:
    """Camera length in mm implied by a detector scale, pixel pitch and voltage (inverse of the above).

    >>> round(camera_length_from_scale_mm(0.055823, 14.0, 200.0), 2)
    100.0
    """
    scale = _positive(scale_inv_nm_per_px, "detector scale", "1/nm per px")
    pitch_mm = _positive(pixel_pitch_um, "pixel pitch", "um") * 1e-3
    return pitch_mm / (scale * electron_wavelength_nm(voltage_kv))


def _positive(value: float, what: str, unit: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} {value!r} is not a number ({unit})") from None
    if not math.isfinite(v) or v <= 0:
        raise InputError(f"{what} must be a positive number of {unit}, got {value!r}")
    return v
