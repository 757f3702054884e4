"""Where the store lives and how it is opened (URL handling, SQLite settings, schema check)."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import platformdirs
from sqlalchemy import create_engine, event, exc
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.orm import Session, sessionmaker

from picker.errors import PickerError
from picker.store import migrate
from picker.store.ledger import USER_INFO_KEY
from picker.store.models import SCHEMA_VERSION

#: Environment variable naming the store when no ``--db`` is given.
DB_ENV_VAR = "PICKER_DB"
#: Seconds a SQLite connection waits for another process's lock.
SQLITE_BUSY_TIMEOUT_S = 30


def default_db_path() -> Path:
    """``<user data dir>/picker/stock.sqlite`` (platformdirs)."""
    return Path(platformdirs.user_data_dir("picker")) / "stock.sqlite"


def resolve_db_url(option: str | None) -> str:
    """The store's SQLAlchemy URL from ``--db``, else ``$PICKER_DB``, else the default path.

    Parameters
    ----------
    option : str or None
        A path (made absolute, ``~`` expanded, becomes ``sqlite:///ABS``) or a URL
        (anything containing ``://``, passed through unchanged, except that a bare
        ``postgresql://`` or ``postgres://`` becomes ``postgresql+psycopg://``).
    """
    raw = option if option else os.environ.get(DB_ENV_VAR) or None
    if raw is None:
        return f"sqlite:///{default_db_path()}"
    if "://" in raw:
        # A bare postgresql:// (or postgres://) URL gets the driver picker installs (psycopg 3).
        for bare in ("postgresql://", "postgres://"):
            if raw.startswith(bare):
                return "postgresql+psycopg://" + raw[len(bare):]
        return raw
    return f"sqlite:///{Path(raw).expanduser().resolve()}"


def display_url(url: str) -> str:
    """The URL with any password hidden, fit for messages."""
    try:
        return make_url(url).render_as_string(hide_password=True)
    except exc.ArgumentError:
        return url


def sqlite_path(url: str) -> Path | None:
    """File path of a SQLite URL; None for other backends and in-memory SQLite."""
    u = make_url(url)
    if u.get_backend_name() != "sqlite" or u.database in (None, "", ":memory:"):
        return None
    if u.database.startswith("file:"):
        return None
    return Path(u.database)


def _sqlite_setup(engine: Engine) -> None:
    """Foreign keys on, busy timeout, and real transactions (DDL included).

    The stdlib driver would otherwise auto-commit DDL, so an interrupted
    upgrade could leave half a schema; we let SQLite itself see BEGIN.
    """

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn, _record):
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA foreign_keys = ON")
        cur.execute(f"PRAGMA busy_timeout = {SQLITE_BUSY_TIMEOUT_S * 1000}")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn):
        # IMMEDIATE takes the write lock up front, so two commands never
        # deadlock upgrading read locks; they wait (busy timeout) instead.
        conn.exec_driver_sql("BEGIN IMMEDIATE")


def make_engine(url: str) -> Engine:
    """A SQLAlchemy engine for ``url``; raises PickerError for a bad URL or missing driver."""
    try:
        u = make_url(url)
        if u.get_backend_name() == "sqlite":
            engine = create_engine(u, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_S})
            _sqlite_setup(engine)
        else:
            engine = create_engine(u, pool_pre_ping=True)
    except exc.NoSuchModuleError:  # a subclass of ArgumentError: catch it first
        raise PickerError(
            f"unknown database type in store URL {display_url(url)!r} (expected a file path or a SQLAlchemy URL like sqlite:///PATH)"
        ) from None
    except exc.ArgumentError as e:
        raise PickerError(f"bad store URL {display_url(url)!r}: {e} (expected a file path or a URL like sqlite:///PATH)") from None
    except ImportError as e:
        raise PickerError(f"store URL {display_url(url)!r} needs a database driver that is not installed ({e})") from None
    return engine


@dataclass
class Store:
    """An opened store: engine, the one sessionmaker, and what opening it did.

    Commands own the transaction: ``with store.Session.begin() as session: ...``.
    """

    url: str
    engine: Engine
    Session: sessionmaker[Session]
    created: bool = False
    upgraded_from: int | None = None
    backup_path: Path | None = None
    user: str | None = None

    @property
    def backend(self) -> str:
        """``sqlite``, ``postgresql``, ...: the SQLAlchemy backend name."""
        return self.engine.dialect.name

    def close(self) -> None:
        self.engine.dispose()


def open_store(url: str, *, create: bool = True, allow_upgrade: bool = False,
               user: str | None = None) -> Store | None:
    """Open the store at ``url``, creating or upgrading its schema as needed.

    Parameters
    ----------
    url : str
        SQLAlchemy URL (see :func:`resolve_db_url`).
    create : bool
        Create a missing SQLite file (and the schema of an empty database).  When
        False and the SQLite file does not exist, return None and touch nothing.
    allow_upgrade : bool
        Upgrade an older server database.  SQLite files are always upgraded, after
        a backup copy is written beside them; server databases are only upgraded
        with this flag (back them up with the server's tools first).
    user : str or None
        Name the store's sessions record in new ledger, build, order and find rows
        (``picker --user``); None: the OS user name (:func:`picker.store.ledger.current_user`).

    Raises
    ------
    PickerError
        Bad URL, missing directory, not a database, store newer than this code,
        older server store without ``allow_upgrade``.
    """
    path = sqlite_path(url) if "://" in url else None
    shown = display_url(url)
    if path is not None:
        if not path.exists():
            if not create:
                return None
            if path == default_db_path():
                path.parent.mkdir(parents=True, exist_ok=True)
            elif not path.parent.is_dir():
                raise PickerError(f"store directory {path.parent} does not exist (store {path})")
        elif path.is_dir():
            raise PickerError(f"store path {path} is a directory, expected a SQLite file")
    engine = make_engine(url)
    info = {USER_INFO_KEY: user} if user else {}
    store = Store(url, engine, sessionmaker(engine, expire_on_commit=False, info=info), user=user)
    try:
        with engine.connect() as conn:
            version = migrate.read_version(conn)
        if version is None:
            if not create:
                engine.dispose()
                return None
            with engine.begin() as conn:
                migrate.create_fresh(conn)
            store.created = True
        elif version > SCHEMA_VERSION:
            raise PickerError(
                f"store {shown} has schema version {version}, this picker knows up to "
                f"{SCHEMA_VERSION}: install a newer picker"
            )
        elif version < SCHEMA_VERSION:
            if path is not None:
                store.backup_path = migrate.backup_sqlite(path, version)
            elif not allow_upgrade:
                raise PickerError(
                    f"store {shown} has schema version {version}, this picker needs "
                    f"{SCHEMA_VERSION}: back it up, then run 'picker --db URL stock upgrade --yes'"
                )
            store.upgraded_from = migrate.upgrade(engine)
    except exc.DatabaseError as e:
        engine.dispose()
        raise PickerError(f"cannot open store {shown}: {e.orig or e}") from None
    except BaseException:
        engine.dispose()
        raise
    return store
