"""The docs say what saed prints: the worked look-alike case of docs/indexing.md (demo grain D) and the demo
caption, read from the files and compared with a run on the bundled example."""

import re
from importlib import resources
from pathlib import Path

import pytest

from saed.cli import main
from saed.report.terminal_text import unwrapped

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = resources.files("saed").joinpath("data/examples")


@pytest.fixture(scope="module")
def grain_d(tmp_path_factory):
    d = tmp_path_factory.mktemp("grain_d")
    img, cal = d / "grain_D_fcc_or_hcp.tif", d / "grain_D_fcc_or_hcp.json"
    img.write_bytes(EXAMPLES.joinpath(img.name).read_bytes())
    cal.write_bytes(EXAMPLES.joinpath(cal.name).read_bytes())
    return img, cal


def _printed(grain_d, capsys) -> str:
    import io
    import sys

    img, cal = grain_d
    buf = io.TextIOWrapper(io.BytesIO(), encoding="ascii")  # plain minus signs, as the docs write them
    old, sys.stdout = sys.stdout, buf
    try:
        assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-fcc", "--phase", "Co-hcp"]) == 0
    finally:
        sys.stdout = old
    buf.flush()
    return buf.buffer.getvalue().decode("ascii")


def test_indexing_doc_grain_d_row_matches_the_printed_tilt(grain_d, capsys):
    doc = (ROOT / "docs" / "indexing.md").read_text(encoding="utf-8")
    row = next(line for line in doc.splitlines() if line.startswith("| Co-fcc [112] (demo grain D)"))
    out = _printed(grain_d, capsys)
    note = next(line for line in unwrapped(out) if "ambiguous with Co-hcp" in line)
    # the same look-alike zone, tilt angle, row, target zones and the angle to the nearest hcp zone
    doc_zone = re.search(r"ambiguous with Co-hcp (\[[-\d]+\])", row).group(1)
    assert f"ambiguous with Co-hcp {doc_zone}" in note
    tilt, row_hkl, row_other = re.search(r"tilt ([\d.]+)° about the (\S+) row \((\S+) in Co-hcp\)", row).groups()
    assert f"tilt {tilt} deg about the {row_hkl} row ({row_other} in Co-hcp" in note
    reach = re.search(r"fcc reaches (\[\d+\])", row).group(1)
    assert f"Co-fcc reaches {reach}" in note
    # the 180-degree reading (issue 10): what the same tilt reaches if the crystal is the turned one
    turned = re.search(r"fcc reaches \[\d+\] \(or (\[\d+\]) if the crystal is turned 180°\)", row).group(1)
    assert f"Co-fcc reaches {turned}, Co-hcp reaches" in note and "if it is turned 180 deg" in note


def test_demo_caption_names_the_zone_the_answer_prints(grain_d, capsys):
    from saed.synth.demo_set import DEMO_PATTERNS

    spec = next(s for s in DEMO_PATTERNS if s.name == "grain_D_fcc_or_hcp")
    caption_zone = re.search(r"hcp cobalt (\[[-\d]+\])", spec.description).group(1)
    out = _printed(grain_d, capsys)
    assert f"ambiguous with Co-hcp {caption_zone}" in out
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert f"hcp {caption_zone} pair" in readme and f"hcp cobalt {caption_zone}" in readme
    # the shipped sidecar carries the same caption
    side = EXAMPLES.joinpath("grain_D_fcc_or_hcp.json").read_text()
    assert f"hcp cobalt {caption_zone}" in side
