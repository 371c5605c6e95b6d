"""Electron scattering factors: ITC Vol C Table 4.3.2.2 values and the Mott-Bethe formula with xraylib."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from saed.crystal import builtin_names, builtin_phase
from saed.crystal.scattering import debye_waller, electron_form_factor_nm, element_symbol
from saed.errors import PhaseError

xraylib = pytest.importorskip("xraylib")


def _mott_bethe_angstrom(z: int, s_inv_ang: float) -> float:
    """Mott-Bethe: f_e(s) = K (Z - f_x(s)) / s^2 with K = m0 e^2 / (8 pi eps0 h^2) = 1 / (8 pi^2 a0).

    K from scipy.constants (CODATA) in 1/Angstrom: 0.0239337 (check-values.md section 4). f_x from
    xraylib.FF_Rayl(Z, q) with q = sin(theta)/lambda in 1/Angstrom. Returns f_e in Angstrom.
    """
    from scipy.constants import e, epsilon_0, h, m_e

    k_inv_ang = m_e * e**2 / (8 * math.pi * epsilon_0 * h**2) * 1e-10  # 1/m -> 1/A
    return k_inv_ang * (z - xraylib.FF_Rayl(z, s_inv_ang)) / s_inv_ang**2


def _fe_angstrom(el: str, s_inv_ang: float) -> float:
    # our f_e takes s in 1/nm (= 10 x 1/A) and returns nm (= A / 10)
    return float(electron_form_factor_nm(el, 10.0 * s_inv_ang)) * 10.0


def test_mott_bethe_constant():
    # check-values.md section 4: K = 1/(8 pi^2 a0) = 0.0239337 1/A (scipy CODATA 2022), the usual 0.023934.
    from scipy.constants import e, epsilon_0, h, m_e, physical_constants

    k = m_e * e**2 / (8 * math.pi * epsilon_0 * h**2) * 1e-10
    a0_ang = physical_constants["Bohr radius"][0] * 1e10
    assert k == pytest.approx(1 / (8 * math.pi**2 * a0_ang), rel=1e-9)
    assert k == pytest.approx(0.0239337, abs=6e-8)


# f_e in Angstrom at s = 0, 0.1, 0.2, 0.5, 1.0 1/A: gemmi's c4322 = ITC Vol C (2011) Table 4.3.2.2,
# as tabulated in check-values.md section 4 (4 decimals).
ITC_FE = {
    "Al": [5.8872, 4.2366, 2.3008, 0.6985, 0.2547],
    "Si": [5.8268, 4.4672, 2.5900, 0.7425, 0.2701],
    "Fe": [7.1637, 5.5581, 3.5643, 1.3880, 0.4663],
    "Cu": [5.5991, 4.5854, 3.2684, 1.4639, 0.5237],
    "Au": [10.5714, 9.2537, 7.0023, 3.0724, 1.2102],
}
S_POINTS = [0.0, 0.1, 0.2, 0.5, 1.0]


@pytest.mark.parametrize("el", sorted(ITC_FE))
def test_itc_table_values(el):
    got = [_fe_angstrom(el, s) for s in S_POINTS]
    assert got == pytest.approx(ITC_FE[el], abs=6e-5)
    # vectorised call gives the same numbers, any shape
    arr = electron_form_factor_nm(el, 10 * np.array(S_POINTS).reshape(5, 1)) * 10
    assert arr.shape == (5, 1)
    assert arr.ravel().tolist() == pytest.approx(got, rel=1e-14)


# Tolerances of check-values.md section 4 (from its table of Mott-Bethe with three X-ray tables):
# Z <= 29 and s >= 0.1 1/A: 0.6 %; Au: 1.5 % for s >= 0.2, 3.5 % at s = 0.1. Never at s -> 0.
@pytest.mark.parametrize("el", ["Al", "Si", "Fe", "Cu"])
@pytest.mark.parametrize("s", [0.1, 0.2, 0.5, 1.0])
def test_mott_bethe_light_elements(el, s):
    z = xraylib.SymbolToAtomicNumber(el)
    assert _fe_angstrom(el, s) == pytest.approx(_mott_bethe_angstrom(z, s), rel=0.006)


@pytest.mark.parametrize("s,tol", [(0.1, 0.035), (0.2, 0.015), (0.5, 0.015), (1.0, 0.015)])
def test_mott_bethe_gold(s, tol):
    assert _fe_angstrom("Au", s) == pytest.approx(_mott_bethe_angstrom(79, s), rel=tol)


BUILTIN_ELEMENTS = sorted({site.element for n in builtin_names() for site in builtin_phase(n).sites})


def _mott_bethe_tolerance(el: str, z: int) -> float:
    """Agreement expected over 0.2 <= s <= 0.75 1/A (g = 4-15 1/nm, the SAED range).

    Measured here over every built-in element, and the reason for each tier:
    - Z <= 54: 1 % (check-values' 0.6 % holds at its sample points; Mg, Zr, Sr reach 0.9 % between them).
    - Z >= 55: 3.5 %: (Z - f_x) is a small difference of large numbers and the X-ray tables differ
      (Au row of check-values.md section 4; Pb and Po reach 3 % at s = 0.2).
    - Cs: 4.5 %: the 5-Gaussian fit of Table 4.3.2.2 itself is 4 % off near s = 0.75, against both
      xraylib and gemmi's it92 X-ray factors (seen while writing this test).
    """
    if el == "Cs":
        return 0.045
    return 0.01 if z <= 54 else 0.035


@given(el=st.sampled_from(BUILTIN_ELEMENTS), s=st.floats(0.2, 0.75))
def test_mott_bethe_every_builtin_element(el, s):
    z = xraylib.SymbolToAtomicNumber(el)
    assert _fe_angstrom(el, s) == pytest.approx(_mott_bethe_angstrom(z, s), rel=_mott_bethe_tolerance(el, z))


@pytest.mark.parametrize("el", BUILTIN_ELEMENTS)
def test_form_factor_positive_and_decreasing(el):
    s = np.linspace(0, 20.0, 200)  # 1/nm, the tabulated range s <= 2 1/A
    f = electron_form_factor_nm(el, s)
    assert np.all(f > 0) and np.all(np.diff(f) < 0)


def test_debye_waller_units():
    # B = 0.5 A^2 = 0.005 nm^2 and s = 0.5 1/A = 5 1/nm: exp(-B s^2) = exp(-0.125) in either unit system.
    assert float(debye_waller(0.005, 5.0)) == pytest.approx(math.exp(-0.5 * 0.5**2), rel=1e-14)
    assert debye_waller(0.0, np.array([1.0, 2.0])).tolist() == [1.0, 1.0]


@pytest.mark.parametrize("label,symbol", [("Fe", "Fe"), ("fe", "Fe"), ("Fe2+", "Fe"), ("O2-", "O"), ("Ca1", "Ca"),
                                          ("C1", "C"), ("Nb", "Nb"), ("CL", "Cl"), ("Si4+", "Si"), ("W", "W"), ("OW1", "O")])
def test_element_symbol(label, symbol):
    assert element_symbol(label) == symbol


# 'Copper' and 'Iron' must not be cut to Co and Ir, nor 'Silver' to Si
@pytest.mark.parametrize("bad", ["", "12", "Xx", "Qq1", "+", "Copper", "Iron", "Silver"])
def test_unknown_element_is_one_line_phase_error(bad):
    with pytest.raises(PhaseError) as err:
        element_symbol(bad)
    assert "\n" not in str(err.value)
