"""CLI test helpers: run the app in-process with CliRunner against a tmp_path store."""

import pytest
from typer.testing import CliRunner

from picker.cli.app import app


class Run:
    def __init__(self, db):
        self.db = db
        self.runner = CliRunner()

    def __call__(self, *args, db=True, **kw):
        argv = (["--db", str(self.db)] if db else []) + [str(a) for a in args]
        return self.runner.invoke(app, argv, catch_exceptions=False, **kw)


@pytest.fixture
def db(tmp_path):
    return tmp_path / "stock.sqlite"


@pytest.fixture
def run(db, monkeypatch, tmp_path):
    monkeypatch.setenv("PICKER_DB", str(tmp_path / "never-used.sqlite"))
    return Run(db)
