"""``picker stock``: import, export, list, add, adjust, history, upgrade, migrate.

Thin layer: parse options, open the store through the Env, own the transaction,
call ``picker.store``, render through ``picker.cli.output``.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Annotated, Optional

import typer

from picker import units
from picker.cli.env import get_env
from picker.cli.output import print_json, print_message, print_note, print_table
from picker.errors import PickerError
from picker.store import (
    SCHEMA_VERSION,
    add_stock,
    apply_import,
    change_qty,
    get_part,
    history as ledger_history,
    list_parts,
    part_dict,
    plan_import,
    read_stock_csv,
    write_stock_csv,
)
from picker.store.builds import reserved_holders
from picker.store.csvio import stock_csv_text
from picker.store.engine import display_url, resolve_db_url
from picker.store.ledger import describe
from picker.store.query import entry_dict
from picker.store.transfer import copy_store
from picker.store.spec import COLUMNS, RATINGS, parse_kind, parse_part

app = typer.Typer(name="stock", no_args_is_help=True, help="Parts on hand: import, list, add, adjust.")


def register(parent: typer.Typer) -> None:
    """Attach ``picker stock`` to the root app."""
    parent.add_typer(app, name="stock")


# ---- import / export --------------------------------------------------------


@app.command("import")
def import_(
    ctx: typer.Context,
    file: Annotated[Path, typer.Argument(help="Stock CSV (see README: CSV format).")],
    dry_run: Annotated[bool, typer.Option("--dry-run", help="Validate and report; write nothing.")] = False,
) -> None:
    """Import a stock CSV. All rows are checked first; one bad row and nothing is written."""
    env = get_env(ctx)
    stock = read_stock_csv(file)
    store = env.store(create=not dry_run)
    if store is None:
        plan = plan_import(None, stock)
    else:
        with store.Session.begin() as session:
            plan = plan_import(session, stock)
            if not dry_run:
                apply_import(session, plan)
    s = plan.summary()
    verb = "would import" if dry_run else "imported"
    print_message(
        env,
        f"{verb} {s['rows']} rows from {file}: {s['new_parts']} new parts, {s['merged_rows']} rows merged "
        f"({s['merged_into_existing']} into parts already in the store), {s['pieces']} pieces",
    )
    if dry_run:
        merges = [a for a in plan.actions if a.target is not None or not a.first]
        if merges:
            rows = [
                (a.line, a.spec.kind, _value_text(a.spec.kind, a.spec.value, a.spec.name), a.spec.bin, a.qty,
                 f"part {a.target}" if a.target is not None else f"new part of row {_first_line(plan, a)}")
                for a in merges
            ]
            print_table(env, [("row", "right"), "kind", "value", "bin", ("qty", "right"), "merges into"], rows,
                        title="Rows that merge")


def _first_line(plan, action) -> int:
    return next(a.line for a in plan.actions if a.first and a.target is None and a.new_index == action.new_index)


@app.command("export")
def export(
    ctx: typer.Context,
    file: Annotated[str, typer.Argument(help="Target CSV, or - for stdout.")],
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing file.")] = False,
) -> None:
    """Export all parts as a stock CSV that imports back to the same store."""
    env = get_env(ctx)
    store = env.store()
    with store.Session.begin() as session:
        if file == "-":
            env.out.file.write(stock_csv_text(session))
            return
        n = write_stock_csv(session, file, overwrite=force)
    print_message(env, f"exported {n} parts to {file}")


# ---- list ------------------------------------------------------------------


def _value_text(kind: str, value: float | None, name: str | None = None) -> str:
    if kind == "npn":
        return name or ""
    return units.format_value(value, kind)


def _ratings_text(d: dict) -> str:
    kind = d["kind"]
    parts = []
    unit = {"voltage_v": "V", "power_w": "W", "dcr_ohm": "Ω", "isat_a": "A", "vbe_v": "V", "ft_hz": "Hz",
            "cob_f": "F", "vaf_v": "V", "vceo_v": "V", "pd_w": "W"}
    label = {"dcr_ohm": "DCR ", "isat_a": "Isat ", "vbe_v": "VBE ", "ft_hz": "fT ", "cob_f": "Cob ",
             "vaf_v": "VAF ", "vceo_v": "VCEO ", "pd_w": "Pd "}
    for c in RATINGS[kind]:
        v = d.get(c)
        if v is None or c == "name":
            continue
        if c == "dielectric":
            parts.append(v)
        elif c in ("hfe_min", "hfe_max"):
            continue
        else:
            parts.append(label.get(c, "") + units.format_eng(v, unit[c]))
    if kind == "npn" and d.get("hfe_min") is not None:
        parts.insert(0, f"hFE {d['hfe_min']:g}-{d['hfe_max']:g}")
    return ", ".join(parts)


@app.command("list")
def list_(
    ctx: typer.Context,
    kind: Annotated[Optional[str], typer.Option("--kind", help="resistor, capacitor, inductor or npn.")] = None,
    bin: Annotated[Optional[str], typer.Option("--bin", help="Only this bin.")] = None,
    min_value: Annotated[Optional[str], typer.Option("--min", metavar="VALUE", help="Smallest value, e.g. 1k (needs --kind).")] = None,
    max_value: Annotated[Optional[str], typer.Option("--max", metavar="VALUE", help="Largest value, e.g. 100k (needs --kind).")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="JSON array on stdout, SI base units.")] = False,
) -> None:
    """List parts (ordered by kind, bin in natural order, value)."""
    env = get_env(ctx)
    k = parse_kind(kind) if kind is not None else None
    lo = hi = None
    if min_value is not None or max_value is not None:
        if k is None or k == "npn":
            raise PickerError("--min/--max need --kind resistor, capacitor or inductor")
        lo = _parse_bound("--min", min_value, k)
        hi = _parse_bound("--max", max_value, k)
    store = env.store()
    with store.Session.begin() as session:
        data = [part_dict(p) for p in list_parts(session, kind=k, bin=bin, min_value=lo, max_value=hi)]
    if as_json:
        print_json(env, data)
        return
    rows = []
    for d in data:
        npn = d["kind"] == "npn"
        rows.append((
            d["id"], d["kind"], _value_text(d["kind"], d["value"], d.get("name")),
            "" if npn else units.to_rkm(d["value"], d["kind"]),
            "" if d["tolerance"] is None else f"{d['tolerance'] * 100:g}%",
            d["qty"], d["bin"], "" if d["unit_cost"] is None else f"{d['unit_cost']:g}",
            _ratings_text(d), d["note"] or "",
        ))  # fmt: skip
    pieces = sum(d["qty"] for d in data)
    columns = [("id", "right"), "kind", "value", "RKM", ("tol", "right"), ("qty", "right"), "bin", ("cost", "right"), "ratings", "note"]
    if not any(d["note"] for d in data):
        columns, rows = columns[:-1], [r[:-1] for r in rows]
    print_table(env, columns, rows, caption=f"{len(data)} part(s), {pieces} piece(s) in {display_url(env.db_url)}")


def _parse_bound(option: str, text: str | None, kind: str) -> float | None:
    if text is None:
        return None
    try:
        return units.parse_value(text, kind)
    except PickerError as e:
        raise PickerError(f"{option}: {e}") from None


# ---- add / adjust / history -----------------------------------------------

_OPTION_OF = {
    "value": "VALUE", "name": "NAME", "qty": "--qty", "bin": "--bin", "tolerance": "--tolerance",
    "unit_cost": "--cost", "voltage_v": "--voltage", "power_w": "--power", "dielectric": "--dielectric",
    "dcr_ohm": "--dcr", "isat_a": "--isat", "note": "--note", "hfe_min": "--hfe-min", "hfe_max": "--hfe-max",
}  # fmt: skip


@app.command("add")
def add(
    ctx: typer.Context,
    kind: Annotated[str, typer.Argument(help="resistor, capacitor, inductor or npn.")],
    value: Annotated[str, typer.Argument(metavar="VALUE|NAME", help="Value (4k7, 100n, 10uH); for npn the profile name.")],
    qty: Annotated[str, typer.Option("--qty", help="Pieces added (whole number >= 0).")],
    bin: Annotated[str, typer.Option("--bin", help="Bin name, e.g. R-A1.")],
    tolerance: Annotated[Optional[str], typer.Option(help="e.g. 5% or 0.05.")] = None,
    cost: Annotated[Optional[str], typer.Option(help="Unit cost (plain number).")] = None,
    voltage: Annotated[Optional[str], typer.Option(help="Voltage rating, e.g. 50V (capacitor, resistor).")] = None,
    power: Annotated[Optional[str], typer.Option(help="Power rating, e.g. 0.25W (resistor).")] = None,
    dielectric: Annotated[Optional[str], typer.Option(help="C0G, NP0, X7R, film, electrolytic, ... (capacitor).")] = None,
    dcr: Annotated[Optional[str], typer.Option(help="DC resistance, e.g. 1.2 ohm (inductor).")] = None,
    isat: Annotated[Optional[str], typer.Option(help="Saturation current, e.g. 300m (inductor).")] = None,
    hfe_min: Annotated[Optional[str], typer.Option("--hfe-min", help="npn: smallest hFE.")] = None,
    hfe_max: Annotated[Optional[str], typer.Option("--hfe-max", help="npn: largest hFE.")] = None,
    set_: Annotated[Optional[list[str]], typer.Option("--set", metavar="COLUMN=VALUE",
        help="Any other CSV column, e.g. --set ft_hz=300M --set vbe_v=0.65 (repeatable).")] = None,  # fmt: skip
    note: Annotated[Optional[str], typer.Option(help="Free text.")] = None,
) -> None:
    """Add pieces of one part; an identical part (all but qty) in the same bin is topped up."""
    env = get_env(ctx)
    k = parse_kind(kind)
    cells = {"kind": k, "qty": qty, "bin": bin, "tolerance": tolerance, "unit_cost": cost, "voltage_v": voltage,
             "power_w": power, "dielectric": dielectric, "dcr_ohm": dcr, "isat_a": isat, "hfe_min": hfe_min,
             "hfe_max": hfe_max, "note": note}  # fmt: skip
    cells["name" if k == "npn" else "value"] = value
    option_of = dict(_OPTION_OF)
    for item in set_ or []:
        col, sep, text = item.partition("=")
        col = col.strip().lower()
        if not sep or col not in COLUMNS or col in ("kind", "qty", "bin", "value"):
            settable = ", ".join(c for c in COLUMNS if c not in ("kind", "qty", "bin", "value"))
            raise PickerError(f"--set: bad column assignment (got {item!r}; expected COLUMN=VALUE with COLUMN one of {settable})")
        cells[col] = text
        option_of[col] = f"--set {col}"
    spec, n, errors = parse_part({c: v for c, v in cells.items() if v is not None})
    if errors:
        raise PickerError("\n".join(f"{option_of.get(e.column, e.column)}: {e.message}" for e in errors))
    store = env.store()
    with store.Session.begin() as session:
        part, created = add_stock(session, spec, n, "add")
        text = describe(part)
    print_message(env, f"{'added' if created else 'topped up'} {text}")


@app.command("adjust", context_settings={"ignore_unknown_options": True})
def adjust(
    ctx: typer.Context,
    part_id: Annotated[int, typer.Argument(metavar="PART_ID")],
    delta: Annotated[str, typer.Argument(metavar="DELTA", help="Signed change, e.g. -3 or +10.")],
    reason: Annotated[str, typer.Option("--reason", help="Why (kept in the ledger).")],
) -> None:
    """Change a part's quantity by DELTA (e.g. -3 used, +10 restocked)."""
    env = get_env(ctx)
    if not re.fullmatch(r"[+-]?\d+", delta.strip()) or int(delta) == 0:
        raise PickerError(f"bad DELTA (got {delta!r}; expected a non-zero whole number such as -3 or +10)")
    store = env.store()
    with store.Session.begin() as session:
        part = get_part(session, part_id)
        before = part.qty
        change_qty(session, part, int(delta), reason)
        text = describe(part)
        holders = reserved_holders(session, part_id)
    print_message(env, f"{text}: {before} -> {part.qty}")
    held = sum(q for _, _, q in holders)
    if part.qty < held:  # the count stays true; the builds holding the part are now short
        names = ", ".join(f"{i} ({name}, {q})" for i, name, q in holders)
        print_note(env, f"part {part_id} now has {part.qty} on hand but reserved builds hold {held}: {names}; "
                        f"restock {held - part.qty}, or cancel builds: 'picker build done' refuses a build "
                        f"that needs more than is on hand")


@app.command("history")
def history(
    ctx: typer.Context,
    part_id: Annotated[int, typer.Argument(metavar="PART_ID")],
    as_json: Annotated[bool, typer.Option("--json", help="JSON array on stdout.")] = False,
) -> None:
    """Ledger of one part, oldest first, with the running balance."""
    env = get_env(ctx)
    store = env.store()
    with store.Session.begin() as session:
        part = get_part(session, part_id)
        title = describe(part)
        balance, data = 0, []
        for e in ledger_history(session, part_id):
            balance += e.delta
            data.append(entry_dict(e, balance))
    if as_json:
        print_json(env, data)
        return
    rows = [(d["id"], d["created_at"][:19].replace("T", " "), f"{d['delta']:+d}", d["balance"], d["user"] or "", d["reason"])
            for d in data]  # fmt: skip
    print_table(env, [("#", "right"), "when (UTC)", ("delta", "right"), ("balance", "right"), "user", "reason"],
                rows, title=title)


@app.command("upgrade")
def upgrade(
    ctx: typer.Context,
    yes: Annotated[bool, typer.Option("--yes", help="Upgrade a server database (back it up first).")] = False,
) -> None:
    """Bring the store's schema to this picker's version (SQLite files upgrade on their own, with a backup)."""
    env = get_env(ctx)
    store = env.store(allow_upgrade=yes)
    print_message(env, f"store {display_url(store.url)} is at schema v{SCHEMA_VERSION}")


@app.command("migrate")
def migrate_(
    ctx: typer.Context,
    to: Annotated[str, typer.Option("--to", metavar="PATH_OR_URL",
                                    help="Empty target database, e.g. postgresql+psycopg://user@host/picker.")],
    as_json: Annotated[bool, typer.Option("--json", help="JSON report on stdout.")] = False,
) -> None:
    """Copy the whole store (ids kept) into an empty database, e.g. a SQLite file onto a server; verified."""
    env = get_env(ctx)
    store = env.store(create=False)
    if store is None:
        raise PickerError(f"no store at {display_url(env.db_url)}: nothing to migrate")
    report = copy_store(store, resolve_db_url(to))
    if as_json:
        print_json(env, report.as_dict())
        return
    rows = [(name, n) for name, n in report.rows.items()]
    print_table(env, ["table", ("rows", "right")], rows,
                title=f"Copied into {report.target}")
    print_message(env, f"verified: row counts per table equal, {report.pieces} pieces on hand, "
                       f"{report.ledger_rows} ledger rows, the ledger balances; point picker at the new store "
                       f"with --db or PICKER_DB")
