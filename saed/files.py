"""Writing and reading files so that nothing already on disk is lost: the one place saed touches files.

Every layer may import this module (it imports nothing of saed but the errors).

Writing (:func:`atomic_write_bytes`, :func:`atomic_write_text`):

- a regular file (or a name not yet taken) is replaced atomically: the data go to a temporary file
  with a name of its own (:func:`tempfile.mkstemp`, so two writers never share one) in the same
  folder, are fsynced, and the temporary file is renamed over the target, then the folder is
  fsynced. A failure removes the temporary file and leaves the target as it was;
- a symbolic link is followed: the regular file it points to is replaced, the link stays;
- a character device (``/dev/null``, a terminal) or a named pipe (FIFO) is written straight, as a
  shell redirection would (stdout itself is ``-`` in the commands);
- anything else (a folder, a socket, a block device) is refused, with its kind named.

Within :func:`all_or_nothing`, atomic writes are prepared (temporary file written and fsynced) and
put in place only when the block ends without an error: a command that fails half-way has
replaced none of its outputs.

:func:`create_new_file` files a new name exclusively (a hard link of the finished temporary file,
which fails when the name exists, so two processes can never take the same name).

Reading (:func:`read_json_file`): a size cap and nesting that cannot overflow the interpreter,
with one-line errors.

:func:`refuse_overwriting_inputs` stops a run before any work when one of its outputs is one of
its inputs (the same resolved path, or the same file under another name: same device and inode).
"""

from __future__ import annotations

import contextlib
import contextvars
import errno
import json
import os
import stat
import tempfile
from dataclasses import dataclass
from pathlib import Path

from saed.errors import InputError

__all__ = ["atomic_write_bytes", "atomic_write_text", "check_writable", "create_new_file", "all_or_nothing",
           "read_json_file", "refuse_overwriting_inputs", "MAX_JSON_BYTES"]

#: Largest JSON file read (calibration files, index results, history entries): 16 MiB is far above
#: any file saed writes (an index result of a 1000-spot pattern is well under 1 MiB).
MAX_JSON_BYTES = 16 * 2**20

_STAGE: contextvars.ContextVar = contextvars.ContextVar("saed_staged_writes", default=None)


_KINDS = ((stat.S_ISDIR, "a folder"), (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"),
          (stat.S_ISCHR, "a character device"), (stat.S_ISFIFO, "a named pipe (FIFO)"),
          (stat.S_ISREG, "a regular file"))


def _kind(mode: int) -> str:
    return next((name for test, name in _KINDS if test(mode)), "a special file")


def _why(exc: OSError) -> str:
    return exc.strerror or exc.__class__.__name__


@dataclass(frozen=True)
class _Target:
    given: str
    real: Path          # the path after following symbolic links
    stream: bool        # a character device or FIFO: written straight, never replaced
    mode: int | None    # permission bits of the existing regular file (None: new file)


def _target(path) -> _Target:
    """Where a write to `path` lands, or InputError naming why nothing may be written there."""
    given = os.fspath(path)
    if given == "":
        raise InputError("an empty file name was given")
    try:
        st = os.stat(given)  # follows links, also the kernel's (/proc/self/fd/1 to a pipe)
    except (FileNotFoundError, NotADirectoryError):  # not there yet (its folder is checked below)
        st = None
    except OSError as exc:  # a loop of links, a name too long, a folder that cannot be searched
        raise InputError(f"{given}: cannot be written ({_why(exc)})") from None
    if st is not None and (stat.S_ISCHR(st.st_mode) or stat.S_ISFIFO(st.st_mode)):
        return _Target(given, Path(given), True, None)
    real = Path(os.path.realpath(given))
    if st is not None:
        if not stat.S_ISREG(st.st_mode):
            what = "a folder, not a file name" if stat.S_ISDIR(st.st_mode) else _kind(st.st_mode)
            raise InputError(f"{given}: is {what}; saed writes only regular files, character devices and named pipes")
    parent = real.parent
    try:
        pst = os.stat(parent)
    except FileNotFoundError:
        raise InputError(f"{given}: folder {parent} does not exist") from None
    except OSError as exc:
        raise InputError(f"{given}: folder {parent} cannot be used ({_why(exc)})") from None
    if not stat.S_ISDIR(pst.st_mode):
        raise InputError(f"{given}: {parent} is {_kind(pst.st_mode)}, not a folder")
    return _Target(given, real, False, None if st is None else stat.S_IMODE(st.st_mode))


def _new_file_mode() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def _fsync_folder(folder: Path) -> None:
    """Make a rename or link in `folder` durable (no-op where folders cannot be opened, e.g. Windows)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _write_temporary(t: _Target, data: bytes) -> Path:
    """`data` in a new, fsynced temporary file beside the target; removed again on any failure."""
    folder = t.real.parent
    try:
        fd, name = tempfile.mkstemp(prefix=f".{t.real.name[:100]}.", suffix=".tmp", dir=folder)  # < NAME_MAX
    except OSError as exc:
        raise InputError(f"{t.given}: cannot write into folder {folder} ({_why(exc)})") from None
    tmp = Path(name)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, t.mode if t.mode is not None else _new_file_mode())
    except BaseException as exc:
        _remove(tmp)
        if isinstance(exc, OSError):
            raise InputError(f"{t.given}: cannot write ({_why(exc)}); nothing was changed") from None
        raise
    return tmp


def _remove(path: Path) -> None:
    with contextlib.suppress(OSError):
        os.unlink(path)


def _put_in_place(t: _Target, tmp: Path) -> None:
    try:
        os.replace(tmp, t.real)
    except OSError as exc:
        _remove(tmp)
        raise InputError(f"{t.given}: cannot be replaced ({_why(exc)}); it was left as it was") from None
    _fsync_folder(t.real.parent)


def _write_stream(t: _Target, data: bytes) -> None:
    """Write straight to a character device or named pipe (no creation, no truncation)."""
    try:
        fd = os.open(t.real, os.O_WRONLY)
    except OSError as exc:
        raise InputError(f"{t.given}: cannot be opened for writing ({_why(exc)})") from None
    try:
        view = memoryview(data)
        while view:
            n = os.write(fd, view)
            view = view[n:]
    except OSError as exc:
        raise InputError(f"{t.given}: cannot write ({_why(exc)})") from None
    finally:
        os.close(fd)


class _Staged:
    """A write prepared inside :func:`all_or_nothing`: put in place (or discarded) when the block ends."""

    def __init__(self, t: _Target, data: bytes):
        self.target = t
        self.data = None if not t.stream else data
        self.tmp = None if t.stream else _write_temporary(t, data)

    def commit(self) -> None:
        if self.tmp is None:
            _write_stream(self.target, self.data)
        else:
            tmp, self.tmp = self.tmp, None
            _put_in_place(self.target, tmp)

    def discard(self) -> None:
        if self.tmp is not None:
            _remove(self.tmp)
            self.tmp = None


@contextlib.contextmanager
def all_or_nothing():
    """Prepare every atomic write in the block; put them all in place only if the block succeeds.

    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> try:
    ...     with all_or_nothing():
    ...         atomic_write_text(d / "a.txt", "first")
    ...         raise KeyError("failure after the first write")
    ... except KeyError:
    ...     pass
    >>> sorted(p.name for p in d.iterdir())   # nothing written, no temporary file left
    []
    >>> d.rmdir()
    """
    staged: list[_Staged] = []
    token = _STAGE.set(staged)
    try:
        yield
    except BaseException:
        _STAGE.reset(token)
        for s in staged:
            s.discard()
        raise
    _STAGE.reset(token)
    try:
        for s in staged:
            s.commit()
    finally:
        for s in staged:
            s.discard()


def check_writable(path) -> Path:
    """Raise InputError unless a file can be written at `path` (tried, not guessed); returns Path(path).

    A trial temporary file is made in the target's folder and removed at once: this is what the
    write will need, and it holds also for root (whom permission bits do not stop).
    """
    t = _target(path)
    if not t.stream:
        _remove(_write_temporary(t, b""))
    return Path(path)


def atomic_write_bytes(path, data: bytes) -> None:
    """Write `data` to `path` so that a failure leaves the old file whole (module notes)."""
    t = _target(path)
    staged = _STAGE.get()
    if staged is not None:
        for s in [s for s in staged if s.target.real == t.real]:  # written twice: the last one counts
            s.discard()
            staged.remove(s)
        staged.append(_Staged(t, bytes(data)))
    elif t.stream:
        _write_stream(t, data)
    else:
        _put_in_place(t, _write_temporary(t, data))


def atomic_write_text(path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))


def create_new_file(path, data: bytes) -> bool:
    """Create `path` holding `data` only if no file of that name exists; True if created, False if taken.

    The finished, fsynced temporary file is hard-linked to the name (a link never replaces an
    existing name, so two processes cannot both take it); where hard links are not supported the
    name is opened with O_CREAT | O_EXCL instead. The folder is fsynced after.
    """
    t = _target(path)
    if t.stream or t.mode is not None:
        return False
    tmp = _write_temporary(t, data)
    try:
        os.link(tmp, t.real)
    except FileExistsError:
        return False
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
            raise InputError(f"{t.given}: cannot be created ({_why(exc)})") from None
        return _create_exclusive(t, data)
    finally:
        _remove(tmp)
    _fsync_folder(t.real.parent)
    return True


def _create_exclusive(t: _Target, data: bytes) -> bool:
    try:
        fd = os.open(t.real, os.O_WRONLY | os.O_CREAT | os.O_EXCL, _new_file_mode())
    except FileExistsError:
        return False
    except OSError as exc:
        raise InputError(f"{t.given}: cannot be created ({_why(exc)})") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except OSError as exc:
        _remove(t.real)
        raise InputError(f"{t.given}: cannot be written ({_why(exc)})") from None
    _fsync_folder(t.real.parent)
    return True


def read_json_file(path, *, what: str, max_bytes: int = MAX_JSON_BYTES):
    """The parsed JSON in `path`; any problem is one InputError "PATH: not WHAT (reason)".

    `what` names the expected file, e.g. "a saed calibration file". Files over `max_bytes` are not
    read through, and nesting too deep for the parser is a message, not a RecursionError.
    """
    try:
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not {what}") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({_why(exc)})") from None
    if len(data) > max_bytes:
        raise InputError(f"{path}: not {what} (larger than {max_bytes / 2**20:g} MiB)")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"{path}: not {what} (not UTF-8 text)") from None
    try:
        return json.loads(text)
    except RecursionError:
        raise InputError(f"{path}: not {what} (JSON nested too deeply)") from None
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: not {what} (not JSON: {exc.msg} at line {exc.lineno})") from None
    except ValueError as exc:  # e.g. an integer literal with too many digits
        raise InputError(f"{path}: not {what} ({str(exc).splitlines()[0]})") from None


def _identity(path):
    """(resolved path, (device, inode) or None) of an existing `path`; None if it is not a file on disk."""
    try:
        real = os.path.realpath(path)
        st = os.stat(real)
    except (OSError, ValueError):
        return None
    return real, (st.st_dev, st.st_ino), st.st_mode


def refuse_overwriting_inputs(inputs, outputs) -> None:
    """InputError before any work if an output would replace an input, or two outputs are one file.

    `inputs` and `outputs` are (label, path) pairs (label as the user typed it, e.g. "--json");
    paths that are None, "-" or (for inputs) not existing files are skipped. Outputs that are
    character devices or named pipes are written straight, never replaced, and are not compared.
    """
    seen_in = []
    for label, path in inputs:
        if path in (None, "", "-"):
            continue
        ident = _identity(path)
        if ident is not None and not stat.S_ISDIR(ident[2]):
            seen_in.append((label, path, ident))
    seen_out = []
    for label, path in outputs:
        if path in (None, "", "-"):
            continue
        real = os.path.realpath(path)
        ident = _identity(path)
        if ident is not None and (stat.S_ISCHR(ident[2]) or stat.S_ISFIFO(ident[2])):
            continue
        for in_label, in_path, (in_real, in_id, _) in seen_in:
            if real == in_real or (ident is not None and ident[1] == in_id):
                raise InputError(f"{label} {path} is the input {in_label} {in_path}: saed never writes over "
                                 "an input of the same run; give another output name")
        for out_label, out_path, out_real, out_id in seen_out:
            if real == out_real or (ident is not None and ident[1] == out_id):
                raise InputError(f"{label} {path} and {out_label} {out_path} name the same file; give two names")
        seen_out.append((label, path, real, None if ident is None else ident[1]))
