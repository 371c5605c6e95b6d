"""Reading recorded patterns: formats, frames, calibration tags, and one-line errors for bad files.

Reference readers: tifffile, Pillow and numpy write the files; what they wrote is what must come back.
"""

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from PIL import Image

from saed.errors import ImageError
from saed.image.io import check_image, count_frames, read_image, read_image_calibration, read_mask_image

RNG = np.random.default_rng(42)


def _pattern(dtype, shape=(40, 48)):
    info = np.iinfo(dtype) if np.dtype(dtype).kind in "ui" else None
    hi = min(info.max, 60000) if info else 5000.0
    lo = max(info.min, -1000) if info and info.min < 0 else 0
    return RNG.uniform(lo, hi, size=shape).astype(dtype)


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.uint32, np.int16, np.int32, np.float32, np.float64])
def test_tiff_values_come_back_unscaled(tmp_path, dtype):
    a = _pattern(dtype)
    p = tmp_path / "p.tif"
    tifffile.imwrite(p, a, photometric="minisblack")
    img = read_image(p)
    assert img.dtype == np.float32 and img.shape == a.shape
    np.testing.assert_array_equal(img, a.astype(np.float32))


def test_multipage_tiff_frames(tmp_path):
    stack = np.stack([np.full((32, 36), k, np.uint16) + np.arange(36, dtype=np.uint16) for k in range(5)])
    p = tmp_path / "stack.tif"
    tifffile.imwrite(p, stack, photometric="minisblack")
    assert count_frames(p) == 5
    assert read_image(p)[0, 0] == 0.0
    assert read_image(p, frame=3)[0, 1] == 4.0
    with pytest.raises(ImageError, match="frame 5 does not exist.*5 frames"):
        read_image(p, frame=5)


@pytest.mark.parametrize("mode,dtype", [("L", np.uint8), ("I;16", np.uint16)])
def test_png_grey(tmp_path, mode, dtype):
    a = _pattern(dtype, (33, 35))
    p = tmp_path / "p.png"
    Image.fromarray(a).save(p)
    np.testing.assert_array_equal(read_image(p), a.astype(np.float32))


def test_jpeg_grey(tmp_path):
    a = (np.add.outer(np.arange(32), np.arange(32)) * 4).astype(np.uint8)
    p = tmp_path / "p.jpg"
    Image.fromarray(a).save(p, quality=95)
    img = read_image(p)
    assert img.shape == a.shape
    assert np.abs(img - a).max() < 12  # lossy, but not rescaled


def test_rgb_with_equal_channels_is_grey_and_colour_is_refused(tmp_path):
    g = _pattern(np.uint8, (32, 32))
    p = tmp_path / "g.png"
    Image.fromarray(np.stack([g, g, g], -1)).save(p)
    np.testing.assert_array_equal(read_image(p), g.astype(np.float32))
    c = np.stack([g, g, g], -1)
    c[3, 4, 1] ^= 7
    Image.fromarray(c).save(tmp_path / "c.png")
    with pytest.raises(ImageError, match=r"c\.png: a colour image"):
        read_image(tmp_path / "c.png")
    tifffile.imwrite(tmp_path / "c.tif", c, photometric="rgb")
    with pytest.raises(ImageError, match="colour"):
        read_image(tmp_path / "c.tif")


def test_npy_plain_and_stack(tmp_path):
    a = _pattern(np.uint16, (2, 3, 32, 34))
    p = tmp_path / "s.npy"
    np.save(p, a)
    assert count_frames(p) == 6
    np.testing.assert_array_equal(read_image(p, frame=4), a[1, 1].astype(np.float32))
    np.save(tmp_path / "o.npy", np.array([{"a": 1}], dtype=object), allow_pickle=True)
    with pytest.raises(ImageError, match="Python objects"):
        read_image(tmp_path / "o.npy")


@pytest.mark.parametrize("data,match", [
    (np.zeros((32, 32), np.uint16), "every pixel is zero"),
    (np.full((32, 32), 65535, np.uint16), "same value 65535"),
    (np.ones((1, 300), np.uint16), "1x300 pixels"),
    (np.zeros((0, 10), np.uint16), "empty"),
])
def test_useless_images_are_refused(tmp_path, data, match):
    p = tmp_path / "bad.npy"
    np.save(p, data)
    with pytest.raises(ImageError, match=match):
        read_image(p)


def test_nan_and_inf(tmp_path):
    a = _pattern(np.float32)
    a[3, 3] = np.nan
    a[4, 4] = np.inf
    tifffile.imwrite(tmp_path / "n.tif", a)
    with pytest.raises(ImageError, match="2 pixels are NaN or infinite"):
        read_image(tmp_path / "n.tif")
    with pytest.raises(ImageError, match="NaN"):
        check_image(a, name="array")


def test_truncated_tiff_and_non_image(tmp_path):
    a = _pattern(np.uint16, (64, 64))
    p = tmp_path / "t.tif"
    tifffile.imwrite(p, a, photometric="minisblack")
    data = p.read_bytes()
    (tmp_path / "cut.tif").write_bytes(data[: len(data) // 2])
    with pytest.raises(ImageError, match=r"cut\.tif: .*truncated"):
        read_image(tmp_path / "cut.tif")
    (tmp_path / "notes.tif").write_text("not an image\n")
    with pytest.raises(ImageError, match=r"notes\.tif: not a readable TIFF"):
        read_image(tmp_path / "notes.tif")
    (tmp_path / "empty.png").write_bytes(b"")
    with pytest.raises(ImageError, match="empty"):
        read_image(tmp_path / "empty.png")
    with pytest.raises(ImageError, match="no such file"):
        read_image(tmp_path / "missing.tif")
    (tmp_path / "x.dat").write_text("hello")
    with pytest.raises(ImageError, match=r"not an image format saed reads .*it reads TIFF, PNG, JPEG, .npy, DM3, DM4, EMD, SER"):
        read_image(tmp_path / "x.dat")


def test_tiff_reciprocal_scale_tags(tmp_path):
    a = _pattern(np.uint16)
    # ImageJ stores "pixels per unit" in XResolution and the unit in its description.
    tifffile.imwrite(tmp_path / "a.tif", a, imagej=True, resolution=(1 / 0.0125, 1 / 0.0125), metadata={"unit": "1/nm"})
    assert read_image_calibration(tmp_path / "a.tif") == pytest.approx(0.0125)
    # 1/Angstrom: 1 1/A = 10 1/nm.
    tifffile.imwrite(tmp_path / "b.tif", a, imagej=True, resolution=(1 / 0.002, 1 / 0.002), metadata={"unit": "1/A"})
    assert read_image_calibration(tmp_path / "b.tif") == pytest.approx(0.02)
    # A real-space unit or a print resolution is not a reciprocal scale.
    tifffile.imwrite(tmp_path / "c.tif", a, imagej=True, resolution=(5.0, 5.0), metadata={"unit": "nm"})
    assert read_image_calibration(tmp_path / "c.tif") is None
    tifffile.imwrite(tmp_path / "d.tif", a, resolution=(300, 300), resolutionunit="INCH")
    assert read_image_calibration(tmp_path / "d.tif") is None
    np.save(tmp_path / "e.npy", a)
    assert read_image_calibration(tmp_path / "e.npy") is None


def test_mask_image(tmp_path):
    m = np.zeros((20, 30), np.uint8)
    m[5:9, 10:20] = 255
    Image.fromarray(m).save(tmp_path / "m.png")
    mask = read_mask_image(tmp_path / "m.png", shape=(20, 30))
    assert mask.sum() == 40 and mask[6, 12]
    with pytest.raises(ImageError, match="the mask is 20x30 pixels but the pattern is 30x30"):
        read_mask_image(tmp_path / "m.png", shape=(30, 30))


# ---------------------------------------------------------------------------- fuzzing
def _real_file_bytes() -> dict:
    """Bytes of small real files, written by the reference writers (tifffile, Pillow, numpy)."""
    import io

    a = np.random.default_rng(7).integers(0, 60000, (32, 36)).astype(np.uint16)
    out = {}
    for key, write in {
        ".tif": lambda b: tifffile.imwrite(b, a, photometric="minisblack"),
        ".tiz": lambda b: tifffile.imwrite(b, np.stack([a, a]), photometric="minisblack", compression="zlib"),
        ".png": lambda b: Image.fromarray(a).save(b, format="PNG"),
        ".jpg": lambda b: Image.fromarray((a // 256).astype(np.uint8)).save(b, format="JPEG"),
        ".npy": lambda b: np.save(b, a),
    }.items():
        buf = io.BytesIO()
        write(buf)
        out[key] = buf.getvalue()
    return out


REAL_FILES = _real_file_bytes()


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(which=st.sampled_from(sorted(REAL_FILES)),
       edits=st.lists(st.tuples(st.floats(0, 1), st.integers(0, 255)), min_size=0, max_size=8),
       cut=st.one_of(st.none(), st.floats(0, 1)))
def test_corrupted_bytes_give_an_image_or_one_line_error(tmp_path, which, edits, cut):
    data = bytearray(REAL_FILES[which])
    for pos, val in edits:
        data[int(pos * (len(data) - 1))] = val
    if cut is not None:
        data = data[: int(cut * len(data))]
    p = tmp_path / ("fuzz" + (".tif" if which == ".tiz" else which))
    p.write_bytes(bytes(data))
    for fn in (read_image, count_frames, read_image_calibration):
        try:
            out = fn(p)
        except ImageError as exc:
            msg = str(exc)
            assert "\n" not in msg and msg.startswith(str(p))
        else:
            if fn is read_image:
                assert out.ndim == 2 and out.dtype == np.float32 and np.isfinite(out).all()
