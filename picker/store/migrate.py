"""Glue between the store and the migration scripts in the top-level ``db`` package.

The scripts live in ``db/migrations/NNNN_name.py`` (see ``db/migrations/__init__.py``
for the rules); this module finds them, reads and writes the schema version,
backs up SQLite files before an upgrade and runs pending migrations in one
transaction.
"""

from __future__ import annotations

import datetime as dt
import importlib
import pkgutil
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from sqlalchemy import inspect, text
from sqlalchemy.engine import Connection, Engine

from picker.errors import PickerError
from picker.store.models import SCHEMA_VERSION


@dataclass(frozen=True)
class Migration:
    """One migration script: the version it produces and its upgrade function."""

    version: int
    name: str
    upgrade: Callable[[Connection], None]


def load_migrations() -> list[Migration]:
    """Import every ``db.migrations`` module, in version order.

    Returns
    -------
    list of Migration
        Versions 1, 2, ... without gaps, the last one equal to ``SCHEMA_VERSION``.
    """
    try:
        import db
        import db.migrations as pkg
    except ImportError as exc:  # pragma: no cover - broken install
        raise RuntimeError("the picker migrations package 'db' is not installed") from exc
    if getattr(db, "OWNER", None) != "picker":  # pragma: no cover - name clash
        raise RuntimeError(f"'import db' found {db.__file__}, not picker's migrations")
    found = []
    for info in pkgutil.iter_modules(pkg.__path__):
        if not info.name[:4].isdigit():
            continue
        mod = importlib.import_module(f"db.migrations.{info.name}")
        found.append(Migration(int(mod.VERSION), info.name, mod.upgrade))
    found.sort(key=lambda m: m.version)
    versions = [m.version for m in found]
    if versions != list(range(1, len(found) + 1)) or versions[-1:] != [SCHEMA_VERSION]:
        raise RuntimeError(f"migrations {versions} do not lead to schema v{SCHEMA_VERSION}")
    return found


def read_version(connection: Connection) -> int | None:
    """Schema version of the database, or None when it has no tables at all.

    Raises
    ------
    PickerError
        If the database has tables but is not a picker store.
    """
    names = set(inspect(connection).get_table_names())
    if not names:
        return None
    if "schema_version" not in names:
        raise PickerError(
            "database has tables but no schema_version table: not a picker store "
            f"(tables: {', '.join(sorted(names)[:8])})"
        )
    rows = connection.execute(text("SELECT version FROM schema_version")).scalars().all()
    if len(rows) != 1:
        raise PickerError(f"schema_version table holds {len(rows)} rows, expected 1")
    return int(rows[0])


def create_fresh(connection: Connection, target: int = SCHEMA_VERSION) -> None:
    """Run migrations 1..target on an empty database and record the version."""
    for mig in load_migrations():
        if mig.version <= target:
            mig.upgrade(connection)
    connection.execute(text("INSERT INTO schema_version (version) VALUES (:v)"), {"v": target})


def upgrade(engine: Engine, target: int = SCHEMA_VERSION) -> int:
    """Run the pending migrations up to ``target`` in one transaction.

    Returns
    -------
    int
        The version the store had before (equal to ``target`` if nothing was done,
        e.g. because another process upgraded it meanwhile).
    """
    with engine.begin() as conn:
        # Take the write lock first (a no-op UPDATE works on every backend), then
        # read the version again: another process may have upgraded meanwhile.
        conn.execute(text("UPDATE schema_version SET version = version"))
        before = read_version(conn)
        assert before is not None
        for mig in load_migrations():
            if before < mig.version <= target:
                mig.upgrade(conn)
        if before < target:
            conn.execute(text("UPDATE schema_version SET version = :v"), {"v": target})
    return before


def backup_sqlite(path: Path, version: int) -> Path:
    """Copy a SQLite store to ``<stem>.v<version>-backup-<UTC time>.sqlite`` beside it.

    Uses SQLite's online backup, so the copy is consistent even if another
    process reads the store meanwhile.
    """
    stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    target = path.with_name(f"{path.stem}.v{version}-backup-{stamp}.sqlite")
    n = 1
    while target.exists():
        n += 1
        target = path.with_name(f"{path.stem}.v{version}-backup-{stamp}-{n}.sqlite")
    src = sqlite3.connect(path)
    try:
        dst = sqlite3.connect(target)
        try:
            src.backup(dst)
        finally:
            dst.close()
    finally:
        src.close()
    return target
