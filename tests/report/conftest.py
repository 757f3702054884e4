"""Fixtures for the report tests: headless Chromium for the printed pick list."""

from __future__ import annotations

import os
import shutil

import pytest

CHROMIUM_MISSING = "headless Chromium is not installed; on Debian/Ubuntu: apt-get install chromium"


@pytest.fixture(scope="session")
def chromium_bin() -> str:
    """Path of chromium; a missing browser fails the run on CI and skips elsewhere (as ngspice does)."""
    path = shutil.which("chromium") or shutil.which("chromium-browser")
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail(CHROMIUM_MISSING)
        pytest.skip(CHROMIUM_MISSING)
    return path
