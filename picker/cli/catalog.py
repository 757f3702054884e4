"""``picker catalog`` (import, list) and ``picker stock incoming`` / ``picker stock receive``.

Thin layer: parse options, open the store through the Env, own the transaction,
call :mod:`picker.store.catalog`, render through :mod:`picker.cli.output`.
The two order commands live here with the catalog (they read and write the
same tables) but belong to the ``stock`` group, so :func:`register` attaches
them to :data:`picker.cli.stock.app`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from picker import units
from picker.cli import stock as stock_cli
from picker.cli.env import get_env
from picker.cli.output import print_json, print_message, print_table
from picker.errors import PickerError
from picker.store.catalog import (
    format_prices,
    import_catalog,
    incoming_orders,
    item_dict,
    list_suppliers,
    load_suppliers,
    receive_order,
)
from picker.store.catalog_csv import check_supplier_name, parse_order_charge, read_catalog_csv
from picker.store.engine import display_url
from picker.store.ledger import get_part

app = typer.Typer(
    name="catalog", no_args_is_help=True, help="Supplier catalogs: what can be bought, in what packs, at what price."
)


def register(parent: typer.Typer) -> None:
    """Attach ``picker catalog`` to the root app and ``incoming`` / ``receive`` to ``picker stock``."""
    parent.add_typer(app, name="catalog")
    stock_cli.app.command("incoming")(incoming)
    stock_cli.app.command("receive")(receive)


def _value_text(kind: str, value, name) -> str:
    if kind == "npn":
        return name or ""
    return units.format_value(value, kind)


def _money(x: float | None) -> str:
    return "" if x is None else f"{x:.2f}"


@app.command("import")
def import_(
    ctx: typer.Context,
    file: Annotated[Path, typer.Argument(help="Catalog CSV (see README: Supplier catalogs).")],
    supplier: Annotated[str, typer.Option("--supplier", help="Supplier name; re-importing a name replaces its items.")],
    order_charge: Annotated[Optional[str], typer.Option("--order-charge", metavar="X",
        help="Fixed charge per order placed with this supplier (default: kept on re-import, else 0).")] = None,  # fmt: skip
) -> None:
    """Import a supplier's catalog. Every row is checked first; one bad row and nothing is written."""
    env = get_env(ctx)
    charge = None
    if order_charge is not None:
        try:
            charge = parse_order_charge(order_charge)
        except PickerError as e:
            raise PickerError(f"--order-charge: {e}") from None
    catalog = read_catalog_csv(file, check_supplier_name(supplier))  # validate before touching the store
    store = env.store()
    with store.Session.begin() as session:
        s = import_catalog(session, file, supplier, charge, catalog=catalog)
    what = "new supplier" if s["created"] else f"replaced {s['replaced']} items of"
    print_message(
        env,
        f"imported {s['items']} items ({s['price_breaks']} price breaks) from {file}: {what} {s['supplier']}, "
        f"order charge {s['order_charge']:.2f}",
    )


@app.command("list")
def list_(
    ctx: typer.Context,
    items: Annotated[bool, typer.Option("--items", help="Also list every item (with --supplier: that supplier's).")] = False,
    supplier: Annotated[Optional[list[str]], typer.Option("--supplier", help="Only this supplier (repeatable).")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="JSON array on stdout, SI base units.")] = False,
) -> None:
    """List the stored suppliers (items, order charge, last import); --items lists their items."""
    env = get_env(ctx)
    store = env.store()
    with store.Session.begin() as session:
        rows = list_suppliers(session)
        wanted = supplier or None
        loaded = load_suppliers(session, wanted) if (items or wanted) else ()
    if wanted:
        names = [s.name for s in loaded]
        rows = sorted((r for r in rows if r["name"] in names), key=lambda r: names.index(r["name"]))
    by_name = {s.name: s for s in loaded}
    if as_json:
        data = []
        for r in rows:
            d = dict(r)
            d["item_count"] = d.pop("items")
            if items:
                d["items"] = [item_dict(i) for i in by_name[r["name"]].items]
            data.append(d)
        print_json(env, data)
        return
    if not rows:
        print_message(env, "no suppliers stored (import a catalog: picker catalog import FILE --supplier NAME)")
        return
    print_table(
        env,
        ["supplier", ("items", "right"), ("order charge", "right"), "imported (UTC)", "file"],
        [(r["name"], r["items"], _money(r["order_charge"]), r["imported_at"][:16].replace("T", " "), r["source"] or "")
         for r in rows],  # fmt: skip
        caption=f"{len(rows)} supplier(s) in {display_url(env.db_url)}",
    )
    if items:
        for r in rows:
            sup = by_name[r["name"]]
            table_rows = []
            for it in sup.items:
                d = item_dict(it)
                table_rows.append((
                    it.sku, _value_text(it.kind, d["value"], d.get("name")),
                    "" if d["tolerance"] is None else f"{d['tolerance'] * 100:g}%",
                    stock_cli._ratings_text(d), it.pack, it.min_order, format_prices(it.breaks).replace(" ", "\n"),
                ))  # fmt: skip
            print_table(env, ["sku", "value", ("tol", "right"), "ratings", ("pack", "right"),
                              ("min", "right"), "qty:price"], table_rows, title=sup.name)  # fmt: skip


def incoming(
    ctx: typer.Context,
    as_json: Annotated[bool, typer.Option("--json", help="JSON array of orders with their lines, SI base units.")] = False,
) -> None:
    """Orders placed and not yet received, with their lines."""
    env = get_env(ctx)
    store = env.store()
    with store.Session.begin() as session:
        orders = incoming_orders(session)
    if as_json:
        print_json(env, orders)
        return
    if not orders:
        print_message(env, "no incoming orders")
        return
    rows = []
    for o in orders:
        for n, x in enumerate(o["lines"], start=1):
            first = n == 1
            rows.append((
                o["id"] if first else "", o["created_at"][:16].replace("T", " ") if first else "", x["supplier"], x["sku"],
                x["kind"], _value_text(x["kind"], x["value"], x.get("name")), x["packs"], x["qty"], _money(x["cost"]),
            ))  # fmt: skip
    total = sum(o["total_cost"] for o in orders)
    print_table(
        env,
        [("order", "right"), "placed (UTC)", "supplier", "sku", "kind", "value", ("packs", "right"), ("qty", "right"),
         ("cost", "right")],
        rows,
        caption=f"{len(orders)} incoming order(s), {total:.2f} in total with order charges",
    )  # fmt: skip


def receive(
    ctx: typer.Context,
    order_id: Annotated[int, typer.Argument(metavar="ORDER_ID")],
    bin: Annotated[Optional[str], typer.Option("--bin", help="Bin for lines that match no part in the store.")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="JSON object: order_id and the parts booked.")] = False,
) -> None:
    """Book an incoming order into stock (one ledger entry per line) and mark it received."""
    env = get_env(ctx)
    store = env.store()
    with store.Session.begin() as session:
        booked = receive_order(session, order_id, bin)
        parts = []
        for part_id, qty in booked:
            p = get_part(session, part_id)
            parts.append({"part_id": part_id, "qty": qty, "kind": p.kind, "value": p.value, "name": p.name,
                          "bin": p.bin, "on_hand": p.qty})  # fmt: skip
    if as_json:
        print_json(env, {"order_id": order_id, "parts": parts})
        return
    print_message(env, f"received order {order_id}: {len(parts)} line(s), {sum(p['qty'] for p in parts)} piece(s) booked")
    print_table(
        env,
        [("part", "right"), "kind", "value", "bin", ("added", "right"), ("on hand", "right")],
        [(p["part_id"], p["kind"], _value_text(p["kind"], p["value"], p["name"]), p["bin"], p["qty"], p["on_hand"])
         for p in parts],  # fmt: skip
    )
