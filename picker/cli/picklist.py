"""``picker picklist ID`` and ``picker build sheet ID``: render a build job for the bench.

Thin layer: read the build (:func:`picker.store.builds.get_build`) in one
read-only transaction, render through :mod:`picker.report.picklist` and
:mod:`picker.report.sheet`.  ``register`` adds ``picklist`` to the root app
and ``sheet`` to the ``build`` sub-app of :mod:`picker.cli.build`.

Choices
-------
* ``picklist`` writes to stdout unless ``--out FILE`` is given (then it
  overwrites FILE and says so on stdout); the folder must exist.
* ``build sheet --out DIR`` creates DIR if its parent exists and overwrites
  the sheet's own files in it (the list is in :mod:`picker.report.sheet`).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from picker.builds.model import BuildRecord
from picker.cli.env import Env, get_env
from picker.cli.output import print_message
from picker.errors import PickerError
from picker.store.engine import display_url

FORMATS = ("text", "csv", "md", "html")


def register(parent: typer.Typer) -> None:
    """Attach ``picker picklist`` to the root app and ``sheet`` to ``picker build``."""
    from picker.cli import build

    parent.command("picklist")(picklist)
    build.app.command("sheet")(sheet)


def load_build(env: Env, build_id: int) -> BuildRecord:
    """The build ``build_id`` from the store (never created here)."""
    from picker.store.builds import get_build

    store = env.store(create=False)
    if store is None:
        raise PickerError(f"no store at {display_url(env.db_url)} (create builds with 'picker build new', "
                          "or name a store with --db)")
    with store.Session.begin() as session:
        return get_build(session, build_id)


def _check_design(record: BuildRecord) -> None:
    from picker.builds.model import design_from_json

    try:
        design_from_json(record.design)
    except ValueError as e:
        raise PickerError(f"build {record.id}: its saved design is not usable ({e})") from None


def picklist(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID", help="Build id (see 'picker build list').")],
    fmt: Annotated[str, typer.Option("--format", metavar="|".join(FORMATS),
                                     help="text (80 columns), csv, md, or html (one printable page).")] = "text",
    out: Annotated[Optional[Path], typer.Option("--out", metavar="FILE", help="Write to FILE instead of stdout.")] = None,
) -> None:
    """Pick list of a build: one line per part, in bin order, with a tick box."""
    from picker.report import picklist as report

    env = get_env(ctx)
    fmt = fmt.strip().lower()
    if fmt not in FORMATS:
        raise PickerError(f"--format: unknown format (got {fmt!r}; expected one of {', '.join(FORMATS)})")
    if out is not None:
        if out.is_dir():
            raise PickerError(f"--out: {out} is a folder (expected a file name)")
        if not out.parent.is_dir():
            raise PickerError(f"--out: folder {out.parent} does not exist (for {out})")
    record = load_build(env, build_id)
    if fmt == "html":
        _check_design(record)
    text = report.render(record, fmt)
    if out is None:
        env.out.file.write(text)
        env.out.file.flush()
        return
    try:
        out.write_text(text, encoding="utf-8")
    except OSError as e:
        raise PickerError(f"--out: cannot write {out} ({e.strerror or e})") from None
    print_message(env, f"wrote the {fmt} pick list of build {record.id} to {out}")


def sheet(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID", help="Build id (see 'picker build list').")],
    out: Annotated[Path, typer.Option("--out", metavar="DIR", help="Folder to write the sheet into.")],
    mc: Annotated[int, typer.Option("--mc", metavar="N", help="Monte Carlo samples for the histograms.")] = 2000,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the Monte Carlo.")] = 1,
) -> None:
    """Design sheet of a build: SPICE deck, Bode plot, Monte Carlo histograms, BOM, schematic, cautions."""
    from picker.report.sheet import write_sheet

    env = get_env(ctx)
    if mc < 1:
        raise PickerError(f"--mc: expected a whole number of at least 1 (got {mc})")
    if out.exists() and not out.is_dir():
        raise PickerError(f"--out: {out} is a file (expected a folder)")
    if not out.exists() and not out.parent.is_dir():
        raise PickerError(f"--out: folder {out.parent} does not exist (for {out})")
    record = load_build(env, build_id)
    _check_design(record)
    try:
        files = write_sheet(record, out, mc=mc, seed=seed)
    except OSError as e:
        raise PickerError(f"--out: cannot write into {out} ({e.strerror or e})") from None
    print_message(env, f"wrote the design sheet of build {record.id} to {out}:")
    for path in files.values():
        print_message(env, f"  {path.name}")
