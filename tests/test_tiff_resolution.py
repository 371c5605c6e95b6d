"""TIFF resolution tags read through tifffile's own reader (issue 16.9): broken tags give no calibration.

Check values: a TIFF rational is two unsigned 32-bit integers, numerator then denominator (TIFF 6.0
specification, section 2, field type RATIONAL); ImageJ stores pixels per unit in XResolution with the
unit in its description.
"""

from __future__ import annotations

import struct

import numpy as np
import pytest
import tifffile

from saed.image.io import read_image_calibration


def _imagej_tiff(path, x_res, y_res, unit="1/nm"):
    tifffile.imwrite(path, np.zeros((64, 64), np.uint16), imagej=True, resolution=(x_res, y_res),
                     metadata={"unit": unit})


def test_scale_is_unit_over_pixels_per_unit(tmp_path):
    _imagej_tiff(tmp_path / "a.tif", (80, 1), (80, 1))  # 80 px per 1/nm -> 0.0125 1/nm per px
    assert read_image_calibration(tmp_path / "a.tif") == pytest.approx(1 / 80)
    _imagej_tiff(tmp_path / "b.tif", (500, 1), (500, 1), unit="1/A")  # 1/A = 10 1/nm -> 0.02 1/nm per px
    assert read_image_calibration(tmp_path / "b.tif") == pytest.approx(10 / 500)


def test_zero_denominator_gives_no_calibration(tmp_path):
    path = tmp_path / "broken.tif"
    _imagej_tiff(path, (80, 7), (80, 7))
    raw = path.read_bytes()
    rational = struct.pack("<II", 80, 7)  # tifffile writes little-endian files
    assert raw.count(rational) == 2
    path.write_bytes(raw.replace(rational, struct.pack("<II", 80, 0)))
    assert read_image_calibration(path) is None


def test_unequal_x_and_y_resolution_gives_no_calibration(tmp_path):
    _imagej_tiff(tmp_path / "c.tif", (80, 1), (90, 1))
    assert read_image_calibration(tmp_path / "c.tif") is None
