"""Test-wide settings: no test may write into the user's real calibration history."""

import pytest


@pytest.fixture(autouse=True)
def _private_calibration_history(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("SAED_CALIBRATION_DIR", str(tmp_path_factory.mktemp("calibration-history")))
