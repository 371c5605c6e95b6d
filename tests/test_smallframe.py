"""The lean scan-frame stage (saed.image.smallframe) and its compiled loops (saed.image.smallframe_kernels).

References outside the code under test: scipy.ndimage (gaussian_filter, uniform_filter1d) for the
compiled smoothing and running mean, bit for bit; a background by radius computed here with numpy's
bincount; Gaussian spots written here at known positions; and, in test_smallframe_reference.py, the
stage's numpy implementation from before the loops were compiled.
"""

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from scipy import ndimage as ndi

import saed
from saed.calibration import Calibration
from saed.errors import ImageError
from saed.image import smallframe_kernels as kern
from saed.image.smallframe import _gaussian_weights, measure_small_frame

CAL = Calibration(0.08, 200.0)   # 0.08 nm^-1 per px at 200 kV, the bench scan's calibration

_finite32 = st.floats(-1e6, 1e6, width=32, allow_nan=False, allow_infinity=False)


@settings(max_examples=150, deadline=None)
@given(hnp.arrays(np.float32, hnp.array_shapes(min_dims=2, max_dims=2, min_side=1, max_side=40), elements=_finite32))
def test_smoothing_is_scipys_gaussian_filter_to_the_last_bit(x):
    ref = ndi.gaussian_filter(x, 1.0, mode="constant", truncate=3.0)   # scipy: the reference
    got = kern.gaussian_smooth(x, _gaussian_weights(1.0, 3.0))
    assert got.dtype == np.float32 and np.array_equal(got, ref)


@settings(max_examples=40, deadline=None)
@given(st.sampled_from([0.5, 0.8, 1.3, 2.0]),
       hnp.arrays(np.float32, st.tuples(st.integers(1, 30), st.integers(1, 30)), elements=_finite32))
def test_smoothing_other_widths_is_scipys_too(sigma_px, x):
    ref = ndi.gaussian_filter(x, sigma_px, mode="constant", truncate=3.0)
    assert np.array_equal(kern.gaussian_smooth(x, _gaussian_weights(sigma_px, 3.0)), ref)


@settings(max_examples=150, deadline=None)
@given(hnp.arrays(np.float64, st.integers(1, 300), elements=st.floats(-1e9, 1e9)))
def test_running_mean_of_three_is_scipys_uniform_filter1d(v):
    assert np.array_equal(kern.running_mean3_nearest(v), ndi.uniform_filter1d(v, 3, mode="nearest"))


@settings(max_examples=100, deadline=None)
@given(hnp.arrays(np.float64, st.integers(0, 400), elements=st.floats(-1e9, 1e9)))
def test_shell_sort_sorts_as_numpy_does(v):
    got = v.copy()
    kern.shell_sort(got)
    assert np.array_equal(got, np.sort(v))


def _background_reference(img, centre_xy, mask=None):
    """Mean and variance by integer radius of every second pixel, after leaving out those 3 sigma above
    the mean of their radius (and masked ones); radii with no pixel left take the next radius that has one."""
    rows, cols = img.shape
    y, x = np.ogrid[:rows, :cols]
    r_full = np.hypot(x - round(centre_xy[0]), y - round(centre_xy[1]))
    n_bins = int(r_full.astype(int).max()) + 1
    rb = r_full[::2, ::2].astype(int).ravel()
    v = img[::2, ::2].astype(np.float64).ravel()
    ok = np.ones(v.size, bool) if mask is None else ~mask[::2, ::2].ravel()
    n = np.maximum(np.bincount(rb[ok], minlength=n_bins), 1)
    mean = np.bincount(rb[ok], v[ok], n_bins) / n
    sd = np.sqrt(np.maximum(np.bincount(rb[ok], v[ok] ** 2, n_bins) / n - mean ** 2, 0.0))
    keep = ok & (v <= mean[rb] + 3.0 * sd[rb])
    n_k = np.bincount(rb[keep], minlength=n_bins).astype(float)
    mean_k = np.where(n_k > 0, np.bincount(rb[keep], v[keep], n_bins) / np.maximum(n_k, 1), mean)
    var_k = np.bincount(rb[keep], v[keep] ** 2, n_bins) / np.maximum(n_k, 1) - mean_k ** 2
    for b in range(n_bins):
        if n_k[b] == 0:
            nxt = [c for c in range(b, n_bins) if n_k[c] > 0] or [c for c in range(n_bins) if n_k[c] > 0][-1:]
            mean_k[b], var_k[b] = mean_k[nxt[0]], var_k[nxt[0]]
    return mean_k, var_k, n_k


@pytest.mark.parametrize("dtype", [np.uint16, np.float32, np.uint8])
@pytest.mark.parametrize("masked", [False, True])
def test_background_by_radius_is_numpys_bincount_statistics(dtype, masked):
    rng = np.random.default_rng(7)
    rows, cols, cx, cy = 96, 110, 51.3, 44.8
    y, x = np.mgrid[:rows, :cols]
    lam = 5.0 + 150.0 / (1.0 + np.hypot(x - cx, y - cy) / 8.0)
    img = rng.poisson(lam).astype(dtype)
    img[::7, ::5] = 250                   # outliers the clip must leave out
    mask = None
    if masked:
        mask = np.zeros((rows, cols), bool)
        mask[40:50, 52:] = True            # a beam-stop arm
    g = np.hypot(x - round(cx), y - round(cy))
    r_sub = np.ascontiguousarray(g[::2, ::2]).astype(np.int32)
    n_bins = int(g.astype(int).max()) + 1
    valid = np.ones(r_sub.shape, bool) if mask is None else ~mask[::2, ::2]
    got = kern.background_by_radius(img, r_sub, n_bins, valid)
    ref = _background_reference(img, (cx, cy), mask)
    for a, b in zip(got, ref):
        assert np.array_equal(a, b)
    assert (ref[2] == 0).any()             # the hole filling was exercised (radius 1 has no even pixel)


def _frame(spots_xy, centre_xy=(63.4, 64.7), shape=(128, 128), amp=600.0, seed=3):
    """Counts of a frame written here: a direct beam, a smooth background and Gaussian spots (sigma 1.2 px)."""
    rng = np.random.default_rng(seed)
    rows, cols = shape
    y, x = np.mgrid[:rows, :cols].astype(float)
    cx, cy = centre_xy
    lam = 20.0 + 60.0 * np.exp(-np.hypot(x - cx, y - cy) / 25.0) + 8000.0 * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / 8.0)
    for sx, sy in spots_xy:
        lam += amp * np.exp(-((x - sx) ** 2 + (y - sy) ** 2) / (2 * 1.2 ** 2))
    return rng.poisson(lam).astype(np.uint16)


def test_spots_written_at_known_places_are_found_within_a_tenth_of_a_pixel():
    placed = [(30.3, 40.7), (95.8, 22.1), (100.45, 100.6), (20.5, 110.25), (63.0, 20.35), (81.7, 77.2)]
    m = measure_small_frame(_frame(placed), CAL, centre_hint_px=(64.0, 65.0))
    assert m is not None and math.hypot(m.center_px[0] - 63.4, m.center_px[1] - 64.7) < 0.1
    found = m.spots.xy_px
    assert len(found) == len(placed)
    for px, py in placed:
        d = np.hypot(found[:, 0] - px, found[:, 1] - py).min()
        assert d < 0.1, (px, py, d)


def test_empty_frame_and_a_masked_spot():
    m = measure_small_frame(_frame([]), CAL, centre_hint_px=(64.0, 65.0))
    assert m is not None and len(m.spots) == 0
    mask = np.zeros((128, 128), bool)
    mask[35:47, 24:37] = True             # over the spot at (30.3, 40.7)
    m = measure_small_frame(_frame([(30.3, 40.7), (95.8, 22.1)]), CAL, centre_hint_px=(64.0, 65.0), mask=mask)
    assert len(m.spots) == 1 and abs(m.spots.x_px[0] - 95.8) < 0.1


@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_nan_or_inf_frame_is_one_line_image_error(bad):
    img = _frame([(30.3, 40.7)]).astype(np.float32)
    img[5, 7] = bad
    with pytest.raises(ImageError) as e:
        measure_small_frame(img, CAL, centre_hint_px=(64.0, 65.0), source="scan frame 3")
    assert str(e.value) == "scan frame 3: some pixels are NaN or infinite; replace them (e.g. by 0) or mask them"


def test_mask_of_another_shape_is_one_line_image_error():
    with pytest.raises(ImageError) as e:
        measure_small_frame(_frame([]), CAL, centre_hint_px=(64.0, 65.0), mask=np.zeros((100, 128), bool), source="f")
    assert str(e.value) == "f: the mask is 100x128 pixels, the frame 128x128"


def test_importing_the_stage_does_not_import_numba():
    root = str(Path(saed.__file__).resolve().parent.parent)
    code = "import json, sys, saed.image.smallframe; print(json.dumps('numba' in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], env=dict(os.environ, PYTHONPATH=root),
                         capture_output=True, text=True, check=True).stdout
    assert json.loads(out.splitlines()[-1]) is False
