"""Lattice metric tensors, spacings and angles against gemmi.UnitCell and textbook tables."""

import math

import numpy as np
import pytest
from hypothesis import assume, given
from hypothesis import strategies as st

from saed.crystal.lattice import Lattice, reduce_indices
from saed.crystal.symmetry import plane_family
from saed.errors import PhaseError

gemmi = pytest.importorskip("gemmi")

INDEX = st.integers(-6, 6)
HKL = st.tuples(INDEX, INDEX, INDEX).filter(any)


def _cell_is_valid(alpha, beta, gamma):
    # Positive volume written out: 1 - cos^2 a - cos^2 b - cos^2 g + 2 cos a cos b cos g > 0.
    ca, cb, cg = (math.cos(math.radians(x)) for x in (alpha, beta, gamma))
    return 1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg > 1e-3


@st.composite
def cells(draw):
    a, b, c = (draw(st.floats(0.2, 3.0)) for _ in range(3))
    alpha, beta, gamma = (draw(st.floats(50.0, 130.0)) for _ in range(3))
    assume(_cell_is_valid(alpha, beta, gamma))
    return a, b, c, alpha, beta, gamma


def _gemmi_cell(a, b, c, alpha, beta, gamma):
    return gemmi.UnitCell(10 * a, 10 * b, 10 * c, alpha, beta, gamma)  # nm -> Angstrom


def _angle_deg(v1, v2):
    """Angle between two Cartesian vectors (reference side): arccos of the normalised dot product."""
    v1, v2 = np.asarray(v1, float), np.asarray(v2, float)
    cos = v1 @ v2 / (np.linalg.norm(v1) * np.linalg.norm(v2))
    return math.degrees(math.acos(max(-1.0, min(1.0, cos))))


# --- against gemmi.UnitCell ----------------------------------------------------------------------
@given(cell=cells(), hkl=HKL)
def test_d_spacing_and_volume_match_gemmi(cell, hkl):
    lat = Lattice(*cell)
    ref = _gemmi_cell(*cell)
    assert float(lat.d_nm(hkl)) == pytest.approx(ref.calculate_d(list(hkl)) / 10, rel=1e-9)  # A -> nm
    assert lat.volume_nm3 == pytest.approx(ref.volume / 1000, rel=1e-9)  # A^3 -> nm^3


@given(cell=cells())
def test_cartesian_frame_matches_gemmi_orthogonalisation(cell):
    # gemmi's orthogonalisation matrix follows the same convention (x || a, z || c*); columns are a, b, c.
    lat = Lattice(*cell)
    ref = np.array(_gemmi_cell(*cell).orth.mat.tolist()) / 10  # A -> nm
    np.testing.assert_allclose(lat.direct_matrix_nm, ref, atol=1e-12, rtol=1e-9)
    # reciprocal basis (no 2 pi): a_i . b_j = delta_ij
    np.testing.assert_allclose(lat.direct_matrix_nm.T @ lat.reciprocal_matrix_inv_nm, np.eye(3), atol=1e-12)


@given(cell=cells(), h1=HKL, h2=HKL)
def test_plane_angle_matches_gemmi_reciprocal_cell(cell, h1, h2):
    # Independent route: plane normals as Cartesian vectors of gemmi's reciprocal cell.
    rec = _gemmi_cell(*cell).reciprocal()
    ref = _angle_deg(rec.orthogonalize(gemmi.Fractional(*h1)).tolist(), rec.orthogonalize(gemmi.Fractional(*h2)).tolist())
    lat = Lattice(*cell)
    assert float(lat.plane_angle_deg(h1, h2)) == pytest.approx(ref, abs=1e-5)
    assert float(lat.plane_angle_deg(h1, h2)) == pytest.approx(float(lat.plane_angle_deg(h2, h1)), abs=1e-9)


@given(cell=cells(), u1=HKL, u2=HKL)
def test_direction_angle_matches_gemmi_orthogonalisation(cell, u1, u2):
    ref_cell = _gemmi_cell(*cell)
    r1 = np.array(ref_cell.orthogonalize(gemmi.Fractional(*u1)).tolist())
    ref = _angle_deg(r1, ref_cell.orthogonalize(gemmi.Fractional(*u2)).tolist())
    lat = Lattice(*cell)
    assert float(lat.direction_angle_deg(u1, u2)) == pytest.approx(ref, abs=1e-5)
    assert float(lat.direction_angle_deg(u1, u2)) == pytest.approx(float(lat.direction_angle_deg(u2, u1)), abs=1e-9)
    assert float(lat.length_nm(u1)) == pytest.approx(np.linalg.norm(r1) / 10, rel=1e-9)


@given(cell=cells(), hkl=HKL, uvw=HKL)
def test_plane_direction_angle(cell, hkl, uvw):
    # angle(g_hkl, r_uvw) from Cartesian vectors in gemmi's frame: r = O u, and g = F^T h with
    # F = O^-1 gemmi's fractionalisation matrix (g . r = h . u).
    ref_cell = _gemmi_cell(*cell)
    g = np.array(ref_cell.frac.mat.tolist()).T @ np.array(hkl, float)
    ref = _angle_deg(g, ref_cell.orthogonalize(gemmi.Fractional(*uvw)).tolist())
    assert float(Lattice(*cell).plane_direction_angle_deg(hkl, uvw)) == pytest.approx(ref, abs=1e-5)


def test_vectorised_over_rows():
    lat = Lattice(0.3, 0.4, 0.5, 80, 95, 105)
    hkl = np.array([[1, 0, 0], [1, 2, 3], [-2, 1, 4]])
    d = lat.d_nm(hkl)
    assert d.shape == (3,)
    assert [float(lat.d_nm(h)) for h in hkl] == pytest.approx(d.tolist(), rel=1e-14)
    assert lat.plane_angle_deg(hkl, hkl[::-1]).shape == (3,)


# --- the cubic interplanar-angle table --------------------------------------------------------------
# check-values.md section 6: all distinct angles 0-90 deg between members of two cubic families.
# Rows with {100}, {110}, {111}: Cullity & Stock, *Elements of X-Ray Diffraction*, table of interplanar
# angles (from memory); the remaining rows were computed by the check-values script [C] from
# cos(phi) = h.h' / (|h| |h'|), and match the same table as recalled (lower confidence).
CUBIC_ANGLES = {
    ("100", "100"): [0, 90], ("100", "110"): [45, 90], ("100", "111"): [54.74],
    ("100", "210"): [26.57, 63.43, 90], ("100", "211"): [35.26, 65.91], ("100", "221"): [48.19, 70.53],
    ("100", "310"): [18.43, 71.57, 90], ("100", "311"): [25.24, 72.45],
    ("110", "110"): [0, 60, 90], ("110", "111"): [35.26, 90], ("110", "210"): [18.43, 50.77, 71.57],
    ("110", "211"): [30, 54.74, 73.22, 90], ("110", "221"): [19.47, 45, 76.37, 90],
    ("110", "310"): [26.57, 47.87, 63.43, 77.08], ("110", "311"): [31.48, 64.76, 90],
    ("111", "111"): [0, 70.53], ("111", "210"): [39.23, 75.04], ("111", "211"): [19.47, 61.87, 90],
    ("111", "221"): [15.79, 54.74, 78.90], ("111", "310"): [43.09, 68.58], ("111", "311"): [29.50, 58.52, 79.98],
    ("210", "210"): [0, 36.87, 53.13, 66.42, 78.46, 90], ("210", "211"): [24.09, 43.09, 56.79, 79.48, 90],
    ("210", "221"): [26.57, 41.81, 53.40, 63.43, 72.65, 90], ("210", "310"): [8.13, 31.95, 45, 64.90, 73.57, 81.87],
    ("210", "311"): [19.29, 47.61, 66.14, 82.25], ("211", "211"): [0, 33.56, 48.19, 60, 70.53, 80.41],
    ("211", "221"): [17.72, 35.26, 47.12, 65.91, 74.21, 82.18], ("211", "310"): [25.35, 49.80, 58.91, 75.04, 82.58],
    ("211", "311"): [10.02, 42.39, 60.50, 75.75, 90], ("221", "221"): [0, 27.27, 38.94, 63.61, 83.62, 90],
    ("221", "310"): [32.51, 42.45, 58.19, 65.06, 83.95], ("221", "311"): [25.24, 45.29, 59.83, 72.45, 84.23],
    ("310", "310"): [0, 25.84, 36.87, 53.13, 72.54, 84.26, 90], ("310", "311"): [17.55, 40.29, 55.10, 67.58, 79.01, 90],
    ("311", "311"): [0, 35.10, 50.48, 62.96, 84.78],
}


@pytest.mark.parametrize("pair", sorted(CUBIC_ANGLES))
def test_cubic_interplanar_angle_table(pair):
    lat = Lattice.cubic(0.4)  # the angles do not depend on a
    fam1 = plane_family([int(c) for c in pair[0]], "P m -3 m")
    fam2 = plane_family([int(c) for c in pair[1]], "P m -3 m")
    phi = lat.plane_angle_deg(fam1[:, None, :], fam2[None, :, :]).ravel()
    folded = np.minimum(phi, 180 - phi)  # (hkl) and (-h-k-l) are the same plane
    distinct = sorted({round(float(x), 2) for x in folded})
    assert distinct == pytest.approx(CUBIC_ANGLES[pair], abs=0.006)


def test_cubic_spacings_textbook():
    # Cu a = 0.36149 nm: d111 = a/sqrt(3) = 0.20871 nm (Lattice docstring), and the Au/Al ring lists of
    # check-values.md section 8 ([C] from a; matching the ICDD cards Au 04-0784, Al 04-0787, from memory).
    au, al = Lattice.cubic(0.40782), Lattice.cubic(0.40495)
    au_d = {"111": 0.23545, "200": 0.20391, "220": 0.14419, "311": 0.12296, "222": 0.11773,
            "400": 0.10195, "331": 0.09356, "420": 0.09119}
    al_d = {"111": 0.23380, "200": 0.20248, "220": 0.14317, "311": 0.12210, "222": 0.11690,
            "400": 0.10124, "331": 0.09290, "420": 0.09055}
    for lat, table in ((au, au_d), (al, al_d)):
        for hkl, d in table.items():
            assert float(lat.d_nm([int(c) for c in hkl])) == pytest.approx(d, abs=6e-6)


# --- hexagonal metric: alpha-Co (check-values.md section 7) -------------------------------------
def test_hcp_cobalt_spacings_and_zone_angles():
    # alpha-Co a = 0.25071, c = 0.40695 nm (ICDD 05-0727, from memory). d values [C] of check-values §7.
    co = Lattice.hexagonal(0.25071, 0.40695)
    for hkl, d in {(1, 0, 0): 0.21712, (0, 0, 2): 0.20347, (1, 0, 1): 0.19156, (1, 0, 2): 0.14847,
                   (1, 1, 0): 0.12535, (1, 0, 3): 0.11504, (2, 0, 0): 0.10856, (1, 1, 2): 0.10673,
                   (2, 0, 1): 0.10489, (0, 0, 4): 0.10174}.items():
        assert float(co.d_nm(hkl)) == pytest.approx(d, abs=6e-6)
    # zone-to-zone angles [C], 3-index directions: [2-1-10] = [100], [10-10] = [210], [01-10] = [120],
    # [01-11] = [121] (u = U - T, v = V - T), [2-1-13] = [101], [0001] = [001].
    for u1, u2, angle in [((1, 0, 0), (2, 1, 0), 30.00), ((1, 2, 0), (1, 2, 1), 43.14),
                          ((1, 0, 0), (1, 0, 1), 58.36), ((1, 2, 1), (0, 0, 1), 46.86),
                          ((1, 0, 1), (0, 0, 1), 31.64), ((1, 0, 0), (1, 2, 0), 90.00)]:
        assert float(co.direction_angle_deg(u1, u2)) == pytest.approx(angle, abs=0.006)
    # basal plane normals (10-10)^(01-10) are 60 deg apart, the a-axes [100]^[010] 120 deg (common practice)
    assert float(co.plane_angle_deg([1, 0, 0], [0, 1, 0])) == pytest.approx(60.0, abs=1e-9)
    assert float(co.direction_angle_deg([1, 0, 0], [0, 1, 0])) == pytest.approx(120.0, abs=1e-9)


def test_fcc_hcp_cobalt_close_packed_geometry():
    # check-values.md section 7 [C]: a_fcc/sqrt 2 = 0.25065 nm vs a_hcp 0.25071 nm; d111 = 0.20465 nm vs
    # c/2 = 0.20347 nm; 11.135 vs 11.076 A^3 per atom.
    fcc, hcp = Lattice.cubic(0.35447), Lattice.hexagonal(0.25071, 0.40695)
    assert float(fcc.length_nm([0.5, 0.5, 0])) == pytest.approx(0.25065, abs=6e-6)
    assert float(fcc.d_nm([1, 1, 1])) == pytest.approx(0.20465, abs=6e-6)
    assert fcc.volume_nm3 / 4 * 1000 == pytest.approx(11.135, abs=6e-4)
    assert hcp.volume_nm3 / 2 * 1000 == pytest.approx(11.076, abs=6e-4)


# --- zone law ------------------------------------------------------------------------------------
@given(h1=HKL, h2=HKL)
def test_zone_of_planes_obeys_weiss_zone_law(h1, h2):
    z = Lattice.zone_of_planes(h1, h2)
    assert int(np.dot(z, h1)) == 0 and int(np.dot(z, h2)) == 0  # Weiss zone law h.u = 0
    cross = np.cross(h1, h2)
    if not cross.any():
        assert not z.any()
        return
    assert math.gcd(*map(int, z)) == 1
    # parallel (or antiparallel) to the cross product: their cross product vanishes
    assert not np.cross(z, cross).any()


@given(u1=HKL, u2=HKL)
def test_plane_of_directions_contains_both(u1, u2):
    p = Lattice.plane_of_directions(u1, u2)
    assert int(np.dot(p, u1)) == 0 and int(np.dot(p, u2)) == 0


def test_zone_textbook_examples():
    # Common practice (any TEM text): (111) and (1-10) share [11-2]; (200) and (020) share [001].
    assert reduce_indices(Lattice.zone_of_planes([1, 1, 1], [1, -1, 0])).tolist() in ([1, 1, -2], [-1, -1, 2])
    assert Lattice.zone_of_planes([2, 0, 0], [0, 2, 0]).tolist() == [0, 0, 1]


def test_reduce_indices():
    assert reduce_indices([[4, -2, 0], [0, 0, 0], [3, 6, 9]]).tolist() == [[2, -1, 0], [0, 0, 0], [1, 2, 3]]
    with pytest.raises(PhaseError):
        reduce_indices([0.5, 1, 0])


# --- crystal systems and bad cells ------------------------------------------------------------------
@pytest.mark.parametrize("cell,system", [
    ((0.4, 0.4, 0.4, 90, 90, 90), "cubic"), ((0.4, 0.4, 0.3, 90, 90, 90), "tetragonal"),
    ((0.4, 0.5, 0.3, 90, 90, 90), "orthorhombic"), ((0.25, 0.25, 0.4, 90, 90, 120), "hexagonal"),
    ((0.5, 0.5, 0.5, 55.3, 55.3, 55.3), "trigonal"), ((0.4, 0.5, 0.3, 90, 100, 90), "monoclinic"),
    ((0.4, 0.5, 0.3, 80, 100, 110), "triclinic"),
])
def test_crystal_system(cell, system):
    assert Lattice(*cell).crystal_system == system


@pytest.mark.parametrize("cell", [
    (0.4, 0.4, 0.4, 120, 120, 120),  # angles sum to 360: flat, zero volume
    (0.4, 0.4, 0.4, 150, 100, 40),   # alpha > beta + gamma: impossible
    (0.4, 0.4, 0.4, 90, 90, 180),
    (0.4, 0.4, 0.4, 0, 90, 90),
    (0.0, 0.4, 0.4, 90, 90, 90),
    (-0.4, 0.4, 0.4, 90, 90, 90),
    (float("nan"), 0.4, 0.4, 90, 90, 90),
    (float("inf"), 0.4, 0.4, 90, 90, 90),
    ("a", 0.4, 0.4, 90, 90, 90),
])
def test_impossible_cell_is_one_line_phase_error(cell):
    with pytest.raises(PhaseError) as err:
        Lattice(*cell)
    assert "\n" not in str(err.value)


def test_lattice_is_frozen_and_arrays_read_only():
    lat = Lattice.cubic(0.4)
    with pytest.raises(AttributeError):
        lat.a_nm = 0.5
    for arr in (lat.direct_matrix_nm, lat.reciprocal_matrix_inv_nm, lat.metric_tensor_nm2,
                lat.reciprocal_metric_tensor_inv_nm2):
        with pytest.raises(ValueError):
            arr[0, 0] = 1.0
