"""Fixtures for store tests: a fresh store (SQLite in tmp_path, or a new server database), CSV writing helper.

With ``PICKER_TEST_SERVER_URL`` set (see ``tests/server_db.py``) the ``store`` fixture
is a new, empty database on that server and tests marked ``sqlite_only`` are skipped.
"""

from pathlib import Path

import pytest

from picker.store import open_store, resolve_db_url
from tests.server_db import create_database, drop_database, server_db, server_url  # noqa: F401  (fixture)


def pytest_runtest_setup(item):
    if server_url() and item.get_closest_marker("sqlite_only"):
        pytest.skip("tests the SQLite store file itself (this is the PostgreSQL pass)")


@pytest.fixture
def store_url(tmp_path):
    """URL of a new, empty store: a SQLite file in tmp_path, or a new database on the test server."""
    if server_url() is None:
        yield resolve_db_url(str(tmp_path / "stock.sqlite"))
        return
    url = create_database()
    yield url
    drop_database(url)


@pytest.fixture
def store(store_url):
    st = open_store(store_url)
    yield st
    st.close()


@pytest.fixture
def write_csv(tmp_path):
    """write_csv(text, name='in.csv') -> Path; text is written as-is (UTF-8)."""

    def _write(text: str, name: str = "in.csv") -> Path:
        p = tmp_path / name
        p.write_text(text, encoding="utf-8")
        return p

    return _write
