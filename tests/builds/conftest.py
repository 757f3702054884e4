"""Fixtures of the retune tests: the ngspice fixture of tests/reference (skip locally, fail in CI)."""

from tests.reference.conftest import ngspice_bin  # noqa: F401  (fixture)
