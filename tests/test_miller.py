"""Miller <-> Miller-Bravais conversions against textbook tables."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from saed.crystal.lattice import Lattice
from saed.crystal.miller import direction_from_4, direction_to_4, format_indices, plane_from_4, plane_to_4
from saed.errors import InputError

INDEX = st.integers(-9, 9)

# Directions [uvw] = [UVTW], the standard hexagonal table of any TEM or crystallography text
# (from memory; e.g. Williams & Carter, *Transmission Electron Microscopy*, chapter on indexing),
# with u = U - T, v = V - T, w = W written beside each.
DIRECTIONS = [
    ((1, 0, 0), (2, -1, -1, 0)),    # u = 2-(-1) = 3 -> /3
    ((0, 1, 0), (-1, 2, -1, 0)),
    ((1, 1, 0), (1, 1, -2, 0)),
    ((1, -1, 0), (1, -1, 0, 0)),
    ((2, 1, 0), (1, 0, -1, 0)),
    ((1, 2, 0), (0, 1, -1, 0)),
    ((-1, 1, 0), (-1, 1, 0, 0)),
    ((0, 0, 1), (0, 0, 0, 1)),
    ((1, 0, 1), (2, -1, -1, 3)),
    ((-1, -2, 1), (0, -1, 1, 1)),   # check-values.md section 5: [0-111] = [-1-21]
    ((-1, -2, 2), (0, -1, 1, 2)),   # check-values.md section 5: [0-112] = [-1-22]
    ((2, 1, 3), (1, 0, -1, 3)),
    ((1, 1, 1), (1, 1, -2, 3)),
]

# Planes (hkl) = (hkil), i = -(h+k) (from memory, same texts).
PLANES = [
    ((1, 0, 0), (1, 0, -1, 0)),
    ((0, 1, 0), (0, 1, -1, 0)),
    ((1, 1, 0), (1, 1, -2, 0)),
    ((1, -1, 0), (1, -1, 0, 0)),
    ((-1, 2, 0), (-1, 2, -1, 0)),
    ((0, 0, 1), (0, 0, 0, 1)),
    ((1, 0, 1), (1, 0, -1, 1)),
    ((1, 0, 2), (1, 0, -1, 2)),
    ((1, 1, 2), (1, 1, -2, 2)),
    ((1, 0, 4), (1, 0, -1, 4)),
]


@pytest.mark.parametrize("uvw,uvtw", DIRECTIONS)
def test_direction_table(uvw, uvtw):
    assert direction_to_4(uvw).tolist() == list(uvtw)
    assert direction_from_4(uvtw).tolist() == list(uvw)


@pytest.mark.parametrize("hkl,hkil", PLANES)
def test_plane_table(hkl, hkil):
    assert plane_to_4(hkl).tolist() == list(hkil)
    assert plane_from_4(hkil).tolist() == list(hkl)


def test_vectorised():
    uvw = np.array([d[0] for d in DIRECTIONS])
    assert direction_to_4(uvw).tolist() == [list(d[1]) for d in DIRECTIONS]
    hkl = np.array([p[0] for p in PLANES])
    assert plane_from_4(plane_to_4(hkl)).tolist() == hkl.tolist()


@given(h=INDEX, k=INDEX, l=INDEX)
def test_plane_round_trip(h, k, l):
    four = plane_to_4([h, k, l])
    assert four[2] == -(h + k)
    assert plane_from_4(four).tolist() == [h, k, l]


@given(u=INDEX, v=INDEX, w=INDEX)
def test_direction_round_trip_is_parallel_and_reduced(u, v, w):
    four = direction_to_4([u, v, w])
    assert four[0] + four[1] + four[2] == 0
    back = direction_from_4(four)
    if not any((u, v, w)):
        assert not back.any()
        return
    assert not np.cross(back, [u, v, w]).any() and np.dot(back, [u, v, w]) > 0  # same direction
    assert np.gcd.reduce(np.abs(four)) == 1
    assert np.gcd.reduce(np.abs(back)) == 1


@given(u=INDEX, v=INDEX, w=INDEX)
def test_four_index_direction_is_the_same_vector(u, v, w):
    # [UVTW] means U a1 + V a2 + T a3 + W c with a3 = -(a1 + a2) (definition; common practice):
    # its 3-index components are (U - T, V - T, W), which must be parallel to [uvw].
    co = Lattice.hexagonal(0.25071, 0.40695)
    big_u, big_v, big_t, big_w = direction_to_4([u, v, w])
    r4 = co.r_cartesian_nm([big_u - big_t, big_v - big_t, big_w])
    r3 = co.r_cartesian_nm([u, v, w])
    assert np.linalg.norm(np.cross(r4, r3)) <= 1e-9 * (1 + np.linalg.norm(r4) * np.linalg.norm(r3))


def test_four_index_zone_law():
    # Weiss zone law in 4 indices: hU + kV + iT + lW = 0 is the same test as the 3-index h.u = 0
    # (common practice). (10-10) lies in the [0001] zone, (0002) in [2-1-10], (01-11) in [2-1-10].
    for hkil, uvtw in [((1, 0, -1, 0), (0, 0, 0, 1)), ((0, 0, 0, 2), (2, -1, -1, 0)), ((0, 1, -1, 1), (2, -1, -1, 0))]:
        assert sum(a * b for a, b in zip(hkil, uvtw)) == 0
        assert int(np.dot(plane_from_4(hkil), direction_from_4(uvtw))) == 0


@pytest.mark.parametrize("func,bad", [
    (plane_from_4, [1, 0, 0, 0]),        # i != -(h+k)
    (direction_from_4, [1, 1, 1, 0]),    # U+V+T != 0
    (plane_to_4, [1, 0]),
    (plane_from_4, [1, 0, -1]),
    (direction_to_4, [1, 0, 0, 0]),
    (direction_to_4, [0.5, 0, 0]),
    (plane_to_4, [float("nan"), 0, 0]),
])
def test_bad_indices_are_one_line_input_errors(func, bad):
    with pytest.raises(InputError) as err:
        func(bad)
    assert "\n" not in str(err.value)


def test_format_indices():
    assert format_indices([2, -1, -1, 0]) == "2-1-10"
    assert format_indices([0, 0, 0, 1]) == "0001"
    assert format_indices([12, 0, -1]) == "12 0 -1"
