"""The image stage's own order statistics against numpy's (issue 14: the image stage on small frames).

Issue 14 replaced ``np.median`` / ``np.percentile`` on the image stage's many small arrays by
:func:`saed.image.binning.median_of`, :func:`~saed.image.binning.percentile_of` and
:func:`~saed.image.binning.median_and_percentile` (one partition, no wrapper), and the global sort
of :func:`~saed.image.binning.radial_quantile_profile` by a partition per radius bin. The promise
is "the same bits", so the check values are:

* numpy's own ``np.median`` and ``np.percentile`` (method 'linear'): an external reference, compared
  bit for bit (value, NaN-ness and numpy scalar type);
* for the radial profile, the single-sort version it replaced (kept verbatim below as
  ``_radial_quantile_profile_by_sort``, from main at fd16c63), compared bit for bit, and numpy's
  ``np.sort`` of each bin's values (the rank min(int(q c), c - 1) of the sorted values), compared to
  1e-9 of the value span (the float key reads the value back to ~1e-12 of the span).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from saed.image.binning import (median_and_percentile, median_in_place, median_of, percentile_in_place, percentile_of,
                                radial_quantile_profile, radius_map, without_nan)


def _same_bits(got, want) -> bool:
    got, want = np.asarray(got), np.asarray(want)
    return got.dtype == want.dtype and got.shape == want.shape and got.tobytes() == want.tobytes()


def _floats(dtype, *, allow_nan: bool = False):
    width = 32 if dtype == np.float32 else 64
    # a few repeated values (ties) and signed zeros come up often with this mix
    return st.one_of(st.sampled_from([0.0, -0.0, -0.0, 1.0, -1.0, 2.5]),
                     st.floats(-1e6, 1e6, width=width, allow_nan=False, allow_infinity=False),
                     *([st.just(float("nan"))] if allow_nan else []))


def _arrays(dtype, *, max_size: int = 300, allow_nan: bool = False):
    return hnp.arrays(dtype, st.integers(1, max_size), elements=_floats(dtype, allow_nan=allow_nan))


@settings(max_examples=300, deadline=None)
@given(st.sampled_from([np.float32, np.float64]).flatmap(lambda dt: _arrays(dt, allow_nan=True)))
def test_median_of_is_numpy_median_bit_for_bit(a):
    with np.errstate(invalid="ignore"):
        assert _same_bits(median_of(a), np.median(a))
        assert type(median_of(a)) is type(np.median(a))
        assert _same_bits(median_in_place(a.copy()), np.median(a))


@settings(max_examples=300, deadline=None)
@given(st.sampled_from([np.float32, np.float64]).flatmap(lambda dt: _arrays(dt, allow_nan=True)),
       st.sampled_from([0.0, 0.5, 1.0, 5.0, 25.0, 50.0, 75.0, 90.0, 95.0, 99.5, 100.0]) | st.floats(0.0, 100.0))
def test_percentile_of_is_numpy_percentile_bit_for_bit(a, p):
    with np.errstate(invalid="ignore"):
        assert _same_bits(percentile_of(a, p), np.percentile(a, p))
        assert _same_bits(percentile_in_place(a.copy(), p), np.percentile(a, p))
        m, pc = median_and_percentile(a, p)
        assert _same_bits(m, np.median(a))
        assert _same_bits(pc, np.percentile(a, p))


def test_order_stats_on_a_frame_sized_array():
    """The sizes the image stage meets (a 256 x 256 block image), even and odd counts."""
    rng = np.random.default_rng(3)
    for n in (65536, 65535, 62001):
        a = rng.gamma(2.0, 30.0, n).astype(np.float32)
        assert _same_bits(median_of(a), np.median(a))
        assert _same_bits(percentile_of(a, 1.0), np.percentile(a, 1.0))
        assert _same_bits(percentile_of(a, 0.5), np.percentile(a, 0.5))
        assert _same_bits(median_and_percentile(a, 1.0)[1], np.percentile(a, 1.0))


def test_order_stats_leave_other_inputs_to_numpy():
    """Empty, 2-D and integer arrays go to numpy itself (same answers, same warnings)."""
    with pytest.warns(RuntimeWarning):
        assert np.isnan(median_of(np.zeros(0)))
    a2 = np.arange(12.0).reshape(3, 4)
    assert median_of(a2) == np.median(a2) == 5.5
    assert median_of(np.array([3, 1, 2])) == 2.0
    assert percentile_of(np.array([1.0]), 50.0) == 1.0


def _radial_quantile_profile_by_sort(values, radius, *, q=0.5, bin_width=1.0, min_count=5):
    """saed.image.binning.radial_quantile_profile as it was at fd16c63 (one sort of float keys)."""
    v = np.asarray(values, np.float64).ravel()
    r = np.asarray(radius, np.float64).ravel()
    ok = np.isfinite(v) & np.isfinite(r)
    v, r = v[ok], r[ok]
    if v.size == 0:
        return np.zeros(0), np.zeros(0)
    b = np.floor(r / bin_width).astype(np.int64)
    lo, hi = float(v.min()), float(v.max())
    span = hi - lo if hi > lo else 1.0
    key = np.sort(b + 0.999 * (v - lo) / span)
    counts = np.bincount(b)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    good = counts >= min_count
    pick = starts[good] + np.minimum((q * counts[good]).astype(np.int64), counts[good] - 1)
    vals = lo + (key[pick] - np.flatnonzero(good)) * span / 0.999
    centres = (np.flatnonzero(good) + 0.5) * bin_width
    return centres, vals


@settings(max_examples=200, deadline=None)
@given(st.integers(1, 400), st.sampled_from([np.float32, np.float64]), st.sampled_from([0.25, 0.5, 0.75, 0.9]),
       st.sampled_from([1.0, 4.0, 0.7]), st.integers(1, 9), st.integers(0, 2**31 - 1), st.booleans())
def test_radial_profile_equals_the_single_sort_it_replaced(n, dtype, q, bin_width, min_count, seed, with_gaps):
    rng = np.random.default_rng(seed)
    r = rng.uniform(0.0, 30.0, n)
    v = (rng.normal(50.0, 10.0, n) * rng.choice([1.0, 0.0, -1.0], n, p=[0.8, 0.1, 0.1])).astype(dtype)
    v[rng.random(n) < 0.2] = 3.0  # ties
    if with_gaps:
        v[rng.random(n) < 0.1] = np.nan
        r[rng.random(n) < 0.05] = np.inf
    got = radial_quantile_profile(v, r, q=q, bin_width=bin_width, min_count=min_count)
    want = _radial_quantile_profile_by_sort(v, r, q=q, bin_width=bin_width, min_count=min_count)
    for g, w in zip(got, want):
        assert _same_bits(g, w)


def test_radial_profile_is_the_rank_of_each_sorted_bin():
    """Against np.sort of each ring's values: rank min(int(q c), c - 1), to 1e-9 of the span."""
    rng = np.random.default_rng(7)
    yy, xx = np.mgrid[0:200, 0:180]
    r = np.hypot(xx - 91.3, yy - 97.8).ravel()
    v = (400.0 / (1.0 + r / 15.0) + rng.normal(0.0, 5.0, r.size)).astype(np.float32)
    for q, bw, mc in ((0.5, 1.0, 3), (0.75, 1.0, 8), (0.5, 4.0, 8)):
        centres, vals = radial_quantile_profile(v, r, q=q, bin_width=bw, min_count=mc)
        b = np.floor(r / bw).astype(int)
        span = float(v.max()) - float(v.min())
        for c, got in zip(centres, vals):
            ring = np.sort(v[b == int(c / bw)].astype(np.float64))
            want = ring[min(int(q * len(ring)), len(ring) - 1)]
            assert abs(got - want) <= 1e-9 * span


@given(st.integers(1, 40), st.integers(1, 40), st.integers(1, 4), st.floats(-50.0, 150.0), st.floats(-50.0, 150.0))
def test_radius_map_is_the_grid_formula(nr, nc, f, cx, cy):
    """radius_map against the two-grid formula find_beam_stop and estimate_background used (same bits)."""
    from saed.image.binning import Binned

    b = Binned(np.zeros((nr, nc), np.float32), np.ones((nr, nc), np.float32), f, (nr * f, nc * f))
    cxb, cyb = b.to_binned_px(cx, cy)
    yy, xx = np.mgrid[0:nr, 0:nc].astype(np.float32)
    assert _same_bits(radius_map(b, (cx, cy)), np.hypot(xx - cxb, yy - cyb))


@settings(max_examples=100, deadline=None)
@given(st.sampled_from([np.float32, np.float64]).flatmap(lambda dt: _arrays(dt, max_size=400, allow_nan=True)),
       st.sampled_from([0.5, 1.0, 50.0]))
def test_nan_order_stats_are_numpys_on_the_non_nan_values(a, p):
    """find_beam_stop's np.nanpercentile / np.nanmedian became percentile_of / median_of of without_nan(a)."""
    kept = without_nan(a)
    assert np.array_equal(np.sort(kept), np.sort(a[~np.isnan(a)]))
    if kept.size == 0:
        return
    assert _same_bits(percentile_of(kept, p), np.nanpercentile(a, p))
    assert _same_bits(percentile_in_place(without_nan(a), p), np.nanpercentile(a, p))
    assert _same_bits(median_of(kept), np.nanmedian(a))


@settings(max_examples=25, deadline=None)
@given(st.integers(2, 70), st.integers(2, 70), st.integers(0, 2**31 - 1), st.booleans())
def test_self_convolution_is_numpys_2d_transforms(nr, nc, seed, gaps):
    """The axis-by-axis transforms into reused work arrays against np.fft.irfft2(np.fft.rfft2(a, s) ** 2, s)."""
    from saed.image.binning import Binned
    from saed.image.centre import _self_convolution

    rng = np.random.default_rng(seed)
    img = rng.gamma(2.0, 50.0, (nr, nc)).astype(np.float32)
    if gaps:
        img[rng.random((nr, nc)) < 0.2] = np.nan
    if not np.isfinite(img).any():
        return
    b = Binned(img, np.ones_like(img), 1, img.shape)
    ok = np.isfinite(img)
    med = float(np.median(img[ok]))
    lo = float(np.percentile(img[ok], 1.0))
    a = np.where(ok, np.log1p(np.clip(img - med, 0.0, None) / max(med - lo, 1e-6)), 0.0).astype(np.float64)
    s = (2 * nr, 2 * nc)
    fa = np.fft.rfft2(a, s=s)
    want = np.fft.irfft2(fa * fa, s=s)
    got = _self_convolution(b)
    assert _same_bits(got, want)
    assert _same_bits(_self_convolution(b), want)  # again, in the kept work arrays


@settings(max_examples=200, deadline=None)
@given(st.integers(1, 30), st.sampled_from([3, 8, 24, 40, 96, 200, 625, 700]), st.integers(0, 2**31 - 1),
       st.floats(0.0, 1.0), st.booleans())
def test_row_nanmedian_is_numpys_nanmedian(n, m, seed, p_keep, ties):
    """spotfit's start plane: np.nanmedian along rows (short rows go through masked arrays, long ones
    through np.median per row; both regimes are met: rows of 8-200 border pixels, 625+ window pixels)."""
    import warnings

    from saed.image.spotfit import _row_nanmedian

    rng = np.random.default_rng(seed)
    vals = rng.normal(100.0, 30.0, (n, m))
    if ties:
        vals = np.round(vals / 10.0) * 10.0
        vals[rng.random((n, m)) < 0.05] = -0.0
    keep = rng.random((n, m)) < p_keep
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        want = np.nanmedian(np.where(keep, vals, np.nan), axis=1)
    assert _same_bits(_row_nanmedian(vals, keep), want)


@settings(max_examples=200, deadline=None)
@given(hnp.arrays(np.float64, st.tuples(st.integers(1, 40), st.just(2)), elements=_floats(np.float64)))
def test_column_medians_are_numpys_axis_0_median(mid):
    """friedel_center's np.median(mid, axis=0) became one median_of per column."""
    got = np.array([median_of(mid[:, 0]), median_of(mid[:, 1])])
    assert _same_bits(got, np.median(mid, axis=0))


@settings(max_examples=300, deadline=None)
@given(hnp.arrays(np.float64, st.tuples(st.integers(1, 12), st.integers(2, 13)),
                  elements=st.sampled_from([0.0, 1.0, 2.0, -3.0, np.inf, -np.inf, np.nan]) | st.floats(-5, 5)))
def test_argmax_2d_is_numpys_argmax_of_a_strided_view(full):
    """symmetric_center's peak: the first maximum in C order (NaN counting as the maximum), as np.argmax."""
    from saed.image.centre import _argmax_2d

    view = full[:, :-1]  # the search region is a strided view of the self-convolution
    want = np.unravel_index(int(np.argmax(view)), view.shape)
    assert _argmax_2d(view) == (int(want[0]), int(want[1]))


@settings(max_examples=300, deadline=None)
@given(hnp.arrays(np.float32, st.integers(1, 300),
                  elements=st.floats(-1e4, 1e4, width=32) | st.sampled_from([1.0, 2.0, float("nan")])),
       st.integers(1, 16))
def test_level_bins_are_searchsorted(lv, nb):
    """_noise_model's bin of each level against np.searchsorted(side='right') - 1, clipped (NaN included)."""
    from saed.image.background import _level_bins

    with np.errstate(invalid="ignore"):
        edges = np.unique(np.quantile(lv, np.linspace(0, 1, nb + 1)))
    want = np.clip(np.searchsorted(edges, lv, side="right") - 1, 0, max(len(edges) - 2, 0))
    assert np.array_equal(_level_bins(lv, edges), want)


@settings(max_examples=60, deadline=None)
@given(st.integers(8192, 70000), st.integers(0, 2**31 - 1), st.sampled_from([None, 1.0, 0.25, 7.0]),
       st.sampled_from([np.float32, np.float32, np.float64]), st.integers(2, 20), st.booleans())
def test_level_groups_are_quantile_edges_and_searchsorted_bins(n, seed, step, dtype, nb, signed):
    """_noise_model's one-pass grouping against np.quantile (edges, bit for bit) and np.searchsorted
    (the values of each bin: the same multiset, compared sorted)."""
    from saed.image.background import _level_bins, _level_groups

    rng = np.random.default_rng(seed)
    lv = rng.gamma(2.0, 40.0, n) + 5.0
    if signed:  # dark-subtracted levels: both signs (bit patterns order negative floats backwards)
        lv -= 60.0
    if step:  # ties: levels on a grid, so edges land on repeated values
        lv = np.round(lv / step) * step
        lv[lv == 0] = 0.0  # np.round makes -0.0, which _level_groups leaves to the general way
    lv = lv.astype(dtype)
    res = rng.normal(0.0, 3.0, n) + 1e-3
    got = _level_groups(lv, res, nb)
    edges = np.unique(np.quantile(lv, np.linspace(0, 1, nb + 1)))
    if dtype == np.float64:  # float32 levels only (the background's); float64 goes the general way
        assert got is None
        return
    assert _same_bits(got[0], edges)
    if len(edges) < 3:
        return
    _, res_g, lv_g, counts = got
    which = _level_bins(lv, edges)
    assert np.array_equal(counts, np.bincount(which, minlength=len(edges) - 1))
    ends = np.cumsum(counts)
    for b in range(len(edges) - 1):
        sl = slice(ends[b] - counts[b], ends[b])
        assert np.array_equal(np.sort(res_g[sl]), np.sort(res[which == b]))
        assert np.array_equal(np.sort(lv_g[sl]), np.sort(lv[which == b]))


def test_level_groups_step_aside_for_signed_zeros_and_nan():
    from saed.image.background import _level_groups

    lv = np.linspace(0.0, 100.0, 9000).astype(np.float32)
    res = np.ones(9000)
    assert _level_groups(lv, res, 16) is not None
    res[5] = -0.0
    assert _level_groups(lv, res, 16) is None
    res[5] = np.nan
    assert _level_groups(lv, res, 16) is None
    assert _level_groups(lv[:100], res[:100], 16) is None
