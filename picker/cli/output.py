"""Rendering helpers shared by the commands: rich tables, JSON, messages, errors.

``--json`` output goes through :func:`print_json` only: stdout then holds exactly
one JSON document (numbers in SI base units, null for blanks), nothing else.
Notes and errors always go to stderr.
"""

from __future__ import annotations

import json
import math
from typing import Any, Iterable, Sequence

from rich.table import Table
from rich.text import Text

from picker.cli.env import Env


def _clean(x: Any) -> Any:
    """JSON-safe copy: NaN/inf -> None, tuples -> lists, numpy scalars -> Python."""
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if hasattr(x, "item") and not isinstance(x, (str, bytes)):
        x = x.item()
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def to_json(data: Any) -> str:
    """The JSON text :func:`print_json` writes."""
    return json.dumps(_clean(data), indent=2, ensure_ascii=False, allow_nan=False)


def print_json(env: Env, data: Any) -> None:
    """Write ``data`` as one JSON document to stdout (raw, no rich markup or wrapping)."""
    env.out.file.write(to_json(data) + "\n")
    env.out.file.flush()


def print_table(
    env: Env,
    columns: Sequence[str | tuple[str, str]],
    rows: Iterable[Sequence[Any]],
    *,
    title: str | None = None,
    caption: str | None = None,
) -> None:
    """A rich table on stdout.

    Parameters
    ----------
    columns : sequence of name or (name, justify)
        ``justify`` is ``'left'``, ``'right'`` or ``'center'``.
    rows : iterable of sequences
        Cells; None prints as blank, everything else through ``str``.
    """
    table = Table(title=title, caption=caption, header_style="bold", show_lines=False)
    for col in columns:
        name, justify = (col, "left") if isinstance(col, str) else col
        table.add_column(name, justify=justify)
    for row in rows:
        table.add_row(*(Text("" if c is None else str(c)) for c in row))
    env.out.print(table)


def print_message(env: Env, message: str) -> None:
    """One result line on stdout (no markup interpretation, no wrapping)."""
    env.out.print(message, markup=False, soft_wrap=True)


def print_note(env: Env, message: str) -> None:
    """An informational line on stderr."""
    env.err.print(Text.assemble(("note: ", "yellow"), message), soft_wrap=True)


def print_error(env: Env, message: str) -> None:
    """``error: <line>`` on stderr for each line of the message."""
    for line in str(message).splitlines() or [""]:
        env.err.print(Text.assemble(("error: ", "bold red"), line), soft_wrap=True)
