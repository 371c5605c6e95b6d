"""Orientation relationships between two crystals, against hand-worked rotations and published numbers.

Rotations are written here with Rodrigues' formula and plane/direction triads built in the test,
not taken from the code under test. Sources of the check values are named beside them.
"""

import json
import math
from importlib import resources

import numpy as np
import pytest

from saed.crystal import builtin_phase
from saed.index.orientation_relationships import (describe_relationship, proper_rotations_cart, misorientation,
                                                  standard_relationships, standard_rotation, variant_count)


def rodrigues(axis, angle_deg):
    k = np.asarray(axis, float) / np.linalg.norm(axis)
    a = math.radians(angle_deg)
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + math.sin(a) * kx + (1 - math.cos(a)) * kx @ kx


def cubic_or(plane1, plane2, dir1, dir2):
    """R (crystal 1 -> crystal 2, cubic Cartesian) with plane1 || plane2, dir1 || dir2, built by hand."""
    def triad(n, d):
        n = np.asarray(n, float) / np.linalg.norm(n)
        d = np.asarray(d, float) / np.linalg.norm(d)
        return np.stack([n, d, np.cross(n, d)], axis=1)

    return triad(plane2, dir2) @ triad(plane1, dir1).T


def family(v):
    return sorted(abs(int(x)) for x in v)


U1 = rodrigues([0.3, -0.5, 0.8], 37.0)  # any orientation of crystal 1 on the detector


def _pair(phase1, phase2, rot):
    return describe_relationship(phase1, phase2, U1, U1 @ rot.T)


def test_sigma3_twin_is_60_deg_about_111_and_named_with_its_plane():
    # Sigma 3 = 60 deg about <111> (Brandon, Acta Metall. 14, 1966, 1479); twin plane {111} in fcc
    co = builtin_phase("Co-fcc")
    r = _pair(co, co, rodrigues([1, 1, 1], 60.0))
    assert r.name == "Sigma-3 twin"
    assert r.kind == "twin"
    assert r.misorientation_deg == pytest.approx(60.0, abs=0.01)
    assert r.deviation_deg == pytest.approx(0.0, abs=0.01)
    assert family(r.twin_plane) == [1, 1, 1]
    ax = np.abs(np.asarray(r.misorientation_axis))
    assert np.allclose(ax, 1.0, atol=0.01)  # <111>
    # 180 deg about the (111) normal is the same twin (cubic symmetry; Randle 1996, ch. 2)
    r2 = _pair(co, co, rodrigues([1, 1, 1], 180.0))
    assert r2.name == "Sigma-3 twin" and r2.misorientation_deg == pytest.approx(60.0, abs=0.01)
    assert "twin" in r2.text and "(111)" in r2.text


def test_kurdjumov_sachs_from_hand_worked_planes_and_directions():
    # KS: (111)fcc || (011)bcc, [-101]fcc || [-1-11]bcc (Kurdjumov & Sachs, Z. Phys. 64, 1930, 325)
    fcc, bcc = builtin_phase("Fe-fcc"), builtin_phase("Fe-bcc")
    rot = cubic_or([1, 1, 1], [0, 1, 1], [-1, 0, 1], [-1, -1, 1])
    r = _pair(fcc, bcc, rot)
    assert r.name == "Kurdjumov-Sachs"
    assert r.deviation_deg == pytest.approx(0.0, abs=0.01)
    assert family(r.parallel_planes[0]) == [1, 1, 1] and family(r.parallel_planes[1]) == [0, 1, 1]
    assert family(r.parallel_directions[0]) == [0, 1, 1] and family(r.parallel_directions[1]) == [1, 1, 1]
    # the reported pairs really are parallel: check with the rotation written above
    p1, p2 = (np.asarray(p, float) for p in r.parallel_planes)
    assert np.degrees(np.arccos(np.clip((rot @ p1) @ p2 / np.linalg.norm(p1) / np.linalg.norm(p2), -1, 1))) < 0.01
    d1, d2 = (np.asarray(p, float) for p in r.parallel_directions)
    assert np.degrees(np.arccos(np.clip((rot @ d1) @ d2 / np.linalg.norm(d1) / np.linalg.norm(d2), -1, 1))) < 0.01
    # smallest misorientation of KS: 42.85 deg about <0.968 0.178 0.178> (Kitahara et al., Acta Mater. 54,
    # 2006, 1279; from memory)
    assert r.misorientation_deg == pytest.approx(42.85, abs=0.05)
    assert sorted(np.round(np.abs(r.misorientation_axis) / max(np.abs(r.misorientation_axis)), 2)) == pytest.approx(
        [0.18, 0.18, 1.0], abs=0.02)


def test_nishiyama_wassermann_bain_and_their_distances():
    fcc, bcc = builtin_phase("Fe-fcc"), builtin_phase("Fe-bcc")
    nw = cubic_or([1, 1, 1], [0, 1, 1], [-1, -1, 2], [0, -1, 1])
    r = _pair(fcc, bcc, nw)
    assert r.name == "Nishiyama-Wassermann"
    # NW: 45.98 deg about <0.976 0.083 0.201> (Nolze, Cryst. Res. Technol. 41, 2006, 72; from memory)
    assert r.misorientation_deg == pytest.approx(45.98, abs=0.05)
    # NW and KS differ by a 5.26 deg turn about the common <111>fcc || <011>bcc normal (same source; from memory)
    ks = cubic_or([1, 1, 1], [0, 1, 1], [-1, 0, 1], [-1, -1, 1])
    assert r.nearest_deviation_deg == pytest.approx(0.0, abs=0.01)
    sym_b = proper_rotations_cart(bcc)
    ang, _ = misorientation(ks @ nw.T, sym_b, sym_b)
    assert ang == pytest.approx(5.26, abs=0.05)
    # Bain: 45 deg about <100> (Bain, Trans. AIME 70, 1924, 25; common practice)
    rb = _pair(fcc, bcc, rodrigues([0, 0, 1], 45.0))
    assert rb.name == "Bain"
    assert rb.misorientation_deg == pytest.approx(45.0, abs=0.01)


def test_shoji_nishiyama_and_burgers_with_hexagonal_axes():
    fcc, hcp = builtin_phase("Co-fcc"), builtin_phase("Co-hcp")
    # hand-worked hcp Cartesian (x || a, z || c): (0001) normal = z, [11-20] = a1 + a2 direction = (1/2, sqrt3/2, 0)
    n_h, d_h = [0, 0, 1], [0.5, math.sqrt(3) / 2, 0]
    rot = cubic_or([1, 1, 1], n_h, [1, -1, 0], d_h)
    r = _pair(fcc, hcp, rot)
    assert r.name == "Shoji-Nishiyama"
    assert r.deviation_deg == pytest.approx(0.0, abs=0.01)
    assert family(r.parallel_planes[0]) == [1, 1, 1] and family(r.parallel_planes[1]) == [0, 0, 1]
    # the same pair with the crystals swapped
    r2 = describe_relationship(hcp, fcc, U1 @ rot.T, U1)
    assert r2.name == "Shoji-Nishiyama" and family(r2.parallel_planes[1]) == [1, 1, 1]
    nb, zr = builtin_phase("Nb"), builtin_phase("Zr-hcp")
    # Burgers: (110)bcc || (0001)hcp, [1-11]bcc || [2-1-10]hcp (Burgers, Physica 1, 1934, 561); [2-1-10] || x
    rb = _pair(nb, zr, cubic_or([1, 1, 0], [0, 0, 1], [1, -1, 1], [1, 0, 0]))
    assert rb.name == "Burgers" and rb.deviation_deg == pytest.approx(0.0, abs=0.01)


def test_variant_counts_from_the_literature():
    # KS 24 (Kitahara et al. 2006), NW 12 (Nolze 2006), Burgers 12 (Gey & Humbert, Acta Mater. 50, 2002, 277),
    # Bain 3 (Nishiyama 1978), Sigma-3 twins in fcc 4 (one per {111} plane; common practice); sources from memory
    expected = {"Kurdjumov-Sachs": 24, "Nishiyama-Wassermann": 12, "Burgers": 12, "Bain": 3, "Sigma-3 twin": 4,
                "Shoji-Nishiyama": 4, "cube-on-cube": 1}
    phases = {"fcc": builtin_phase("Fe-fcc"), "bcc": builtin_phase("Fe-bcc"), "hcp": builtin_phase("Co-hcp"),
              "cubic": builtin_phase("Co-fcc")}
    seen = set()
    for std in standard_relationships():
        p1, p2 = phases[std.structures[0]], phases[std.structures[1]]
        assert variant_count(std, p1, p2) == expected[std.name], std.name
        assert std.variants == expected[std.name]
        assert std.source
        seen.add(std.name)
    assert seen == set(expected)


def test_data_file_lists_planes_containing_their_directions():
    raw = json.loads(resources.files("saed").joinpath("data/orientation_relationships.json").read_text("utf-8"))
    for r in raw["relationships"]:
        for p, d in zip(r["planes"], r["directions"]):
            assert sum(a * b for a, b in zip(p, d)) == 0, r["name"]  # Weiss zone law


def test_general_misorientation_is_not_named():
    fcc, bcc = builtin_phase("Fe-fcc"), builtin_phase("Fe-bcc")
    r = _pair(fcc, bcc, rodrigues([1, 2, 3], 20.0))
    assert r.name == "none" and r.deviation_deg is None
    assert r.nearest and r.nearest_deviation_deg > 2.5
    assert "no standard relationship" in r.text


def test_standard_rotation_maps_planes_onto_planes():
    fcc, bcc = builtin_phase("Fe-fcc"), builtin_phase("Fe-bcc")
    std = next(s for s in standard_relationships() if s.name == "Kurdjumov-Sachs")
    rot = standard_rotation(std, fcc, bcc)
    assert np.allclose(rot, cubic_or([1, 1, 1], [0, 1, 1], [-1, 0, 1], [-1, -1, 1]), atol=1e-9)
    assert np.allclose(rot @ rot.T, np.eye(3), atol=1e-12)


def _cubic_rotations():
    """The 24 proper rotations of the cube: signed permutation matrices of determinant +1 (built here)."""
    import itertools

    out = []
    for perm in itertools.permutations(range(3)):
        for signs in itertools.product((1, -1), repeat=3):
            m = np.zeros((3, 3))
            for row, (col, sg) in enumerate(zip(perm, signs)):
                m[row, col] = sg
            if np.linalg.det(m) > 0:
                out.append(m)
    return out


def _hexagonal_rotations():
    """The 12 proper rotations of 622 in the hexagonal Cartesian frame (x || a1, z || c): six turns about z
    and six two-fold axes in the basal plane, 30 deg apart (built here)."""
    out = [rodrigues([0, 0, 1], 60.0 * k) for k in range(6)]
    out += [rodrigues([math.cos(math.radians(30.0 * k)), math.sin(math.radians(30.0 * k)), 0], 180.0) for k in range(6)]
    return out


def _variants(rot, sym1, sym2):
    """Distinct orientations R S (S a symmetry of crystal 1) of crystal 2, up to crystal 2's symmetry."""
    found = []
    for s in sym1:
        v = rot @ s
        if not any(np.allclose(t @ v, w, atol=1e-6) for w in found for t in sym2):
            found.append(v)
    return found


def test_variant_counts_enumerated_from_rotations_written_here():
    """Variant counts from the literature, enumerated here from the hand-built relationships and the point
    groups above, not from the code's own count: KS 24 (Kitahara, Ueji, Tsuji & Minamino, Acta Mater. 54, 2006,
    1279), NW 12 (Nolze, Cryst. Res. Technol. 41, 2006, 72), Burgers 12 (Gey & Humbert, Acta Mater. 50, 2002,
    277), Bain 3 (common practice), Sigma-3 twins 4, one per {111} (common practice); sources from memory.
    Each KS variant is also named Kurdjumov-Sachs by saed with no deviation."""
    cub, hexa = _cubic_rotations(), _hexagonal_rotations()
    assert len(cub) == 24 and len(hexa) == 12
    ks = cubic_or([1, 1, 1], [0, 1, 1], [-1, 0, 1], [-1, -1, 1])
    nw = cubic_or([1, 1, 1], [0, 1, 1], [-1, -1, 2], [0, -1, 1])
    burgers = cubic_or([1, 1, 0], [0, 0, 1], [1, -1, 1], [1, 0, 0])
    assert len(_variants(ks, cub, cub)) == 24
    assert len(_variants(nw, cub, cub)) == 12
    assert len(_variants(burgers, cub, hexa)) == 12
    assert len(_variants(rodrigues([0, 0, 1], 45.0), cub, cub)) == 3
    assert len(_variants(rodrigues([1, 1, 1], 60.0), cub, cub)) == 4
    fcc, bcc = builtin_phase("Fe-fcc"), builtin_phase("Fe-bcc")
    for v in _variants(ks, cub, cub):
        r = describe_relationship(fcc, bcc, U1, U1 @ v.T)
        assert r.name == "Kurdjumov-Sachs" and r.deviation_deg == pytest.approx(0.0, abs=0.01)
