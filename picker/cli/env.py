"""The one environment object of a CLI run: consoles, store URL, data dir.

The root callback creates an :class:`Env` and stores it in ``ctx.obj``.  Tests
can pass their own (``CliRunner().invoke(app, args, obj=Env(...))``); the
callback then keeps it and only applies ``--db``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import platformdirs
import typer
from rich.console import Console

from picker.store import SCHEMA_VERSION, Store, open_store, resolve_db_url
from picker.store.engine import display_url
from picker.store.ledger import check_user


def _out() -> Console:
    return Console(highlight=False)


def _err() -> Console:
    return Console(stderr=True, highlight=False)


@dataclass
class Env:
    """Consoles, store location and data dir of one CLI run.

    Attributes
    ----------
    out, err : rich Console
        Results go to ``out`` (stdout), errors and notes to ``err`` (stderr).
    db_url : str
        Store URL from ``--db``, ``$PICKER_DB`` or the default path.
    db_given : bool
        True when ``--db`` was given on the command line (``picker demo`` only
        writes to a store the user named explicitly).
    data_dir : Path
        Per-user data directory (platformdirs).
    user : str or None
        Name recorded in new ledger, build, order and find rows (``--user``); None:
        the OS user name.
    """

    out: Console = field(default_factory=_out)
    err: Console = field(default_factory=_err)
    db_url: str = field(default_factory=lambda: resolve_db_url(None))
    db_given: bool = False
    data_dir: Path = field(default_factory=lambda: Path(platformdirs.user_data_dir("picker")))
    user: str | None = None
    _store: Store | None = field(default=None, repr=False)

    def use_db(self, option: str) -> None:
        """Point the env at the store named by ``--db``."""
        self.db_url = resolve_db_url(option)
        self.db_given = True

    def use_user(self, name: str) -> None:
        """Record ``name`` (``--user``) as who makes this run's changes."""
        self.user = check_user(name)

    def store(self, *, create: bool = True, allow_upgrade: bool = False) -> Store | None:
        """Open the store once per run (see :func:`picker.store.open_store`).

        With ``create=False`` a store file that does not exist yet gives None.
        An automatic upgrade is reported on ``err``.
        """
        if self._store is None:
            store = open_store(self.db_url, create=create, allow_upgrade=allow_upgrade, user=self.user)
            if store is None:
                return None
            if store.upgraded_from is not None and store.upgraded_from < SCHEMA_VERSION:
                where = f"; backup at {store.backup_path}" if store.backup_path else ""
                self.err.print(
                    f"note: upgraded store {display_url(self.db_url)} from schema v{store.upgraded_from} "
                    f"to v{SCHEMA_VERSION}{where}",
                    soft_wrap=True, markup=False,
                )
            self._store = store
        return self._store

    def close(self) -> None:
        if self._store is not None:
            self._store.close()
            self._store = None


def get_env(ctx: typer.Context) -> Env:
    """The run's Env (created by the root callback; a default one if absent)."""
    env = ctx.find_object(Env)
    if env is None:
        env = Env()
        ctx.obj = env
        ctx.call_on_close(env.close)
    return env
