"""Percent and fraction are converted in one place, saed.units (percent, fraction, percent_off)."""

import re
from pathlib import Path

import saed

#: Multiplications by 100 that are not percent conversions (file: reason).
NOT_PERCENT = {
    "calibration.py": "a doctest radius of 100 px",
    "report/index_overlay.py": "the drawing unit, a hundredth of the shown width",
    "report/render_atlas.py": "progress ticks, 100 per phase",
    "cli/cmd_atlas.py": "progress ticks, 100 per phase",
    "crystal/phase.py": "U in square angstrom to B in square nm (8 pi^2 U / 100)",
    "crystal/scattering.py": "square angstrom to square nm",
    "rings/peaks.py": "a doctest profile",
}
PATTERN = re.compile(r"\b100(\.0)?\s*\*|\*\s*100(\.0)?\b|/\s*100(\.0)?\b")


def test_percent_conversions_go_through_saed_units():
    root = Path(saed.__file__).parent
    found = []
    for p in sorted(root.rglob("*.py")):
        rel = p.relative_to(root).as_posix()
        if rel == "units.py" or rel.startswith("bench/") or rel in NOT_PERCENT:
            continue
        for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1):
            if PATTERN.search(line.split("#")[0]):
                found.append(f"{rel}:{i}: {line.strip()}")
    assert found == []


def test_the_three_conversions():
    from saed.units import fraction, percent, percent_off

    assert percent(0.25) == 25.0 and fraction(25.0) == 0.25
    assert percent_off(0.5, 0.4) == 100.0 * (0.5 / 0.4 - 1.0)
