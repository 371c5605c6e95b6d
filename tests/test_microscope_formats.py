"""Microscope file formats read through rosettasciio: pixels, metadata in saed's units, laziness, indexing.

Every file is written by the test itself (tests/microscope_writers.py: DM3/DM4 and SER from their
published layouts, EMD with h5py in both layouts, MRC with mrcfile), with known pixels and metadata.
Check values are the values written, converted by hand in the comments.
"""

from __future__ import annotations

import functools
import json
import os
import resource
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import microscope_writers as w
from saed.cli import main
from saed.errors import ImageError
from saed.image.io import count_frames, read_image, read_pattern
from saed.image.microscope import read_frames

RNG = np.random.default_rng(42)
PIX = RNG.integers(0, 60000, (40, 48)).astype(np.uint16)
STACK = RNG.integers(0, 60000, (3, 40, 48)).astype(np.uint16)


# ----------------------------------------------------------------------------- pixels and metadata
@pytest.mark.parametrize("version", [3, 4])
def test_dm_pixels_and_metadata(tmp_path, version):
    p = tmp_path / f"p.dm{version}"
    w.write_dm(p, PIX, version=version, scale=0.005, units="1/Å", voltage_v=200000, mode="DIFFRACTION",
               camera_length_mm=120, pixel_size_um=7.5, binning=2, exposure_s=0.5, microscope="TEM-200",
               date="12/1/2026", time="10:12:13 PM")
    img, meta = read_pattern(p)
    np.testing.assert_array_equal(img, PIX.astype(np.float32))
    assert meta.format == f"DM{version}" and meta.frame_shape == (40, 48) and meta.n_frames == 1
    # 0.005 per Å = 0.005 per 0.1 nm = 0.05 per nm (written as float32: 1e-7 relative)
    assert meta.scale_inv_nm_per_px == pytest.approx(0.05, rel=1e-6)
    assert meta.voltage_kv == 200.0                      # 200000 V
    assert meta.camera_length_mm == 120.0 and meta.mode == "diffraction"
    assert meta.pixel_pitch_um == 7.5 and meta.binning == 2
    assert meta.effective_pixel_pitch_um == 15.0         # binning applied once: 7.5 um x 2
    assert meta.exposure_s == 0.5 and meta.instrument == "TEM-200" and "10:12:13 PM" in meta.acquired


def test_dm4_scan_stays_lazy_and_frames_are_the_right_ones(tmp_path):
    scan = RNG.integers(0, 4000, (2, 3, 40, 48)).astype(np.uint16)
    p = tmp_path / "scan.dm4"
    w.write_dm(p, scan, version=4, scale=0.05, units="1/nm")
    frames, meta = read_frames(p)
    assert meta.scan_shape == (2, 3) and meta.n_frames == 6 and meta.frame_shape == (40, 48)
    assert not isinstance(frames, np.ndarray) or isinstance(frames, np.memmap)  # nothing decoded yet
    assert count_frames(p) == 6
    for k in (0, 4, 5):
        np.testing.assert_array_equal(read_image(p, frame=k), scan.reshape(6, 40, 48)[k].astype(np.float32))
    with pytest.raises(ImageError, match="frame 6 does not exist; the file holds 6 frames"):
        read_image(p, frame=6)


def test_emd_berkeley(tmp_path):
    p = tmp_path / "b.emd"
    # dim units "[n_m^-1]" is the Berkeley spelling of nm^-1
    w.write_emd_berkeley(p, PIX, scale=0.05, microscope_attrs={"voltage": 300.0, "camera_length": 80.0})
    img, meta = read_pattern(p)
    np.testing.assert_array_equal(img, PIX.astype(np.float32))
    assert meta.format == "EMD (Berkeley layout)"
    assert meta.scale_inv_nm_per_px == pytest.approx(0.05) and meta.voltage_kv == 300.0
    assert meta.camera_length_mm == 80.0


def test_emd_instrument_maker_stack(tmp_path):
    p = tmp_path / "v.emd"
    # 5e7 per metre = 5e7 per 1e9 nm = 0.05 per nm; 0.12 m = 120 mm; 200000 V = 200 kV
    w.write_emd_maker(p, STACK, pixel_size=5e7, pixel_unit="1/m", camera_length_m=0.12, binning=4, exposure_s=0.25)
    frames, meta = read_frames(p)
    assert meta.format == "EMD (instrument-maker layout)" and meta.n_frames == 3
    assert meta.scale_inv_nm_per_px == pytest.approx(0.05) and meta.voltage_kv == 200.0
    assert meta.camera_length_mm == pytest.approx(120.0) and meta.binning == 4 and meta.exposure_s == 0.25
    np.testing.assert_array_equal(read_image(p, frame=2), STACK[2].astype(np.float32))


def test_a_file_with_a_survey_image_and_a_pattern_opens_on_the_pattern(tmp_path):
    import h5py

    p = tmp_path / "two.emd"
    survey, pattern = PIX, PIX[::-1].copy()
    with h5py.File(p, "w") as f:   # Berkeley layout, two groups: a real-space survey image, then the pattern
        f.attrs["version_major"], f.attrs["version_minor"] = 0, 2
        for name, data, units, step in (("a_survey", survey, "[n_m]", 0.5), ("b_pattern", pattern, "[n_m^-1]", 0.05)):
            g = f.create_group(f"data/{name}")
            g.attrs["emd_group_type"] = 1
            g.create_dataset("data", data=data.T)
            for k, n in enumerate(data.T.shape):
                d = g.create_dataset(f"dim{k + 1}", data=np.arange(n) * step)
                d.attrs["name"], d.attrs["units"] = "xy"[k], units
    assert count_frames(p) == 2
    img, meta = read_pattern(p)
    np.testing.assert_array_equal(img, pattern.astype(np.float32))
    assert meta.image_name == "b_pattern" and meta.scale_inv_nm_per_px == pytest.approx(0.05)
    assert "the file holds 2 images; this is 'b_pattern'" in meta.notes and "frame 1 of 2 (choose with --frame)" in meta.notes
    img0, meta0 = read_pattern(p, frame=0)
    np.testing.assert_array_equal(img0, survey.astype(np.float32))
    assert meta0.mode == "image" and meta0.real_pixel_size_nm == pytest.approx(0.5)


def test_ser_with_and_without_its_emi(tmp_path):
    p = tmp_path / "run_1.ser"
    w.write_ser(p, STACK, delta=5e7)
    frames, meta = read_frames(p)           # alone: m or 1/m is not stated, so the scale is not used
    assert meta.scale_inv_nm_per_px is None and meta.real_pixel_size_nm is None and not meta.units_stated
    np.testing.assert_array_equal(read_image(p, frame=1), STACK[1].astype(np.float32))
    w.write_emi(tmp_path / "run.emi", mode="TEM Diffraction", high_tension_kv=200, camera_length_m=0.12)
    img, meta = read_pattern(p, frame=2)    # the EMI beside it says diffraction: 5e7 1/m = 0.05 1/nm
    np.testing.assert_array_equal(img, STACK[2].astype(np.float32))
    assert meta.scale_inv_nm_per_px == pytest.approx(0.05) and meta.voltage_kv == 200.0
    assert meta.camera_length_mm == pytest.approx(120.0) and meta.mode == "diffraction"


def test_mrc_stack_scale_is_not_a_diffraction_calibration(tmp_path):
    p = tmp_path / "m.mrc"
    w.write_mrc(p, STACK.astype(np.int16), voxel_size_angstrom=1.5)
    img, meta = read_pattern(p, frame=1)
    np.testing.assert_array_equal(img, STACK[1].astype(np.int16).astype(np.float32))
    assert meta.n_frames == 3 and meta.scale_inv_nm_per_px is None and meta.real_pixel_size_nm is None
    assert any("does not say whether" in n for n in meta.notes)


def test_a_tiff_named_npy_is_read_by_content(tmp_path):
    import tifffile

    p = tmp_path / "really_a_tiff.npy"
    tifffile.imwrite(p, PIX, photometric="minisblack")
    np.testing.assert_array_equal(read_image(p), PIX.astype(np.float32))


# ----------------------------------------------------------------------------- index with no calibration options
TRUE_SCALE = 0.0498418  # 200 kV, L = 120 mm, 15 um pixels: 0.015 mm / (0.0025079 nm x 120 mm) (README convention)


@pytest.fixture(scope="module")
def hcp_pattern():
    from saed.crystal import builtin_phase
    from saed.synth.demo_set import demo_scale_inv_nm_per_px
    from saed.synth.kinematic import synthetic_image

    scale = demo_scale_inv_nm_per_px()
    assert scale == pytest.approx(TRUE_SCALE, rel=1e-5)
    pat, truth = synthetic_image(builtin_phase("Co-hcp"), [2, -1, -1, 0], scale_inv_nm_per_px=scale,
                                 in_plane_rotation_deg=64.0, image_shape=(384, 384), max_g_inv_nm=9.0, rng=5)
    return np.asarray(pat.image).astype(np.uint16), scale


def _writers(scale):
    return {
        "dm3": lambda p, a: w.write_dm(p, a, version=3, scale=scale, units="1/nm", voltage_v=200000, mode="DIFFRACTION"),
        # no stored scale: L, voltage, 7.5 um sensor pixels binned 2 -> 15 um -> the same scale (binning once)
        "dm4": lambda p, a: w.write_dm(p, a, version=4, voltage_v=200000, mode="DIFFRACTION", camera_length_mm=120,
                                       pixel_size_um=7.5, binning=2),
        "emd_berkeley.emd": lambda p, a: w.write_emd_berkeley(p, a, scale=scale, microscope_attrs={"voltage": 200.0}),
        "emd_maker.emd": lambda p, a: w.write_emd_maker(p, a, pixel_size=scale * 1e9, pixel_unit="1/m"),
        "ser": lambda p, a: (w.write_ser(p, a, delta=scale * 1e9), w.write_emi(Path(p).with_name("pat.emi"),
                                                                                high_tension_kv=200)),
        "mrc": lambda p, a: (w.write_mrc(p, a.astype(np.int16)),   # MRC has no reciprocal calibration: a sidecar
                             Path(p).with_suffix(".json").write_text(json.dumps(
                                 {"format": "saed-calibration-1", "scale_inv_nm_per_px": scale, "voltage_kv": 200.0}))),
    }


@pytest.mark.parametrize("kind", ["dm3", "dm4", "emd_berkeley.emd", "emd_maker.emd", "ser", "mrc"])
def test_simulated_pattern_in_each_format_indexes_without_calibration_options(tmp_path, hcp_pattern, kind):
    image, scale = hcp_pattern
    name = "pat_1.ser" if kind == "ser" else (kind if "." in kind else f"pat.{kind}")
    p = tmp_path / name
    _writers(scale)[kind](p, image)
    out = tmp_path / "r.json"
    assert main(["index", str(p), "--phase", "Co-hcp", "--phase", "Co-fcc", "--json", str(out)]) == 0
    doc = json.loads(out.read_text())
    assert doc["calibration_source"] == ("sidecar" if kind == "mrc" else "file metadata")
    assert doc["scale_inv_nm_per_px"] == pytest.approx(TRUE_SCALE, rel=1e-3)       # within 0.1 %
    best = doc["solutions"][0]
    assert best["phase"] == "Co-hcp" and best["zone_axis_4"] in ([2, -1, -1, 0], [-2, 1, 1, 0])


# ----------------------------------------------------------------------------- mangled files
@functools.lru_cache(maxsize=1)
def _fixture_bytes() -> dict[str, bytes]:
    out = {}
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        w.write_dm(tmp / "a.dm3", PIX, version=3, scale=0.05, units="1/nm", voltage_v=2e5)
        w.write_dm(tmp / "a.dm4", STACK, version=4, scale=0.05, units="1/nm", voltage_v=2e5)
        w.write_ser(tmp / "a_1.ser", STACK, delta=5e7)
        w.write_mrc(tmp / "a.mrc", PIX.astype(np.int16))
        w.write_emd_maker(tmp / "a.emd", STACK, pixel_size=5e7, camera_length_m=0.12)
        for k in ("a.dm3", "a.dm4", "a_1.ser", "a.mrc", "a.emd"):
            out[Path(k).suffix] = (tmp / k).read_bytes()
    return out


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_mangled_microscope_files_give_one_line_errors(tmp_path, data):
    files = _fixture_bytes()
    suffix = data.draw(st.sampled_from(sorted(files)))
    b = bytearray(files[suffix])
    how = data.draw(st.sampled_from(["truncate", "flip", "typecode", "huge"]))
    if how == "truncate":
        b = b[:data.draw(st.integers(1, len(b) - 1))]
    elif how == "flip":
        for _ in range(data.draw(st.integers(1, 8))):
            i = data.draw(st.integers(0, len(b) - 1))
            b[i] ^= data.draw(st.integers(1, 255))
    elif how == "typecode":  # a wrong element type where a tag says what follows ('%%%%' + count + type)
        marks = [i for i in range(len(b) - 4) if b[i:i + 4] == b"%%%%"] or [0]
        i = data.draw(st.sampled_from(marks)) + 4 + (8 if suffix == ".dm4" else 4)
        width = 8 if suffix == ".dm4" else 4
        b[i:i + width] = data.draw(st.integers(0, 40)).to_bytes(width, "big")
    else:  # an absurd size written over a 4-byte word
        i = data.draw(st.integers(0, max(0, len(b) - 4)))
        b[i:i + 4] = (10 ** 9).to_bytes(4, data.draw(st.sampled_from(["big", "little"])))
    p = tmp_path / f"m{suffix}"
    p.write_bytes(bytes(b))
    try:
        img = read_image(p)
    except ImageError as exc:
        msg = str(exc)
        assert "\n" not in msg and msg.startswith(str(p))
    else:
        assert img.ndim == 2 and img.dtype == np.float32


def _vm_limited_run(args, limit_bytes):
    def limit():
        resource.setrlimit(resource.RLIMIT_AS, (limit_bytes, limit_bytes))

    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(Path(__file__).parents[1])] + sys.path))
    return subprocess.run([sys.executable, "-m", "saed", *args], capture_output=True, text=True, env=env,
                          preexec_fn=limit, timeout=120)


@pytest.mark.parametrize("kind", ["dm4", "ser"])
def test_a_declared_billion_pixels_is_refused_in_one_line_within_a_memory_limit(tmp_path, kind):
    small = RNG.integers(0, 4000, (64, 64)).astype(np.uint16)
    if kind == "dm4":
        tree = w.dm_tree(small, scale=0.05, units="1/nm")
        tree["ImageList"][""]["ImageData"]["Dimensions"] = w._unnamed([w.DMData(5, 31623), w.DMData(5, 31623)])
        p = tmp_path / "huge.dm4"
        p.write_bytes(w.dm_bytes(tree, version=4))
    else:
        p = tmp_path / "huge_1.ser"
        w.write_ser(p, small)
        b = bytearray(p.read_bytes())
        first = int.from_bytes(b[30 + 24 + 4 + 6 + 4: 30 + 24 + 4 + 6 + 8], "little")  # first element's offset
        b[first + 42: first + 50] = (31623).to_bytes(4, "little") * 2                # ArraySizeX, ArraySizeY
        p.write_bytes(bytes(b))
    r = _vm_limited_run(["spots", str(p)], 3 << 30)   # 3 GB of address space; the frame would need 4 GB+
    assert r.returncode == 2, r.stderr
    assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr and str(p) in r.stderr


def test_memory_estimate_refuses_a_small_zlib_tiff_of_a_huge_frame(tmp_path):
    import tifffile

    # issue 17.10 used 16000x16000 (5.6 GB); 8000x8000 needs 8000^2 x 25 B = 1.6 GB: refused under 1.5 GB
    p = tmp_path / "big.tif"
    tifffile.imwrite(p, np.zeros((8000, 8000), np.uint8), compression="zlib", photometric="minisblack",
                     tile=(1024, 1024))
    assert p.stat().st_size < 200_000
    r = _vm_limited_run(["spots", str(p)], 1500 << 20)
    assert r.returncode == 2 and r.stderr.count("\n") == 1, r.stderr
    assert "8000x8000 frame needs about 1.6 GB" in r.stderr and "is available" in r.stderr


def test_huge_float_values_give_the_message_without_a_numpy_warning(tmp_path):
    a = np.ones((40, 40)) * 1e300
    a[3, 3] = 1.0
    np.save(tmp_path / "h.npy", a)
    with pytest.raises(ImageError, match=r"pixel values up to 1e\+300 exceed"):  # warnings are errors here:
        read_image(tmp_path / "h.npy")                                           # a numpy warning would fail


def test_batch_takes_each_files_own_calibration(tmp_path, hcp_pattern, capsys):
    import argparse

    from saed.batch import discover_inputs
    from saed.calibration import Calibration
    from saed.cli.cmd_batch import _per_file_calibrations

    image, scale = hcp_pattern
    d = tmp_path / "session"
    d.mkdir()
    w.write_dm(d / "stack.dm4", np.stack([image, image]), version=4, scale=scale, units="1/nm", voltage_v=200000)
    w.write_dm(d / "plain.dm3", image, version=3)                       # nothing calibrates this one
    np.save(d / "side.npy", image)
    (d / "side.json").write_text(json.dumps({"format": "saed-calibration-1", "scale_inv_nm_per_px": 0.05}))
    w.write_dm(d / "scan.dm4", RNG.integers(0, 4000, (2, 3, 40, 48)).astype(np.uint16), version=4)
    inputs = discover_inputs([str(d)])
    scan = next(s for s in inputs.sources if s.name.endswith("scan.dm4"))
    assert (scan.n_frames, scan.scan_shape, scan.frame_shape) == (6, (2, 3), (40, 48))   # a scan, for the map
    args = argparse.Namespace(scale=None, camera_length=None, pixel_pitch=None, voltage=None, calibration=None,
                              center=None, uncalibrated=False)
    context_of, table_scale = _per_file_calibrations(args, inputs.sources, Calibration())
    by_name = {Path(s.name).name: context_of(s) for s in inputs.sources}
    assert by_name["stack.dm4"].scale_inv_nm_per_px == pytest.approx(TRUE_SCALE, rel=1e-6)
    assert by_name["side.npy"].scale_inv_nm_per_px == 0.05 and by_name["plain.dm3"] is None
    err = capsys.readouterr().err
    assert "stack.dm4: calibration  0.049842 1/nm per px at 200 kV  (file metadata: DM4 scale" in err
    assert "1 from file metadata" in err and "1 from sidecar" in err and "2 from none (uncalibrated)" in err


def test_serve_indexes_a_dm4_from_the_acquisition_folder_with_its_own_calibration(tmp_path, hcp_pattern):
    from saed.serve.engine import TableCache, index_file
    from saed.serve.settings import PhaseBook, Settings

    image, scale = hcp_pattern
    p = tmp_path / "acq.dm4"
    w.write_dm(p, image, version=4, scale=scale, units="1/nm", voltage_v=200000, mode="DIFFRACTION")
    done = index_file(p, Settings(phases=("Co-hcp", "Co-fcc")), TableCache(PhaseBook()))
    assert done.doc["calibration_source"] == "file metadata"
    assert done.doc["scale_inv_nm_per_px"] == pytest.approx(TRUE_SCALE, rel=1e-3)
    assert done.doc["solutions"][0]["phase"] == "Co-hcp"
