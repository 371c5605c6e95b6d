"""saed.files: what a write does to whatever stands at the target, and what is left after a failure.

Every special target is one the test makes itself (a symbolic link, a FIFO from os.mkfifo, a Unix
socket, and, where the kernel lets the test make one, a private character-device node in the
temporary folder); no real device node or system file is touched.
"""

from __future__ import annotations

import errno
import json
import os
import socket
import stat
import threading

import pytest

from saed import files
from saed.errors import InputError
from saed.files import (all_or_nothing, atomic_write_bytes, atomic_write_text, check_writable, create_new_file,
                        read_json_file, refuse_overwriting_inputs)


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".tmp"))


def test_regular_file_is_replaced_whole_and_keeps_its_permissions(tmp_path):
    p = tmp_path / "out.json"
    p.write_text("old")
    os.chmod(p, 0o640)
    atomic_write_text(p, "new")
    assert p.read_text() == "new" and stat.S_IMODE(p.stat().st_mode) == 0o640
    assert _leftovers(tmp_path) == []


def test_a_symlink_is_written_through_and_stays_a_link(tmp_path):
    target = tmp_path / "real.json"
    target.write_text("old")
    link = tmp_path / "link.json"
    link.symlink_to(target)
    atomic_write_text(link, "new")
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert target.read_text() == "new"


def test_a_dangling_symlink_creates_its_target(tmp_path):
    link = tmp_path / "link.json"
    link.symlink_to(tmp_path / "made.json")
    atomic_write_text(link, "x")
    assert link.is_symlink() and (tmp_path / "made.json").read_text() == "x"


def _read_fifo(path, box):
    with open(path, "rb") as fh:
        box.append(fh.read())


def test_a_fifo_is_written_straight_and_stays_a_fifo(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    box: list[bytes] = []
    reader = threading.Thread(target=_read_fifo, args=(fifo, box))
    reader.start()
    atomic_write_bytes(fifo, b"through the pipe")
    reader.join(timeout=10)
    assert box == [b"through the pipe"]
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)
    assert _leftovers(tmp_path) == []


def test_a_character_device_is_written_straight_and_stays_a_device(tmp_path, private_device):
    node = private_device(3)  # a private twin of the null device
    atomic_write_text(node, "discarded")
    assert stat.S_ISCHR(os.lstat(node).st_mode)
    assert _leftovers(tmp_path) == []


def test_a_full_device_is_one_line_and_stays_a_device(private_device):
    node = private_device(7)  # a private twin of the full device: every write fails with ENOSPC
    with pytest.raises(InputError, match="cannot write"):
        atomic_write_text(node, "x" * 10000)
    assert stat.S_ISCHR(os.lstat(node).st_mode)


def test_a_socket_a_folder_and_a_file_as_folder_are_refused_by_kind(tmp_path):
    sock_path = tmp_path / "s.sock"
    s = socket.socket(socket.AF_UNIX)
    try:
        s.bind(str(sock_path))
        with pytest.raises(InputError, match="is a socket"):
            atomic_write_text(sock_path, "x")
    finally:
        s.close()
    with pytest.raises(InputError, match="is a folder"):
        atomic_write_text(tmp_path, "x")
    plain = tmp_path / "plain.txt"
    plain.write_text("keep")
    with pytest.raises(InputError, match="is a regular file, not a folder"):
        check_writable(plain / "out.json")
    assert plain.read_text() == "keep"


def test_a_failed_rename_leaves_the_old_file_and_no_temporary(tmp_path, monkeypatch):
    p = tmp_path / "out.json"
    p.write_text("old")

    def refuse(src, dst):
        raise PermissionError(errno.EPERM, "Operation not permitted")

    monkeypatch.setattr(files.os, "replace", refuse)
    with pytest.raises(InputError, match="cannot be replaced"):
        atomic_write_text(p, "new")
    assert p.read_text() == "old" and _leftovers(tmp_path) == []


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path, monkeypatch):
    p = tmp_path / "out.json"
    p.write_text("old")

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(files.os, "fsync", full)
    with pytest.raises(InputError, match="No space left"):
        atomic_write_text(p, "new")
    assert p.read_text() == "old" and _leftovers(tmp_path) == []


def test_all_or_nothing_replaces_nothing_when_the_block_fails(tmp_path):
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    a.write_text("old a")
    with pytest.raises(RuntimeError):
        with all_or_nothing():
            atomic_write_text(a, "new a")
            assert a.read_text() == "old a"  # prepared, not yet in place
            atomic_write_text(b, "new b")
            raise RuntimeError("a later step fails")
    assert a.read_text() == "old a" and not b.exists() and _leftovers(tmp_path) == []
    with all_or_nothing():
        atomic_write_text(a, "new a")
        atomic_write_text(b, "new b")
    assert a.read_text() == "new a" and b.read_text() == "new b" and _leftovers(tmp_path) == []


def test_create_new_file_never_replaces(tmp_path):
    p = tmp_path / "entry.json"
    assert create_new_file(p, b"first") is True
    assert create_new_file(p, b"second") is False
    assert p.read_bytes() == b"first" and _leftovers(tmp_path) == []


def test_outputs_that_are_inputs_are_refused_by_path_link_and_inode(tmp_path):
    img = tmp_path / "p.tif"
    img.write_bytes(b"pattern")
    hard = tmp_path / "same_inode.json"
    os.link(img, hard)
    soft = tmp_path / "soft.json"
    soft.symlink_to(img)
    for out in (img, tmp_path / "." / "p.tif", hard, soft):
        with pytest.raises(InputError, match="is the input IMAGE"):
            refuse_overwriting_inputs([("IMAGE", str(img))], [("--json", str(out))])
    with pytest.raises(InputError, match="name the same file"):
        refuse_overwriting_inputs([("IMAGE", str(img))], [("--json", str(tmp_path / "r")), ("--overlay", str(tmp_path / "r"))])
    refuse_overwriting_inputs([("IMAGE", str(img)), ("--phase", "Co-fcc")], [("--json", "-"), ("--overlay", str(tmp_path / "o.png"))])
    assert img.read_bytes() == b"pattern"


def test_json_reader_caps_size_and_nesting(tmp_path):
    deep = tmp_path / "deep.json"
    deep.write_text("[" * 200000 + "]" * 200000)
    with pytest.raises(InputError, match="not a thing .*nested too deeply"):
        read_json_file(deep, what="a thing")
    big = tmp_path / "big.json"
    with open(big, "wb") as fh:  # sparse: no 17 MB written to disk
        fh.truncate(files.MAX_JSON_BYTES + 10)
    with pytest.raises(InputError, match="larger than 16 MiB"):
        read_json_file(big, what="a thing")
    digits = tmp_path / "digits.json"
    digits.write_text("1" * 10000)
    with pytest.raises(InputError, match="not a thing"):
        read_json_file(digits, what="a thing")
    ok = tmp_path / "ok.json"
    ok.write_text(json.dumps({"a": [1, 2]}))
    assert read_json_file(ok, what="a thing") == {"a": [1, 2]}


def test_a_symlink_to_a_pipe_of_this_process_is_written_straight(tmp_path):
    r, w = os.pipe()
    try:
        fd_link = f"/proc/self/fd/{w}"
        if not os.path.exists(fd_link):
            pytest.skip("no /proc/self/fd on this system")
        link = tmp_path / "out.json"
        link.symlink_to(fd_link)  # as in the issue: --json naming a link to the process's own stdout
        atomic_write_bytes(link, b"into our own pipe")
        assert os.read(r, 100) == b"into our own pipe" and link.is_symlink()
    finally:
        os.close(r)
        os.close(w)


def test_a_name_near_the_length_limit_still_gets_a_temporary(tmp_path):
    p = tmp_path / ("n" * 250 + ".json")  # 255 bytes: the longest name most file systems allow
    atomic_write_text(p, "x")
    assert p.read_text() == "x" and _leftovers(tmp_path) == []
