"""``saed serve`` on the command line: bad input is one line and exit status 2, before any server starts."""

from __future__ import annotations

import socket

import pytest

from saed.cli import main


@pytest.fixture(autouse=True)
def _private_settings(tmp_path, monkeypatch):
    monkeypatch.setenv("SAED_SERVE_DIR", str(tmp_path / "serve-state"))


def _one_line_error(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "Traceback" not in err, err
    return err


def test_port_in_use_is_one_line_exit_2(capsys, tmp_path):
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen(1)
        port = busy.getsockname()[1]
        assert main(["serve", "--port", str(port), "--watch", str(tmp_path)]) == 2
    err = _one_line_error(capsys)
    assert f"port {port}" in err and "in use" in err


def test_missing_watch_folder_is_one_line_exit_2(capsys, tmp_path):
    assert main(["serve", "--port", "0", "--watch", str(tmp_path / "no-such-folder")]) == 2
    assert "no such folder" in _one_line_error(capsys)
    f = tmp_path / "a-file"
    f.write_text("x")
    assert main(["serve", "--port", "0", "--watch", str(f)]) == 2
    assert "not a folder" in _one_line_error(capsys)


@pytest.mark.parametrize("argv, words", [
    (["--host", "0.0.0.0"], "--allow-remote"),
    (["--port", "70000"], "65535"),
    (["--phase", "Unobtainium"], "Unobtainium"),
    (["--scale", "0.05", "--camera-length", "100", "--pixel-pitch", "14"], "either"),
    (["--top", "0"], "--top"),
])
def test_bad_options_are_one_line_exit_2(capsys, argv, words):
    assert main(["serve", "--port", "0", *argv]) == 2
    assert words in _one_line_error(capsys)
