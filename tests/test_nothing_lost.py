"""Issue 17: no command overwrites its own input, loses a file already written, or leaves a traceback.

Each case of the issue is one test here. Special targets are objects the test makes (symbolic and
hard links, a FIFO, a Unix socket, a private device node where the kernel allows it, a "folder"
that is really a regular file: the tests run as root, whom permission bits do not stop). Races use
real processes (multiprocessing, 20 rounds each).
"""

from __future__ import annotations

import json
import math
import multiprocessing
import os
import resource
import socket
import stat
import subprocess
import sys
import tempfile
import threading
import warnings
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
import tifffile

from saed import files as saed_files
from saed.calibration import Calibration, Ellipse, read_calibration_file, write_calibration_file
from saed.calibrate.history import list_calibrations, store_calibration
from saed.cli import main
from saed.crystal import builtin_phase
from saed.errors import InputError
from saed.synth.rings import ring_pattern

EXAMPLES = resources.files("saed").joinpath("data/examples")
ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data"


def _run(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def _one_line_error(err: str, *needles: str) -> None:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and "error:" in lines[0] and "Traceback" not in err, err
    for n in needles:
        assert n in lines[0], lines[0]


@pytest.fixture()
def example(tmp_path):
    img, cal = tmp_path / "grain_B_hcp.tif", tmp_path / "grain_B_hcp.json"
    img.write_bytes(EXAMPLES.joinpath("grain_B_hcp.tif").read_bytes())
    cal.write_bytes(EXAMPLES.joinpath("grain_B_hcp.json").read_bytes())
    return img, cal


def _png_copy(img: Path) -> Path:
    from PIL import Image

    a = tifffile.imread(img).astype(float)
    png = img.with_suffix(".png")
    Image.fromarray(np.uint8(255 * a / a.max())).save(png)
    return png


# ---------------------------------------------------------------- 17.1 outputs never replace inputs
def _cases(d: Path, img: Path, cal: Path):
    """(argv, the input that must survive, the label the message names)."""
    png = _png_copy(img)
    hard = d / "also_the_image.json"
    os.link(img, hard)
    soft = d / "link_to_cal.json"
    soft.symlink_to(cal)
    mask = d / "mask.png"
    mask.write_bytes(png.read_bytes())
    cif = d / "Si.cif"
    cif.write_bytes((DATA / "Si.cif").read_bytes())
    result = d / "result.json"
    result.write_text(json.dumps({"solutions": []}))
    pdf_cif = d / "cell.pdf"
    pdf_cif.write_bytes(cif.read_bytes())
    return {
        "index --json IMAGE": (["index", img, "--calibration", cal, "--json", img], img, "IMAGE"),
        "index --overlay onto the input PNG": (["index", png, "--scale", "0.05", "--overlay", png], png, "IMAGE"),
        "index --json: a hard link of IMAGE": (["index", img, "--calibration", cal, "--json", hard], img, "IMAGE"),
        "spots --json: a symlink to --calibration": (["spots", img, "--calibration", cal, "--json", soft], cal,
                                                      "--calibration"),
        "spots --overlay --mask": (["spots", img, "--mask", mask, "--overlay", mask], mask, "--mask"),
        "rings --json --calibration": (["rings", img, "--calibration", cal, "--json", cal], cal, "--calibration"),
        "calibrate --out IMAGE": (["calibrate", img, "--standard", "Au", "--out", img, "--no-history"], img, "IMAGE"),
        "calibrate --out --standard CIF": (["calibrate", img, "--standard", cif, "--out", cif, "--no-history"], cif,
                                           "--standard"),
        "simulate --json PHASE CIF": (["simulate", cif, "--zone", "0", "1", "1", "--json", cif], cif, "PHASE"),
        "simulate --json --calibration": (["simulate", "Si", "--zone", "0", "1", "1", "--calibration", cal,
                                           "--json", cal], cal, "--calibration"),
        "tilt --json --from-index": (["tilt", "--from-index", result, "--json", result], result, "--from-index"),
        "atlas --out PHASE": (["atlas", pdf_cif, "--out", pdf_cif], pdf_cif, "PHASE"),
    }


CASE_NAMES = ["index --json IMAGE", "index --overlay onto the input PNG", "index --json: a hard link of IMAGE",
              "spots --json: a symlink to --calibration", "spots --overlay --mask", "rings --json --calibration",
              "calibrate --out IMAGE", "calibrate --out --standard CIF", "simulate --json PHASE CIF",
              "simulate --json --calibration", "tilt --json --from-index", "atlas --out PHASE"]


@pytest.mark.parametrize("case", CASE_NAMES)
def test_no_output_replaces_an_input_of_the_same_run(case, example, tmp_path, capsys):
    img, cal = example
    argv, kept, label = _cases(tmp_path, img, cal)[case]
    before = kept.read_bytes()
    rc, out, err = _run(capsys, *argv)
    assert rc == 2
    _one_line_error(err, "is the input", label)
    assert kept.read_bytes() == before and stat.S_ISREG(os.lstat(kept).st_mode)
    assert out == ""  # refused before any work


def test_two_outputs_naming_one_file_are_refused(example, tmp_path, capsys):
    img, cal = example
    rc, _, err = _run(capsys, "index", img, "--calibration", cal, "--json", tmp_path / "r.png",
                      "--overlay", tmp_path / "r.png")
    assert rc == 2
    _one_line_error(err, "name the same file")
    assert not (tmp_path / "r.png").exists()


# ---------------------------------------------------------------- 17.3 what stands at the target
def test_json_through_a_symlink_replaces_the_file_it_names(tmp_path, capsys):
    real = tmp_path / "phases.json"
    real.write_text("old")
    link = tmp_path / "latest.json"
    link.symlink_to(real)
    rc, _, _ = _run(capsys, "phases", "--json", link)
    assert rc == 0 and link.is_symlink()
    assert "Co-fcc" in json.dumps(json.loads(real.read_text()))


def test_json_into_a_fifo_is_written_straight(tmp_path, capsys):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    box: list[bytes] = []

    def read():
        with open(fifo, "rb") as fh:
            box.append(fh.read())

    reader = threading.Thread(target=read)
    reader.start()
    rc, _, _ = _run(capsys, "phases", "--json", fifo)
    reader.join(timeout=20)
    assert rc == 0 and "Co-fcc" in json.dumps(json.loads(box[0]))
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


def test_json_onto_a_device_node_stays_a_device(private_device, capsys):
    node = private_device(3)  # a private twin of the null device
    rc, _, _ = _run(capsys, "phases", "--json", node)
    assert rc == 0 and stat.S_ISCHR(os.lstat(node).st_mode)


def test_a_socket_or_folder_as_target_is_refused_by_kind(tmp_path, capsys):
    s = socket.socket(socket.AF_UNIX)
    try:
        s.bind(str(tmp_path / "s.json"))
        rc, _, err = _run(capsys, "phases", "--json", tmp_path / "s.json")
    finally:
        s.close()
    assert rc == 2
    _one_line_error(err, "is a socket")
    (tmp_path / "o.png").mkdir()
    rc, _, err = _run(capsys, "simulate", "Co-fcc", "--zone", "0", "0", "1", "--image", tmp_path / "o.png")
    assert rc == 2
    _one_line_error(err, "is a folder")


# ---------------------------------------------------------------- 17.9 write errors: one line, nothing damaged
def test_report_folder_that_cannot_be_made_is_refused_before_any_work(example, tmp_path, capsys):
    img, cal = example
    earlier = tmp_path / "r.json"
    earlier.write_text("earlier result")
    blocker = tmp_path / "reports"
    blocker.write_text("a file where the report's parent folder should be")
    rc, out, err = _run(capsys, "index", img, "--calibration", cal, "--json", earlier, "--report", blocker / "today")
    assert rc == 2 and out == ""
    _one_line_error(err, "does not exist")
    assert earlier.read_text() == "earlier result"


def test_simulate_image_whose_folder_is_a_file_is_one_line(tmp_path, capsys):
    not_a_folder = tmp_path / "proc"  # stands in for a folder nothing can be created in
    not_a_folder.write_text("x")
    rc, _, err = _run(capsys, "simulate", "Co-fcc", "--zone", "0", "0", "1", "--image", not_a_folder / "x.tif")
    assert rc == 2
    _one_line_error(err, "not a folder")


def test_a_failing_later_output_leaves_the_earlier_one_untouched(tmp_path, capsys, monkeypatch):
    earlier = tmp_path / "s.json"
    earlier.write_text("earlier result")
    real_mkstemp = tempfile.mkstemp

    def no_space_for_tiffs(*a, **k):
        if ".tif" in k.get("prefix", ""):
            raise OSError(28, "No space left on device")
        return real_mkstemp(*a, **k)

    monkeypatch.setattr(saed_files.tempfile, "mkstemp", no_space_for_tiffs)
    rc, _, err = _run(capsys, "simulate", "Co-fcc", "--zone", "0", "0", "1", "--json", earlier,
                      "--image", tmp_path / "s.tif", "--image-size", "128")
    assert rc == 2
    _one_line_error(err, "No space left")
    assert earlier.read_text() == "earlier result" and not (tmp_path / "s.tif").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["s.json"]


def test_stdout_on_a_full_device_is_one_line(private_device):
    node = private_device(7)  # a private twin of the full device
    with open(node, "wb") as out:
        proc = subprocess.run([sys.executable, "-m", "saed", "phases"], stdout=out, stderr=subprocess.PIPE,
                              cwd=ROOT, env={**os.environ, "PYTHONPATH": str(ROOT)}, timeout=120)
    err = proc.stderr.decode()
    assert proc.returncode == 2
    _one_line_error(err, "No space left on device")
    assert "Exception ignored" not in err


@pytest.fixture(scope="module")
def au_rings(tmp_path_factory):
    d = tmp_path_factory.mktemp("au")
    pat = ring_pattern([builtin_phase("Au")], shape_px=(256, 256), scale_inv_nm_per_px=0.08, rng=3)
    path = d / "au.tif"
    tifffile.imwrite(path, np.round(pat.image).astype(np.uint16))
    return path


def test_calibrate_failing_late_keeps_the_old_out_file(au_rings, tmp_path, capsys, monkeypatch):
    out = tmp_path / "cal.json"
    out.write_text("yesterday's calibration")

    def history_fails(*a, **k):
        raise InputError("the calibration history could not be written (disk full)")

    monkeypatch.setattr("saed.calibrate.history.store_calibration", history_fails)
    rc, _, err = _run(capsys, "calibrate", au_rings, "--standard", "Au", "--out", out, "--plot", tmp_path / "p.png",
                      "--history", tmp_path / "h")
    assert rc == 2
    _one_line_error(err, "disk full")
    assert out.read_text() == "yesterday's calibration" and not (tmp_path / "p.png").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cal.json"]


def test_calibrate_with_a_history_folder_that_cannot_exist_fails_before_work(tmp_path, capsys):
    blocker = tmp_path / "hist"
    blocker.write_text("a file")
    out = tmp_path / "cal.json"
    out.write_text("kept")
    rc, _, err = _run(capsys, "calibrate", tmp_path / "no_image_needed_yet.tif", "--standard", "Au", "--out", out,
                      "--history", blocker / "sub")
    assert rc == 2
    _one_line_error(err, "is not a folder")
    assert out.read_text() == "kept"


# ---------------------------------------------------------------- 17.4 / 17.5 races with real processes
ROUNDS = 20


def _file_calibrations(root, k, barrier, errors):
    """Writer k: in every round, file one calibration into round<r>/ the moment all writers are ready."""
    cal = Calibration(0.0558, 200.0, pixel_pitch_um=14.0, standard="Au", date="2026-03-01T22:15:00+01:00")
    for r in range(ROUNDS):
        barrier.wait(timeout=60)
        try:
            store_calibration(cal, root / f"round{r}", nominal_camera_length_mm=100, residual_pct=0.1, writer=k)
        except BaseException as exc:  # any failure of a writer is the bug this test looks for
            errors.put(f"round {r}: {type(exc).__name__}: {exc}")


def _write_out_files(root, k, barrier, errors):
    """Writer k: in every round, write cal<r>.json the moment all writers are ready."""
    for r in range(ROUNDS):
        barrier.wait(timeout=60)
        try:
            write_calibration_file(Calibration(0.05 + 0.001 * k, 200.0, date="2026-03-01T22:15:00+01:00"),
                                   root / f"cal{r}.json", writer=k)
        except BaseException as exc:
            errors.put(f"round {r}: {type(exc).__name__}: {exc}")


def _race(target, n, root) -> list[str]:
    """n real processes running `target` for ROUNDS rounds, each round started together (a barrier)."""
    ctx = multiprocessing.get_context("fork")
    barrier, errors = ctx.Barrier(n), ctx.Queue()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # fork in a threaded test process (Python >= 3.12)
        procs = [ctx.Process(target=target, args=(root, k, barrier, errors)) for k in range(n)]
        for p in procs:
            p.start()
    for p in procs:
        p.join(timeout=300)
    assert all(p.exitcode == 0 for p in procs)
    problems = []
    while not errors.empty():
        problems.append(errors.get())
    return problems


def test_calibrations_filed_at_the_same_moment_are_all_kept(tmp_path):
    assert _race(_file_calibrations, 6, tmp_path) == []
    for r in range(ROUNDS):
        folder = tmp_path / f"round{r}"
        entries, problems = list_calibrations(folder)
        assert problems == [] and len(entries) == 6, sorted(p.name for p in folder.iterdir())
        assert len(list(folder.iterdir())) == 6  # 6 processes, 6 entries: none replaced another, no leftovers


def test_writers_of_one_out_file_never_collide(tmp_path):
    assert _race(_write_out_files, 3, tmp_path) == []
    for r in range(ROUNDS):
        doc = json.loads((tmp_path / f"cal{r}.json").read_text())  # whole, valid JSON: one writer's file
        assert doc["scale_inv_nm_per_px"] == pytest.approx(0.05 + 0.001 * doc["writer"])
        assert read_calibration_file(tmp_path / f"cal{r}.json").date == "2026-03-01T22:15:00+01:00"
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


# ---------------------------------------------------------------- 17.6 the history under bad entries
def _entry(folder: Path, name: str, **fields):
    d = {"format": "saed-calibration-1", "scale_inv_nm_per_px": 0.0558, "voltage_kv": 200.0, "pixel_pitch_um": 14.0,
         "standard": "Au", "date": "2026-02-01T09:00:00+00:00", "nominal_camera_length_mm": 100}
    d.update(fields)
    (folder / name).write_text(json.dumps(d))


def test_bad_history_entries_are_named_unreadable_and_never_starred(tmp_path, capsys):
    _entry(tmp_path, "good_old.json", date="2026-01-05T10:00:00+00:00", scale_inv_nm_per_px=0.0559)
    _entry(tmp_path, "good_new.json", date="2026-03-01T09:30:00+00:00", scale_inv_nm_per_px=0.0557)
    _entry(tmp_path, "date_number.json", date=12345)
    _entry(tmp_path, "date_garbage.json", date="garbage", scale_inv_nm_per_px=0.167)  # scale 3x off
    _entry(tmp_path, "text_in_number.json", residual_pct="low")
    _entry(tmp_path, "scale_true.json", scale_inv_nm_per_px=True)
    (tmp_path / "angle_inf.json").write_text(json.dumps({
        "format": "saed-calibration-1", "scale_inv_nm_per_px": 0.0558, "date": "2026-12-01T00:00:00+00:00",
        "ellipse": {"axis_ratio": 1.01, "major_axis_angle_deg": float("inf")}}))
    (tmp_path / "deep.json").write_text("[" * 100000)
    rc, out, err = _run(capsys, "calibrate", "--list", tmp_path)
    assert rc == 0 and err == ""
    starred = [ln for ln in out.splitlines() if "*" in ln[:9] and ln.strip()[0].isdigit()]
    assert len(starred) == 1 and "good_new.json" in starred[0], out
    unreadable = [ln for ln in out.splitlines() if ln.startswith("unreadable:")]
    assert len(unreadable) == 6
    for name, why in (("date_number", "date"), ("date_garbage", "date"), ("text_in_number", "residual_pct"),
                      ("scale_true", "scale_inv_nm_per_px"), ("angle_inf", "ellipse"), ("deep", "nested")):
        assert any(name in ln and why in ln for ln in unreadable), (name, unreadable)
    rc, out, _ = _run(capsys, "calibrate", "--list", tmp_path, "--json", "-")
    doc = json.loads(out)
    assert [Path(c["file"]).name for c in doc["calibrations"]] == ["good_new.json", "good_old.json"]
    assert len(doc["skipped"]) == 6


def test_history_dates_with_different_utc_offsets_compare_as_times(tmp_path, capsys):
    # 10:00 at +02:00 is 08:00 UTC: earlier than 09:30 UTC, though later as text.
    _entry(tmp_path, "a.json", date="2026-03-01T10:00:00+02:00", scale_inv_nm_per_px=0.0556)
    _entry(tmp_path, "b.json", date="2026-03-01T09:30:00+00:00", scale_inv_nm_per_px=0.0558)
    entries, problems = list_calibrations(tmp_path)
    assert problems == [] and [e.path.name for e in entries] == ["b.json", "a.json"]
    assert main(["calibrate", "--list", str(tmp_path)]) == 0
    rows = [ln for ln in capsys.readouterr().out.splitlines() if ln.endswith(".json")]
    assert [r.split()[-1] for r in rows] == ["b.json", "a.json"] and "*" in rows[0]
    shown = [r[8:30].strip() for r in rows]  # both in this machine's zone, so the order reads true
    assert shown[0][-5:] == shown[1][-5:] and shown[0] > shown[1]


# ---------------------------------------------------------------- 17.7 every calibration field checked
BAD_FIELDS = {
    "scale true": ({"scale_inv_nm_per_px": True}, "scale_inv_nm_per_px"),
    "scale as text": ({"scale_inv_nm_per_px": "0.05"}, "scale_inv_nm_per_px"),
    "scale NaN": ({"scale_inv_nm_per_px": float("nan")}, "scale_inv_nm_per_px"),
    "infinite ellipse angle": ({"ellipse": {"axis_ratio": 1.01, "major_axis_angle_deg": float("inf")}},
                               "major_axis_angle_deg"),
    "ellipse ratio as text": ({"ellipse": {"axis_ratio": "1.01", "major_axis_angle_deg": 3}}, "axis_ratio"),
    "ellipse a list": ({"ellipse": [1.01, 3]}, "ellipse"),
    "centre one number": ({"center_px": [12.0]}, "center_px"),
    "centre text": ({"center_px": ["a", 2]}, "center_px"),
    "voltage negative": ({"voltage_kv": -200}, "voltage_kv"),
    "voltage true": ({"voltage_kv": True}, "voltage_kv"),
    "camera length negative": ({"camera_length_mm": -100}, "camera_length_mm"),
    "pixel pitch text": ({"pixel_pitch_um": "14 um"}, "pixel_pitch_um"),
    "date a number": ({"date": 12345}, "date"),
    "date garbage": ({"date": "garbage"}, "date"),
    "standard a list": ({"standard": ["Au"]}, "standard"),
    "wavelength of another voltage": ({"wavelength_nm": 0.0037}, "wavelength_nm"),
}


@pytest.mark.parametrize("case", list(BAD_FIELDS))
def test_every_calibration_field_is_checked_on_load(case, tmp_path):
    fields, name = BAD_FIELDS[case]
    p = tmp_path / "cal.json"
    _entry(tmp_path, "cal.json", **fields)
    with pytest.raises(InputError, match=name) as info:
        read_calibration_file(p)
    assert "\n" not in str(info.value)


def test_infinite_ellipse_angle_is_refused_by_index_not_read_as_a_line(example, tmp_path, capsys):
    img, _ = example
    cal = tmp_path / "cal.json"
    _entry(tmp_path, "cal.json", scale_inv_nm_per_px=0.0498, ellipse={"axis_ratio": 1.01,
                                                                       "major_axis_angle_deg": float("inf")})
    rc, out, err = _run(capsys, "index", img, "--calibration", cal, "--phase", "Co-hcp")
    assert rc == 2 and out == ""
    _one_line_error(err, "ellipse.major_axis_angle_deg")
    with pytest.raises(InputError, match="finite"):
        Ellipse(1.01, float("inf"))


# ---------------------------------------------------------------- 17.8 nesting and size in every JSON reader
def test_deep_or_huge_json_is_one_line_in_every_reader(example, tmp_path, capsys):
    img, _ = example
    deep = tmp_path / "deep.json"
    deep.write_text('{"a":' * 100000 + "1" + "}" * 100000)
    rc, _, err = _run(capsys, "index", img, "--calibration", deep)
    assert rc == 2
    _one_line_error(err, "not a saed calibration file", "nested too deeply")
    rc, _, err = _run(capsys, "tilt", "--from-index", deep)
    assert rc == 2
    _one_line_error(err, "not a 'saed index' JSON", "nested too deeply")
    huge = tmp_path / "huge.json"
    with open(huge, "wb") as fh:
        fh.truncate(saed_files.MAX_JSON_BYTES + 1)
    rc, _, err = _run(capsys, "simulate", "Co-fcc", "--zone", "0", "0", "1", "--calibration", huge)
    assert rc == 2
    _one_line_error(err, "not a saed calibration file", "MiB")


# ---------------------------------------------------------------- 17.11 / 17.12 remaining tracebacks, wrong answers
def test_simulate_negative_seed_and_far_centre_are_refused(tmp_path, capsys):
    with pytest.raises(SystemExit) as info:  # an option error: argparse's exit, one line
        main(["simulate", "Co-fcc", "--zone", "0", "0", "1", "--noise", "--seed", "-1", "--image", str(tmp_path / "s.tif")])
    err = capsys.readouterr().err
    assert info.value.code == 2 and not (tmp_path / "s.tif").exists()
    assert "--seed" in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    rc, _, err = _run(capsys, "simulate", "Co-fcc", "--zone", "0", "0", "1", "--scale", "0.05",
                      "--center", "1e12", "1e12", "--image", tmp_path / "c.tif")
    assert rc == 2
    _one_line_error(err, "far outside")
    assert not (tmp_path / "c.tif").exists()


TINY_CIF = """data_tiny
_cell_length_a 0.000001
_cell_length_b 0.000001
_cell_length_c 0.000001
_cell_angle_alpha 90
_cell_angle_beta 90
_cell_angle_gamma 90
_symmetry_space_group_name_H-M 'P 1'
loop_
_atom_site_label
_atom_site_type_symbol
_atom_site_fract_x
_atom_site_fract_y
_atom_site_fract_z
Co1 Co 0 0 0
"""


def test_rings_with_a_sub_angstrom_cif_is_one_line(au_rings, tmp_path, capsys):
    cif = tmp_path / "tiny_cell.cif"
    cif.write_text(TINY_CIF)
    for argv in (["rings", au_rings, "--scale", "0.08", "--phase", cif], ["simulate", cif, "--zone", "0", "0", "1"]):
        rc, _, err = _run(capsys, *argv)
        assert rc == 2
        _one_line_error(err, "tiny_cell.cif", "cell parameter a")


def _limit_memory():
    resource.setrlimit(resource.RLIMIT_AS, (3 * 2**30, 3 * 2**30))


def test_a_5000_atom_cif_is_refused_with_the_cif_and_atom_count_under_a_memory_limit(tmp_path):
    rng = np.random.default_rng(0)
    rows = "\n".join(f"Co{i} Co {x:.5f} {y:.5f} {z:.5f}" for i, (x, y, z) in enumerate(rng.random((5000, 3))))
    cif = tmp_path / "big_cell.cif"
    cif.write_text(TINY_CIF.replace("0.000001", "40").replace("Co1 Co 0 0 0\n", rows + "\n"))
    assert cif.stat().st_size > 150_000
    proc = subprocess.run([sys.executable, "-m", "saed", "simulate", str(cif), "--zone", "0", "0", "1"],
                          capture_output=True, cwd=ROOT, env={**os.environ, "PYTHONPATH": str(ROOT)},
                          preexec_fn=_limit_memory, timeout=300)
    err = proc.stderr.decode()
    assert proc.returncode == 2
    _one_line_error(err, "big_cell.cif", "5,000 atoms", "reflections")


@pytest.fixture(scope="module")
def frame_256(tmp_path_factory):
    """A 256 x 256 simulated frame whose centre we place ourselves at (131.3, 124.8) px."""
    path = tmp_path_factory.mktemp("f256") / "f256.tif"
    assert main(["simulate", "Co-fcc", "--zone", "0", "1", "1", "--image-size", "256", "--scale", "0.08",
                 "--center", "131.3", "124.8", "--noise", "--seed", "1", "--image", str(path)]) == 0
    return path


@pytest.mark.parametrize("offset", [(20.0, 0.0), (0.0, -20.0), (-14.1, 14.1), (14.1, 14.1)])
def test_a_centre_hint_20_px_off_on_a_256_px_frame_still_finds_the_centre(frame_256, offset, capsys):
    capsys.readouterr()
    hint = (131.3 + offset[0], 124.8 + offset[1])
    rc, out, err = _run(capsys, "spots", frame_256, "--scale", "0.08", "--center", *hint, "--json", "-")
    assert rc == 0
    doc = json.loads(out)
    assert doc["n_spots"] >= 12
    assert math.hypot(doc["center_px"][0] - 131.3, doc["center_px"][1] - 124.8) < 0.3


def test_a_centre_hint_20_px_off_behind_a_beam_stop_on_a_256_px_frame():
    from saed.calibration import Calibration as Cal
    from saed.image.measure import measure_pattern
    from saed.synth import BeamStop, Detector, Scene, render_lattice

    c = (129.37, 125.39)
    pat, _ = render_lattice(np.array([33.7, 5.9]), np.array([-12.3, 41.1]), center_px=c,
                            detector=Detector(shape=(256, 256)),
                            scene=Scene(beam_stop=BeamStop(angle_deg=200.0, width_px=16.0, transmission=0.0)), rng=11)
    for dx, dy in ((20.0, 0.0), (0.0, 20.0), (-14.1, -14.1)):
        mp = measure_pattern(pat.image, Cal(center_px=(c[0] + dx, c[1] + dy)))
        assert math.hypot(mp.center_px[0] - c[0], mp.center_px[1] - c[1]) < 0.3


@pytest.mark.parametrize("address", ["not a url", "tcp://head-node", "head-node"])
def test_a_bad_scheduler_address_is_refused_before_a_dask_client_exists(address, monkeypatch):
    # A Client that fails inside its constructor prints a traceback from its __del__ at exit
    # (after a 10 s close timeout): the address must be refused before one is made.
    import distributed

    from saed.batch.cluster import _connect

    made = []
    monkeypatch.setattr(distributed, "Client", lambda *a, **k: made.append(a))
    with pytest.raises(InputError, match="not a scheduler address"):
        _connect(address, 0.5)
    assert made == []


def _two_symmetric_sets(shape=(256, 256)):
    """Gaussian spots point-symmetric about A = (120.3, 131.6) (strong) and B = A + (24, 0) (weak)."""
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    img = np.full(shape, 100.0)
    rng = np.random.default_rng(4)
    for centre, amp in (((120.3, 131.6), 4000.0), ((144.3, 131.6), 1500.0)):
        for g in rng.uniform(-90, 90, size=(12, 2)):
            for s in (1, -1):
                x, y = centre[0] + s * g[0], centre[1] + s * g[1]
                img += amp * np.exp(-((xx - x) ** 2 + (yy - y) ** 2) / (2 * 2.0**2))
    return img


def test_an_exact_hint_on_a_weaker_centre_of_symmetry_is_kept_not_replaced():
    from saed.image.binning import bin_image
    from saed.image.centre import near_symmetry_peak, symmetric_center

    img = _two_symmetric_sets()
    b = bin_image(img, np.ones(img.shape, bool))
    cx, cy = symmetric_center(b)
    assert math.hypot(cx - 120.3, cy - 131.6) < 1.0  # the stronger set wins the global search
    assert near_symmetry_peak(b, (144.3, 131.6))  # the weaker set's centre is a centre of its own: kept
    assert near_symmetry_peak(b, (120.3, 131.6))
    assert not near_symmetry_peak(b, (132.3, 131.6))  # half-way between: no centre, the hint gives way
    assert not near_symmetry_peak(b, (120.3, 151.6))  # 20 px off the strong centre
