"""``picker reorder``: the cheapest purchase that makes every planned build work."""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Annotated, Optional

import typer

from picker.cli.env import Env, get_env
from picker.cli.find import _int, build_spec, load_drawer, parse_tol
from picker.cli.check import _option_quantity
from picker.cli.output import print_json
from picker.errors import PickerError
from picker.planning.reorder import Target, plan
from picker.store.engine import display_url

TARGET_FORM = "FREQ:TOL:BOARDS, e.g. 455k:1%:4"


def parse_target(text: str) -> Target:
    parts = text.split(":")
    if len(parts) != 3:
        raise PickerError(f"--target: expected {TARGET_FORM} (got {text!r})")
    freq = _option_quantity("--target", parts[0].strip(), "Hz", "frequency")
    try:
        tol = parse_tol(parts[1])
    except PickerError:
        raise PickerError(f"--target {text}: the tolerance must be a fraction or percentage between 0 and 50% "
                          f"(got {parts[1]!r}; expected {TARGET_FORM})") from None
    try:
        boards = _int("--target", parts[2].strip(), 1)
    except PickerError:
        raise PickerError(f"--target {text}: the board count must be a whole number >= 1 "
                          f"(got {parts[2]!r}; expected {TARGET_FORM})") from None
    return Target(freq, tol, boards)


def _suppliers(env: Env, session, names: list[str]):
    from picker.store.catalog import load_suppliers
    from picker.store.catalog_csv import demo_suppliers

    if not names:
        sups = load_suppliers(session) if session is not None else ()
        if not sups:
            raise PickerError("no supplier catalogs: import one with 'picker catalog import FILE --supplier NAME', "
                              "or name the shipped one with --catalog demo")
        env.err.print(f"using every imported catalog: {', '.join(s.name for s in sups)}", markup=False)
        return sups
    out, seen = [], set()
    for n in names:
        got = demo_suppliers() if n.strip().lower() == "demo" else load_suppliers(session, [n]) if session else None
        if got is None:
            raise PickerError(f"--catalog {n}: no store to read it from (only --catalog demo works without one)")
        for s in got:
            if s.name not in seen:
                seen.add(s.name)
                out.append(s)
    return tuple(out)


def write_csv(rows: list[list[str]], target: Path) -> None:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(rows)
    try:
        target.write_text(buf.getvalue(), encoding="utf-8")
    except OSError as e:
        raise PickerError(f"--out {target}: cannot write ({e.strerror or e})") from None


def reorder_command(
    ctx: typer.Context,
    target: Annotated[list[str], typer.Option("--target", metavar="FREQ:TOL:BOARDS",
                                              help="A planned build, e.g. 455k:1%:4; repeat for more.")],
    topology: Annotated[str, typer.Option("--topology", help="Topology, or any.")] = "any",
    min_margin: Annotated[str, typer.Option("--min-margin", metavar="M", help="Worst-case start-up margin.")] = "2.5",
    supply: Annotated[str, typer.Option("--supply", metavar="VOLTS", help="Supply voltage.")] = "12",
    npn: Annotated[str, typer.Option("--npn", metavar="NAME|any", help="npn profile name, or any.")] = "any",
    style: Annotated[str, typer.Option("--style", help="Build style.")] = "breadboard",
    temp: Annotated[str, typer.Option("--temp", metavar="LO..HI", help="Temperature range, °C.")] = "0..50",
    catalog: Annotated[Optional[list[str]], typer.Option("--catalog", metavar="NAME",
                                                         help="Supplier catalog to buy from (demo: the shipped one); "
                                                              "repeat for more. Default: every imported catalog.")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="The plan as JSON on stdout.")] = False,
    out: Annotated[Optional[Path], typer.Option("--out", metavar="FILE.csv", help="Write the shopping list as CSV.")] = None,
    commit: Annotated[bool, typer.Option("--commit", help="Record the order as expected incoming stock.")] = False,
) -> None:
    """Plan the cheapest purchase that lets every build meet its target."""
    env = get_env(ctx)
    targets = [parse_target(t) for t in target]
    base = build_spec(f"{targets[0].freq_hz}", "1%", topology, min_margin, supply, "0.5m..3m", npn, "1", style, temp,
                      False, "1", "error=1,margin=1,cost=0.2", "0", "1")
    if out is not None and out.suffix.lower() != ".csv":
        raise PickerError(f"--out {out}: the shopping list is written as CSV; give a file name ending in .csv")
    store = env.store(create=False)
    if store is None:
        raise PickerError(f"no store at {display_url(env.db_url)} (add parts with 'picker stock import' "
                          "or run 'picker demo --db PATH')")
    with store.Session.begin() as session:
        drawer = load_drawer(session)
        suppliers = _suppliers(env, session, list(catalog or []))
    result = _run(env, drawer, suppliers, targets, base, show_progress=not as_json)
    from picker.report.reorder_report import csv_rows, plan_json, plan_report

    order_id = None
    if result.status != "infeasible":
        if out is not None:
            write_csv(csv_rows(result), out)
        if commit and result.purchases:
            from picker.store.catalog import record_order

            with store.Session.begin() as session:
                order_id = record_order(session, list(result.purchases),
                                        note="reorder " + " ".join(target),
                                        order_charges={s.name: s.order_charge for s in suppliers})
    if as_json:
        data = plan_json(result)
        data["order_id"] = order_id
        print_json(env, data)
    else:
        env.out.print(plan_report(result, targets))
        if out is not None and result.status != "infeasible":
            env.out.print(f"shopping list written to {out}", markup=False)
        if order_id is not None:
            env.out.print(f"recorded as incoming order {order_id}; book it with 'picker stock receive {order_id}' "
                          "when it arrives", markup=False)
        elif commit and result.status != "infeasible":
            env.out.print("nothing to buy, so no order was recorded", markup=False)
    if result.status == "infeasible":
        raise typer.Exit(1)


def _run(env: Env, drawer, suppliers, targets, base, show_progress: bool):
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    try:
        if not show_progress:
            return plan(drawer, suppliers, targets, base)
        with Progress(TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(),
                      console=env.err, transient=True) as bar:
            task = bar.add_task("planning", total=1.0)
            return plan(drawer, suppliers, targets, base,
                        progress=lambda what, frac: bar.update(task, description=what, completed=frac))
    except KeyboardInterrupt:
        raise PickerError("reorder: stopped (Ctrl-C); nothing was changed") from None


def register(parent: typer.Typer) -> None:
    parent.command("reorder")(reorder_command)
