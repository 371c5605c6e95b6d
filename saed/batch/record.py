"""What a batch CSV was indexed against: the phase list, kept beside the CSV so a resume can check it.

Rows indexed against one phase list and rows indexed against another do not compare (a frame
that was "no solution" may fit a phase added later; a phase removed can no longer win), so a
run that resumes a CSV with rows must use the same phases. The record is a small JSON file next
to the CSV, ``NAME.csv.run.json``: each phase's name, space group and cell (an edited CIF under
the same name is another phase).
"""

from __future__ import annotations

import json
from pathlib import Path

from saed.errors import InputError

__all__ = ["record_path", "phase_fingerprint", "check_run_record", "RECORD_FORMAT"]

RECORD_FORMAT = "saed-batch-run-1"


def record_path(out) -> Path:
    """``scan.csv`` -> ``scan.csv.run.json``."""
    p = Path(out)
    return p.with_name(p.name + ".run.json")


def phase_fingerprint(phase) -> str:
    """``'Co-fcc F m -3 m a=0.35447 b=0.35447 c=0.35447 90 90 90'``: name, space group and cell (nm, deg)."""
    lat = phase.lattice
    cell = " ".join(f"{v:.6g}" for v in (lat.a_nm, lat.b_nm, lat.c_nm))
    angles = " ".join(f"{v:.4g}" for v in (lat.alpha_deg, lat.beta_deg, lat.gamma_deg))
    return f"{phase.name} {phase.space_group} {cell} {angles}"


def _names(fps) -> str:
    return ", ".join(f.split(" ")[0] for f in fps) or "(none)"


def check_run_record(out, phases, *, has_rows: bool) -> None:
    """Refuse to add rows to `out` when its rows were indexed against other phases; else (re)write the record.

    Raises
    ------
    InputError
        `out` has rows and its record lists other phases (names, or the same names with another
        cell or space group), or the record cannot be read or written.
    """
    from saed.files import atomic_write_text

    path = record_path(out)
    now = [phase_fingerprint(p) for p in phases]
    if has_rows and path.exists():
        try:
            rec = json.loads(path.read_text(encoding="utf-8"))
            before = [str(v) for v in rec["phases"]]
        except (OSError, ValueError, KeyError, TypeError, RecursionError):
            raise InputError(f"{path}: the record of the phases {out} was indexed against cannot be read; "
                             "move it away to resume anyway, or give another --out") from None
        if sorted(before) != sorted(now):
            if sorted(_names(before).split(", ")) != sorted(_names(now).split(", ")):
                why = f"its rows were indexed against {_names(before)}, this run asks for {_names(now)}"
            else:
                changed = sorted(set(before) - set(now))
                why = f"a phase of the same name changed its cell or space group ({_names(changed)})"
            raise InputError(f"{out}: cannot resume: {why}; rows against different phases would not compare. "
                             "Give the same --phase list, or another --out for the new list")
        return
    atomic_write_text(path, json.dumps({"format": RECORD_FORMAT, "phases": now}, indent=1) + "\n")
