"""Symmetry-equivalent planes and directions against ASE's space-group tables and textbook multiplicities."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.crystal import builtin_names, builtin_phase
from saed.crystal.miller import direction_from_4, plane_from_4
from saed.crystal.structure_factor import structure_factors_nm
from saed.crystal.symmetry import direction_family, laue_rotations, plane_family, point_group_rotations, space_group
from saed.errors import PhaseError

ase_spacegroup = pytest.importorskip("ase.spacegroup")

INDEX = st.integers(-5, 5)
HKL = st.tuples(INDEX, INDEX, INDEX).filter(any)
SPACE_GROUPS = sorted({builtin_phase(n).space_group for n in builtin_names()})


def _as_set(rows):
    return {tuple(int(x) for x in r) for r in np.atleast_2d(rows)}


# --- multiplicities ------------------------------------------------------------------------------
# Multiplicity of {hkl} in the Laue class: International Tables Vol. A / the powder multiplicity
# tables of Cullity & Stock, *Elements of X-Ray Diffraction* (from memory).
CUBIC_MULT = {(1, 0, 0): 6, (1, 1, 0): 12, (1, 1, 1): 8, (2, 1, 0): 24, (2, 1, 1): 24, (2, 2, 1): 24,
              (3, 1, 0): 24, (1, 2, 3): 48}
HEX_MULT = {(1, 0, -1, 0): 6, (1, 1, -2, 0): 6, (0, 0, 0, 1): 2, (1, 0, -1, 1): 12, (1, 1, -2, 2): 12,
            (2, -1, -1, 0): 6, (1, 2, -3, 0): 12, (1, 2, -3, 1): 24}
TETRAGONAL_MULT = {(1, 0, 0): 4, (1, 1, 0): 4, (0, 0, 1): 2, (1, 0, 1): 8, (1, 1, 1): 8, (2, 1, 0): 8,
                   (2, 1, 1): 16}


@pytest.mark.parametrize("sg", ["F m -3 m", "I m -3 m", "P m -3 m", "F d -3 m:1", "F -4 3 m"])
@pytest.mark.parametrize("hkl,mult", sorted(CUBIC_MULT.items()))
def test_cubic_plane_multiplicities(sg, hkl, mult):
    # F-43m (zinc blende) has point group -43m but the same Laue class m-3m.
    assert len(plane_family(hkl, sg)) == mult
    assert len(direction_family(hkl, sg)) == mult


@pytest.mark.parametrize("hkil,mult", sorted(HEX_MULT.items()))
def test_hexagonal_plane_multiplicities(hkil, mult):
    assert len(plane_family(plane_from_4(hkil), "P 63/m m c")) == mult


@pytest.mark.parametrize("uvtw,mult", [((2, -1, -1, 0), 6), ((1, 0, -1, 0), 6), ((0, 0, 0, 1), 2),
                                       ((2, -1, -1, 3), 12), ((1, 0, -1, 1), 12)])
def test_hexagonal_direction_multiplicities(uvtw, mult):
    # <2-1-10> and <10-10> each have 6 members, <0001> 2 (from memory, same tables)
    assert len(direction_family(direction_from_4(uvtw), "P 63/m m c")) == mult


@pytest.mark.parametrize("hkl,mult", sorted(TETRAGONAL_MULT.items()))
def test_tetragonal_plane_multiplicities(hkl, mult):
    assert len(plane_family(hkl, "P 42/m n m")) == mult
    assert len(plane_family(hkl, "P 4/m m m")) == mult


@pytest.mark.parametrize("sg,order", [("F m -3 m", 48), ("F -4 3 m", 24), ("P 63/m m c", 24),
                                      ("R -3 c:H", 12), ("P 42/m n m", 16), ("P 4/m m m", 16)])
def test_point_group_orders(sg, order):
    # point-group orders (ITC Vol. A, from memory): m-3m 48, -43m 24, 6/mmm 24, -3m 12, 4/mmm 16
    assert len(point_group_rotations(sg)) == order
    assert len(laue_rotations(sg)) == (48 if order == 24 and sg.startswith("F") else order)


# --- against ASE's own operation tables ----------------------------------------------------------
def _ase_group(sg_name):
    sg = space_group(sg_name)
    return ase_spacegroup.Spacegroup(sg.number, setting=2 if sg.xhm().endswith(":2") else 1)


@settings(max_examples=60, deadline=None)
@given(sg_name=st.sampled_from(SPACE_GROUPS), hkl=HKL)
def test_plane_family_matches_ase(sg_name, hkl):
    # ASE: symmetry-equivalent reflections from its own space-group tables; Friedel mates added (Laue class).
    ref = _ase_group(sg_name).equivalent_reflections([hkl])
    expected = _as_set(ref) | _as_set(-ref)
    assert _as_set(plane_family(hkl, sg_name)) == expected


@settings(max_examples=60, deadline=None)
@given(sg_name=st.sampled_from(SPACE_GROUPS), uvw=HKL)
def test_direction_family_matches_ase(sg_name, uvw):
    rots = _ase_group(sg_name).get_rotations()
    images = np.einsum("nij,j->ni", rots, np.array(uvw))
    assert _as_set(direction_family(uvw, sg_name)) == _as_set(images) | _as_set(-images)


# --- invariants over the built-in phases ------------------------------------------------------------
@settings(max_examples=80, deadline=None)
@given(name=st.sampled_from(builtin_names()), hkl=HKL)
def test_family_members_share_d_and_structure_factor_modulus(name, hkl):
    ph = builtin_phase(name)
    fam = plane_family(hkl, ph.space_group)
    d = ph.lattice.d_nm(fam)
    np.testing.assert_allclose(d, d[0], rtol=1e-12)
    f = np.abs(structure_factors_nm(ph, fam))  # Friedel's law and the space-group symmetry
    np.testing.assert_allclose(f, f[0], rtol=1e-9, atol=1e-12)
    dirs = direction_family(hkl, ph.space_group)
    lengths = ph.lattice.length_nm(dirs)
    np.testing.assert_allclose(lengths, lengths[0], rtol=1e-12)


@given(name=st.sampled_from(builtin_names()), h1=HKL, h2=HKL)
def test_angles_are_symmetric(name, h1, h2):
    lat = builtin_phase(name).lattice
    assert float(lat.plane_angle_deg(h1, h2)) == pytest.approx(float(lat.plane_angle_deg(h2, h1)), abs=1e-9)
    assert float(lat.direction_angle_deg(h1, h2)) == pytest.approx(float(lat.direction_angle_deg(h2, h1)), abs=1e-9)


# --- space-group lookup ----------------------------------------------------------------------------
def test_space_group_by_number_and_symbol():
    assert space_group("225").number == 225
    assert space_group("Fm-3m").number == 225
    assert space_group("P 63/m m c").number == 194
    assert space_group("R -3 c:H").xhm() == "R -3 c:H"


@pytest.mark.parametrize("bad", ["Q 1 2 3", "", "0", "231", "Fm-3x", "hcp"])
def test_unknown_space_group_is_one_line_phase_error(bad):
    with pytest.raises(PhaseError) as err:
        space_group(bad)
    assert "\n" not in str(err.value) and "space group" in str(err.value)
