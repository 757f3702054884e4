"""Supplier catalogs and orders in the store: import, load as plain objects, record, receive.

The CSV format is :mod:`picker.store.catalog_csv`; the objects are those of
:mod:`picker.planning.catalog` (SI units).  Every function works in the
caller's transaction (the command owns it) and leaves everything or nothing:
a PickerError raised here is raised before the caller commits.

An order is ``incoming`` from :func:`record_order` until :func:`receive_order`
books its lines into stock through the ledger (quantities change only in
:mod:`picker.store.ledger`) and marks it ``received``.
"""

from __future__ import annotations

import datetime as dt
import math
import operator
import os
from typing import Iterable, Mapping

from sqlalchemy import delete, func, select, update
from sqlalchemy.orm import Session, selectinload

from picker import units
from picker.errors import PickerError
from picker.planning.catalog import ITEM_FIELDS, CatalogItem, Purchase, Supplier
from picker.store.catalog_csv import (
    CatalogFile,
    check_supplier_name,
    demo_suppliers,
    format_prices,
    parse_prices,
    read_catalog_csv,
)
from picker.store.ledger import add_stock, current_user
from picker.store.models import CatalogItemRow, Order, OrderLine, Part, PriceBreak, SupplierRow
from picker.store.spec import MAX_TEXT, RATINGS, PartSpec

__all__ = [
    "demo_suppliers", "format_prices", "import_catalog", "incoming_orders", "item_dict", "list_orders",
    "list_suppliers", "load_suppliers", "order_dict", "parse_prices", "read_catalog_csv", "receive_order",
    "record_order",
]  # fmt: skip


def _now() -> dt.datetime:
    return dt.datetime.now(dt.timezone.utc)


def _no_suppliers_hint() -> str:
    return "no suppliers stored; import one with 'picker catalog import FILE --supplier NAME'"


# ---- import ----------------------------------------------------------------------


def import_catalog(
    session: Session,
    path: str | os.PathLike,
    supplier: str,
    order_charge: float | None = None,
    *,
    catalog: CatalogFile | None = None,
) -> dict:
    """Import a catalog CSV as ``supplier``'s items, replacing the items it had.

    Parameters
    ----------
    path : path of a catalog CSV (see :mod:`picker.store.catalog_csv`)
    supplier : str
        The supplier's name (unique in the store).  A name equal to a stored one
        but for letter case is refused, to catch typos.
    order_charge : float, optional
        Fixed charge per order placed with the supplier (>= 0).  Default: the
        stored supplier's charge on a re-import, else 0.
    catalog : CatalogFile, optional
        ``read_catalog_csv(path, supplier)`` done already (a command validates
        the file before it opens the store); ``path`` is then not read again.

    Returns
    -------
    dict
        ``supplier, file, items, price_breaks, replaced`` (items removed),
        ``created`` (a new supplier), ``order_charge``.

    Every row is validated before the store is touched; the replacement happens
    in the caller's transaction.
    """
    name = check_supplier_name(supplier)
    if order_charge is not None and not (math.isfinite(order_charge) and order_charge >= 0):
        raise PickerError(f"bad order charge (got {order_charge!r}; expected a number >= 0, e.g. 3.50)")
    if catalog is None:
        catalog = read_catalog_csv(path, name)
    elif catalog.supplier != name:
        raise ValueError(f"catalog read for {catalog.supplier!r}, imported as {name!r}")
    row = session.scalars(select(SupplierRow).where(SupplierRow.name == name)).one_or_none()
    if row is None:
        clash = session.scalars(select(SupplierRow.name).where(func.lower(SupplierRow.name) == name.lower())).first()
        if clash is not None:
            raise PickerError(
                f"supplier {name!r} differs only in letter case from the stored supplier {clash!r} "
                f"(use --supplier {clash!r} to re-import it)"
            )
    created = row is None
    replaced = 0
    if created:
        row = SupplierRow(name=name, order_charge=order_charge or 0.0, imported_at=_now(), source=catalog.path.name)
        session.add(row)
        session.flush()
    else:
        old_ids = select(CatalogItemRow.id).where(CatalogItemRow.supplier_id == row.id)
        replaced = session.scalar(select(func.count()).select_from(old_ids.subquery())) or 0
        quiet = {"synchronize_session": False}
        session.execute(delete(PriceBreak).where(PriceBreak.item_id.in_(old_ids)).execution_options(**quiet))
        session.execute(delete(CatalogItemRow).where(CatalogItemRow.supplier_id == row.id).execution_options(**quiet))
        session.expire(row, ["items"])
        if order_charge is not None:
            row.order_charge = order_charge
        row.imported_at = _now()
        row.source = catalog.path.name
    n_breaks = 0
    for item in catalog.items:
        session.add(CatalogItemRow(
            supplier_id=row.id, sku=item.sku, kind=item.kind, pack=item.pack, min_order=item.min_order,
            **{f: item.attrs.get(f) for f in ITEM_FIELDS},
            breaks=[PriceBreak(min_qty=q, unit_price=p) for q, p in item.breaks],
        ))  # fmt: skip
        n_breaks += len(item.breaks)
    session.flush()
    return {
        "supplier": name, "file": str(catalog.path), "items": len(catalog.rows), "price_breaks": n_breaks,
        "replaced": replaced, "created": created, "order_charge": row.order_charge,
    }  # fmt: skip


# ---- reading ---------------------------------------------------------------------


def list_suppliers(session: Session) -> list[dict]:
    """Stored suppliers by name: ``name, order_charge, items`` (count), ``imported_at`` (ISO), ``source``."""
    counts = dict(session.execute(select(CatalogItemRow.supplier_id, func.count()).group_by(CatalogItemRow.supplier_id)).all())
    return [
        {"name": s.name, "order_charge": s.order_charge, "items": int(counts.get(s.id, 0)),
         "imported_at": s.imported_at.isoformat(), "source": s.source}
        for s in session.scalars(select(SupplierRow).order_by(SupplierRow.name))
    ]  # fmt: skip


def _item_of(supplier: str, row: CatalogItemRow) -> CatalogItem:
    return CatalogItem(
        supplier, row.sku, row.kind, {f: getattr(row, f) for f in ITEM_FIELDS}, row.pack, row.min_order,
        tuple((b.min_qty, b.unit_price) for b in row.breaks),
    )


def load_suppliers(session: Session, names: Iterable[str] | None = None) -> tuple[Supplier, ...]:
    """Stored suppliers as :class:`picker.planning.catalog.Supplier` objects (SI units).

    Parameters
    ----------
    names : iterable of str, optional
        Only these suppliers, in this order; default every stored supplier, by name.
        Items keep their file order.

    Raises
    ------
    PickerError
        A name that is not stored (the message lists the stored ones).
    """
    stmt = select(SupplierRow).options(selectinload(SupplierRow.items).selectinload(CatalogItemRow.breaks))
    rows = {s.name: s for s in session.scalars(stmt.order_by(SupplierRow.name))}
    wanted = list(rows) if names is None else [n.strip() for n in names]
    unknown = [n for n in wanted if n not in rows]
    if unknown:
        known = f"stored: {', '.join(rows)}" if rows else _no_suppliers_hint()
        raise PickerError(f"unknown supplier {', '.join(repr(n) for n in unknown)} ({known})")
    return tuple(
        Supplier(n, rows[n].order_charge, tuple(_item_of(n, it) for it in rows[n].items)) for n in wanted
    )


def item_dict(item: CatalogItem) -> dict:
    """JSON-ready dict of a catalog item: supplier, sku, kind, value, tolerance, the kind's ratings, pack, min_order, breaks."""
    d = {"supplier": item.supplier, "sku": item.sku, "kind": item.kind, "value": item.get("value"),
         "tolerance": item.get("tolerance")}  # fmt: skip
    for c in RATINGS[item.kind]:
        d[c] = item.get(c)
    d |= {"pack": item.pack, "min_order": item.min_order,
          "breaks": [{"min_qty": q, "unit_price": p} for q, p in item.breaks]}  # fmt: skip
    return d


# ---- orders ----------------------------------------------------------------------


def _checked_purchase(i: int, p: Purchase) -> tuple[int, int, float]:
    """``(packs, qty, cost)`` as Python numbers (the planner may hand numpy scalars); ValueError if they do not fit."""
    item = p.item
    what = f"purchase {i + 1} ({item.supplier} {item.sku})"
    try:
        packs, qty = operator.index(p.packs), operator.index(p.qty)
    except TypeError:
        raise ValueError(f"{what}: packs and qty must be whole numbers, not {p.packs!r}, {p.qty!r}") from None
    cost = float(p.cost)
    if packs < 1:
        raise ValueError(f"{what}: packs must be at least 1, not {packs}")
    if qty != packs * item.pack:
        raise ValueError(f"{what}: qty {qty} is not {packs} packs of {item.pack}")
    if qty < item.min_order:
        raise ValueError(f"{what}: qty {qty} is below the minimum order {item.min_order}")
    if not (math.isfinite(cost) and cost >= 0):
        raise ValueError(f"{what}: bad cost {p.cost!r}")
    return packs, qty, cost


def record_order(
    session: Session,
    purchases: list[Purchase],
    note: str | None = None,
    *,
    order_charges: Mapping[str, float] | None = None,
) -> int:
    """Record an expected incoming order; returns its id.

    Parameters
    ----------
    purchases : list of Purchase
        The lines (``qty`` must be ``packs`` whole packs, at least the item's minimum order).
    note : str, optional
    order_charges : mapping of supplier name to charge, optional
        The fixed charge of each supplier in the order, added once per supplier to
        ``total_cost``.  Default: the stored suppliers' charges; a supplier neither
        given nor stored is an error (pass the charges of catalogs not in the store,
        e.g. the demo catalog's, here).

    Raises
    ------
    PickerError
        No purchases, or a supplier whose order charge is unknown.
    ValueError
        A purchase whose quantity does not fit its item (a caller's bug).
    """
    if not purchases:
        raise PickerError("nothing to order (the shopping list is empty)")
    checked = [_checked_purchase(i, p) for i, p in enumerate(purchases)]
    names = sorted({p.item.supplier for p in purchases})
    charges = dict(order_charges or {})
    missing = [n for n in names if n not in charges]
    if missing:
        query = select(SupplierRow.name, SupplierRow.order_charge).where(SupplierRow.name.in_(missing))
        stored = dict(session.execute(query).all())
        charges |= stored
        missing = [n for n in missing if n not in stored]
    if missing:
        raise PickerError(f"order charge unknown for supplier {', '.join(repr(n) for n in missing)} (not in the store)")
    total = sum(c for _, _, c in checked) + sum(float(charges[n]) for n in names)
    order = Order(created_at=_now(), status="incoming", user=current_user(session), total_cost=total,
                  note=(note.strip() or None) if note else None)  # fmt: skip
    order.lines = [
        OrderLine(supplier=p.item.supplier, sku=p.item.sku, kind=p.item.kind, packs=packs, qty=qty, cost=cost,
                  **{f: p.item.attrs.get(f) for f in ITEM_FIELDS})
        for p, (packs, qty, cost) in zip(purchases, checked)
    ]  # fmt: skip
    session.add(order)
    session.flush()
    return order.id


def line_dict(line: OrderLine) -> dict:
    """JSON-ready order line: supplier, sku, kind, value, tolerance, the kind's ratings, packs, qty, cost, part_id."""
    d = {"supplier": line.supplier, "sku": line.sku, "kind": line.kind, "value": line.value, "tolerance": line.tolerance}
    for c in RATINGS[line.kind]:
        d[c] = getattr(line, c)
    d |= {"packs": line.packs, "qty": line.qty, "cost": line.cost, "part_id": line.part_id}
    return d


def order_dict(order: Order) -> dict:
    """JSON-ready order with its lines (timestamps ISO 8601 UTC)."""
    return {
        "id": order.id, "status": order.status, "created_at": order.created_at.isoformat(),
        "received_at": order.received_at.isoformat() if order.received_at else None, "user": order.user,
        "total_cost": order.total_cost, "note": order.note, "lines": [line_dict(x) for x in order.lines],
    }  # fmt: skip


def list_orders(session: Session, status: str | None = None) -> list[Order]:
    """Orders (optionally of one status), oldest first, lines loaded."""
    stmt = select(Order).options(selectinload(Order.lines)).order_by(Order.id)
    if status is not None:
        stmt = stmt.where(Order.status == status)
    return list(session.scalars(stmt))


def incoming_orders(session: Session) -> list[dict]:
    """Orders still expected (status ``incoming``), oldest first, as :func:`order_dict`."""
    return [order_dict(o) for o in list_orders(session, "incoming")]


def _get_order(session: Session, order_id: int) -> Order:
    order = session.get(Order, order_id)
    if order is None:
        waiting = session.scalars(select(Order.id).where(Order.status == "incoming").order_by(Order.id)).all()
        hint = f"incoming: {', '.join(map(str, waiting))}" if waiting else "no orders are incoming"
        raise PickerError(f"no order with id {order_id} ({hint}; see 'picker stock incoming')")
    return order


def _attrs_key(obj) -> tuple:
    return tuple(getattr(obj, f) for f in ITEM_FIELDS)


def _describe_line(n: int, line: OrderLine) -> str:
    what = line.name if line.kind == "npn" else units.format_value(line.value, line.kind)
    return f"line {n} ({line.kind} {what}, {line.supplier} {line.sku})"


def receive_order(session: Session, order_id: int, default_bin: str | None = None) -> list[tuple[int, int]]:
    """Book an incoming order into stock; returns ``(part_id, qty)`` per line, in line order.

    Each line becomes a stock addition through :func:`picker.store.ledger.add_stock`
    (one ledger row per line, reason ``order N: SUPPLIER SKU``) with
    ``unit_cost = cost / qty``.  Its bin is the bin of the stored part with the
    same kind, value, tolerance and ratings (the one with most on hand, then the
    oldest), else ``default_bin``.  As in the ledger, it merges into a part equal
    in every attribute (bin and unit cost included), else it is a new part.

    Raises
    ------
    PickerError
        Unknown order, an order already received, or a line matching no stored
        part while no ``default_bin`` is given.  Nothing is written then.
    """
    order = _get_order(session, order_id)
    if order.status != "incoming":
        when = order.received_at.strftime("%Y-%m-%d %H:%M UTC") if order.received_at else "earlier"
        raise PickerError(f"order {order_id} was already received ({when}); nothing booked")
    if default_bin is not None:
        default_bin = default_bin.strip()
        if not default_bin or len(default_bin) > MAX_TEXT:
            raise PickerError(f"bad bin (got {default_bin!r}; expected a bin name of 1..{MAX_TEXT} characters, e.g. IN-1)")
    # Claim the order first with one guarded statement, so two processes cannot both receive it.
    now = _now()
    claimed = session.execute(
        update(Order).where(Order.id == order_id, Order.status == "incoming")
        .values(status="received", received_at=now).execution_options(synchronize_session=False)
    )  # fmt: skip
    if claimed.rowcount != 1:
        raise PickerError(f"order {order_id} was already received; nothing booked")
    session.refresh(order, ["status", "received_at"])
    lines = list(order.lines)
    kinds = {x.kind for x in lines}
    home: dict[tuple, str] = {}
    for part in session.scalars(select(Part).where(Part.kind.in_(kinds)).order_by(Part.qty.desc(), Part.id)):
        home.setdefault((part.kind, *_attrs_key(part)), part.bin)
    bins = [home.get((x.kind, *_attrs_key(x)), default_bin) for x in lines]
    homeless = [_describe_line(n, x) for n, (x, b) in enumerate(zip(lines, bins), start=1) if b is None]
    if homeless:
        raise PickerError(
            f"order {order_id}: {len(homeless)} line(s) match no part in the store, so there is no bin to put "
            f"them in: {'; '.join(homeless[:3])}{' ...' if len(homeless) > 3 else ''} (give --bin BIN)"
        )
    booked = []
    for line, b in zip(lines, bins):
        spec = PartSpec(kind=line.kind, bin=b, unit_cost=line.cost / line.qty,
                        **{f: getattr(line, f) for f in ITEM_FIELDS})  # fmt: skip
        part, _ = add_stock(session, spec, line.qty, f"order {order_id}: {line.supplier} {line.sku}")
        line.part_id = part.id
        booked.append((part.id, line.qty))
    session.flush()
    return booked
