"""Reading stock for display: filters, natural bin order, plain dicts (SI numbers)."""

from __future__ import annotations


from sqlalchemy import select
from sqlalchemy.orm import Session

from picker.errors import PickerError
from picker.units import natural_key  # noqa: F401  (re-exported by picker.store)
from picker.store.models import LedgerEntry, Part
from picker.store.spec import KINDS, RATINGS



def list_parts(
    session: Session,
    *,
    kind: str | None = None,
    bin: str | None = None,
    min_value: float | None = None,
    max_value: float | None = None,
    in_stock_only: bool = False,
) -> list[Part]:
    """Parts matching the filters, ordered by kind, bin (natural order), value, id.

    Parameters
    ----------
    kind : str, optional
    bin : str, optional
        Exact bin name.
    min_value, max_value : float, optional
        Value bounds in SI base units (inclusive); need ``kind``.
    """
    if (min_value is not None or max_value is not None) and kind in (None, "npn"):
        raise PickerError("--min/--max need --kind resistor, capacitor or inductor")
    stmt = select(Part)
    if kind is not None:
        stmt = stmt.where(Part.kind == kind)
    if bin is not None:
        stmt = stmt.where(Part.bin == bin)
    if min_value is not None:
        stmt = stmt.where(Part.value >= min_value)
    if max_value is not None:
        stmt = stmt.where(Part.value <= max_value)
    if in_stock_only:
        stmt = stmt.where(Part.qty > 0)
    parts = list(session.scalars(stmt))
    parts.sort(key=lambda p: (KINDS.index(p.kind), natural_key(p.bin), p.value or 0.0, p.name or "", p.id))
    return parts


def part_dict(part: Part) -> dict:
    """JSON-ready dict: id, kind, value, tolerance, qty, bin, unit_cost, the kind's ratings, note."""
    d = {
        "id": part.id,
        "kind": part.kind,
        "value": part.value,
        "tolerance": part.tolerance,
        "qty": part.qty,
        "bin": part.bin,
        "unit_cost": part.unit_cost,
    }
    for c in RATINGS[part.kind]:
        d[c] = getattr(part, c)
    d["note"] = part.note
    return d


def entry_dict(entry: LedgerEntry, balance: int) -> dict:
    """JSON-ready ledger row with the running balance after it."""
    return {
        "id": entry.id,
        "part_id": entry.part_id,
        "created_at": entry.created_at.isoformat(),
        "delta": entry.delta,
        "balance": balance,
        "reason": entry.reason,
        "user": entry.user,
    }
