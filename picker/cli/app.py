"""The ``picker`` command: root app, global ``--db`` and ``--user`` options, error handling.

Command groups live one per module in ``picker/cli/``.  Each module defines
``register(parent: typer.Typer) -> None`` that attaches its sub-app
(``parent.add_typer(app, name="stock")``) or its command
(``parent.command("demo")(demo)``); add the module to ``COMMAND_MODULES`` below.
"""

from __future__ import annotations

import sys
from typing import Annotated

import click
import typer
from sqlalchemy import exc as sa_exc
from typer.core import TyperGroup

from picker.cli import build, catalog, check, demo, find, picklist, reorder, retune, stock
from picker.cli.env import Env, get_env
from picker.cli.output import print_error
from picker.errors import PickerError

#: Command-group modules, each with ``register(parent)``.  New groups go here.
COMMAND_MODULES = (stock, catalog, demo, check, find, reorder, build, retune, picklist)


class PickerGroup(TyperGroup):
    """Root group: turns a PickerError (or a database failure) into ``error: ...`` and an exit code."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except PickerError as err:
            print_error(_env_for_errors(ctx), str(err))
            ctx.exit(err.exit_code)
        except sa_exc.OperationalError as err:
            # Locked, unreachable or unwritable database: not a bug in picker.
            print_error(_env_for_errors(ctx), f"database error: {str(err.orig or err).strip()}")
            ctx.exit(3)


def _env_for_errors(ctx: click.Context) -> Env:
    env = ctx.find_object(Env)
    return env if env is not None else Env()


app = typer.Typer(
    name="picker",
    cls=PickerGroup,
    no_args_is_help=True,
    help="Pick on-hand parts for single-transistor LC oscillators.",
    pretty_exceptions_show_locals=False,
    add_completion=False,
)


@app.callback()
def _root(
    ctx: typer.Context,
    db: Annotated[
        str | None,
        typer.Option(
            "--db",
            metavar="PATH_OR_URL",
            help="Store: a SQLite file path or a SQLAlchemy URL. Default: $PICKER_DB, "
            "else stock.sqlite in the user data dir.",
        ),
    ] = None,
    user: Annotated[
        str | None,
        typer.Option(
            "--user",
            metavar="NAME",
            help="Who is making the changes (recorded in the ledger, builds and orders). "
            "Default: the OS user name.",
        ),
    ] = None,
) -> None:
    """Pick on-hand parts for single-transistor LC oscillators."""
    env = ctx.obj if isinstance(ctx.obj, Env) else None
    if env is None:
        env = get_env(ctx)
    else:
        ctx.call_on_close(env.close)
    if db:
        env.use_db(db)
    if user is not None:
        env.use_user(user)


for _module in COMMAND_MODULES:
    _module.register(app)


def main(argv: list[str] | None = None) -> None:
    """Console-script entry point (``picker = picker.cli.app:main``)."""
    try:
        app(args=argv, prog_name="picker")
    except PickerError as err:  # raised outside a command (should not happen, but never a traceback)
        print_error(Env(), str(err))
        sys.exit(err.exit_code)


if __name__ == "__main__":
    main()
