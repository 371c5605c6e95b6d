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
"""

from __future__ import annotations

import json
import os
import re
import sys
from dataclasses import dataclass
from pathlib import Path

from saed.calibration import CALIBRATION_FORMAT, Calibration, read_calibration_file
from saed.errors import InputError
from saed.report.files import atomic_write_text

__all__ = ["HistoryEntry", "history_folder", "store_calibration", "list_calibrations", "ENV_VAR"]

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
    path = root / f"{name}.json"
    k = 2
    while path.exists():
        path = root / f"{name}_{k}.json"
        k += 1
    d = cal.to_json()
    d["nominal_camera_length_mm"] = nominal_camera_length_mm
    d.update(extra)
    atomic_write_text(path, json.dumps(d, indent=2, allow_nan=False) + "\n")
    return path


def list_calibrations(folder) -> tuple[list[HistoryEntry], list[str]]:
    """Stored calibrations in `folder`, grouped by camera length (ascending) and newest first.

    Returns (entries, problems): files that are not calibration files are skipped and named in
    `problems`.
    """
    root = Path(folder)
    if not root.exists():
        return [], []
    if not root.is_dir():
        raise InputError(f"{root}: not a folder")
    entries, problems = [], []
    for p in sorted(root.glob("*.json")):
        try:
            cal = read_calibration_file(p)
            d = json.loads(p.read_text(encoding="utf-8"))
        except InputError as exc:
            problems.append(str(exc))
            continue
        if d.get("format") != CALIBRATION_FORMAT:
            continue
        nominal = d.get("nominal_camera_length_mm")
        res = d.get("residual_pct")
        entries.append(HistoryEntry(p, cal, float(nominal) if nominal is not None else None,
                                    float(res) if res is not None else None))

    # Newest first within a camera length (two stable sorts), camera lengths ascending.
    entries.sort(key=lambda e: e.calibration.date or "", reverse=True)
    entries.sort(key=lambda e: (e.label_mm is None, round(e.label_mm) if e.label_mm is not None else 0))
    return entries, problems
