"""The batch CSV: one row per frame, appended as frames finish, safe to resume.

Columns (CONTRACT.md), then saed's additions::

    image,frame,phase,zone_axis,score,in_plane_rotation_deg,scale_inv_nm_per_px,n_spots,status,
    zone_axis_4,runner_up_phase,runner_up_zone_axis,runner_up_score,note,search,file,file_id

``zone_axis`` is "u v w" (3-index, the phase's conventional cell), ``zone_axis_4`` the
Miller-Bravais "U V T W" for hexagonal axes (else empty); ``status`` is ``ok``,
``no-solution`` or ``error: <one line>``; ``runner_up_*`` describe the second-ranked
solution (its zone in 4-index form for a hexagonal phase); ``note`` carries the indexer's
message (a look-alike caution, the closest near-miss; hexagonal zones in 4-index form);
``search`` says how the frame was solved (``full``, ``warm``, or on a checked frame
``full+warm same`` / ``full+warm differ``: see :mod:`saed.batch.scanindex`); ``file`` is the
resolved path of the input and ``file_id`` its size and modification time (``SIZE:MTIME_NS``).

A frame's identity for resuming is (``file``, ``file_id``, ``frame``): the same file typed
differently, or from another working directory, is the same file; a file changed since its
rows were written is a different one (its frames are done again). ``image`` keeps the path
as typed, for people.

Durability: rows are appended with one write per group, then flushed and fsync'ed, so a
row that is in the file is complete and stays there. Reopening an existing file reads the
(image, frame) pairs already done; a last line cut short by a crash is removed (that frame
is simply done again). A file that is not a saed batch CSV is never appended to. While a
run holds the file, a second run on the same file is refused (an advisory ``flock`` where
the platform has one).
"""

from __future__ import annotations

import csv
import io
import logging
import math
import os
from dataclasses import dataclass, fields

from saed.errors import InputError

__all__ = ["CONTRACT_COLUMNS", "COLUMNS", "Row", "ResultsFile", "read_rows", "iter_rows", "frame_key", "file_identity",
           "error_status"]

logger = logging.getLogger(__name__)

#: The columns CONTRACT.md fixes, in order.
CONTRACT_COLUMNS = ("image", "frame", "phase", "zone_axis", "score", "in_plane_rotation_deg",
                    "scale_inv_nm_per_px", "n_spots", "status")
#: Every column saed writes: the contract's, then additions.
COLUMNS = CONTRACT_COLUMNS + ("zone_axis_4", "runner_up_phase", "runner_up_zone_axis", "runner_up_score", "note",
                               "search", "file", "file_id")


def frame_key(file: str, file_id: str, frame: int) -> tuple[str, str, int]:
    """The identity of a frame for resuming: (resolved path, size:mtime of the file, flat frame index)."""
    return file, file_id, int(frame)


def file_identity(path: str) -> tuple[str, str]:
    """(resolved path, ``SIZE:MTIME_NS``) of an input; for ``FILE::DATASET`` the file's, dataset kept.

    A Zarr store is a folder: its identity is that of its array metadata and the folder itself.

    >>> import tempfile, os
    >>> d = tempfile.mkdtemp(); p = os.path.join(d, "a.npy")
    >>> with open(p, "wb") as fh: _ = fh.write(b"x")
    >>> os.symlink(p, os.path.join(d, "b.npy"))
    >>> file_identity(os.path.join(d, "b.npy"))[0] == os.path.realpath(p)
    True
    """
    base, sep, ds = str(path).partition("::")
    real = os.path.realpath(base)
    st = os.stat(real)
    size, mtime = st.st_size, st.st_mtime_ns
    if os.path.isdir(real):
        for meta in ("zarr.json", ".zarray", ".zgroup"):
            mp = os.path.join(real, ds.strip("/"), meta) if ds else os.path.join(real, meta)
            if os.path.exists(mp):
                m = os.stat(mp)
                size, mtime = m.st_size, max(mtime, m.st_mtime_ns)
                break
    return real + (sep + ds if sep else ""), f"{size}:{mtime}"


def error_status(message: str) -> str:
    """``'error: <message>'`` on one line (newlines and runs of spaces collapsed)."""
    return "error: " + " ".join(str(message).split())


@dataclass(frozen=True)
class Row:
    """One frame's outcome. Indices are tuples of ints; absent values are None or ''."""

    image: str
    frame: int
    status: str = "ok"
    phase: str = ""
    zone_axis: tuple[int, ...] | None = None
    score: float | None = None
    in_plane_rotation_deg: float | None = None
    scale_inv_nm_per_px: float | None = None
    n_spots: int | None = None
    zone_axis_4: tuple[int, ...] | None = None
    runner_up_phase: str = ""
    runner_up_zone_axis: tuple[int, ...] | None = None
    runner_up_score: float | None = None
    note: str = ""
    search: str = ""
    file: str = ""
    file_id: str = ""

    def __post_init__(self):
        object.__setattr__(self, "frame", int(self.frame))
        for name in ("zone_axis", "zone_axis_4", "runner_up_zone_axis"):
            v = getattr(self, name)
            if v is not None:
                object.__setattr__(self, name, tuple(int(x) for x in v))
        object.__setattr__(self, "status", " ".join(str(self.status).split()))
        object.__setattr__(self, "note", " ".join(str(self.note).split()))

    @property
    def key(self) -> tuple[str, str, int]:
        """(file, file_id, frame); a row written without ``file`` falls back to the absolute typed path."""
        return frame_key(self.file or os.path.abspath(self.image), self.file_id, self.frame)

    @property
    def is_error(self) -> bool:
        return self.status.startswith("error")

    def cells(self) -> list[str]:
        """The row as CSV cells, in :data:`COLUMNS` order."""
        return [_fmt(name, getattr(self, name)) for name in COLUMNS]

    @classmethod
    def from_cells(cls, cells: list[str]) -> "Row":
        d = dict(zip(COLUMNS, cells))
        kw = {}
        for f in fields(cls):
            text = d.get(f.name, "")
            kw[f.name] = _parse(f.name, text)
        return cls(**kw)


_FLOAT_FORMATS = {"score": "{:.4f}", "in_plane_rotation_deg": "{:.2f}", "scale_inv_nm_per_px": "{:.6g}",
                  "runner_up_score": "{:.4f}"}
_INDEX_COLUMNS = ("zone_axis", "zone_axis_4", "runner_up_zone_axis")


def _fmt(name: str, v) -> str:
    if v is None:
        return ""
    if name in _INDEX_COLUMNS:
        return " ".join(str(int(x)) for x in v)
    if name in _FLOAT_FORMATS:
        v = float(v)
        return _FLOAT_FORMATS[name].format(v) if math.isfinite(v) else ""
    return str(v)


def _parse(name: str, text: str):
    if name in ("image", "status", "phase", "runner_up_phase", "note", "search", "file", "file_id"):
        return text
    if text == "":
        return None
    if name in _INDEX_COLUMNS:
        return tuple(int(t) for t in text.split())
    if name in ("frame", "n_spots"):
        return int(text)
    return float(text)


def _csv_line(cells: list[str]) -> str:
    buf = io.StringIO()
    # minimal quoting quotes a cell with "\n" but not one with a bare "\r": quote that row fully
    quoting = csv.QUOTE_ALL if any("\r" in c for c in cells) else csv.QUOTE_MINIMAL
    csv.writer(buf, lineterminator="\n", quoting=quoting).writerow(cells)
    return buf.getvalue()


_HEADER_LINE = _csv_line(list(COLUMNS))


def _check_header(path, first_line: str) -> None:
    try:
        got = next(csv.reader([first_line]), [])
    except csv.Error:
        got = []
    if tuple(got) == COLUMNS:
        return
    if tuple(got[:len(CONTRACT_COLUMNS)]) == CONTRACT_COLUMNS:
        raise InputError(f"{path}: a saed batch CSV with other extra columns ({','.join(got[len(CONTRACT_COLUMNS):])}); "
                         "it was written by another saed version: give a new --out")
    shown = first_line.strip()[:60]
    raise InputError(f"{path}: not a saed batch CSV (first line {shown!r}); refusing to append to it: "
                     "give another --out or move the file away")


class _CompleteLines:
    """The lines of a binary file object that end in a newline, decoded (a last line cut short is left out).

    Lines are split at ``\\n`` only (a ``\\r`` inside a quoted cell stays in its cell);
    ``n_bytes`` counts the bytes of the lines handed out so far.
    """

    def __init__(self, fh):
        self._fh = fh
        self.n_bytes = 0

    def __iter__(self):
        for line in self._fh:
            if not line.endswith(b"\n"):
                return
            self.n_bytes += len(line)
            yield line.decode("utf-8")


def _iter_parsed(path, lines: _CompleteLines):
    """Rows from `lines` of a saed batch CSV (header checked first); InputError on anything else."""
    reader = csv.reader(lines)
    try:
        first = next(reader, None)
        if first is None:
            return
        _check_header(path, _csv_line(first))
        for cells in reader:
            if not cells:
                continue
            if len(cells) != len(COLUMNS):
                raise InputError(f"{path}: line {reader.line_num} has {len(cells)} cells, expected {len(COLUMNS)}; the "
                                 "file was changed by something else: refusing to append (give another --out)")
            try:
                yield Row.from_cells(cells)
            except ValueError:
                raise InputError(f"{path}: line {reader.line_num} is not a saed batch row ({','.join(cells)[:60]!r}); "
                                 "refusing to append (give another --out)") from None
    except csv.Error as exc:
        raise InputError(f"{path}: not a saed batch CSV ({exc}); refusing to append to it: give another --out") from None
    except UnicodeDecodeError:
        raise InputError(f"{path}: not a saed batch CSV (not text); refusing to append to it: "
                         "give another --out or move the file away") from None


def iter_rows(path):
    """The complete rows of a saed batch CSV, one at a time (InputError if the file is not one)."""
    try:
        fh = open(path, "rb")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read the file ({exc.strerror})") from None
    with fh:
        yield from _iter_parsed(path, _CompleteLines(fh))


def read_rows(path) -> list[Row]:
    """Every complete row of a saed batch CSV, as a list."""
    return list(iter_rows(path))


class ResultsFile:
    """The batch CSV opened for appending: ``with ResultsFile(path) as out: out.append(rows)``.

    On opening, an existing file is locked and checked line by line; ``done`` holds the
    (path, frame) keys already in it and ``n_rows`` their number (the rows themselves are not
    kept: read them back with :func:`iter_rows`). A new or empty file gets the header; a last
    line cut short by a crash is removed. ``retry_errors=True`` drops the error rows first
    (rewriting the file atomically), so those frames are done again.
    """

    def __init__(self, path, *, retry_errors: bool = False):
        from saed.files import check_writable

        self.path = check_writable(path)
        self._fh = None
        self.done: set = set()
        self.n_rows = 0
        try:
            self._open(retry_errors)
        except BaseException:
            self.close()
            raise

    def _open_locked(self) -> None:
        try:
            self._fh = open(self.path, "r+b" if self.path.exists() else "w+b")
        except OSError as exc:
            raise InputError(f"{self.path}: cannot open the file for writing ({exc.strerror})") from None
        _lock(self._fh, self.path)

    def _scan(self) -> tuple[int, int]:
        """Read the keys of the rows in the file; returns (bytes of complete lines, error rows)."""
        lines = _CompleteLines(self._fh)
        keys: dict = {}
        n_err = 0
        self.done, self.n_rows = set(), 0
        for r in _iter_parsed(self.path, lines):
            k = r.key
            file, fid = keys.setdefault(k[:2], k[:2])    # one pair of strings per file
            self.done.add((file, fid, k[2]))
            self.n_rows += 1
            n_err += r.is_error
        return lines.n_bytes, n_err

    def _open(self, retry_errors: bool) -> None:
        self._open_locked()
        head = self._fh.read(len(_HEADER_LINE)).decode("utf-8", errors="replace")
        if head and "\n" not in head and not _HEADER_LINE.startswith(head):
            _check_header(self.path, head)     # one line and no newline: only a header cut short is ours
        self._fh.seek(0)
        good_bytes, n_err = self._scan()
        size = self._fh.seek(0, os.SEEK_END)
        if retry_errors and n_err:
            self._drop_error_rows(n_err)
        elif good_bytes < size:
            logger.warning("%s: removed a last line cut short by an interruption (that frame is done again)", self.path)
            self._fh.truncate(good_bytes)
            self._fh.seek(0, os.SEEK_END)
        if self._fh.tell() == 0:
            self._fh.write(_HEADER_LINE.encode("utf-8"))
            self._sync(self._fh)

    def _drop_error_rows(self, n_err: int) -> None:
        from saed.files import atomic_write_bytes

        # the kept rows are rewritten through saed.files (temporary file, fsync, rename): a crash
        # half-way leaves the old file as it was
        kept = "".join(_csv_line(r.cells()) for r in iter_rows(self.path) if not r.is_error)
        atomic_write_bytes(self.path, (_HEADER_LINE + kept).encode("utf-8"))
        self._fh.close()
        self._open_locked()
        self._scan()
        self._fh.seek(0, os.SEEK_END)
        logger.info("%s: %d error rows removed; those frames will be done again", self.path, n_err)

    @staticmethod
    def _sync(fh) -> None:
        fh.flush()
        os.fsync(fh.fileno())

    def append(self, rows) -> int:
        """Write `rows` not yet in the file in one write, then flush and fsync; returns how many."""
        new, keys = [], set()
        for r in rows:
            if r.key not in self.done and r.key not in keys:
                keys.add(r.key)
                new.append(r)
        if new:
            self._fh.write("".join(_csv_line(r.cells()) for r in new).encode("utf-8"))
            self._sync(self._fh)
            self.done |= keys
            self.n_rows += len(new)
        return len(new)

    def close(self) -> None:
        if self._fh is not None:
            self._fh.close()
            self._fh = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _lock(fh, path) -> None:
    try:
        import fcntl
    except ImportError:  # not on this platform: no advisory lock
        return
    try:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        raise InputError(f"{path}: another saed batch run is writing this file; wait for it or give another --out") from None
