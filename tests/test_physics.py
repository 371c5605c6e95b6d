"""Electron wavelength and detector scale against outside values."""

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from saed import physics
from saed.errors import InputError

# (kV, lambda pm): textbook table, Williams & Carter, *Transmission Electron Microscopy*, Table 1.1
# (from memory, 3 significant figures), and the CODATA-based value computed independently below.
TEXTBOOK_PM = [(100, 3.70), (120, 3.35), (200, 2.51), (300, 1.97)]


@pytest.mark.parametrize("kv,pm", TEXTBOOK_PM)
def test_wavelength_textbook_table(kv, pm):
    assert physics.electron_wavelength_nm(kv) * 1e3 == pytest.approx(pm, abs=0.006)


@pytest.mark.parametrize("kv", [60, 80, 100, 120, 200, 300])
def test_wavelength_from_codata_written_out(kv):
    # Independent form: lambda = h c / sqrt(E (E + 2 m0 c^2)), E = e V, scipy.constants (CODATA).
    from scipy.constants import c, e, h, m_e

    energy = e * kv * 1e3
    lam_nm = h * c / (energy * (energy + 2 * m_e * c**2)) ** 0.5 * 1e9
    assert physics.electron_wavelength_nm(kv) == pytest.approx(lam_nm, rel=1e-12)


def test_camera_scale_worked_example():
    # Worked example (computed by hand): 200 kV, L = 100 mm, 14 um pixels:
    # lambda L = 0.0025079 nm * 100 mm = 0.25079 nm mm; scale = 0.014 mm / 0.25079 nm mm = 0.055823 1/nm/px.
    assert physics.scale_from_camera_inv_nm_per_px(100, 14, 200) == pytest.approx(0.055823, rel=2e-5)


@pytest.mark.parametrize("bad", [0, -200, float("nan"), 3001, 200000, "abc"])
def test_bad_voltage_is_one_line_input_error(bad):
    with pytest.raises(InputError) as err:
        physics.electron_wavelength_nm(bad)
    assert "\n" not in str(err.value)


# --- gamma and the interaction constant -------------------------------------------------------
# (kV, gamma, sigma rad/(V nm)): computed by the check-values script from scipy.constants (CODATA 2022),
# gamma = 1 + eV/m0c^2, sigma = 2 pi gamma m0 e lambda / h^2 (check-values.md section 1, [C]).
# gamma also agrees with m/m0 of Williams & Carter, *Transmission Electron Microscopy*, Table 1.1
# (from memory: 1.196, 1.235, 1.391, 1.587).
CHECK_GAMMA_SIGMA = [
    (100, 1.19570, 0.009244),
    (120, 1.23483, 0.008638),
    (200, 1.39139, 0.007288),
    (300, 1.58709, 0.006526),
]


@pytest.mark.parametrize("kv,gamma,sigma", CHECK_GAMMA_SIGMA)
def test_gamma_and_sigma_check_values(kv, gamma, sigma):
    assert physics.lorentz_gamma(kv) == pytest.approx(gamma, abs=6e-6)
    # sigma is given to 4 significant figures: half a unit in the last place is < 6e-5 relative.
    assert physics.interaction_constant_rad_per_v_nm(kv) == pytest.approx(sigma, rel=6e-5)


@pytest.mark.parametrize("kv", [60, 100, 200, 300, 1000, 3000])
def test_sigma_textbook_form(kv):
    # The other textbook form of the same constant (e.g. Reimer & Kohl, *Transmission Electron
    # Microscopy*, from memory): sigma = (2 pi / (lambda V)) (m0c^2 + eV) / (2 m0c^2 + eV),
    # with m0c^2 and eV in the same unit. lambda in nm, V in volts -> rad/(V nm).
    from scipy.constants import c, e, m_e

    rest_ev = m_e * c**2 / e
    v = kv * 1e3
    lam_nm = physics.electron_wavelength_nm(kv)
    sigma = 2 * math.pi / (lam_nm * v) * (rest_ev + v) / (2 * rest_ev + v)
    assert physics.interaction_constant_rad_per_v_nm(kv) == pytest.approx(sigma, rel=1e-12)


def test_rest_energy_is_codata():
    # m0 c^2 = 510.99895 keV (CODATA 2018/2022; check-values.md section 1).
    assert physics.REST_ENERGY_KEV == pytest.approx(510.99895, abs=5e-6)


@pytest.mark.parametrize("kv,pm", [(60, 4.8661), (80, 4.1757), (100, 3.7014), (120, 3.3492), (200, 2.5079), (300, 1.9687)])
def test_wavelength_check_values_five_figures(kv, pm):
    # check-values.md section 1 [C] (scipy.constants, CODATA 2022), 5 significant figures.
    assert physics.electron_wavelength_nm(kv) * 1e3 == pytest.approx(pm, abs=6e-5)


# --- camera length <-> scale -------------------------------------------------------------------
@given(length_mm=st.floats(10.0, 5000.0), pitch_um=st.floats(1.0, 200.0), kv=st.floats(20.0, 3000.0))
def test_camera_length_scale_round_trip(length_mm, pitch_um, kv):
    scale = physics.scale_from_camera_inv_nm_per_px(length_mm, pitch_um, kv)
    back = physics.camera_length_from_scale_mm(scale, pitch_um, kv)
    assert back == pytest.approx(length_mm, rel=1e-12)
    # Definition written out: scale = pitch / (lambda L), pitch in mm, lambda in nm, L in mm.
    assert scale == pytest.approx(pitch_um * 1e-3 / (physics.electron_wavelength_nm(kv) * length_mm), rel=1e-12)
    assert physics.camera_constant_nm_mm(length_mm, kv) == pytest.approx(
        physics.electron_wavelength_nm(kv) * length_mm, rel=1e-12)


def test_camera_worked_example_au_rings():
    # check-values.md section 8 worked example [C]: 200 kV, L = 100 mm, 14 um pixels, Au a = 0.40782 nm:
    # Au 111 ring at 76.08 px, Au 220 at 124.24 px. Radius = (1/d) / scale.
    scale = physics.scale_from_camera_inv_nm_per_px(100, 14, 200)
    a_nm = 0.40782
    assert math.sqrt(3) / a_nm / scale == pytest.approx(76.08, abs=0.006)
    assert math.sqrt(8) / a_nm / scale == pytest.approx(124.24, abs=0.006)


@pytest.mark.parametrize("func,args", [
    (physics.scale_from_camera_inv_nm_per_px, (0, 14, 200)),
    (physics.scale_from_camera_inv_nm_per_px, (100, -1, 200)),
    (physics.scale_from_camera_inv_nm_per_px, (100, 14, 0)),
    (physics.camera_length_from_scale_mm, (float("inf"), 14, 200)),
    (physics.camera_length_from_scale_mm, (0.05, "x", 200)),
    (physics.camera_constant_nm_mm, (float("nan"), 200)),
    (physics.lorentz_gamma, (-1,)),
    (physics.interaction_constant_rad_per_v_nm, (3000.5,)),
])
def test_bad_camera_or_voltage_is_one_line_input_error(func, args):
    with pytest.raises(InputError) as err:
        func(*args)
    assert "\n" not in str(err.value)


def test_voltage_limits():
    # 3 MV is the highest TEM voltage accepted (MAX_VOLTAGE_KV); just above it is refused.
    assert physics.check_voltage_kv(3000) == 3000.0
    with pytest.raises(InputError, match="kV"):
        physics.check_voltage_kv(3000.001)
    with pytest.raises(InputError, match="positive"):
        physics.check_voltage_kv(-0.0)
