"""Test-wide settings: no test may write into the user's real calibration history."""

import os
import stat

import pytest


@pytest.fixture(autouse=True)
def _private_calibration_history(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("SAED_CALIBRATION_DIR", str(tmp_path_factory.mktemp("calibration-history")))


@pytest.fixture()
def private_device(tmp_path):
    """make(minor): a character-device node of the test's own in tmp_path, (1, minor) = a twin of the
    null (3) or full (7) device; skips where it cannot be made (not root, a nodev mount)."""
    def make(minor: int):
        node = tmp_path / f"dev_1_{minor}"
        try:
            os.mknod(node, stat.S_IFCHR | 0o666, os.makedev(1, minor))
            with open(node, "wb"):
                pass
        except OSError as exc:
            pytest.skip(f"cannot make a private device node here ({exc.strerror})")
        return node

    return make
