"""Zone-axis patterns against outside values: standard patterns, gemmi structure factors, Ewald geometry.

Sources are named beside each value. "Recalled" values are textbook standard-pattern tables quoted
from memory (Edington, Practical Electron Microscopy in Materials Science vol. 2, 1976; Andrews, Dyson
& Keown, Interpretation of Electron Diffraction Patterns, 1971; Williams & Carter, TEM, 2009), so
every expected ratio and angle is also worked out by hand in the test from the Weiss zone law and
the metric (cos phi = g1.g2 / |g1||g2|).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc

from saed.crystal import builtin_phase
from saed.crystal.lattice import Lattice
from saed.crystal.miller import plane_to_4
from saed.errors import InputError
from saed.simulate.families import interzone_angle_deg, pattern_summary
from saed.simulate.geometry import orientation_matrix, project_to_detector_inv_nm
from saed.simulate.zone import layer_multiplicity, zone_pattern

S2, S3, S5, S6, S11 = (math.sqrt(x) for x in (2, 3, 5, 6, 11))


def _deg(c):
    return math.degrees(math.acos(c))


def _family(h):
    return tuple(sorted(abs(int(x)) for x in h))


# ---------------------------------------------------------------------- standard zone-axis patterns
# (phase, zone, family of g1, family of g2, R2/R1 by hand, angle by hand, note on the source)
CUBIC_STANDARD = [
    # fcc [001]: 200 and 020, equal length, 90 deg. Recalled (Edington vol. 2).
    ("Cu", (0, 0, 1), (0, 0, 2), (0, 0, 2), 1.0, 90.0),
    # fcc [011]: 11-1 and -11-1, cos = (-1+1+1)/3 = 1/3 -> 70.53 deg. Recalled (Edington; Williams & Carter).
    ("Cu", (0, 1, 1), (1, 1, 1), (1, 1, 1), 1.0, _deg(1 / 3)),
    # fcc [111]: 20-2 and 2-20 (or 02-2), cos = 4/8 -> 60 deg. Recalled.
    ("Cu", (1, 1, 1), (0, 2, 2), (0, 2, 2), 1.0, 60.0),
    # fcc [112]: 11-1 and 2-20, ratio sqrt(8/3) = 1.6330, 90 deg. Recalled.
    ("Cu", (1, 1, 2), (1, 1, 1), (0, 2, 2), math.sqrt(8 / 3), 90.0),
    # fcc [013]: 200 and 13-1, ratio sqrt(11)/2 = 1.6583, cos = 2/(2 sqrt 11) -> 72.45 deg. By hand only.
    ("Cu", (0, 1, 3), (0, 0, 2), (1, 1, 3), S11 / 2, _deg(1 / S11)),
    # fcc [123]: 11-1 and -33-1, ratio sqrt(19/3) = 2.5166, cos = (-3+3+1)/(sqrt3 sqrt19) -> 82.39 deg. By hand.
    ("Cu", (1, 2, 3), (1, 1, 1), (1, 3, 3), math.sqrt(19 / 3), _deg(1 / math.sqrt(57))),
    # rock salt has the fcc geometry (Williams & Carter ch. 16, recalled): NaCl [011] as fcc [011].
    ("NaCl", (0, 1, 1), (1, 1, 1), (1, 1, 1), 1.0, _deg(1 / 3)),
    ("NaCl", (0, 0, 1), (0, 0, 2), (0, 0, 2), 1.0, 90.0),
    # bcc [001]: 110 and 1-10, 90 deg. Recalled.
    ("Fe-bcc", (0, 0, 1), (0, 1, 1), (0, 1, 1), 1.0, 90.0),
    # bcc [011]: 01-1 and 200, ratio 2/sqrt2 = 1.4142, 90 deg. Recalled.
    ("Fe-bcc", (0, 1, 1), (0, 1, 1), (0, 0, 2), S2, 90.0),
    # bcc [111]: 10-1 and 1-10, cos = 1/2 -> 60 deg. Recalled.
    ("Fe-bcc", (1, 1, 1), (0, 1, 1), (0, 1, 1), 1.0, 60.0),
    # bcc [112]: 1-10 and 22-2, ratio sqrt(12)/sqrt(2) = sqrt 6 = 2.4495, 90 deg. By hand.
    ("Fe-bcc", (1, 1, 2), (0, 1, 1), (2, 2, 2), S6, 90.0),
    # diamond [001]: 220 and 2-20 (200 is a d-glide absence), 90 deg. Recalled.
    ("Si", (0, 0, 1), (0, 2, 2), (0, 2, 2), 1.0, 90.0),
    # diamond [011]: as fcc, 11-1 / -11-1 at 70.53 deg. Recalled (Edington).
    ("Si", (0, 1, 1), (1, 1, 1), (1, 1, 1), 1.0, _deg(1 / 3)),
    # diamond [013]: 13-1 and -13-1 (200 forbidden), cos = (-1+9+1)/11 = 9/11 -> 35.10 deg. By hand.
    ("Si", (0, 1, 3), (1, 1, 3), (1, 1, 3), 1.0, _deg(9 / 11)),
    # CsCl (B2) has the simple-cubic geometry: [001] 100/010 at 90; [011] 100/01-1 ratio sqrt2 at 90;
    # [111] 10-1/1-10 at 60; [112] 1-10 and 11-1, ratio sqrt(3/2) = 1.2247, 90 deg. By hand (recalled for 001/011).
    ("CsCl", (0, 0, 1), (0, 0, 1), (0, 0, 1), 1.0, 90.0),
    ("CsCl", (0, 1, 1), (0, 0, 1), (0, 1, 1), S2, 90.0),
    ("CsCl", (1, 1, 1), (0, 1, 1), (0, 1, 1), 1.0, 60.0),
    ("CsCl", (1, 1, 2), (0, 1, 1), (1, 1, 1), math.sqrt(1.5), 90.0),
]


@pytest.mark.parametrize("name, zone, fam1, fam2, ratio, angle", CUBIC_STANDARD)
def test_cubic_standard_patterns(name, zone, fam1, fam2, ratio, angle):
    zp = zone_pattern(builtin_phase(name), zone, max_g_inv_nm=14.0)
    s = pattern_summary(zp)
    assert _family(s.g1_hkl) == fam1
    assert _family(s.g2_hkl) == fam2
    assert s.ratio == pytest.approx(ratio, abs=1e-4)
    assert s.angle_deg == pytest.approx(angle, abs=0.01)
    # g1 and g2 lie in the zone (Weiss zone law h u + k v + l w = 0)
    assert np.dot(s.g1_hkl, zone) == 0 and np.dot(s.g2_hkl, zone) == 0


def test_hcp_standard_patterns_mg():
    """Mg (a 0.32094, c 0.52105 nm, the built-in values): hcp low-index zones worked by hand.

    |g(hkl)|^2 = 4/3 (h^2 + hk + k^2)/a^2 + l^2/c^2 (hexagonal metric).
    [0001]: 10-10 and 01-10 (or 1-100), equal, 60 deg (recalled).
    [2-1-10] = [100]: 01-10 and 0002, ratio (2/c) / (2/(sqrt3 a)) = sqrt3 a / c = 1.0669, 90 deg
        (recalled: 01-10 perpendicular to 0002).
    [01-10] = [120]: 0002 and 2-1-10, ratio (2/a) / (2/c) = c/a = 1.6235, 90 deg (recalled: ratio c/a).
    """
    mg = builtin_phase("Mg")
    a, c = 0.32094, 0.52105
    # families as sorted |indices| of hkil: {10-10} -> (0,0,1,1), {0002} -> (0,0,0,2), {2-1-10} -> (0,1,1,2)
    cases = [((0, 0, 0, 1), 1.0, 60.0, {(0, 0, 1, 1)}),
             ((2, -1, -1, 0), math.sqrt(3) * a / c, 90.0, {(0, 0, 1, 1), (0, 0, 0, 2)}),
             ((0, 1, -1, 0), c / a, 90.0, {(0, 0, 0, 2), (0, 1, 1, 2)})]
    for zone4, ratio, angle, fams in cases:
        s = pattern_summary(zone_pattern(mg, zone4, max_g_inv_nm=10.0))
        assert s.ratio == pytest.approx(ratio, abs=2e-4), zone4
        assert s.angle_deg == pytest.approx(angle, abs=0.01), zone4
        got = {tuple(sorted(abs(int(x)) for x in plane_to_4(h))) for h in (s.g1_hkl, s.g2_hkl)}
        assert got <= fams, (zone4, got)


def test_hcp_0111_angle_by_hand():
    """Mg [0-111]: 10-11 and 1-10-1. g = h a* + k b* + l c*; with the hexagonal metric
    g1.g2 = 4/(3a^2) (h1h2 + (h1k2 + k1h2)/2 + k1k2) + l1l2/c^2. For 10-11 (1,0,1) and 1-10-1 (1,-1,-1):
    = 4/(3a^2) (1 - 1/2) - 1/c^2; |g|^2 = 4/(3a^2) + 1/c^2 for both. Check-value table: 80.34 deg for Mg."""
    a, c = 0.32094, 0.52105
    dot = 4 / (3 * a * a) * 0.5 - 1 / (c * c)
    n2 = 4 / (3 * a * a) + 1 / (c * c)
    angle = math.degrees(math.acos(abs(dot) / n2))
    s = pattern_summary(zone_pattern(builtin_phase("Mg"), [0, -1, 1, 1], max_g_inv_nm=10.0))
    assert s.ratio == pytest.approx(1.0, abs=1e-6)
    assert s.angle_deg == pytest.approx(angle, abs=0.01)
    assert angle == pytest.approx(80.34, abs=0.01)


# ---------------------------------------------------------------------- intensities against gemmi
def _gemmi_f_abs(phase, hkls):
    """|F| (A) from gemmi's own space-group expansion and ITC C 4.3.2.2 electron form factors."""
    gemmi = pytest.importorskip("gemmi")
    lat = phase.lattice
    st = gemmi.SmallStructure()
    st.cell = gemmi.UnitCell(10 * lat.a_nm, 10 * lat.b_nm, 10 * lat.c_nm, lat.alpha_deg, lat.beta_deg, lat.gamma_deg)
    st.spacegroup_hm = phase.space_group
    st.determine_and_set_spacegroup("1")
    for site in phase.sites:
        s = gemmi.SmallStructure.Site()
        s.label = site.label or site.element
        s.element = gemmi.Element(site.element)
        s.fract = gemmi.Fractional(site.x, site.y, site.z)
        s.occ = site.occupancy
        s.u_iso = site.b_iso_nm2 * 100.0 / (8 * math.pi ** 2)  # B (nm^2) -> U (A^2)
        st.add_site(s)
    st.setup_cell_images()
    st.change_occupancies_to_crystallographic()  # needed, or F comes out n_ops/multiplicity too large
    calc = gemmi.StructureFactorCalculatorE(st.cell)
    return np.array([abs(calc.calculate_sf_from_small_structure(st, [int(v) for v in h])) for h in hkls])


@pytest.mark.parametrize("name, zone", [("Cu", (0, 1, 1)), ("Si", (0, 1, 1)), ("NaCl", (0, 0, 1)),
                                        ("GaAs", (0, 1, 1)), ("Co-hcp", (1, 0, 0)), ("CsCl", (0, 0, 1))])
def test_intensity_order_matches_gemmi(name, zone):
    """Thin-foil limit (t = 0.5 nm, sinc^2 ~ 1): the order of the first ZOLZ intensities is gemmi's |F|^2 order."""
    ph = builtin_phase(name)
    zp = zone_pattern(ph, zone, max_g_inv_nm=9.0, thickness_nm=0.5, include_holz=False)
    rows = np.flatnonzero(zp.allowed)[:16]
    ref = _gemmi_f_abs(ph, zp.hkl[rows])
    ours = zp.intensity[rows]
    ref_i = ref ** 2 / (ref ** 2).max()
    # same ranking (ties within 1e-6 relative may swap)
    assert np.all(np.diff(ref_i[np.argsort(-ours, kind="stable")]) <= 1e-6)
    # |F| agrees with gemmi to 0.1 % (gemmi in A, ours in nm: 1 nm = 10 A)
    assert np.allclose(zp.f_abs[rows] * 10.0, ref, rtol=1e-3)


@pytest.mark.parametrize("name, zone", [("Si", (0, 1, 1)), ("GaAs", (0, 1, 1)), ("Co-hcp", (2, -1, -1, 0)),
                                        ("Al2O3", (0, 0, 0, 1)), ("TiO2-rutile", (1, 1, 1))])
def test_friedel_symmetry_of_zolz(name, zone):
    """Friedel's law I(g) = I(-g) on the exact zone axis, also without a centre of symmetry (GaAs, F-43m)."""
    zp = zone_pattern(builtin_phase(name), zone, max_g_inv_nm=8.0, include_holz=False)
    lookup = {tuple(h): i for i, h in enumerate(zp.hkl.tolist())}
    for i, h in enumerate(zp.hkl.tolist()):
        j = lookup[tuple(-x for x in h)]
        assert zp.intensity[j] == pytest.approx(zp.intensity[i], rel=1e-9, abs=1e-15)
        assert np.allclose(zp.xy_inv_nm[j], -zp.xy_inv_nm[i])


# ---------------------------------------------------------------------- double diffraction
def _route(zp, hkl):
    i = int(np.flatnonzero(np.all(zp.hkl == np.array(hkl), axis=1))[0])
    return i, zp.dd_route[i]


def test_si_011_002_double_diffraction():
    """Si [011]: 200 is a d-glide absence that appears by double diffraction, e.g. 11-1 + 1-11
    (Edington vol. 2, recalled; the standard example). 222 (site-specific zero) too: 11-1 + 11-1 style."""
    zp = zone_pattern(builtin_phase("Si"), [0, 1, 1])
    for hkl in ([2, 0, 0], [2, 2, -2]):
        i, (a, b) = _route(zp, hkl)
        assert zp.kinematically_forbidden[i] and zp.double_diffraction[i] and zp.intensity[i] == 0
        assert a >= 0 and b >= 0
        assert np.array_equal(zp.hkl[a] + zp.hkl[b], hkl)
        assert zp.allowed[a] and zp.allowed[b] and zp.laue_zone[a] == 0 and zp.laue_zone[b] == 0


def test_si_001_002_has_no_zolz_route():
    """Si [001]: the allowed ZOLZ spots are {220} and {400}; any sum of them has even h and k with
    h + k = 4n or h = k = 2 mod 4, so 200 (h + k = 2) cannot be reached in the zone."""
    zp = zone_pattern(builtin_phase("Si"), [0, 0, 1])
    i, route = _route(zp, [2, 0, 0])
    assert zp.kinematically_forbidden[i] and not zp.double_diffraction[i]
    assert list(route) == [-1, -1]


def test_hcp_basal_double_diffraction_routes():
    """hcp 0001 (screw-axis absence) by double diffraction in [2-1-10], e.g. 01-11 + 0-110; none in
    [01-10], whose ZOLZ is (-2m, m, m, l): h + 2k = 3n there, so every l-odd spot is zero and sums of
    l-even spots stay l-even (worked by hand)."""
    co = builtin_phase("Co-hcp")
    zp = zone_pattern(co, [2, -1, -1, 0])
    i, (a, b) = _route(zp, [0, 0, 1])
    assert zp.double_diffraction[i]
    assert np.array_equal(zp.hkl[a] + zp.hkl[b], [0, 0, 1])
    assert zp.allowed[a] and zp.allowed[b]
    zp2 = zone_pattern(co, [0, 1, -1, 0])
    i2, route2 = _route(zp2, [0, 0, 1])
    assert zp2.kinematically_forbidden[i2] and not zp2.double_diffraction[i2]
    assert not zp2.double_diffraction.any()


def test_fcc_and_rock_salt_have_no_double_diffraction_spots():
    """fcc and rock-salt absences are all lattice-centring ones: no forbidden reciprocal-lattice points."""
    for name in ("Cu", "NaCl"):
        for zone in ((0, 0, 1), (0, 1, 1), (1, 1, 1), (1, 1, 2)):
            zp = zone_pattern(builtin_phase(name), zone)
            assert not zp.kinematically_forbidden.any(), (name, zone)


# ---------------------------------------------------------------------- geometry and Ewald sphere
def _wavelength_nm(kv):
    """lambda = h / sqrt(2 m e V (1 + e V / (2 m c^2))), scipy.constants (CODATA), written out here."""
    ev = sc.e * kv * 1e3
    return sc.h / math.sqrt(2 * sc.m_e * ev * (1 + ev / (2 * sc.m_e * sc.c ** 2))) * 1e9


def test_interzone_angles_cubic():
    """cos = u1.u2/(|u1||u2|): [001]-[011] 1/sqrt2 -> 45; [001]-[111] 1/sqrt3 -> 54.74; [011]-[111] 2/sqrt6 -> 35.26."""
    lat = Lattice.cubic(0.36149)
    assert interzone_angle_deg(lat, [0, 0, 1], [0, 1, 1]) == pytest.approx(_deg(1 / S2), abs=1e-9)
    assert interzone_angle_deg(lat, [0, 0, 1], [1, 1, 1]) == pytest.approx(54.7356, abs=1e-4)
    assert interzone_angle_deg(lat, [0, 1, 1], [1, 1, 1]) == pytest.approx(_deg(2 / S6), abs=1e-9)
    assert _deg(2 / S6) == pytest.approx(35.26, abs=0.005)


def test_folz_ring_radius_by_hand_cu_001():
    """Cu [001], 200 kV. lambda = 0.0025079 nm -> k = 1/lambda = 398.74 1/nm. [001]/p is no fcc lattice
    vector for p > 1, so the layers are H = 1/a = 1/0.36149 = 2.7663 1/nm apart. The sphere meets the first
    layer at R with (k - H)^2 + R^2 = k^2: R = sqrt(2 k H - H^2) = sqrt(2206.1 - 7.65) = 46.89 1/nm."""
    k = 1 / _wavelength_nm(200.0)
    assert k == pytest.approx(398.74, abs=0.01)
    h = 1 / 0.36149
    r = math.sqrt(2 * k * h - h * h)
    assert r == pytest.approx(46.89, abs=0.01)
    zp = zone_pattern(builtin_phase("Cu"), [0, 0, 1])
    assert zp.layer_spacing_inv_nm == pytest.approx(h, rel=1e-9)
    assert zp.folz_ring_radius_inv_nm == pytest.approx(r, rel=1e-6)


def test_folz_layer_of_fcc_011_is_the_second():
    """fcc [011]: [0 1/2 1/2] is a lattice vector (face centring), so H = 2/|r_011| = 2/(a sqrt2); the layer
    h.u = 1 (k + l odd, mixed indices) holds no allowed reflection."""
    cu = builtin_phase("Cu")
    assert layer_multiplicity(cu, [0, 1, 1]) == 2
    zp = zone_pattern(cu, [0, 1, 1])
    assert zp.layer_spacing_inv_nm == pytest.approx(2 / (0.36149 * S2), rel=1e-9)
    from saed.crystal import reflection_table

    t = reflection_table(cu, 10.0)
    n = t.hkl @ np.array([0, 1, 1])
    assert not np.any(t.allowed & (np.abs(n) == 1)) and np.any(t.allowed & (np.abs(n) == 2))


def test_holz_spots_sit_on_the_folz_ring():
    """Reflections of the first Laue zone kept near the Ewald sphere lie at the FOLZ ring radius."""
    # Cu [001] layer l = -1: h, k odd with (h^2 + k^2)/a^2 near R^2 = 46.89^2, i.e. h^2 + k^2 near 287.3;
    # 1^2 + 17^2 = 13^2 + 11^2 = 290 gives |g_perp| = 47.11 1/nm and s about (47.11^2 - 46.89^2)/(2k) = -0.026 1/nm:
    # 16 spots within |s| <= 1/t for t = 20 nm.
    zp = zone_pattern(builtin_phase("Cu"), [0, 0, 1], max_g_inv_nm=50.0, thickness_nm=20.0)
    holz = zp.laue_zone == 1
    assert holz.sum() == 16
    assert set(map(tuple, np.sort(np.abs(zp.hkl[holz]), axis=1).tolist())) == {(1, 1, 17), (1, 11, 13)}
    assert np.all(zp.hkl[holz][:, 2] == -1)  # layer n = h.[001] = -1: toward the sphere's centre
    r = np.hypot(*zp.xy_inv_nm[holz].T)
    assert np.all(np.abs(zp.excitation_error_inv_nm[holz]) <= 1 / 20.0 + 1e-12)
    assert np.allclose(r, math.sqrt(290) / 0.36149, rtol=1e-3)
    assert np.all(np.abs(r - zp.folz_ring_radius_inv_nm) < 0.3)


def test_positions_follow_the_geometry_convention():
    """On the zone, xy = (U g)_xy with U = geometry.orientation_matrix(lattice, zone, 0); |xy| = |g| for ZOLZ."""
    si = builtin_phase("Si")
    zp = zone_pattern(si, [1, 1, 2])
    u = orientation_matrix(si.lattice, [1, 1, 2], 0.0)
    expect = project_to_detector_inv_nm(u, si.lattice.g_cartesian_inv_nm(zp.hkl))
    assert np.allclose(zp.xy_inv_nm, expect)
    z = zp.zolz
    assert np.allclose(np.hypot(*zp.xy_inv_nm[z].T), zp.g_inv_nm[z])


def test_exact_excitation_error_and_shape_factor():
    """On the zone, s_g = sqrt(k^2 - g^2) - k for ZOLZ (the sphere through 000, centre -k b), about -g^2/(2k);
    I/|F|^2 = sinc^2(pi t s) (Hirsch et al. 1965, ch. 4)."""
    t_nm = 40.0
    zp = zone_pattern(builtin_phase("Al"), [0, 0, 1], thickness_nm=t_nm, include_holz=False, thickness_spread=0.0)
    k = 1 / _wavelength_nm(200.0)
    g = zp.g_inv_nm
    s = np.sqrt(k * k - g * g) - k
    assert np.allclose(zp.excitation_error_inv_nm, s, atol=1e-12)
    assert np.allclose(s, -g * g / (2 * k), rtol=2e-3)
    x = math.pi * t_nm * s
    raw = zp.f_abs ** 2 * (np.sin(x) / x) ** 2
    assert np.allclose(zp.intensity, raw / raw.max())


def test_tilt_to_bragg_angle_excites_g():
    """Tilting the beam by theta_B = asin(lambda |g| / 2) toward g puts g exactly on the Ewald sphere (Bragg's law)."""
    cu = builtin_phase("Cu")
    lam = _wavelength_nm(200.0)
    g = 1 / cu.lattice.d_nm([2, 0, 0])
    theta = math.degrees(math.asin(lam * g / 2))
    zp = zone_pattern(cu, [0, 0, 1], tilt_deg=theta, tilt_toward_hkl=[2, 0, 0], include_holz=False)
    i = int(np.flatnonzero(np.all(zp.hkl == [2, 0, 0], axis=1))[0])
    j = int(np.flatnonzero(np.all(zp.hkl == [-2, 0, 0], axis=1))[0])
    assert abs(zp.excitation_error_inv_nm[i]) < 1e-9
    assert zp.excitation_error_inv_nm[j] < 2 * zp.excitation_error_inv_nm[i] - 0.01
    assert zp.intensity[i] == pytest.approx(1.0)
    # beam is theta away from the zone; Laue circle radius k sin(theta), centre on the +200 side, through 000
    z = cu.lattice.r_cartesian_nm([0, 0, 1]) / 0.36149
    assert _deg(float(zp.beam_direction_cart @ z)) == pytest.approx(theta, abs=1e-9)
    assert zp.laue_circle_radius_inv_nm == pytest.approx(math.sin(math.radians(theta)) / lam, rel=1e-9)
    assert float(zp.laue_circle_center_xy_inv_nm @ zp.xy_inv_nm[i]) > 0
    assert np.hypot(*zp.laue_circle_xy_inv_nm().T).min() < 1e-3 * zp.laue_circle_radius_inv_nm


# ---------------------------------------------------------------------- bad input
@pytest.mark.parametrize("kwargs, words", [
    (dict(zone_axis=[0, 0, 0]), "[000]"),
    (dict(zone_axis=[0, 1.5, 1]), "integers"),
    (dict(zone_axis=[float("nan"), 1, 1]), "non-finite"),
    (dict(zone_axis=[1, 1]), "3 indices"),
    (dict(zone_axis=[0, 1, 1], max_g_inv_nm=0.0), "max_g"),
    (dict(zone_axis=[0, 1, 1], max_g_inv_nm=-3.0), "max_g"),
    (dict(zone_axis=[0, 1, 1], thickness_nm=0.0), "thickness"),
    (dict(zone_axis=[0, 1, 1], thickness_nm=-5.0), "thickness"),
    (dict(zone_axis=[0, 1, 1], tilt_deg=2.0), "direction"),
    (dict(zone_axis=[0, 1, 1], tilt_deg=2.0, tilt_toward_hkl=[0, 2, 2]), "along the zone"),
    (dict(zone_axis=[0, 1, 1], tilt_deg=75.0, tilt_toward_hkl=[2, 0, 0]), "tilt"),
    (dict(zone_axis=[2, -1, -1, 0]), "hexagonal"),
])
def test_bad_input_cubic(kwargs, words):
    with pytest.raises(InputError) as exc:
        zone_pattern(builtin_phase("Si"), **kwargs)
    assert words in str(exc.value) and "\n" not in str(exc.value)


def test_bad_four_index_zone():
    with pytest.raises(InputError, match="U\\+V\\+T"):
        zone_pattern(builtin_phase("Co-hcp"), [1, 1, 1, 0])


def test_thickness_averaged_shape_factor_matches_numerical_average():
    """The default shape factor is sinc^2(pi t s) averaged over t in [0.5 t0, 1.5 t0]: compare the closed form
    with a brute-force numerical mean (scipy.integrate.quad) of (sin(pi s t) / (pi s t0))^2."""
    from scipy.integrate import quad

    from saed.simulate.zone import shape_factor

    t0 = 50.0
    for s_val in (1e-4, 0.005, 0.02, 0.0399, 0.1):
        num = quad(lambda t: (math.sin(math.pi * s_val * t) / (math.pi * s_val * t0)) ** 2, 0.5 * t0, 1.5 * t0)[0] / t0
        assert float(shape_factor(s_val, t0, 0.5)) == pytest.approx(num, rel=1e-6)


def test_default_pattern_keeps_strong_low_order_spots():
    """fcc [011] at 200 kV, t = 50 nm: the exact sinc^2 nearly removes 200 (pi t s ~ 2 pi), which a real
    selected area never shows (common practice: 200 is among the strongest spots of fcc [011]).
    With the default thickness averaging 200 stays within a factor 3 of 111."""
    cu = builtin_phase("Cu")
    zp = zone_pattern(cu, [0, 1, 1], include_holz=False)
    i111 = zp.intensity[np.flatnonzero((np.abs(zp.hkl) == 1).all(axis=1))[0]]
    i200 = zp.intensity[np.flatnonzero((np.sort(np.abs(zp.hkl), axis=1) == [0, 0, 2]).all(axis=1))[0]]
    assert i200 > i111 / 3
    exact = zone_pattern(cu, [0, 1, 1], include_holz=False, thickness_spread=0.0)
    j200 = exact.intensity[np.flatnonzero((np.sort(np.abs(exact.hkl), axis=1) == [0, 0, 2]).all(axis=1))[0]]
    assert j200 < i200 / 3
