"""Fixtures for store tests: a fresh SQLite store in tmp_path, CSV writing helper."""

from pathlib import Path

import pytest

from picker.store import open_store, resolve_db_url


@pytest.fixture
def store(tmp_path):
    st = open_store(resolve_db_url(str(tmp_path / "stock.sqlite")))
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
