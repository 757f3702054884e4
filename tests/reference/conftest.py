"""Fixtures for the checks against the ngspice simulator."""

from __future__ import annotations

import os

import pytest

from picker.sim.ngspice import NOT_INSTALLED, find_ngspice


@pytest.fixture(scope="session")
def ngspice_bin() -> str:
    """Path of ngspice; a missing simulator fails the run on CI and skips elsewhere."""
    path = find_ngspice()
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail(NOT_INSTALLED)
        pytest.skip(NOT_INSTALLED)
    return path
