"""saed.batch.inputs: files, folders and stacks found without reading pixels; bad inputs skipped and named."""

import os

import numpy as np
import pytest
import tifffile
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.batch.inputs import discover_inputs, inspect_source
from saed.errors import InputError


def _pattern(seed=0, shape=(32, 32)):
    return np.random.default_rng(seed).poisson(20, shape).astype(np.uint16)


def test_folder_natural_order_and_non_images_skipped(tmp_path):
    d = tmp_path / "grains"
    d.mkdir()
    for k in (10, 2, 1):
        np.save(d / f"p{k}.npy", _pattern(k))
    (d / "notes.txt").write_text("grain 3 looked bent")
    (d / "p1.json").write_text("{}")
    (d / ".DS_Store").write_bytes(b"\0\0")
    (d / "broken.tif").write_bytes(b"II*\x00" + b"\x00" * 20)
    (d / "sub").mkdir()
    inp = discover_inputs([str(d)])
    assert [os.path.basename(s.name) for s in inp.sources] == ["p1.npy", "p2.npy", "p10.npy"]
    reasons = {os.path.basename(s.path): s.reason for s in inp.skipped}
    assert set(reasons) == {"notes.txt", "p1.json", "broken.tif", "sub"}
    assert "not an image" in reasons["notes.txt"]
    assert "no image" in reasons["broken.tif"]
    assert "--recursive" in reasons["sub"]
    assert all(str(s).startswith("skipped ") for s in inp.skipped)


def test_recursive_and_excluded_outputs(tmp_path):
    (tmp_path / "a").mkdir()
    np.save(tmp_path / "a" / "x.npy", _pattern())
    np.save(tmp_path / "top.npy", _pattern(1))
    out_map = tmp_path / "run_map.png"
    out_map.write_bytes(b"\x89PNG not really")
    inp = discover_inputs([str(tmp_path)], recursive=True, exclude=[str(out_map)])
    assert sorted(os.path.basename(s.name) for s in inp.sources) == ["top.npy", "x.npy"]
    assert inp.skipped == ()


def test_stacks_count_frames_without_loading(tmp_path):
    p3 = tmp_path / "tilt.npy"
    np.save(p3, np.zeros((7, 40, 48), np.float32))
    p4 = tmp_path / "scan.npy"
    np.save(p4, np.zeros((3, 5, 32, 32), np.uint16))
    pt = tmp_path / "series.tif"
    tifffile.imwrite(pt, np.stack([_pattern(k) for k in range(4)]), photometric="minisblack")
    s3, s4, st = (inspect_source(str(p)) for p in (p3, p4, pt))
    assert (s3.n_frames, s3.stack_shape, s3.scan_shape) == (7, (7,), None)
    assert (s4.n_frames, s4.scan_shape) == (15, (3, 5))
    assert st.n_frames == 4


@pytest.mark.parametrize("shape, words", [((100,), "neither an image"), ((2, 3, 4, 32, 32), "neither an image"),
                                          ((50, 3, 8), "detector"), ((0, 32, 32), "no frames")])
def test_stack_of_wrong_shape_is_skipped_with_reason(tmp_path, shape, words):
    p = tmp_path / "bad.npy"
    np.save(p, np.zeros(shape, np.float32))
    inp = discover_inputs([str(p)])
    assert inp.sources == ()
    assert words in inp.skipped[0].reason


def test_missing_path_is_an_error_naming_it(tmp_path):
    with pytest.raises(InputError, match="nosuch"):
        discover_inputs([str(tmp_path / "nosuch")])
    with pytest.raises(InputError):
        discover_inputs([])


def test_same_file_twice_is_taken_once(tmp_path):
    p = tmp_path / "a.npy"
    np.save(p, _pattern())
    inp = discover_inputs([str(p), str(tmp_path), os.path.relpath(p)])
    assert len(inp.sources) == 1


_MAGIC = [b"", b"\x93NUMPY\x01\x00", b"II*\x00", b"MM\x00*", b"\x89PNG\r\n\x1a\n", b"\xff\xd8"]


@settings(max_examples=60, deadline=None)
@given(suffix=st.sampled_from([".npy", ".tif", ".png", ".jpg", ".txt", ""]), magic=st.sampled_from(_MAGIC),
       body=st.binary(max_size=200))
def test_broken_files_in_a_folder_are_skipped_never_raised(tmp_path_factory, suffix, magic, body):
    # hypothesis: any bytes under any name are either a source or a skipped line with a reason
    d = tmp_path_factory.mktemp("junk")
    (d / f"f{suffix}").write_bytes(magic + body)
    inp = discover_inputs([str(d)])
    assert len(inp.sources) + len(inp.skipped) == 1
    assert all(s.reason and "\n" not in s.reason for s in inp.skipped)
