"""Hypothesis: mangled calibration files and history folders fed to every command that reads them.

A calibration file is read by ``index``, ``spots``, ``rings``, ``simulate`` and ``batch`` (--calibration);
the history by ``calibrate --list``. Whatever the bytes, the answer is a result (exit 0) or one
line naming the file (exit 2), never a traceback; a history lists every good entry, names every
bad one "unreadable", and orders each camera length newest first by time (checked here with
datetime in the test, not with the code under test).
"""

from __future__ import annotations

import datetime as dt
import json
import math
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from saed.calibration import read_calibration_file
from saed.cli import main
from saed.errors import InputError

GOOD = {"format": "saed-calibration-1", "scale_inv_nm_per_px": 0.0558, "voltage_kv": 200.0,
        "wavelength_nm": 0.0025079, "center_px": [255.5, 256.0], "ellipse": {"axis_ratio": 1.01,
                                                                              "major_axis_angle_deg": 20.0},
        "camera_length_mm": 100.0, "camera_constant_nm_mm": 0.25079, "pixel_pitch_um": 14.0, "standard": "Au",
        "date": "2026-03-01T22:15:00+01:00", "nominal_camera_length_mm": 100, "residual_pct": 0.1}

json_values = st.recursive(
    st.none() | st.booleans() | st.integers(min_value=-10**30, max_value=10**30)
    | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=6)


@st.composite
def mangled_file(draw) -> bytes:
    """A calibration file with fields replaced or removed, maybe nested or cut, maybe not text at all."""
    d = dict(GOOD)
    for key in draw(st.lists(st.sampled_from(sorted(GOOD)), max_size=4, unique=True)):
        if draw(st.booleans()):
            d[key] = draw(json_values)
        else:
            d.pop(key)
    data = json.dumps(d, allow_nan=True).encode()
    how = draw(st.sampled_from(["as is", "cut", "byte", "nested", "binary"]))
    if how == "cut":
        data = data[:draw(st.integers(0, len(data)))]
    elif how == "byte":
        i = draw(st.integers(0, len(data) - 1))
        data = data[:i] + bytes([draw(st.integers(0, 255))]) + data[i + 1:]
    elif how == "nested":
        n = draw(st.sampled_from([10, 1000, 50000]))
        data = b'{"format": "saed-calibration-1", "x": ' + b"[" * n + b"]" * n + b"}"
    elif how == "binary":
        data = draw(st.binary(max_size=64))
    return data


FAST = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FAST
@given(mangled_file())
def test_the_reader_returns_a_checked_calibration_or_one_line(data):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "cal.json"
        p.write_bytes(data)
        try:
            cal = read_calibration_file(p)
        except InputError as exc:
            assert "\n" not in str(exc) and str(p) in str(exc)
            return
    # Accepted: every number it carries is usable (ITC-free facts: finite, positive, within range).
    assert 1e-4 <= cal.scale_inv_nm_per_px <= 2.0
    assert math.isfinite(cal.voltage_kv) and cal.voltage_kv > 0
    if cal.center_px is not None:
        assert all(math.isfinite(v) for v in cal.center_px)
    if cal.ellipse is not None:
        assert 1.0 <= cal.ellipse.axis_ratio <= 1.5 and 0.0 <= cal.ellipse.major_axis_angle_deg < 180.0
    for v in (cal.camera_length_mm, cal.pixel_pitch_um):
        assert v is None or (math.isfinite(v) and v > 0)
    assert cal.date is None or isinstance(cal.date, str)


COMMANDS = {
    # The image does not exist: a calibration that passes is followed by the missing-image message,
    # so each command's calibration path is exercised without image work.
    "index": ["index", "{missing}", "--phase", "Co-fcc", "--calibration", "{cal}"],
    "spots": ["spots", "{missing}", "--calibration", "{cal}"],
    "rings": ["rings", "{missing}", "--phase", "Au", "--calibration", "{cal}"],
    "simulate": ["simulate", "Co-fcc", "--zone", "0", "0", "1", "--max-g", "4", "--calibration", "{cal}"],
    "batch": ["batch", "{missing}", "--phase", "Co-fcc", "--calibration", "{cal}", "--out", "{out}"],
}


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(data=mangled_file(), command=st.sampled_from(sorted(COMMANDS)))
# a record separator quoted from the file into the message once split it into two lines
@example(data=json.dumps({**GOOD, "center_px": "\x1e"}).encode(), command="index")
def test_every_command_reading_a_calibration_gives_a_result_or_one_line(data, command, capsys):
    with tempfile.TemporaryDirectory() as d:
        cal = Path(d) / "cal.json"
        cal.write_bytes(data)
        missing = Path(d) / "pattern.tif"
        argv = [a.format(cal=cal, missing=missing, out=Path(d) / "rows.csv") for a in COMMANDS[command]]
        try:
            read_calibration_file(cal)
            readable = True
        except InputError:
            readable = False
        rc = main(argv)
        out, err = capsys.readouterr()
    assert "Traceback" not in err
    if not readable:
        assert rc == 2 and len(err.strip().splitlines()) == 1 and str(cal) in err
    elif command == "simulate":
        assert rc == 0 and err == ""
    else:
        assert rc == 2 and len(err.strip().splitlines()) == 1 and "pattern.tif" in err


def _zone(minutes: int) -> dt.timezone:
    return dt.timezone(dt.timedelta(minutes=minutes))


good_entry = st.fixed_dictionaries({
    "scale_inv_nm_per_px": st.floats(0.01, 0.1),
    "nominal_camera_length_mm": st.sampled_from([100, 200]),
    "when": st.datetimes(min_value=dt.datetime(2020, 1, 1), max_value=dt.datetime(2030, 1, 1)),
    "offset_min": st.sampled_from([-300, -60, 0, 60, 120, 330]),
})


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(goods=st.lists(good_entry, max_size=5), bads=st.lists(mangled_file(), max_size=4))
def test_calibrate_list_survives_any_history_folder(goods, bads, capsys):
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d)
        times = {}
        for k, g in enumerate(goods):
            when = g["when"].replace(tzinfo=_zone(g["offset_min"]), microsecond=0)
            doc = {**GOOD, "scale_inv_nm_per_px": g["scale_inv_nm_per_px"], "camera_length_mm": None,
                   "camera_constant_nm_mm": None, "nominal_camera_length_mm": g["nominal_camera_length_mm"],
                   "date": when.isoformat()}
            name = f"good{k}.json"
            (folder / name).write_text(json.dumps(doc))
            times[name] = (g["nominal_camera_length_mm"], when)
        for k, data in enumerate(bads):
            (folder / f"bad{k}.json").write_bytes(data)
        rc = main(["calibrate", "--list", str(folder)])
        out, err = capsys.readouterr()
        assert rc == 0 and "Traceback" not in err
        rc = main(["calibrate", "--list", str(folder), "--json", "-"])
        out, err = capsys.readouterr()
    assert rc == 0 and err == ""
    doc = json.loads(out)
    listed = [Path(c["file"]).name for c in doc["calibrations"]]
    assert set(times) <= set(listed)  # every good entry is listed
    assert len(listed) + len(doc["skipped"]) == len(goods) + len(bads)
    assert all(s.startswith("unreadable: ") and "\n" not in s for s in doc["skipped"])
    goods_in_order = [n for n in listed if n in times]
    for length in (100, 200):  # newest first, compared as times (not as text)
        seq = [times[n][1] for n in goods_in_order if times[n][0] == length]
        assert seq == sorted(seq, reverse=True)


@pytest.mark.parametrize("n", [0, 1])
def test_an_empty_or_missing_history_folder_lists_nothing(tmp_path, capsys, n):
    folder = tmp_path / "h" if n else tmp_path
    assert main(["calibrate", "--list", str(folder)]) == 0
    assert "no calibrations stored" in capsys.readouterr().out
