"""Electron wavelength and detector scale against outside values."""

import pytest

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
