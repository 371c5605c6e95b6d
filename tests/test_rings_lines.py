"""Ring lines of a phase against outside values: d-spacings, ratio sequences, multiplicities, intensities."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.crystal import Lattice, Phase, Site, builtin_phase
from saed.simulate.rings import ring_lines

# Polycrystalline Au and Al ring d-spacings, nm: ICDD PDF 04-0784 (Au) and 04-0787 (Al), card numbers and
# values from memory, as listed in the project's check-value sheet, section 8. Four significant figures on
# the cards (five for the outer rings): the tolerance is one unit of the last digit, or 2.5e-4 relative
# (the Au card's a = 0.40786 nm differs from the built-in Pearson value 0.40782 nm by 1e-4).
AU_D_NM_ICDD = {(1, 1, 1): 0.2355, (2, 0, 0): 0.2039, (2, 2, 0): 0.1442, (3, 1, 1): 0.1230, (2, 2, 2): 0.11774,
                (4, 0, 0): 0.10196, (3, 3, 1): 0.09358, (4, 2, 0): 0.09120}
AL_D_NM_ICDD = {(1, 1, 1): 0.2338, (2, 0, 0): 0.2024, (2, 2, 0): 0.1431, (3, 1, 1): 0.1221, (2, 2, 2): 0.11690,
                (4, 0, 0): 0.10124, (3, 3, 1): 0.09289, (4, 2, 0): 0.09055}


@pytest.mark.parametrize("name,table", [("Au", AU_D_NM_ICDD), ("Al", AL_D_NM_ICDD)])
def test_ring_d_spacings_match_the_powder_cards(name, table):
    lines = ring_lines(builtin_phase(name), 12.0)
    got = {tuple(int(v) for v in lines.hkl[i]): float(lines.d_nm[i]) for i in range(len(lines))}
    for hkl, d_card in table.items():
        unit = 1e-4 if d_card > 0.12 else 1e-5
        assert got[hkl] == pytest.approx(d_card, abs=max(unit, 2.5e-4 * d_card))


@pytest.mark.parametrize("name", ["Au", "Al"])
def test_ring_d_spacings_match_gemmi(name):
    gemmi = pytest.importorskip("gemmi")
    ph = builtin_phase(name)
    a_ang = 10 * ph.lattice.a_nm  # gemmi works in Angstrom
    cell = gemmi.UnitCell(a_ang, a_ang, a_ang, 90, 90, 90)
    lines = ring_lines(ph, 12.0)
    for hkl, d in zip(lines.hkl, lines.d_nm):
        assert d == pytest.approx(cell.calculate_d([int(v) for v in hkl]) / 10, rel=1e-12)


def test_fcc_ratio_sequence_sqrt3_4_8_11_12():
    # d111/d_hkl = sqrt(N/3) for N = h^2 + k^2 + l^2 = 3, 4, 8, 11, 12 (fcc: h, k, l unmixed); check-value
    # sheet section 8, a textbook fact of ring indexing (common practice).
    for name in ("Au", "Al"):
        d = ring_lines(builtin_phase(name), 12.0).d_nm
        assert d[0] / d[:5] == pytest.approx(np.sqrt(np.array([3, 4, 8, 11, 12]) / 3), rel=1e-12)


@pytest.mark.parametrize("name,n_seq", [
    ("Fe-bcc", [2, 4, 6, 8, 10, 12, 14, 16]),   # bcc: h + k + l even (check-value sheet section 8)
    ("Si", [3, 8, 11, 16, 19, 24, 27, 32]),     # diamond: unmixed and not 4n+2 (same source)
])
def test_other_cubic_ring_sequences(name, n_seq):
    ph = builtin_phase(name)
    lines = ring_lines(ph, 15.0)
    n = (lines.g_inv_nm * ph.lattice.a_nm) ** 2
    assert np.round(n[: len(n_seq)]).astype(int).tolist() == n_seq


def test_multiplicities_and_merged_families():
    # Cubic m3m multiplicities {111} 8, {200} 6, {220} 12, {311} 24, {222} 8, {400} 6, {331} 24, {420} 24
    # (International Tables for Crystallography Vol. A, general and special forms of m-3m; common practice).
    # 333 and 511 share one ring (N = 27): 8 + 24 reflections.
    lines = ring_lines(builtin_phase("Au"), 16.0)
    assert lines.multiplicity[:8].tolist() == [8, 6, 12, 24, 8, 6, 24, 24]
    labels = [lines.hkl_label(i) for i in range(len(lines))]
    k = [i for i, lab in enumerate(labels) if "511" in lab][0]
    assert set(labels[k].split("/")) == {"511", "333"} and lines.multiplicity[k] == 32


def test_relative_intensity_is_m_f2_d2_with_gemmi_scattering_factors():
    # Independent: fcc F = 4 f_e(s) exp(-B s^2) for allowed hkl (common practice), f_e from gemmi's ITC Vol. C
    # Table 4.3.2.2 coefficients (Angstrom), s = 1/(2d); ring intensity m |F|^2 d^2 (Vainshtein 1964).
    gemmi = pytest.importorskip("gemmi")
    ph = builtin_phase("Au")
    b_nm2 = ph.sites[0].b_iso_nm2
    lines = ring_lines(ph, 9.0)
    el = gemmi.Element("Au")
    ref = []
    for d, m in zip(lines.d_nm, lines.multiplicity):
        s_ang = 1 / (2 * d * 10)
        f_nm = el.c4322.calculate_sf(stol2=s_ang**2) / 10
        s_nm = 1 / (2 * d)
        ref.append(m * (4 * f_nm * math.exp(-b_nm2 * s_nm**2)) ** 2 * d**2)
    ref = np.array(ref) / max(ref)
    assert lines.intensity == pytest.approx(ref, rel=1e-6)


@settings(max_examples=25, deadline=None)
@given(a_nm=st.floats(0.3, 0.7))
def test_fcc_ratios_do_not_depend_on_the_lattice_parameter(a_nm):
    ph = Phase("X", Lattice.cubic(a_nm), "F m -3 m", (Site("Cu", 0, 0, 0),))
    d = ring_lines(ph, 6.0 / a_nm).d_nm
    assert d[0] / d[:5] == pytest.approx(np.sqrt(np.array([3, 4, 8, 11, 12]) / 3), rel=1e-9)
    assert d[0] == pytest.approx(a_nm / math.sqrt(3), rel=1e-12)
