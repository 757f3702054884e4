"""CLI test helpers: run the app in-process with CliRunner against a tmp_path store.

With ``PICKER_TEST_SERVER_URL`` set (see ``tests/server_db.py``) ``db`` is the URL of a
new, empty database on that server instead of a SQLite path, and tests marked
``sqlite_only`` (they look at the store file itself) are skipped.
"""

import pytest
from typer.testing import CliRunner

from picker.cli.app import app
from tests.server_db import create_database, drop_database, server_db, server_url  # noqa: F401  (fixture)


def pytest_runtest_setup(item):
    if server_url() and item.get_closest_marker("sqlite_only"):
        pytest.skip("tests the SQLite store file itself (this is the PostgreSQL pass)")


class Run:
    def __init__(self, db):
        self.db = db
        self.runner = CliRunner()

    def __call__(self, *args, db=True, **kw):
        argv = (["--db", str(self.db)] if db else []) + [str(a) for a in args]
        return self.runner.invoke(app, argv, catch_exceptions=False, **kw)


@pytest.fixture
def db(tmp_path):
    """The test's store: a SQLite path in tmp_path, or (server pass) a new server database's URL."""
    if server_url() is None:
        yield tmp_path / "stock.sqlite"
        return
    url = create_database()
    yield url
    drop_database(url)


@pytest.fixture
def run(db, monkeypatch, tmp_path):
    monkeypatch.setenv("PICKER_DB", str(tmp_path / "never-used.sqlite"))
    return Run(db)
