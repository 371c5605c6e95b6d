"""The matcher fed spot lists that saed did not make: textbook standard patterns and gemmi structure factors.

Every other matcher test builds its input with saed's own kinematic simulation (saed.synth.kinematic),
the same zone_pattern the matcher scores against, so an error there would pass them. The inputs here
are built in this file from facts outside saed:

* Standard zone-axis patterns (g1, g2, |g2|/|g1|, angle): Andrews, Dyson & Keown, *Interpretation of
  Electron Diffraction Patterns* (1971); Edington, *Practical Electron Microscopy in Materials Science*
  vol. 2 (1975); Williams & Carter, *Transmission Electron Microscopy* (2009) ch. 18 (all from memory),
  recomputed from the Weiss zone law and cubic/hexagonal geometry: fcc [001] 200/020 1.000 at 90 deg,
  [011] 11-1/-11-1 1.000 at 70.53 deg (111^200 54.74 deg), [111] 20-2/2-20 1.000 at 60 deg, [112]
  11-1/2-20 1.633 at 90 deg; bcc [001] 110/1-10 1.000 at 90 deg, [011] 01-1/200 1.414 at 90 deg,
  [111] 10-1/1-10 1.000 at 60 deg; hcp [0001] 10-10/01-10 1.000 at 60 deg.
* Lattice parameters (nm): Cu 0.36149 (ICDD 04-0836), alpha-Fe 0.28665 (ICDD 06-0696), Mg a 0.32094,
  c 0.52105 (ICDD 35-0821), NiAl 0.2887, Si 0.5431021 (scipy.constants 'lattice parameter of silicon',
  CODATA) - the ICDD values from memory.
* Structure factors: gemmi's StructureFactorCalculatorE (ITC Vol C Table 4.3.2.2 electron form factors)
  on a gemmi.SmallStructure written here from the space group and Wyckoff sites (International Tables).
* Electron wavelength at 200 kV: 2.5079 pm (relativistic de Broglie wavelength from scipy.constants,
  CODATA 2022); scale = pixel pitch / (lambda L) (common practice), here 15 um pixels at L = 120 mm.

The geometry (in-plane rotation, camera constant, centre) is written in each test; nothing in
saed.simulate or saed.synth is called.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from saed.calibration import Calibration
from saed.crystal import builtin_phase
from saed.image.values import MeasuredPattern, Spots
from saed.index import index_pattern, prepare_phases

WAVELENGTH_200KV_NM = 0.0025079  # scipy.constants (CODATA 2022), relativistic; Williams & Carter Table 1.1: 2.51 pm
SCALE_INV_NM_PER_PX = 0.015 / (WAVELENGTH_200KV_NM * 120.0)  # 15 um pixels, L = 120 mm
CENTRE_PX = (255.8, 256.4)
SHAPE = (512, 512)
G_MAX_INV_NM = 11.0

A_CU, A_FE, A_NIAL, A_SI = 0.36149, 0.28665, 0.2887, 0.5431021
A_MG, C_MG = 0.32094, 0.52105


def _kind(spot) -> str:
    return str(getattr(spot.kind, "value", spot.kind))


def _measured(xy_px: np.ndarray, intensity: np.ndarray) -> MeasuredPattern:
    """A calibrated MeasuredPattern of spots at detector offsets `xy_px` from CENTRE_PX (no noise)."""
    x = CENTRE_PX[0] + xy_px[:, 0]
    y = CENTRE_PX[1] + xy_px[:, 1]
    i = np.asarray(intensity, float)
    spots = Spots(x, y, i, intensity_sigma=np.sqrt(i), sigma_xy_px=np.full(len(x), 0.1), snr=np.sqrt(i))
    return MeasuredPattern(image_shape=SHAPE, center_px=CENTRE_PX, spots=spots, basis=None,
                           calibration=Calibration(SCALE_INV_NM_PER_PX, 200.0), source="test: independent input")


def _rot(phi_deg: float) -> np.ndarray:
    p = math.radians(phi_deg)
    return np.array([[math.cos(p), -math.sin(p)], [math.sin(p), math.cos(p)]])


# ---------------------------------------------------------------------- textbook standard patterns
def _cubic_g(a_nm, hkl) -> float:
    return math.sqrt(sum(v * v for v in hkl)) / a_nm


def _hex_g(a_nm, c_nm, hkl) -> float:
    """|g| of (hkl) in 3 indices, hexagonal axes: 1/d^2 = 4/3 (h^2 + hk + k^2)/a^2 + l^2/c^2 (International Tables)."""
    h, k, l = hkl
    return math.sqrt(4.0 / 3.0 * (h * h + h * k + k * k) / a_nm**2 + l * l / c_nm**2)


# (phase, lattice (a, c or None), zone, g1 hkl, g2 hkl, |g2|/|g1|, angle deg) from the tables in the docstring
STANDARD = [
    ("Cu", (A_CU, None), (0, 0, 1), (2, 0, 0), (0, 2, 0), 1.000, 90.00),
    ("Cu", (A_CU, None), (0, 1, 1), (1, 1, -1), (-1, 1, -1), 1.000, 70.53),
    ("Cu", (A_CU, None), (1, 1, 1), (2, 0, -2), (2, -2, 0), 1.000, 60.00),
    ("Cu", (A_CU, None), (1, 1, 2), (1, 1, -1), (2, -2, 0), 1.633, 90.00),
    ("Fe-bcc", (A_FE, None), (0, 0, 1), (1, 1, 0), (1, -1, 0), 1.000, 90.00),
    ("Fe-bcc", (A_FE, None), (0, 1, 1), (0, 1, -1), (2, 0, 0), 1.414, 90.00),
    ("Fe-bcc", (A_FE, None), (1, 1, 1), (1, 0, -1), (1, -1, 0), 1.000, 60.00),
    ("Mg", (A_MG, C_MG), (0, 0, 1), (1, 0, 0), (0, 1, 0), 1.000, 60.00),  # 10-10 / 01-10 in 4 indices
]


@pytest.fixture(scope="module")
def textbook_tables():
    return prepare_phases([builtin_phase(n) for n in ("Cu", "Fe-bcc", "Mg", "Si", "Co-hcp")])


def _g_of(lattice, hkl) -> float:
    a, c = lattice
    return _cubic_g(a, hkl) if c is None else _hex_g(a, c, hkl)


def _angle_between(lattice, h1, h2) -> float:
    """Angle between two plane normals from the lattice metric (cubic dot product, hexagonal metric tensor)."""
    a, c = lattice
    if c is None:
        return math.degrees(math.acos(np.dot(h1, h2) / (np.linalg.norm(h1) * np.linalg.norm(h2))))
    g12 = (_hex_g(a, c, np.add(h1, h2)) ** 2 - _hex_g(a, c, h1) ** 2 - _hex_g(a, c, h2) ** 2) / 2.0
    return math.degrees(math.acos(g12 / (_hex_g(a, c, h1) * _hex_g(a, c, h2))))


@pytest.mark.parametrize("phase, lattice, zone, h1, h2, ratio, angle_deg", STANDARD,
                         ids=[f"{p}-{''.join(map(str, z))}" for p, _, z, *_ in STANDARD])
def test_textbook_standard_pattern_is_indexed_as_its_phase_and_zone(textbook_tables, phase, lattice, zone, h1, h2,
                                                                   ratio, angle_deg):
    # the tabulated ratio and angle agree with the lattice geometry (Weiss zone law: g . uvw = 0)
    assert np.dot(h1, zone) == 0 and np.dot(h2, zone) == 0
    g1_len = _g_of(lattice, h1)
    assert _g_of(lattice, h2) / g1_len == pytest.approx(ratio, abs=1e-3)
    assert _angle_between(lattice, h1, h2) == pytest.approx(angle_deg, abs=0.01)
    # the spot net m g1 + n g2 on the detector: g1 at 23 deg from +x, g2 a further angle_deg toward +y
    phi = 23.0
    g1 = _rot(phi) @ np.array([g1_len, 0.0])
    g2 = _rot(phi + angle_deg) @ np.array([ratio * g1_len, 0.0])
    mn = [(m, n) for m in range(-6, 7) for n in range(-6, 7) if (m, n) != (0, 0)]
    g = np.array([m * g1 + n * g2 for m, n in mn])
    keep = np.linalg.norm(g, axis=1) <= G_MAX_INV_NM
    g, mn = g[keep], [p for p, k in zip(mn, keep) if k]
    g_len = np.linalg.norm(g, axis=1)
    intensity = 1e4 * np.exp(-((g_len / 6.0) ** 2))  # plain fall-off with |g|; the net alone fixes the answer
    res = index_pattern(_measured(g / SCALE_INV_NM_PER_PX, intensity), textbook_tables)

    best = res.best
    assert best is not None and best.phase_name == phase
    pt = textbook_tables.table(phase)
    assert pt.canonical_zone(best.zone_axis) == pt.canonical_zone(zone)
    assert best.scale_inv_nm_per_px == pytest.approx(SCALE_INV_NM_PER_PX, rel=2e-3)
    by_spot = {s.spot_index: s for s in best.indexed}
    assert len(by_spot) == len(g)
    for i in range(len(g)):
        s = by_spot[i]
        assert _kind(s) == "allowed", (i, mn[i], _kind(s))
        # the label has the spacing of the spot it was given (d = 1/|m g1 + n g2|) and lies in the zone found
        assert _g_of(lattice, s.hkl) == pytest.approx(g_len[i], rel=1e-3)
        assert np.dot(s.hkl, best.zone_axis) == 0
    # the labels of the two generating spots make the tabulated angle, as the spots do on the detector
    i1, i2 = mn.index((1, 0)), mn.index((0, 1))
    assert _angle_between(lattice, by_spot[i1].hkl, by_spot[i2].hkl) == pytest.approx(angle_deg, abs=0.05)


# ---------------------------------------------------------------------- gemmi structure factors
def _gemmi_structure(cell, hm, sites):
    gemmi = pytest.importorskip("gemmi")
    st = gemmi.SmallStructure()
    st.cell = gemmi.UnitCell(*cell)
    st.spacegroup_hm = hm
    st.determine_and_set_spacegroup("1")
    for i, (el, xyz) in enumerate(sites):
        s = gemmi.SmallStructure.Site()
        s.label, s.type_symbol, s.element = f"{el}{i}", el, gemmi.Element(el)
        s.fract = gemmi.Fractional(*xyz)
        s.occ = 1.0
        st.add_site(s)
    st.setup_cell_images()
    st.change_occupancies_to_crystallographic()  # else F is n_ops/multiplicity too large (check-values notes)
    return st


def _gemmi_spots(st, zone_uvw, ref_hkl, phi_deg, *, box=8):
    """Detector offsets (px) and |F|^2 of the zero-order reflections of zone [uvw], from gemmi only.

    Orientation written out: the beam (+z) along the direct-lattice vector of [uvw] (gemmi's
    orthogonalisation), the reflection `ref_hkl` along +x turned by `phi_deg` toward +y.
    Reflections with |F|^2 below 1e-3 of the strongest are left out (kinematically absent).
    """
    gemmi = pytest.importorskip("gemmi")
    orth = np.array(st.cell.orth.mat)  # fractional -> Cartesian, Angstrom
    frac_t = np.array(st.cell.frac.mat).T  # hkl -> reciprocal Cartesian, 1/Angstrom
    e3 = orth @ np.asarray(zone_uvw, float)
    e3 /= np.linalg.norm(e3)
    e1 = frac_t @ np.asarray(ref_hkl, float)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(e3, e1)
    calc = gemmi.StructureFactorCalculatorE(st.cell)
    hkls, xy, f2 = [], [], []
    rng = range(-box, box + 1)
    for h in rng:
        for k in rng:
            for l in rng:
                if (h, k, l) == (0, 0, 0) or h * zone_uvw[0] + k * zone_uvw[1] + l * zone_uvw[2] != 0:
                    continue
                g = 10.0 * (frac_t @ np.array([h, k, l], float))  # 1/nm
                if np.linalg.norm(g) > G_MAX_INV_NM:
                    continue
                hkls.append((h, k, l))
                xy.append(_rot(phi_deg) @ np.array([g @ e1, g @ e2]))
                f2.append(abs(calc.calculate_sf_from_small_structure(st, [h, k, l])) ** 2)
    f2 = np.array(f2)
    keep = f2 > 1e-3 * f2.max()
    return np.array(xy)[keep] / SCALE_INV_NM_PER_PX, f2[keep] / f2.max(), [h for h, k in zip(hkls, keep) if k]


GEMMI_CASES = [
    # Si, diamond, Fd-3m origin choice 1, 8a at 0,0,0 (International Tables): along [011] the 200 and 222
    # positions carry no intensity (F = 0), so only 111, 022, 311, 400 ... spots are given
    ("Si", (10 * A_SI,) * 3 + (90, 90, 90), "F d -3 m:1", [("Si", (0, 0, 0))], (0, 1, 1), (1, 1, -1)),
    # Mg, hcp, P6_3/mmc, 2c at 1/3,2/3,1/4: along [2-1-10] (3 indices [100]) 0001 has F = 0 and is left out
    ("Mg", (10 * A_MG, 10 * A_MG, 10 * C_MG, 90, 90, 120), "P 63/m m c", [("Mg", (1 / 3, 2 / 3, 0.25))], (1, 0, 0),
     (0, 0, 2)),
    # NiAl, B2 (CsCl type), Pm-3m, Ni 1a, Al 1b: along [001] the weak 100 superlattice spots tell it from bcc
    ("NiAl", (10 * A_NIAL,) * 3 + (90, 90, 90), "P m -3 m", [("Ni", (0, 0, 0)), ("Al", (0.5, 0.5, 0.5))],
     (0, 0, 1), (1, 1, 0)),
]


@pytest.fixture(scope="module")
def gemmi_tables():
    return prepare_phases([builtin_phase(n) for n in ("Si", "Ge", "Cu", "Mg", "Co-hcp", "NiAl", "Fe-bcc", "Cr")])


@pytest.mark.parametrize("phase, cell, hm, sites, zone, ref", GEMMI_CASES, ids=[c[0] for c in GEMMI_CASES])
def test_gemmi_structure_factor_pattern_is_indexed_as_its_phase_and_zone(gemmi_tables, phase, cell, hm, sites,
                                                                       zone, ref):
    st = _gemmi_structure(cell, hm, sites)
    xy, f2, hkls = _gemmi_spots(st, zone, ref, phi_deg=-41.0)
    res = index_pattern(_measured(xy, 1e4 * f2), gemmi_tables)
    best = res.best
    assert best is not None and best.phase_name == phase
    pt = gemmi_tables.table(phase)
    assert pt.canonical_zone(best.zone_axis) == pt.canonical_zone(zone)
    by_spot = {s.spot_index: s for s in best.indexed}
    for i, h in enumerate(hkls):
        s = by_spot[i]
        assert _kind(s) == "allowed", (h, _kind(s))
        # the spacing of the label is gemmi's spacing of the reflection the spot was made from
        assert s.d_nm_calc == pytest.approx(0.1 * st.cell.calculate_d(list(h)), rel=1e-3), (h, s.hkl)
