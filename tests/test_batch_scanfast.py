"""Scans: the lean small-frame image stage, the warm start, orientation maps and HDF5/Zarr stacks.

Patterns come from the kinematic simulation through the detector model of saed.synth, so every
spot's true position (SynthPattern.spot_xy_px) and every frame's phase and zone are known from
the renderer, not from the code under test.
"""

import numpy as np
import pytest

from saed.calibration import Calibration
from saed.crystal import builtin_phase

SCALE = 0.08


def _render(phase, zone, rot_deg, seed, centre=(127.6, 128.3), size=256):
    from saed.synth.kinematic import synthetic_measured
    from saed.synth.detector import Detector, Scene, render_pattern

    m, _ = synthetic_measured(builtin_phase(phase), zone, scale_inv_nm_per_px=SCALE, in_plane_rotation_deg=rot_deg,
                              image_shape=(size, size), center_px=centre, position_noise_px=0.0, rng=seed)
    return render_pattern(np.stack([m.spots.x_px, m.spots.y_px], 1), m.spots.intensity / m.spots.intensity.max() * 3e4,
                          center_px=m.center_px, detector=Detector(shape=(size, size)),
                          scene=Scene(haze_electrons=200.0, haze_core_px=10.0), rng=seed)


def test_small_frame_stage_finds_the_rendered_spots_and_centre():
    from saed.image.smallframe import measure_small_frame

    errors = []
    for seed, (ph, zone) in enumerate([("Co-fcc", (0, 1, 1)), ("Co-hcp", (1, 0, 0)), ("Cr", (0, 0, 1))]):
        pat = _render(ph, zone, 17.0 * seed, seed)
        m = measure_small_frame(pat.image, Calibration(SCALE, 200.0), centre_hint_px=(129.0, 127.0))
        assert np.hypot(m.center_px[0] - 127.6, m.center_px[1] - 128.3) < 0.1      # the renderer's centre
        truth = pat.spot_xy_px[pat.visible & (pat.peak_snr > 8)]
        found = m.spots.xy_px
        for t in truth:                                          # every clear spot is found ...
            d = np.hypot(*(found - t).T).min()
            assert d < 0.6, (ph, t, d)
            errors.append(d)
        for f in found:                                          # ... and nothing that is not there
            assert np.hypot(*(pat.spot_xy_px - f).T).min() < 1.0
    assert np.sqrt(np.mean(np.square(errors))) < 0.25


def test_small_frame_stage_gives_up_without_a_direct_beam_near_the_hint_and_rejects_nan():
    from saed.errors import ImageError
    from saed.image.smallframe import measure_small_frame

    pat = _render("Co-fcc", (0, 1, 1), 0.0, 1)
    assert measure_small_frame(pat.image, Calibration(SCALE, 200.0), centre_hint_px=(60.0, 60.0)) is None
    bad = pat.image.astype(np.float32)
    bad[5, 5] = np.nan
    with pytest.raises(ImageError, match="NaN"):
        measure_small_frame(bad, Calibration(SCALE, 200.0), centre_hint_px=(127.6, 128.3))


def test_vacuum_frame_has_no_spots():
    from saed.image.smallframe import measure_small_frame
    from saed.synth.detector import Detector, Scene, render_pattern

    img = render_pattern(np.zeros((0, 2)), np.zeros(0), center_px=(127.6, 128.3), detector=Detector(shape=(256, 256)),
                         scene=Scene(haze_electrons=200.0, haze_core_px=10.0), rng=3).image
    m = measure_small_frame(img, Calibration(SCALE, 200.0), centre_hint_px=(127.0, 128.0))
    assert len(m.spots) == 0


@pytest.fixture(scope="module")
def small_scan(tmp_path_factory):
    from saed.synth.scan import ScanGrain, write_scan_npy

    grains = (ScanGrain("Co-fcc", (0, 1, 1), 12.0), ScanGrain("Co-hcp", (0, 0, 1), 35.0),
              ScanGrain("Co-fcc", (1, 1, 2), 40.0), ScanGrain("", None))
    path = tmp_path_factory.mktemp("scan") / "scan.npy"
    truth = write_scan_npy(path, (6, 8), grains=grains, variants=2, seed=4)
    return path, truth


def test_warm_start_gives_the_full_search_answers(small_scan):
    from saed.batch.indexing import index_frame, make_index_job
    from saed.batch.inputs import discover_inputs
    from saed.batch.runner import plan_chunks, process_chunk
    from saed.batch.scan import zone_family
    from saed.batch.scanindex import CHECK_SAME, index_scan_frame

    path, truth = small_scan
    job = make_index_job([builtin_phase(p) for p in ("Co-fcc", "Co-hcp", "Cr")], Calibration(SCALE, 200.0),
                         frame_shape=(256, 256), check_every=5)
    chunks = list(plan_chunks(discover_inputs([str(path)]).sources, set(), chunk_frames=24))
    fast = [r for c in chunks for r in process_chunk(c, index_scan_frame, job)]
    full = [r for c in chunks[:1] for r in process_chunk(c, index_frame, job)]          # the first 24 frames
    how = [r.search for r in fast]
    assert how.count("warm") >= 20 and how.count(CHECK_SAME) >= 3 and "full+warm differ" not in how
    grains = truth.grain.ravel()
    for r in fast:                                        # against the scan's truth
        g = truth.grains[grains[r.frame]]
        if not g.phase:
            assert r.status == "no-solution", r
        else:
            ph = builtin_phase(g.phase)
            assert r.phase == g.phase and zone_family(r.zone_axis, ph) == zone_family(g.zone_axis, ph), r
    for a, b in zip(fast, full):                          # against the full search, frame by frame
        assert (a.status, a.phase, a.zone_axis) == (b.status, b.phase, b.zone_axis)
        if a.search in ("warm", "search"):
            assert a.score == pytest.approx(b.score, abs=0.05)
            # the same orientation, or its 180 deg turn about the beam (one pattern cannot tell them apart)
            turn = (a.in_plane_rotation_deg - b.in_plane_rotation_deg) % 180.0
            assert min(turn, 180.0 - turn) < 0.5
        elif a.search in ("full", "full+warm same"):
            assert a.score == pytest.approx(b.score, abs=1e-9)


def test_run_centre_hint_starts_tasks_inside_a_scan_on_the_lean_stage(small_scan):
    from dataclasses import replace

    from saed.batch.indexing import make_index_job
    from saed.batch.inputs import discover_inputs
    from saed.batch.runner import plan_chunks, process_chunk
    from saed.batch.scanindex import EMPTY, FULL, LEAN_SEARCH, index_scan_frame, scan_centre_hint
    from saed.index.orientmap import misorientation_deg, orientations

    path, truth = small_scan
    source = discover_inputs([str(path)]).sources[0]
    hint = scan_centre_hint(source, Calibration(SCALE, 200.0))
    # saed.synth.scan renders every frame's direct beam at (size/2 - 0.2, size/2 - 0.7)
    assert np.hypot(hint[0] - 127.8, hint[1] - 127.3) < 0.1
    plain = make_index_job([builtin_phase(p) for p in ("Co-fcc", "Co-hcp", "Cr")], Calibration(SCALE, 200.0),
                           frame_shape=(256, 256), check_every=0)
    chunks = list(plan_chunks([source], set(), chunk_frames=12))
    runs = {}
    for label, job in (("none", plain), ("hint", replace(plain, centre_hint_px=hint)),
                       ("far", replace(plain, centre_hint_px=(40.0, 200.0)))):
        runs[label] = [r for c in chunks for r in process_chunk(c, index_scan_frame, job)]
    starts = [c.frames[0] for c in chunks]
    assert all(runs["none"][k].search == FULL for k in starts)
    assert all(runs["far"][k].search == FULL for k in starts)        # no beam near a wrong hint: the full stage
    # a task starting inside the file starts on the lean stage; the file's frame 0 goes through the full stage
    assert starts[0] == 0 and runs["hint"][0].search == FULL
    assert all(runs["hint"][k].search in (LEAN_SEARCH, EMPTY) for k in starts[1:])
    for a, b in zip(runs["none"], runs["hint"]):                      # the same answers either way
        assert (a.status, a.phase, a.zone_axis) == (b.status, b.phase, b.zone_axis)
        if a.status == "ok":
            assert a.score == pytest.approx(b.score, abs=0.05)
            # the same orientation up to the Laue group and the 180 deg turn one pattern cannot tell apart
            ph = builtin_phase(a.phase)
            ua, ub = (orientations(ph, np.array([r.zone_axis]), np.array([r.in_plane_rotation_deg])) for r in (a, b))
            assert misorientation_deg(ph, ua, ub, friedel=True)[0] < 0.5


def test_a_single_pattern_is_measured_by_the_full_stage_whatever_the_run_hint():
    # a folder of single patterns: each file is frame 0 of its own task, and gets saed index's image stage
    from saed.batch.indexing import make_index_job
    from saed.batch.scanindex import FULL, LEAN_SEARCH, index_scan_frame

    job = make_index_job([builtin_phase(p) for p in ("Co-fcc", "Co-hcp")], Calibration(SCALE, 200.0),
                         frame_shape=(256, 256), check_every=0, centre_hint_px=(127.6, 128.3))
    image = _render("Co-fcc", (0, 1, 1), 10.0, 2).image
    index_scan_frame.new_task(job)
    assert index_scan_frame(image, job, name="one.tif", frame=0).search == FULL
    index_scan_frame.new_task(job)                       # the same frame as a task start inside a scan
    assert index_scan_frame(image, job, name="scan", frame=256).search == LEAN_SEARCH


def test_ipf_colours_and_misorientation_against_rotations_written_here():
    from saed.index.orientmap import ipf_colours, misorientation_deg, orientations
    from saed.simulate.geometry import rotation_about_axis

    fcc, hcp = builtin_phase("Co-fcc"), builtin_phase("Co-hcp")
    # standard triangle corners of m-3m: [001] red, [101] green, [111] blue (common practice);
    # [110] and [-1 0 -1] are copies of [101]
    rgb = ipf_colours(fcc, np.array([[0, 0, 1.0], [1, 1, 0], [-1, 0, -1], [1, 1, 1]]))
    assert np.allclose(rgb, [[1, 0, 0], [0, 1, 0], [0, 1, 0], [0, 0, 1]], atol=1e-9)
    # hexagonal 6/mmm: [0001] red; a* direction x (the a axis is [2-1-10]) green
    assert np.allclose(ipf_colours(hcp, np.array([[0, 0, 1.0], [1, 0, 0]])), [[1, 0, 0], [0, 1, 0]], atol=1e-9)
    u0 = np.eye(3)[None]
    # the twin of fcc: 60 deg about <111> (a Sigma 3 boundary; Randle & Engler 2000), and 90 deg about <001> is a
    # symmetry operation; hcp: 60 deg about c is symmetry, 30 deg is not
    for phase, axis, angle, expect in ((fcc, (1, 1, 1), 60.0, 60.0), (fcc, (0, 0, 1), 90.0, 0.0),
                                       (fcc, (0, 0, 1), 7.0, 7.0), (hcp, (0, 0, 1), 60.0, 0.0), (hcp, (0, 0, 1), 30.0, 30.0)):
        r = rotation_about_axis(axis, angle)[None]
        assert misorientation_deg(phase, u0, r)[0] == pytest.approx(expect, abs=1e-6)
    u = orientations(fcc, np.array([[0, 1, 1], [0, 1, 1]]), np.array([10.0, 13.0]))
    assert misorientation_deg(fcc, u[:1], u[1:])[0] == pytest.approx(3.0, abs=1e-6)
    # [112] is not a two-fold axis of m-3m: its 180 deg turn about the beam is another orientation (the angle
    # between them is that of a 180 deg rotation about [112] reduced by symmetry), which boundaries ignore
    u = orientations(fcc, np.array([[1, 1, 2], [1, 1, 2]]), np.array([40.0, 220.0]))
    assert misorientation_deg(fcc, u[:1], u[1:])[0] > 5.0
    assert misorientation_deg(fcc, u[:1], u[1:], friedel=True)[0] == pytest.approx(0.0, abs=1e-5)


def test_ipf_colour_key_is_filled_without_gaps():
    """The colour key had white speckles on the hcp triangle (dots at even steps of the corners' weights
    spread apart where the stereographic projection stretches the triangle): every pixel inside the
    triangle of the projected corners must now be coloured.

    Geometry written here: stereographic projection x, y / (1 + z) of the unit corner directions; the key's
    edges are great-circle arcs that bulge outward from the straight triangle of the projected corners
    (or are straight, through [001]), so that straight triangle lies inside the key.
    """
    from saed.index.orientmap import triangle_key

    for name, corners in (("Co-hcp", ((0, 0, 1), (1, 0, 0), (3 ** 0.5 / 2, 0.5, 0))),
                          ("Co-fcc", ((0, 0, 1), (1, 0, 1), (1, 1, 1)))):
        rgba, (x0, x1, y0, y1), _, _ = triangle_key(builtin_phase(name))
        c = np.array(corners, float)
        c /= np.linalg.norm(c, axis=1, keepdims=True)
        p = c[:, :2] / (1 + c[:, 2:3])
        n_rows, n_cols = rgba.shape[:2]
        xs = x0 + (np.arange(n_cols) + 0.5) * (x1 - x0) / n_cols
        ys = y0 + (np.arange(n_rows) + 0.5) * (y1 - y0) / n_rows
        px, py = np.meshgrid(xs, ys)
        t = np.linalg.solve(np.array([[p[1, 0] - p[0, 0], p[2, 0] - p[0, 0]], [p[1, 1] - p[0, 1], p[2, 1] - p[0, 1]]]),
                            np.stack([px.ravel() - p[0, 0], py.ravel() - p[0, 1]]))
        inside = (t.min(axis=0) > 0.02) & (t.sum(axis=0) < 0.98)
        assert inside.sum() > 1000
        assert np.all(rgba.reshape(-1, 4)[inside, 3] == 1.0), name
        assert np.all(rgba.reshape(-1, 4)[inside, :3].max(axis=1) > 0.99)   # one channel at full strength


def test_hdf5_and_zarr_scans_are_read_lazily_with_their_scan_shape(tmp_path):
    import h5py
    import zarr

    from saed.batch.inputs import discover_inputs
    from saed.batch.stacks import read_frames

    data = np.random.default_rng(0).poisson(30, (3, 4, 32, 32)).astype(np.uint16)
    h5 = tmp_path / "scan.h5"
    with h5py.File(h5, "w") as f:
        f.create_dataset("entry/data", data=data, chunks=(1, 2, 32, 32))
        f.create_dataset("entry/dark", data=np.zeros((32, 32)))
    z = tmp_path / "scan.zarr"
    arr = zarr.open_array(str(z), mode="w", shape=data.shape, chunks=(1, 4, 32, 32), dtype="uint16")
    arr[:] = data
    for name in (str(h5), str(z)):
        (src,) = discover_inputs([name]).sources
        assert src.scan_shape == (3, 4) and src.n_frames == 12 and src.frame_shape == (32, 32) and src.stack
        got = read_frames(src.path, [1, 2, 3, 4, 11])
        for k in (1, 2, 3, 4, 11):
            assert np.array_equal(got[k], data.reshape(12, 32, 32)[k])
    # a folder holding both: each is a stack, the .zarr folder is not searched as a folder
    assert len(discover_inputs([str(tmp_path)]).sources) == 2


def test_an_hdf5_with_two_stacks_needs_a_dataset_name(tmp_path):
    import h5py

    from saed.batch.inputs import discover_inputs

    h5 = tmp_path / "two.h5"
    with h5py.File(h5, "w") as f:
        f.create_dataset("a", data=np.ones((2, 32, 32)))
        f.create_dataset("b", data=np.ones((3, 32, 32)))
    found = discover_inputs([str(h5)])
    assert not found.sources and "name one as FILE::DATASET" in found.skipped[0].reason
    (src,) = discover_inputs([f"{h5}::/b"]).sources
    assert src.n_frames == 3 and src.path.endswith("two.h5::/b")


def test_array_set_holds_the_table(tmp_path):
    import h5py
    import zarr

    from saed.batch.arrays import PHASE_ERROR, PHASE_NONE, write_array_set
    from saed.batch.inputs import FrameSource
    from saed.batch.results import Row

    src = FrameSource("scan.npy", "/x/scan.npy", 6, (2, 3), (64, 64), "1:2", True)
    rows = [Row("scan.npy", 4, phase="Co-hcp", zone_axis=(1, 0, 0), zone_axis_4=(2, -1, -1, 0), score=0.9,
                in_plane_rotation_deg=30.0, n_spots=12, file="/x/scan.npy", file_id="1:2"),
            Row("scan.npy", 0, status="no-solution", n_spots=0, file="/x/scan.npy", file_id="1:2"),
            Row("scan.npy", 1, status="error: 12 pixels are NaN", file="/x/scan.npy", file_id="1:2")]
    phases = {"Co-fcc": builtin_phase("Co-fcc"), "Co-hcp": builtin_phase("Co-hcp")}
    for name in ("t.zarr", "t.h5"):
        p = tmp_path / name
        assert write_array_set(rows, (src,), p, phases=phases, phase_order=("Co-fcc", "Co-hcp"), scan_shape=(2, 3)) == 6
        g = zarr.open_group(str(p), mode="r") if name.endswith(".zarr") else h5py.File(p, "r")
        assert list(g["phase"][:]) == [PHASE_NONE, PHASE_ERROR, -3, -3, 1, -3]
        assert list(g["zone_axis_4"][4]) == [2, -1, -1, 0] and g["score"][4] == pytest.approx(0.9)
        u = g["orientation"][4]
        assert np.allclose(u @ u.T, np.eye(3), atol=1e-5) and np.isnan(g["orientation"][0]).all()
        assert list(g.attrs["scan_shape"]) == [2, 3]


def test_batch_row_names_hexagonal_runner_up_and_lookalike_zones_in_four_indices():
    from saed.batch.indexing import row_from_result
    from saed.index import index_pattern, prepare_phases
    from saed.synth.kinematic import synthetic_measured

    # fcc [112] and hcp [2-1-10]-type zones give look-alike patterns (the close-packed stacking); the hcp
    # one must be named in Miller-Bravais form, [10-10] for the 3-index direction [2 1 0]
    # (U = (2u - v)/3, V = (2v - u)/3, T = -(U + V), W = w: International Tables A, 2016, sect. 1.2)
    tables = prepare_phases([builtin_phase("Co-fcc"), builtin_phase("Co-hcp")])
    m, _ = synthetic_measured(builtin_phase("Co-fcc"), (1, 1, 2), scale_inv_nm_per_px=SCALE, image_shape=(256, 256),
                              position_noise_px=0.0, rng=1)
    result = index_pattern(m, tables)
    row = row_from_result(result, name="x", frame=0)
    hex_sols = [s for s in result.solutions[1:2] if s.phase_name == "Co-hcp"]
    assert hex_sols, "expected the hcp look-alike as runner-up"
    assert row.runner_up_phase == "Co-hcp" and len(row.runner_up_zone_axis) == 4
    u, v, w = hex_sols[0].zone_axis
    assert row.runner_up_zone_axis == tuple(int(x) for x in np.array([2 * u - v, 2 * v - u, -(u + v), 3 * w]) //
                                           np.gcd.reduce([2 * u - v, 2 * v - u, u + v, 3 * w]))
    assert "ambiguous: Co-hcp [" in row.note                  # the look-alike caution names the hcp zone ...
    zone_text = row.note.split("Co-hcp [")[1].split("]")[0]
    assert tuple(int(t) for t in zone_text.split()) == row.runner_up_zone_axis    # ... in 4 indices


def test_small_frame_stage_on_arbitrary_frames_never_fails_badly():
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st
    from hypothesis.extra.numpy import arrays

    from saed.image.smallframe import measure_small_frame

    frames = st.one_of(arrays(np.uint16, st.tuples(st.integers(16, 48), st.integers(16, 48))),
                       arrays(np.float32, st.tuples(st.integers(16, 48), st.integers(16, 48)),
                              elements=st.floats(-1e4, 1e6, width=32)))

    @settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(frames, st.floats(0, 47), st.floats(0, 47))
    def check(img, hx, hy):
        m = measure_small_frame(img, Calibration(SCALE, 200.0), centre_hint_px=(hx, hy))
        if m is None:
            return
        rows, cols = img.shape
        assert np.all(np.isfinite(m.center_px)) and -1 <= m.center_px[0] <= cols and -1 <= m.center_px[1] <= rows
        xy = m.spots.xy_px
        assert np.all(np.isfinite(xy)) and np.all((xy >= 0) & (xy <= [cols - 1, rows - 1]))

    check()


def test_index_without_the_mistilt_fit_gives_the_same_ranking_and_no_mistilt():
    # batch rows skip the mistilt fit (index_pattern(mistilt=False)); the phase and zone are the renderer's
    # (Co-hcp [1 0 0] is [2 -1 -1 0] in 4 indices: 'a' axis), and nothing but the mistilt may differ
    from saed.image.measure import measure_pattern
    from saed.index import index_pattern, prepare_phases

    tables = prepare_phases([builtin_phase(p) for p in ("Co-fcc", "Co-hcp", "Cr")], voltage_kv=200.0)
    for seed, (ph, zone) in enumerate([("Co-fcc", (0, 1, 1)), ("Co-hcp", (1, 0, 0)), ("Cr", (0, 0, 1))]):
        m = measure_pattern(_render(ph, zone, 23.0 * seed, seed).image, Calibration(SCALE, 200.0))
        full, lean = index_pattern(m, tables), index_pattern(m, tables, mistilt=False)
        assert full.best.phase_name == ph and builtin_phase(ph) is not None
        assert full.best.mistilt is not None                      # the default fits it ...
        assert all(s.mistilt is None for s in lean.solutions)     # ... the option does not
        assert len(full.solutions) == len(lean.solutions)
        for a, b in zip(full.solutions, lean.solutions):
            advice = a.mistilt.advice if a.mistilt is not None else None
            assert (a.phase_name, a.zone_axis, a.zone_axis_4, a.score, a.in_plane_rotation_deg,
                    a.scale_inv_nm_per_px) == (b.phase_name, b.zone_axis, b.zone_axis_4, b.score,
                                               b.in_plane_rotation_deg, b.scale_inv_nm_per_px)
            assert np.array_equal(a.orientation_matrix, b.orientation_matrix)
            assert [lk.relation for lk in a.lookalikes] == [lk.relation for lk in b.lookalikes]
            assert tuple(n for n in a.notes if n != advice) == b.notes
        assert full.message == lean.message and len(full.crystals) == len(lean.crystals)


def test_small_frame_stage_reads_16_bit_counts_and_their_float32_copy_alike():
    """The same counts as uint16 (background sums over the kept pixels taken as all pixels less the
    left-out ones, exact for integers) and as float32 (summed over the kept pixels) give the same spots
    to the last bit, and the renderer's spots are found either way."""
    from saed.image.smallframe import measure_small_frame

    pat = _render("Co-fcc", (0, 1, 1), 23.0, 5)
    counts = np.clip(np.rint(pat.image), 0, 65535).astype(np.uint16)
    a = measure_small_frame(counts, Calibration(SCALE, 200.0), centre_hint_px=(129.0, 127.0))
    b = measure_small_frame(counts.astype(np.float32), Calibration(SCALE, 200.0), centre_hint_px=(129.0, 127.0))
    assert a.center_px == b.center_px and len(a.spots) >= 8
    for f in ("x_px", "y_px", "intensity", "intensity_sigma", "sigma_xy_px", "snr", "size_px"):
        assert np.array_equal(getattr(a.spots, f), getattr(b.spots, f)), f
    truth = pat.spot_xy_px[pat.visible & (pat.peak_snr > 8)]
    assert all(np.hypot(*(a.spots.xy_px - t).T).min() < 0.6 for t in truth)
