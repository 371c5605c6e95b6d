"""Phase identification from rings: single phases, two-phase mixtures (the Co-Cr coating scenario), no calibration."""

import numpy as np
import pytest

from saed.calibration import Ellipse
from saed.crystal import builtin_names, builtin_phase
from saed.errors import InputError
from saed.rings.identify import identify_phases
from saed.rings.match import ObservedRings
from saed.rings.measure import measure_rings
from saed.synth.rings import ring_pattern

SCALE = 0.03  # 1/nm per px of the synthetic patterns below
CANDIDATES = ("Co-fcc", "Co-hcp", "Cr", "Ni", "Cu", "Fe-bcc", "Fe-fcc", "Au", "Al", "Si", "NiAl", "TiN", "Al2O3")


def _observe(names, fractions=None, seed=0):
    pat = ring_pattern([builtin_phase(n) for n in names], fractions=fractions, shape_px=(640, 640),
                       scale_inv_nm_per_px=SCALE, ellipse=Ellipse(1.01, 50.0), graininess=0.3, rng=seed)
    m = measure_rings(pat.image)
    return ObservedRings.from_profile_rings(m.rings, radius_px_of_bins=m.profile.radius_px)


@pytest.fixture(scope="module")
def candidates():
    return [builtin_phase(n) for n in CANDIDATES]


@pytest.mark.parametrize("name,seed", [("Co-fcc", 1), ("Co-hcp", 2), ("Cr", 3), ("Al2O3", 4)])
def test_single_phase_is_ranked_first(candidates, name, seed):
    ident = identify_phases(_observe([name], seed=seed), candidates, scale_inv_nm_per_px=SCALE)
    best = ident.solutions[0]
    assert best.name == name
    assert best.score > ident.solutions[1].score + 0.1


def test_fcc_and_hcp_cobalt_mixture_is_explained_as_such(candidates):
    ident = identify_phases(_observe(["Co-fcc", "Co-hcp"], fractions=[1.0, 0.8], seed=5), candidates,
                            scale_inv_nm_per_px=SCALE)
    best = ident.solutions[0]
    assert sorted(p.name for p in best.phases) == ["Co-fcc", "Co-hcp"]
    assert min(best.unique_rings) >= 2 and all(a > 0 for a in best.amounts)
    # every ring is explained, each by the phase whose line it is
    assert best.n_matched == len(best.ring_lines)


def test_a_single_phase_is_not_made_a_mixture(candidates):
    ident = identify_phases(_observe(["Co-hcp"], seed=6), candidates, scale_inv_nm_per_px=SCALE)
    assert len(ident.solutions[0].phases) == 1


def test_without_calibration_one_structure_type_ties_and_says_so():
    phases = [builtin_phase(n) for n in ("Au", "Cu", "Co-hcp", "Cr")]
    ident = identify_phases(_observe(["Cu"], seed=7), phases)
    top2 = {m.name for m in ident.solutions[:2]}
    assert top2 == {"Au", "Cu"}  # same fcc ratio sequence: only the scale tells them apart
    assert any("ratios alone" in n for n in ident.notes)
    cu = [m for m in ident.solutions if m.name == "Cu"][0]
    assert cu.scale_inv_nm_per_px == pytest.approx(SCALE, rel=2e-3)


def test_the_whole_library_as_candidates():
    phases = [builtin_phase(n) for n in builtin_names()]
    ident = identify_phases(_observe(["Co-hcp"], seed=8), phases, scale_inv_nm_per_px=SCALE, top=3)
    assert ident.solutions[0].name == "Co-hcp"


def test_one_ring_cannot_be_identified(candidates):
    obs = ObservedRings(np.array([100.0]), np.array([0.02]), np.array([1.5]), np.array([1.0]),
                        np.array([50.0, 300.0]), np.array([0.01, 0.01]), 40.0, 300.0)
    with pytest.raises(InputError, match="only one ring"):
        identify_phases(obs, candidates, scale_inv_nm_per_px=SCALE)
