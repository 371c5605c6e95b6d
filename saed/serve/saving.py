"""Saving a pattern's HTML report and JSON beside it, never overwriting anything.

The names are ``<stem>_saed.html`` and ``<stem>_saed.json`` in the pattern's folder; when one of
them exists already, ``_saed-2``, ``_saed-3`` ... are used instead. Each file is created with
:func:`saed.files.create_new_file`, which fails rather than replaces when the name was taken in the
meantime: no existing file, and never the pattern itself, is touched.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from saed.errors import InputError
from saed.files import create_new_file

__all__ = ["save_beside", "free_stem"]

MAX_TRIES = 500


def free_stem(folder: Path, stem: str) -> str:
    """The first ``<stem>_saed[-n]`` for which neither the .html nor the .json exists in `folder`.

    >>> import tempfile; d = Path(tempfile.mkdtemp()); _ = (d / "p_saed.json").write_text("{}")
    >>> free_stem(d, "p")
    'p_saed-2'
    """
    for n in range(1, MAX_TRIES + 1):
        cand = f"{stem}_saed" + ("" if n == 1 else f"-{n}")
        if not (folder / f"{cand}.html").exists() and not (folder / f"{cand}.json").exists():
            return cand
    raise InputError(f"{folder}: {MAX_TRIES} saved reports of {stem} exist already; move some away")


def save_beside(pattern: Path, doc: dict, html_text: str) -> list[Path]:
    """Write the JSON `doc` and the report `html_text` beside `pattern`; returns the two new paths."""
    folder = pattern.parent
    if not os.access(folder, os.W_OK):
        raise InputError(f"{folder}: the pattern's folder is not writable; nothing saved")
    json_bytes = (json.dumps(doc, indent=2, allow_nan=False) + "\n").encode("utf-8")
    for _ in range(MAX_TRIES):
        stem = free_stem(folder, pattern.stem or "pattern")
        out_json, out_html = folder / f"{stem}.json", folder / f"{stem}.html"
        if not create_new_file(out_json, json_bytes):
            continue  # taken meanwhile: the next free name
        if not create_new_file(out_html, html_text.encode("utf-8")):
            raise InputError(f"{out_html}: appeared while saving; not overwritten (the JSON is in {out_json.name})")
        return [out_html, out_json]
    raise InputError(f"{folder}: no free name for the report of {pattern.name}")
