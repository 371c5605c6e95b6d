"""The superlattice probe: photometry at predicted positions, its false-alarm control, and the order check it feeds.

Images here are written by hand with numpy (a flat Poisson background plus Gaussian spots whose
integrated counts are set in the test: a Gaussian of peak A and width s holds 2 pi s^2 A counts,
analytic), not by the code under test. The end-to-end cases use saed.synth.overlap (the generator,
outside the indexer) with the truth it records.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from saed.index.superlattice_probe import PRESENT_Z, amplitude_map, decoy_family_z, probe_reflections

SIGMA = 2.0
CENTRE = (255.5, 255.5)


def _image(spots, *, background=200.0, seed=0, shape=(512, 512)):
    """Poisson image: flat `background` counts per pixel plus Gaussian spots (x, y, integrated counts)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]].astype(float)
    mean = np.full(shape, background)
    for x, y, total in spots:
        mean += total / (2 * math.pi * SIGMA ** 2) * np.exp(-((xx - x) ** 2 + (yy - y) ** 2) / (2 * SIGMA ** 2))
    return rng.poisson(mean).astype(np.float64)


def _ring(n, radius, phase_deg=0.0):
    a = np.radians(phase_deg) + 2 * np.pi * np.arange(n) / n
    return np.stack([CENTRE[0] + radius * np.cos(a), CENTRE[1] + radius * np.sin(a)], axis=1)


def test_photometry_recovers_the_integrated_counts_of_a_spot():
    pos = _ring(8, 120.0)
    img = _image([(x, y, 5000.0) for x, y in pos])
    amap = amplitude_map(img, SIGMA)
    pr = probe_reflections(amap, pos, center_px=CENTRE, sigma_px=SIGMA, exclude_xy_px=pos)
    # 5000 counts each, written above; the noise of one measurement ~ sqrt(background * 4 pi s^2) ~ 100
    assert np.all(np.abs(pr.intensity - 5000.0) < 5 * pr.intensity_sigma)
    assert np.all(pr.z > 20)
    assert pr.present


def test_empty_positions_are_not_a_family():
    """Pure noise: no predicted set, and none of its turned copies, reaches the (one-sided) threshold.

    Positions on one ring share their null points, so the errors of the null median add up across a ring
    and the family Z scatters wider than a unit normal (about 1.3-1.4 x here and on the benchmark frames):
    that is why the order probe also asks Z to beat the turned copies measured on the same image."""
    img = _image([], seed=3)
    amap = amplitude_map(img, SIGMA)
    pos = np.vstack([_ring(12, r, 7.0 * k) for k, r in enumerate((60.0, 110.0, 170.0))])
    pr = probe_reflections(amap, pos, center_px=CENTRE, sigma_px=SIGMA, exclude_xy_px=pos)
    assert not pr.present and abs(pr.family_z) < PRESENT_Z
    decoys = decoy_family_z(amap, pos, center_px=CENTRE, sigma_px=SIGMA, exclude_xy_px=pos, n_decoys=12)
    assert len(decoys) == 12 and np.all(decoys < PRESENT_Z)
    # z of empty positions scatter like a unit normal (36 positions: mean within 4/6, scatter 0.6-1.5)
    z = pr.z[np.isfinite(pr.z)]
    assert abs(float(np.mean(z))) < 0.7 and 0.6 < float(np.std(z)) < 1.5


def test_faint_spots_too_weak_one_by_one_are_seen_together():
    """24 spots of 2.5 x the single-measurement noise each: a 5-sigma spot search keeps almost none, the family
    (sum z / sqrt(n), about 2.5 sqrt(24) = 12) is plainly present."""
    pos = np.vstack([_ring(12, 90.0), _ring(12, 160.0, 15.0)])
    noise = math.sqrt(200.0 * 4 * math.pi * SIGMA ** 2)  # matched-filter noise of a Gaussian spot, flat background
    img = _image([(x, y, 2.5 * noise) for x, y in pos], seed=5)
    amap = amplitude_map(img, SIGMA)
    pr = probe_reflections(amap, pos, center_px=CENTRE, sigma_px=SIGMA, exclude_xy_px=pos)
    assert np.count_nonzero(pr.z >= 5.0) <= 3
    assert pr.family_z > 8.0 and pr.present
    decoys = decoy_family_z(amap, pos, center_px=CENTRE, sigma_px=SIGMA, exclude_xy_px=pos)
    assert np.all(decoys < PRESENT_Z)


def test_photometric_ratio_is_linear_in_the_superlattice_and_free_of_the_exposure():
    """rho is a ratio: with negligible photometric noise, superlattice intensities x k give rho x k; every
    intensity and its noise x c leave it unchanged (the exposure)."""
    from saed.crystal import builtin_phase
    from saed.index.ordering import order_evidence_photometric

    ph = builtin_phase("Ni3Al")
    # [001] zone: fundamentals h, k both even (fcc rule, all hkl unmixed); superlattice mixed parity
    hkl = np.array([(h, k, 0) for h in range(-4, 5) for k in range(-4, 5) if (h, k) != (0, 0)])
    fund = np.array([(h % 2 == k % 2) for h, k, _ in hkl])
    g = ph.lattice.g_inv_nm(hkl)
    rng = np.random.default_rng(2)
    base = np.where(fund, 100.0, 1.3) * np.exp(-0.02 * g ** 2) * np.exp(rng.normal(0, 0.2, len(hkl)))
    sig = np.full(len(hkl), 1e-7)
    ev = order_evidence_photometric(ph, (0, 0, 1), hkl, base, sig, fund, voltage_kv=200.0)
    assert ev is not None and ev.photometric and ev.n_superlattice >= 3 and ev.n_fundamental >= 4
    half = order_evidence_photometric(ph, (0, 0, 1), hkl, np.where(fund, base, 0.5 * base), sig, fund, voltage_kv=200.0)
    assert half.ratio == pytest.approx(0.5 * ev.ratio, rel=0.02)
    brighter = order_evidence_photometric(ph, (0, 0, 1), hkl, 7.0 * base, 7.0 * sig, fund, voltage_kv=200.0)
    assert brighter.ratio == pytest.approx(ev.ratio, rel=1e-6)
    # no superlattice signal at all: no evidence, not a ratio of zero dressed as a measurement
    assert order_evidence_photometric(ph, (0, 0, 1), hkl, np.where(fund, base, -0.01), sig, fund, voltage_kv=200.0) is None


@pytest.fixture(scope="module")
def ni_tables():
    from saed.crystal import builtin_phase
    from saed.index import prepare_phases

    return prepare_phases([builtin_phase(n) for n in ("Ni", "Ni3Al", "Co-hcp")], max_g_inv_nm=14.0)


def _measured(img, scale):
    from saed.calibration import Calibration
    from saed.image.measure import measure_pattern

    return measure_pattern(img, Calibration(scale, 200.0))


def test_small_share_of_ordered_precipitates_is_found_only_by_looking_where_they_must_be(ni_tables):
    """15 % of the area Ni3Al cube-on-cube in Ni [001] (the generator's truth): its superlattice spots are too
    faint for the spot search, so the spots alone say Ni; the probe finds them and the two crystals."""
    from saed.crystal import builtin_phase
    from saed.index import index_pattern
    from saed.synth.overlap import overlap_image

    img, truth = overlap_image(builtin_phase("Ni"), (0, 0, 1), [(builtin_phase("Ni3Al"), np.eye(3), 0.15)],
                               in_plane_rotation_deg=31.0, scale_inv_nm_per_px=0.05, rng=40)
    m = _measured(img, 0.05)
    alone = index_pattern(m, ni_tables, max_crystals=2)
    assert [c.phase_name for c in alone.crystals] == ["Ni"]
    r = index_pattern(m, ni_tables, max_crystals=2, image=img)
    assert sorted(c.phase_name for c in r.crystals) == ["Ni", "Ni3Al"]
    roles = {c.phase_name: c.role for c in r.crystals}
    assert roles == {"Ni": "matrix", "Ni3Al": "ordered precipitate"}
    assert r.orientation_relationships[0].kind == "ordered precipitate"
    assert any("probed in the image" in n for n in r.notes)


def test_disordered_crystal_alone_gets_no_ordered_partner(ni_tables):
    from saed.crystal import builtin_phase
    from saed.index import index_pattern
    from saed.synth.kinematic import synthetic_image

    pat, _ = synthetic_image(builtin_phase("Ni"), (0, 1, 1), in_plane_rotation_deg=12.0, scale_inv_nm_per_px=0.05,
                             image_shape=(512, 512), rng=8)
    r = index_pattern(_measured(pat.image, 0.05), ni_tables, max_crystals=2, image=pat.image)
    assert [c.phase_name for c in r.crystals] == ["Ni"]
    assert not any("superlattice" in n for n in r.notes)


def test_saed_index_looks_in_the_image_too(tmp_path, capsys):
    """The command passes its image to the indexer: the same 15 % Ni3Al frame as above, written as a TIFF and
    indexed by 'saed index', gives both crystals (the spots alone give Ni only)."""
    import json

    import tifffile

    from saed.cli import main
    from saed.crystal import builtin_phase
    from saed.synth.overlap import overlap_image

    img, _ = overlap_image(builtin_phase("Ni"), (0, 0, 1), [(builtin_phase("Ni3Al"), np.eye(3), 0.15)],
                           in_plane_rotation_deg=31.0, scale_inv_nm_per_px=0.05, rng=40)
    tif, out = tmp_path / "ni_ni3al.tif", tmp_path / "r.json"
    tifffile.imwrite(tif, np.clip(np.rint(img), 0, 65535).astype(np.uint16), photometric="minisblack")
    assert main(["index", str(tif), "--scale", "0.05", "--phase", "Ni", "--phase", "Ni3Al", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert sorted(c["phase"] for c in doc["crystals"]) == ["Ni", "Ni3Al"]
