"""A fresh, empty database on a PostgreSQL server per test, when the tests are pointed at one.

Set ``PICKER_TEST_SERVER_URL`` to a database URL on a server where that role may
``CREATE DATABASE`` (e.g. ``postgresql+psycopg://postgres@127.0.0.1:5432/postgres``;
``.ci/run`` starts a throwaway cluster and sets it).  Then the store and CLI test
fixtures (``tests/store/conftest.py``, ``tests/cli/conftest.py``) give every test its
own new database ``picker_t_<random>`` on that server instead of a SQLite file, and
drop it afterwards; tests marked ``sqlite_only`` (they test the SQLite file itself)
are skipped.  Unset: everything runs on SQLite and tests that need the server skip.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import uuid
from pathlib import Path

import pytest
from sqlalchemy import MetaData, create_engine, inspect, select, text
from sqlalchemy.engine import make_url
from sqlalchemy.pool import NullPool

#: Environment variable naming the server the tests may create databases on.
SERVER_ENV = "PICKER_TEST_SERVER_URL"


def server_url() -> str | None:
    """The admin URL from ``PICKER_TEST_SERVER_URL``, or None (tests then use SQLite)."""
    return os.environ.get(SERVER_ENV) or None


def require_server() -> str:
    """The admin URL; skips the test when none is set (locally without a server)."""
    url = server_url()
    if url is None:
        pytest.skip(f"needs a PostgreSQL server: set {SERVER_ENV} (the CI's PostgreSQL pass does)")
    return url


def _admin(url: str):
    return create_engine(url, isolation_level="AUTOCOMMIT", poolclass=NullPool)


def create_database(prefix: str = "picker_t") -> str:
    """Create an empty database on the server and return its URL (the same role and host)."""
    admin_url = require_server()
    name = f"{prefix}_{uuid.uuid4().hex[:12]}"
    engine = _admin(admin_url)
    try:
        with engine.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
    finally:
        engine.dispose()
    return make_url(admin_url).set(database=name).render_as_string(hide_password=False)


def drop_database(url: str) -> None:
    """Drop a database made by :func:`create_database` (closing any connection left to it)."""
    name = make_url(url).database
    engine = _admin(server_url())
    try:
        with engine.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    finally:
        engine.dispose()


@pytest.fixture
def server_db():
    """URL of a new, empty database on the test server (skips without one); dropped afterwards."""
    url = create_database()
    yield url
    drop_database(url)


# ---- helpers that take a test's store as a SQLite Path or a server URL (the ``db`` fixture) ----


def _is_url(db) -> bool:
    return isinstance(db, str) and "://" in db


def store_exists(db) -> bool:
    """Whether the store exists: the SQLite file, or (a server URL) any table in that database."""
    if not _is_url(db):
        return Path(db).exists()
    engine = create_engine(db, poolclass=NullPool)
    try:
        with engine.connect() as conn:
            return bool(inspect(conn).get_table_names())
    finally:
        engine.dispose()


def store_snapshot(db):
    """Something equal before and after only if nothing changed: the file's hash, or every row of every table."""
    if not _is_url(db):
        return hashlib.sha256(Path(db).read_bytes()).hexdigest()
    engine = create_engine(db, poolclass=NullPool)
    try:
        with engine.connect() as conn:
            meta = MetaData()
            meta.reflect(conn)
            return {name: sorted(map(repr, conn.execute(select(t)).all())) for name, t in sorted(meta.tables.items())}
    finally:
        engine.dispose()


def install_store_file(src: Path, db) -> None:
    """Make the test's store a copy of the SQLite store ``src``: a file copy, or ``picker stock migrate`` to the server.

    A server database that already holds a store is emptied (dropped and created again) first.
    """
    if not _is_url(db):
        shutil.copyfile(src, db)
        return
    from picker.store import open_store, resolve_db_url
    from picker.store.transfer import copy_store

    if store_exists(db):
        drop_database(db)
        name = make_url(db).database
        engine = _admin(server_url())
        try:
            with engine.connect() as conn:
                conn.execute(text(f'CREATE DATABASE "{name}"'))
        finally:
            engine.dispose()
    source = open_store(resolve_db_url(str(src)), create=False)
    try:
        copy_store(source, db)
    finally:
        source.close()
