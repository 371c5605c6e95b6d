"""Electron atomic scattering factors and Debye-Waller damping.

f_e(s) is the five-Gaussian fit of International Tables for Crystallography
Vol. C (2006/2011), Table 4.3.2.2 (Peng, Ren, Dudarev & Whelan (1996),
Acta Cryst. A52, 257, :DOI:`10.1107/S0108767395014371`), whose coefficients
gemmi carries (``gemmi.Element(...).c4322``); they are used here, not retyped.
The table is non-relativistic and valid for s = sin(theta)/lambda <= 2 1/Angstrom
(20 1/nm); multiply by the Lorentz factor gamma once where absolute values
matter (see :func:`saed.physics.lorentz_gamma`).

Units: s in 1/nm (s = |g| / 2 = 1 / (2 d)); f_e in nm; B in nm^2.
The Angstrom coefficients are converted here, once.
"""

from __future__ import annotations

import re
from functools import lru_cache

import numpy as np

from saed.errors import PhaseError
from saed.readonly import freeze_in_place

__all__ = ["electron_form_factor_nm", "debye_waller", "element_symbol"]


@lru_cache(maxsize=None)
def element_symbol(name: str) -> str:
    """Normalise an element or ion label ('fe', 'Fe2+', 'O2-') to its element symbol, or raise PhaseError."""
    import gemmi

    # The leading letters only ('Fe2+' -> 'Fe', 'Ca1' -> 'Ca', 'OW1' -> 'O'); a longer word is refused
    # rather than cut to two letters: 'Copper' would become Co, 'Iron' Ir, 'Silver' Si.
    m = re.match(r"\s*([A-Za-z]+)", str(name))
    raw = m.group(1) if m else ""
    if not raw or len(raw) > 2:
        raise PhaseError(f"{name!r} is not a chemical element symbol (e.g. 'Co', 'Fe', 'O')")
    for cand in (raw[:2].capitalize(), raw[:1].upper()):
        el = gemmi.Element(cand)
        if el.atomic_number > 0 and el.name.lower() == cand.lower():
            return el.name
    raise PhaseError(f"{name!r} is not a chemical element")


@lru_cache(maxsize=None)
def _coefficients(symbol: str) -> tuple[np.ndarray, np.ndarray]:
    import gemmi

    el = gemmi.Element(symbol)
    coefs = np.array(el.c4322.get_coefs(), dtype=float)
    if coefs.size != 10 or not np.any(coefs):
        raise PhaseError(f"no electron scattering factor tabulated for element {symbol!r}")
    a_ang = coefs[:5]  # Angstrom
    b_ang2 = coefs[5:]  # Angstrom^2
    # f(s) = sum a_i exp(-b_i s^2); s in 1/A = s_nm / 10; f in A = 10 * f_nm.
    a_nm = a_ang / 10.0
    b_nm2 = b_ang2 / 100.0
    freeze_in_place(a_nm, b_nm2)
    return a_nm, b_nm2


def electron_form_factor_nm(element: str, s_inv_nm) -> np.ndarray:
    """Non-relativistic electron scattering factor f_e(s) in nm, vectorised over `s_inv_nm`.

    Parameters
    ----------
    element : str
        Element symbol (ion charges are ignored: the ITC Table 4.3.2.2 fits are for neutral atoms).
    s_inv_nm : array_like
        s = sin(theta)/lambda = 1/(2d) in 1/nm, any shape.

    Examples
    --------
    >>> round(float(electron_form_factor_nm("Si", 2.0)) * 10, 4)  # Angstrom, at s = 0.2 1/A
    2.59
    """
    a, b = _coefficients(element_symbol(element))
    s2 = np.square(np.asarray(s_inv_nm, dtype=float))
    return np.sum(a * np.exp(-b * s2[..., None]), axis=-1)


def debye_waller(b_iso_nm2, s_inv_nm) -> np.ndarray:
    """Isotropic Debye-Waller amplitude factor exp(-B s^2), B in nm^2 and s in 1/nm."""
    s2 = np.square(np.asarray(s_inv_nm, dtype=float))
    return np.exp(-np.asarray(b_iso_nm2, dtype=float)[..., None] * s2) if np.ndim(b_iso_nm2) else np.exp(-float(b_iso_nm2) * s2)
