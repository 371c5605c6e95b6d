"""The calibration history: one calibration file per standard recorded, listed per camera length.

Where the files live (first that applies):

1. the folder given explicitly (``saed calibrate --history FOLDER`` / ``--list FOLDER``);
2. the environment variable ``SAED_CALIBRATION_DIR``;
3. a per-user folder: ``$XDG_DATA_HOME/saed/calibrations``, or ``~/.local/share/saed/calibrations``
   (on Windows ``%LOCALAPPDATA%\\saed\\calibrations``).

saed writes nowhere else unless asked (``--out``). Each file is an ordinary calibration file
(:mod:`saed.calibration`) named ``L<camera length>mm_<date-time>_<standard>.json``; the camera length
in the name is the nominal one the operator gave (``--camera-length``, the microscope's setting),
else the one measured. The list groups files by that camera length, newest first, so the operator
at the microscope picks the latest calibration of the setting in use.

Nothing is lost when several calibrations are filed at the same moment: each file is created
exclusively (:func:`saed.files.create_new_file`: a name already taken is never replaced, the next
free ``_2``, ``_3``... is used), and the file and the folder are fsynced. Reading checks every
entry (:func:`saed.calibration.validate_calibration_dict`); an entry that fails is listed as
unreadable with the reason and is never chosen. Dates are compared as date-times (a date without a
UTC offset counts as local time), not as text.
"""

from __future__ import annotations

import json
import os
import re
import sys
from dataclasses import dataclass
from pathlib import Path

from saed.calibration import Calibration, parse_calibration_date, validate_calibration_dict
from saed.errors import InputError
from saed.files import create_new_file, read_json_file

__all__ = ["HistoryEntry", "history_folder", "check_history_folder", "store_calibration", "list_calibrations", "read_history_entry", "ENV_VAR"]

#: Environment variable naming the calibration-history folder.
ENV_VAR = "SAED_CALIBRATION_DIR"


@dataclass(frozen=True)
class HistoryEntry:
    """One stored calibration: the file, its calibration, and the camera-length label it is filed under."""

    path: Path
    calibration: Calibration
    nominal_camera_length_mm: float | None
    residual_pct: float | None

    @property
    def when(self):
        """The calibration date as an aware datetime (None if undated); checked when the entry was read."""
        return None if self.calibration.date is None else parse_calibration_date(self.calibration.date)

    @property
    def label_mm(self) -> float | None:
        """The camera length the file is grouped under: nominal if recorded, else measured."""
        if self.nominal_camera_length_mm is not None:
            return self.nominal_camera_length_mm
        return self.calibration.implied_camera_length_mm


def history_folder(folder=None) -> Path:
    """The calibration-history folder (module notes); not created here."""
    if folder:
        return Path(folder).expanduser()
    env = os.environ.get(ENV_VAR)
    if env:
        return Path(env).expanduser()
    if sys.platform.startswith("win") and os.environ.get("LOCALAPPDATA"):
        return Path(os.environ["LOCALAPPDATA"]) / "saed" / "calibrations"
    base = os.environ.get("XDG_DATA_HOME") or str(Path.home() / ".local" / "share")
    return Path(base) / "saed" / "calibrations"


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9.+-]+", "-", text).strip("-") or "standard"


def check_history_folder(folder) -> None:
    """Before any work: InputError unless a calibration can be filed in `folder` (made if missing)."""
    from saed.files import check_writable

    root = Path(folder)
    probe = root
    while not probe.exists() and probe.parent != probe:  # the nearest part of the path that exists
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise InputError(f"cannot file calibrations in {root}: {probe} is not a folder; "
                         f"choose another with --history FOLDER or {ENV_VAR}")
    check_writable(probe / ".saed-history-probe")


def store_calibration(cal: Calibration, folder, *, nominal_camera_length_mm: float | None = None, **extra) -> Path:
    """Write `cal` into the history `folder` (created if missing) and return the file's path."""
    root = Path(folder)
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the calibration-history folder {root} ({exc.strerror}); "
                         f"choose another with --history FOLDER or {ENV_VAR}") from None
    length = nominal_camera_length_mm if nominal_camera_length_mm is not None else cal.implied_camera_length_mm
    label = f"L{length:.0f}mm" if length is not None else f"S{cal.scale_inv_nm_per_px:.5f}"
    stamp = re.sub(r"[^0-9]", "", (cal.date or "")[:19]) or "undated"
    stamp = f"{stamp[:8]}-{stamp[8:]}" if len(stamp) == 14 else stamp
    name = f"{label}_{stamp}_{_slug(cal.standard or 'standard')}"
    d = cal.to_json()
    d["nominal_camera_length_mm"] = nominal_camera_length_mm
    d.update(extra)
    data = (json.dumps(d, indent=2, allow_nan=False) + "\n").encode("utf-8")
    for k in range(1, MAX_SAME_NAME + 1):
        path = root / (f"{name}.json" if k == 1 else f"{name}_{k}.json")
        if create_new_file(path, data):
            return path
    raise InputError(f"{root}: {MAX_SAME_NAME} calibrations named {name} already; clear out the history folder")


#: Files of one camera length, date and standard before filing gives up (a runaway script, not a lab).
MAX_SAME_NAME = 1000


def list_calibrations(folder) -> tuple[list[HistoryEntry], list[str]]:
    """Stored calibrations in `folder`, grouped by camera length (ascending) and newest first.

    Returns (entries, problems): a ``*.json`` file that is not a valid calibration file is left out
    of `entries` and named in `problems` as "unreadable: FILE: reason".
    """
    root = Path(folder)
    if not root.exists():
        return [], []
    if not root.is_dir():
        raise InputError(f"{root}: not a folder")
    entries, problems = [], []
    for p in sorted(root.glob("*.json")):
        try:
            entries.append(read_history_entry(p))
        except InputError as exc:
            problems.append(f"unreadable: {exc}")
    # Newest first within a camera length (two stable sorts), camera lengths ascending; undated last.
    entries.sort(key=lambda e: (e.when is not None, e.when.timestamp() if e.when is not None else 0.0), reverse=True)
    entries.sort(key=lambda e: (e.label_mm is None, round(e.label_mm) if e.label_mm is not None else 0))
    return entries, problems


def read_history_entry(path) -> HistoryEntry:
    """One history file, every field checked; InputError (one line naming the file and field) if it fails."""
    p = Path(path)
    d = read_json_file(p, what="a saed calibration file", max_bytes=MAX_ENTRY_BYTES)
    cal = validate_calibration_dict(d, where=p.name)
    nominal, res = d.get("nominal_camera_length_mm"), d.get("residual_pct")  # checked by validate_calibration_dict
    return HistoryEntry(p, cal, None if nominal is None else float(nominal), None if res is None else float(res))


#: Largest history file read: an entry is about 1 KB.
MAX_ENTRY_BYTES = 2**20
