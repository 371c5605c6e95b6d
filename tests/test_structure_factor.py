"""Structure factors against gemmi's electron calculator, International Tables rules and textbook formulae."""

import itertools
import math

import numpy as np
import pytest

from saed.crystal import Lattice, Phase, Site, builtin_names, builtin_phase, reflection_table
from saed.crystal.phase import cell_atoms
from saed.crystal.scattering import electron_form_factor_nm
from saed.crystal.structure_factor import ZERO_F_RELATIVE, scattering_sum_nm, structure_factors_nm
from saed.crystal.symmetry import space_group
from saed.errors import InputError

gemmi = pytest.importorskip("gemmi")

# every hkl with |h|, |k|, |l| <= 4 except 000: 728 reflections (as in check-values.md section 3)
BOX = np.array([h for h in itertools.product(range(-4, 5), repeat=3) if any(h)])


def _gemmi_small_structure(ph: Phase):
    """The same phase as a gemmi.SmallStructure (Angstrom, U_iso), for gemmi's own calculator."""
    lat = ph.lattice
    small = gemmi.SmallStructure()
    small.cell = gemmi.UnitCell(10 * lat.a_nm, 10 * lat.b_nm, 10 * lat.c_nm, lat.alpha_deg, lat.beta_deg, lat.gamma_deg)
    small.spacegroup_hm = ph.space_group  # extended H-M, e.g. 'F d -3 m:1', 'R -3 c:H'
    small.determine_and_set_spacegroup("1")  # from spacegroup_hm; the xhm suffix fixes the setting
    for i, site in enumerate(ph.sites):
        s = gemmi.SmallStructure.Site()
        s.label, s.type_symbol, s.element = f"{site.element}{i}", site.element, gemmi.Element(site.element)
        s.fract = gemmi.Fractional(site.x, site.y, site.z)
        s.occ = site.occupancy
        # Debye-Waller: ours B in nm^2; gemmi's U_iso in A^2 with B = 8 pi^2 U:
        # U_A2 = B_nm2 * 100 (nm^2 -> A^2) / (8 pi^2).
        s.u_iso = site.b_iso_nm2 * 100.0 / (8.0 * math.pi**2)
        small.add_site(s)
    small.setup_cell_images()
    # Without this gemmi counts every symmetry image of a special position (x48 for Cu on 4a of Fm-3m;
    # check-values.md section 3 notes).
    small.change_occupancies_to_crystallographic()
    return small


@pytest.mark.parametrize("name", builtin_names())
def test_structure_factor_matches_gemmi(name):
    ph = builtin_phase(name)
    small = _gemmi_small_structure(ph)
    assert small.spacegroup.number == ph.space_group_number
    calc = gemmi.StructureFactorCalculatorE(small.cell)
    ref_nm = np.array([calc.calculate_sf_from_small_structure(small, [int(x) for x in h]) for h in BOX]) / 10  # A -> nm
    ours = structure_factors_nm(ph, BOX)
    scale = np.max(np.abs(ref_nm))
    # gemmi works partly in single precision: 1e-7 of the largest |F| is its noise floor.
    np.testing.assert_allclose(np.abs(ours), np.abs(ref_nm), rtol=0, atol=2e-6 * scale)
    # F itself (phase too) where it is not tiny; both use the same origin
    big = np.abs(ref_nm) > 1e-3 * scale
    np.testing.assert_allclose(ours[big], ref_nm[big], rtol=1e-5)


# --- International Tables reflection rules ---------------------------------------------------------
def _unmixed(h, k, l):
    return h % 2 == k % 2 == l % 2


# Textbook rules, check-values.md section 3 (International Tables Vol. A reflection conditions plus
# the site-specific ones): True = nonzero.
RULES = {
    "fcc": ("Cu", lambda h, k, l: _unmixed(h, k, l)),
    "bcc": ("Fe-bcc", lambda h, k, l: (h + k + l) % 2 == 0),
    "sc": ("Po", lambda h, k, l: True),
    "diamond": ("Si", lambda h, k, l: _unmixed(h, k, l) and (h % 2 == 1 or (h + k + l) % 4 == 0)),
    "zinc blende": ("GaAs", lambda h, k, l: _unmixed(h, k, l)),
    "rock salt": ("NaCl", lambda h, k, l: _unmixed(h, k, l)),
    "B2": ("NiAl", lambda h, k, l: True),
    "fluorite": ("CaF2", lambda h, k, l: _unmixed(h, k, l)),
    "perovskite": ("SrTiO3", lambda h, k, l: True),
    "ReO3": ("ReO3", lambda h, k, l: True),
    "L1_2": ("Ni3Al", lambda h, k, l: True),
    # hcp, 3-index hkl: F = 0 iff h + 2k = 3n and l odd
    "hcp": ("Mg", lambda h, k, l: not ((h + 2 * k) % 3 == 0 and l % 2 == 1)),
    # P4_2/mnm: 0kl: k+l = 2n (h0l: h+l = 2n); h00: h = 2n; 00l: l = 2n (h00 and 00l follow from 0kl/h0l)
    "rutile": ("TiO2-rutile", lambda h, k, l: not ((h == 0 and (k + l) % 2) or (k == 0 and (h + l) % 2))),
    # R-3c, hexagonal axes, obverse: -h+k+l = 3n; h-h0l, h0-hl, 0h-hl (3-index h = -k, k = 0, h = 0): l = 2n;
    # 000l: l = 6n (follows from the two)
    "corundum": ("Al2O3", lambda h, k, l: (-h + k + l) % 3 == 0 and not ((h == -k or h == 0 or k == 0) and l % 2)),
    # L1_0 in the 4-atom fct cell: h + k odd is zero
    "L1_0": ("TiAl", lambda h, k, l: (h + k) % 2 == 0),
}

# (space-group absent, zero but not space-group absent) counts for the 728 hkl of BOX,
# from check-values.md section 3 (gemmi GroupOps.is_systematically_absent and the F sum).
ABSENCE_COUNTS = {
    "fcc": (540, 0), "bcc": (364, 0), "sc": (0, 0), "diamond": (570, 32), "zinc blende": (540, 0),
    "rock salt": (540, 0), "B2": (0, 0), "fluorite": (540, 0), "perovskite": (0, 0), "ReO3": (0, 0),
    "L1_2": (0, 0), "hcp": (68, 40), "rutile": (76, 0), "corundum": (518, 0), "L1_0": (0, 360),
}


def _nonzero(ph, hkl):
    f = np.abs(structure_factors_nm(ph, hkl))
    return f > ZERO_F_RELATIVE * scattering_sum_nm(ph, hkl)


@pytest.mark.parametrize("stype", sorted(RULES))
def test_reflection_rules_and_space_group_absences(stype):
    name, rule = RULES[stype]
    ph = builtin_phase(name)
    nonzero = _nonzero(ph, BOX)
    expected = np.array([rule(*map(int, h)) for h in BOX])
    wrong = BOX[nonzero != expected]
    assert not len(wrong), f"{name}: rule broken for {wrong[:5].tolist()}"
    ops = space_group(ph.space_group).operations()
    absent = np.array([ops.is_systematically_absent([int(x) for x in h]) for h in BOX])
    assert not np.any(absent & nonzero), "a space-group absence came out nonzero"
    assert (int(absent.sum()), int((~absent & ~nonzero).sum())) == ABSENCE_COUNTS[stype]


@pytest.mark.parametrize("rule_name", sorted(RULES))
def test_rules_hold_for_every_builtin_phase_of_the_type(rule_name):
    # The same rule must hold for every built-in phase that shares the structure type of the test phase.
    name, rule = RULES[rule_name]
    ref = builtin_phase(name)
    same = [n for n in builtin_names() if builtin_phase(n).structure_type == ref.structure_type]
    assert name in same
    expected = np.array([rule(*map(int, h)) for h in BOX])
    for n in same:
        assert np.array_equal(_nonzero(builtin_phase(n), BOX), expected), n


def test_site_specific_zeros_are_not_space_group_absences():
    # check-values.md section 3 notes: diamond 222 and 442 vanish only because all atoms sit on 8a;
    # 200 and 420 are d-glide absences. hcp 30-31, 30-33, 41-51, 41-53 vanish only because of site 2c;
    # 000l and hh-2hl with l odd are space-group absences.
    cases = {
        "Si": {"site": [(2, 2, 2), (4, 4, 2), (2, -2, 2)], "group": [(2, 0, 0), (4, 2, 0), (0, 0, 6)]},
        "Co-hcp": {"site": [(3, 0, 1), (3, 0, 3), (4, 1, 1), (4, 1, 3)],  # 3-index of 30-31, 30-33, 41-51, 41-53
                   "group": [(0, 0, 1), (0, 0, 3), (1, 1, 1), (1, 1, 3)]},  # 0001, 0003, 11-21, 11-23
    }
    for name, kinds in cases.items():
        ph = builtin_phase(name)
        ops = space_group(ph.space_group).operations()
        for hkl in kinds["site"]:
            assert not _nonzero(ph, [hkl])[0] and not ops.is_systematically_absent(list(hkl)), (name, hkl)
        for hkl in kinds["group"]:
            assert not _nonzero(ph, [hkl])[0] and ops.is_systematically_absent(list(hkl)), (name, hkl)
    # and the allowed neighbours are really there: Si 111, 220, 400; Co 10-10, 0002, 10-11
    assert _nonzero(builtin_phase("Si"), [(1, 1, 1), (2, 2, 0), (4, 0, 0)]).all()
    assert _nonzero(builtin_phase("Co-hcp"), [(1, 0, 0), (0, 0, 2), (1, 0, 1)]).all()


# --- weak classes and textbook magnitudes ------------------------------------------------------------
# |F|/sum|f| at B = 0 for the weak (difference) class: check-values.md section 3 (3 decimals, [C] with
# gemmi's c4322 = ITC Vol C Table 4.3.2.2).
WEAK_RATIOS = [("NaCl", (1, 1, 1), 0.270), ("NiAl", (1, 0, 0), 0.180), ("CsCl", (1, 0, 0), 0.40),
               ("GaAs", (2, 0, 0), 0.055), ("CaF2", (2, 0, 0), 0.134), ("Ni3Al", (1, 0, 0), 0.068),
               ("TiAl", (0, 0, 1), 0.189)]


@pytest.mark.parametrize("name,hkl,ratio", WEAK_RATIOS)
def test_weak_class_ratio(name, hkl, ratio):
    ph = builtin_phase(name)
    got = abs(structure_factors_nm(ph, hkl, debye_waller=False)) / scattering_sum_nm(ph, hkl, debye_waller=False)
    digits = len(str(ratio).split(".")[1])
    assert got == pytest.approx(ratio, abs=0.5 * 10**-digits + 1e-12)


def _f(ph, el, hkl):
    return float(electron_form_factor_nm(el, 0.5 * float(ph.lattice.g_inv_nm(hkl))))


# Structure-factor formulae of the textbooks (e.g. Cullity & Stock, *Elements of X-Ray Diffraction*,
# chapter 4; Williams & Carter chapter 16; from memory), at B = 0. Each returns |F|.
FORMULAE = [
    ("Cu", (1, 1, 1), lambda f: 4 * f["Cu"]),
    ("Fe-bcc", (1, 1, 0), lambda f: 2 * f["Fe"]),
    ("Si", (1, 1, 1), lambda f: 4 * math.sqrt(2) * f["Si"]),      # |4 (1 -+ i)| f
    ("Si", (2, 2, 0), lambda f: 8 * f["Si"]),
    ("NaCl", (2, 0, 0), lambda f: 4 * (f["Na"] + f["Cl"])),
    ("NaCl", (3, 1, 1), lambda f: 4 * abs(f["Na"] - f["Cl"])),
    ("GaAs", (1, 1, 1), lambda f: 4 * math.hypot(f["Ga"], f["As"])),  # |4 (fA -+ i fB)|
    ("GaAs", (2, 0, 0), lambda f: 4 * abs(f["Ga"] - f["As"])),
    ("GaAs", (4, 0, 0), lambda f: 4 * (f["Ga"] + f["As"])),
    ("CaF2", (2, 2, 0), lambda f: 4 * (f["Ca"] + 2 * f["F"])),
    ("CaF2", (2, 0, 0), lambda f: 4 * abs(f["Ca"] - 2 * f["F"])),
    ("CaF2", (1, 1, 1), lambda f: 4 * f["Ca"]),
    ("CsCl", (1, 1, 0), lambda f: f["Cs"] + f["Cl"]),
    ("CsCl", (1, 0, 0), lambda f: abs(f["Cs"] - f["Cl"])),
    ("Ni3Al", (1, 1, 1), lambda f: f["Al"] + 3 * f["Ni"]),
    ("Ni3Al", (1, 1, 0), lambda f: abs(f["Al"] - f["Ni"])),
    ("TiAl", (1, 1, 1), lambda f: 2 * (f["Ti"] + f["Al"])),
    ("TiAl", (0, 0, 1), lambda f: 2 * abs(f["Ti"] - f["Al"])),
    ("Mg", (0, 0, 2), lambda f: 2 * f["Mg"]),
    ("Mg", (1, 0, 0), lambda f: f["Mg"]),                         # |1 + exp(2 pi i (h/3 + 2k/3 + l/2))|: h+2k = 3n+-1, l even
    ("Mg", (1, 0, 1), lambda f: math.sqrt(3) * f["Mg"]),          # l odd
    ("SrTiO3", (1, 0, 0), lambda f: abs(f["Sr"] - f["Ti"] - f["O"])),  # Sr + Ti(-1) + O(1 - 1 - 1)
    ("SrTiO3", (1, 1, 0), lambda f: abs(f["Sr"] + f["Ti"] - f["O"])),
    ("SrTiO3", (2, 0, 0), lambda f: f["Sr"] + f["Ti"] + 3 * f["O"]),
]


@pytest.mark.parametrize("name,hkl,formula", FORMULAE)
def test_textbook_structure_factor_formulae(name, hkl, formula):
    ph = builtin_phase(name)
    f = {s.element: _f(ph, s.element, hkl) for s in ph.sites}
    assert abs(structure_factors_nm(ph, hkl, debye_waller=False)) == pytest.approx(formula(f), rel=1e-12)


def test_friedel_and_centrosymmetric_phases():
    for name in builtin_names():
        ph = builtin_phase(name)
        f_plus, f_minus = structure_factors_nm(ph, BOX), structure_factors_nm(ph, -BOX)
        np.testing.assert_allclose(f_minus, np.conj(f_plus), atol=1e-12)  # Friedel's law (real f, no absorption)
    # origin on an inversion centre: F is real
    for name in ("Cu", "NaCl", "Mg", "TiO2-rutile", "Al2O3", "CaF2"):
        assert np.max(np.abs(structure_factors_nm(builtin_phase(name), BOX).imag)) < 1e-12


def test_debye_waller_and_occupancy():
    cu = builtin_phase("Cu")
    hkl = np.array([[1, 1, 1], [2, 0, 0], [4, 2, 0]])
    s = 0.5 * cu.lattice.g_inv_nm(hkl)
    ratio = structure_factors_nm(cu, hkl) / structure_factors_nm(cu, hkl, debye_waller=False)
    np.testing.assert_allclose(ratio.real, np.exp(-cu.sites[0].b_iso_nm2 * s**2), rtol=1e-12)
    # a disordered Co-Cr fcc solid solution on 4a: F = 4 (0.7 f_Co + 0.3 f_Cr) (common practice: the
    # average-atom scattering factor of a random solid solution)
    lat = Lattice.cubic(0.3560)
    alloy = Phase("Co70Cr30-fcc", lat, "F m -3 m",
                  (Site("Co", 0, 0, 0, occupancy=0.7, b_iso_nm2=0.0), Site("Cr", 0, 0, 0, occupancy=0.3, b_iso_nm2=0.0)))
    ss = 0.5 * lat.g_inv_nm(hkl)
    expected = 4 * (0.7 * electron_form_factor_nm("Co", ss) + 0.3 * electron_form_factor_nm("Cr", ss))
    np.testing.assert_allclose(structure_factors_nm(alloy, hkl).real, expected, rtol=1e-12)
    assert len(cell_atoms(alloy).elements) == 8


# --- the reflection table ---------------------------------------------------------------------------
@pytest.mark.parametrize("name,max_g", [("Si", 8.0), ("Co-hcp", 9.0), ("Al2O3", 6.0), ("TiO2-rutile", 7.5)])
def test_reflection_table_is_complete_and_consistent(name, max_g):
    ph = builtin_phase(name)
    table = reflection_table(ph, max_g)
    assert reflection_table(ph, max_g) is table  # cached
    # brute force over a generous box
    n = 40
    grid = np.array([h for h in itertools.product(range(-n // 2, n // 2 + 1), repeat=3) if any(h)])
    g = ph.lattice.g_inv_nm(grid)
    inside = grid[g <= max_g]
    assert {tuple(r) for r in table.hkl.tolist()} == {tuple(r) for r in inside.tolist()}
    assert np.all(np.diff(table.g_inv_nm) >= -1e-12)
    np.testing.assert_allclose(table.g_inv_nm, ph.lattice.g_inv_nm(table.hkl), rtol=1e-12)
    np.testing.assert_allclose(np.linalg.norm(table.g_cart_inv_nm, axis=1), table.g_inv_nm, rtol=1e-12)
    np.testing.assert_allclose(table.f_nm, structure_factors_nm(ph, table.hkl), rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(table.intensity, np.abs(table.f_nm) ** 2, rtol=1e-12)
    assert np.array_equal(table.allowed, _nonzero(ph, table.hkl))
    rows = table.index_of([table.hkl[3], [99, 99, 99]])
    assert rows.tolist() == [3, -1]
    for arr in (table.hkl, table.g_inv_nm, table.f_nm, table.allowed):
        with pytest.raises(ValueError):
            arr[0] = arr[1]


def test_reflection_table_first_rings_cobalt():
    # check-values.md section 7 [C]: the first allowed reflections of beta-Co (fcc) and alpha-Co (hcp), d in nm.
    fcc = reflection_table(builtin_phase("Co-fcc"), 15.0)
    hcp = reflection_table(builtin_phase("Co-hcp"), 10.0)

    def distinct_d(table, n):
        g = np.sort(table.g_inv_nm[table.allowed])
        shells = g[np.concatenate([[True], np.diff(g) > 1e-9 * g[1:]])]  # equal |g| within rounding noise
        return (1 / shells[:n]).tolist()

    assert distinct_d(fcc, 10) == pytest.approx(
        [0.20465, 0.17724, 0.12532, 0.10688, 0.10233, 0.08862, 0.08132, 0.07926, 0.07236, 0.06822], abs=6e-6)
    assert distinct_d(hcp, 10) == pytest.approx(
        [0.21712, 0.20347, 0.19156, 0.14847, 0.12535, 0.11504, 0.10856, 0.10673, 0.10489, 0.10174], abs=6e-6)


@pytest.mark.parametrize("bad", [0, -1, float("nan"), float("inf")])
def test_reflection_table_bad_max_g(bad):
    with pytest.raises(InputError) as err:
        reflection_table(builtin_phase("Si"), bad)
    assert "\n" not in str(err.value)


def test_reflection_table_refuses_a_huge_request():
    with pytest.raises(InputError, match="max-g"):
        reflection_table(builtin_phase("Al2O3"), 400.0)
