"""saed.batch.results: the CSV columns of CONTRACT.md, durable appends, resume, refusing foreign files."""

import csv
import os

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.batch.results import COLUMNS, CONTRACT_COLUMNS, ResultsFile, Row, read_rows
from saed.errors import InputError

# The column list CONTRACT.md fixes for `saed batch` (copied here; the contract file is not read at test time).
CONTRACT = "image,frame,phase,zone_axis,score,in_plane_rotation_deg,scale_inv_nm_per_px,n_spots,status"


def _row(k, **kw):
    base = dict(phase="Co-fcc", zone_axis=(0, 1, 1), score=0.87654, in_plane_rotation_deg=12.345,
                scale_inv_nm_per_px=0.0558, n_spots=14)
    base.update(kw)
    return Row("scan.npy", k, **base)


def test_header_starts_with_the_contract_columns(tmp_path):
    p = tmp_path / "out.csv"
    with ResultsFile(p) as out:
        out.append([_row(0), _row(1, status="no-solution", phase="", zone_axis=None, score=None)])
    with open(p, newline="") as fh:
        lines = list(csv.reader(fh))
    assert ",".join(lines[0][:9]) == CONTRACT
    assert tuple(lines[0][:9]) == CONTRACT_COLUMNS
    first = dict(zip(lines[0], lines[1]))
    assert first["zone_axis"] == "0 1 1"
    assert first["status"] == "ok"
    assert first["frame"] == "0"
    assert dict(zip(lines[0], lines[2]))["status"] == "no-solution"


def test_resume_skips_done_frames_and_never_duplicates(tmp_path):
    p = tmp_path / "out.csv"
    with ResultsFile(p) as out:
        out.append([_row(0), _row(1)])
    with ResultsFile(p) as out:
        assert out.done == {_row(0).key, _row(1).key}
        assert out.append([_row(1), _row(2), _row(2)]) == 1
    assert [r.frame for r in read_rows(p)] == [0, 1, 2]


def test_line_cut_short_by_a_crash_is_removed(tmp_path):
    p = tmp_path / "out.csv"
    with ResultsFile(p) as out:
        out.append([_row(0), _row(1)])
    with open(p, "a") as fh:
        fh.write("scan.npy,2,Co-fc")          # the process died in the middle of a write
    with ResultsFile(p) as out:
        assert out.n_rows == 2
        out.append([_row(2)])
    rows = read_rows(p)
    assert [r.frame for r in rows] == [0, 1, 2]
    assert rows[2].phase == "Co-fcc"


@pytest.mark.parametrize("content", ["a,b,c\n1,2,3\n", "", "\x89PNG\r\n\x1a\n\x00\x00\xff\xfe"])
def test_refuses_to_append_to_a_file_that_is_not_a_saed_csv(tmp_path, content):
    p = tmp_path / "out.csv"
    p.write_bytes(content.encode("latin-1"))
    if content == "":
        with ResultsFile(p):              # an empty file is simply started
            pass
        return
    before = p.read_bytes()
    with pytest.raises(InputError, match="not a saed batch CSV"):
        ResultsFile(p)
    assert p.read_bytes() == before        # nothing written to it


def test_refuses_a_changed_row(tmp_path):
    p = tmp_path / "out.csv"
    with ResultsFile(p) as out:
        out.append([_row(0)])
    with open(p, "a") as fh:
        fh.write("edited by hand,1\n")
    with pytest.raises(InputError, match="line 3"):
        ResultsFile(p)


def test_retry_errors_drops_error_rows_only(tmp_path):
    p = tmp_path / "out.csv"
    with ResultsFile(p) as out:
        out.append([_row(0), Row("scan.npy", 1, status="error: 1024 pixels are NaN"), _row(2)])
    with ResultsFile(p, retry_errors=True) as out:
        assert out.done == {_row(0).key, _row(2).key}
        out.append([_row(1)])
    assert sorted(r.frame for r in read_rows(p)) == [0, 1, 2]
    assert all(r.status == "ok" for r in read_rows(p))


def test_second_writer_is_refused(tmp_path):
    pytest.importorskip("fcntl")
    p = tmp_path / "out.csv"
    with ResultsFile(p):
        with pytest.raises(InputError, match="another saed batch run"):
            ResultsFile(p)


def test_a_folder_is_not_an_output(tmp_path):
    with pytest.raises(InputError, match="folder"):
        ResultsFile(tmp_path)


_idx = st.tuples(*[st.integers(-12, 12)] * 3)
_text = st.text(st.characters(blacklist_categories=("Cs",)), max_size=30)


@settings(max_examples=60, deadline=None)
@given(frame=st.integers(0, 10**6), phase=_text, zone=st.none() | _idx, score=st.none() | st.floats(0, 1),
       status=st.sampled_from(["ok", "no-solution"]) | _text.map(lambda t: "error: " + t), note=_text)
def test_rows_survive_the_round_trip(tmp_path_factory, frame, phase, zone, score, status, note):
    # hypothesis: any text in names, statuses and notes (commas, quotes, newlines) comes back as written
    p = tmp_path_factory.mktemp("rt") / "out.csv"
    row = Row(os.path.join("d", "a,b.tif"), frame, status=status, phase=phase, zone_axis=zone, score=score,
              note=note)
    with ResultsFile(p) as out:
        out.append([row])
    (back,) = read_rows(p)
    assert back.frame == frame and back.zone_axis == row.zone_axis and back.phase == row.phase
    assert back.status == row.status and back.note == row.note and back.image == row.image
    if score is not None:
        assert back.score == pytest.approx(score, abs=5e-5)
    assert len(COLUMNS) == len(back.cells())


@settings(max_examples=80, deadline=None)
@given(content=st.binary(max_size=300) | st.text(max_size=200).map(lambda t: t.encode("utf-8")))
def test_any_existing_file_is_refused_cleanly_or_taken(tmp_path_factory, content):
    # hypothesis: whatever an existing --out holds, opening it either works or is a one-line
    # InputError that leaves the file exactly as it was
    p = tmp_path_factory.mktemp("any") / "out.csv"
    p.write_bytes(content)
    try:
        with ResultsFile(p) as out:
            out.append([_row(0)])
    except InputError as exc:
        assert "\n" not in str(exc)
        assert p.read_bytes() == content
    else:
        assert _row(0).key in {r.key for r in read_rows(p)}


def test_report_never_imports_the_batch_layer():
    """Issue 16 item 5: report/scan_map.py imported batch while batch wrote through report (a cycle).
    The scan values now live in report/scan_values.py and the orientation colours in
    index/orientmap.py, so report (the lower layer) never imports batch.

    Checked on the source (every import statement, also those inside functions), not by importing.
    """
    import ast
    from pathlib import Path

    import saed.report

    upward = []
    for path in sorted(Path(saed.report.__file__).parent.glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            upward += [f"{path.name}: {n}" for n in names if n == "saed.batch" or n.startswith("saed.batch.")]
    assert upward == []
