"""Quantity changes: every change of ``Part.qty`` goes through :func:`change_qty`.

Invariant: a part's ``qty`` equals the sum of its ledger deltas and is never
negative.  :func:`ledger_balance_ok` checks it for the whole store.
"""

from __future__ import annotations

import datetime as dt
import getpass

from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from picker import units
from picker.errors import PickerError
from picker.store.models import LedgerEntry, Part
from picker.store.spec import PartSpec, spec_of


#: Key of ``Session.info`` holding the user name a store's sessions record (``open_store(user=...)``).
USER_INFO_KEY = "picker_user"
#: Longest user name (the ``user_name`` columns are 64 characters).
USER_MAX = 64


def current_user(session: Session | None = None) -> str:
    """Who a new ledger (build, order, find) row is recorded as.

    The name the store was opened with (``picker --user NAME``: ``open_store(user=...)``
    puts it in ``session.info``), else the OS user name ("unknown" if the OS cannot tell).
    """
    if session is not None:
        name = session.info.get(USER_INFO_KEY)
        if name:
            return name
    try:
        return getpass.getuser()[:USER_MAX]
    except Exception:  # getuser raises OSError/KeyError without a passwd entry or env var
        return "unknown"


def check_user(name: str) -> str:
    """A ``--user`` name stripped; PickerError unless it is one line of 1..64 characters."""
    text = (name or "").strip()
    if not text or len(text) > USER_MAX or any(c in text for c in "\r\n\t"):
        raise PickerError(f"--user: expected one line of 1..{USER_MAX} characters (got {name!r})")
    return text


def describe(part: Part) -> str:
    """Short human description of a part, e.g. ``part 12 (capacitor 10 nF in bin C-A3, 40 on hand)``."""
    what = part.name if part.kind == "npn" else units.format_value(part.value, part.kind)
    return f"part {part.id} ({part.kind} {what} in bin {part.bin}, {part.qty} on hand)"


def change_qty(session: Session, part: Part, delta: int, reason: str) -> LedgerEntry:
    """Add ``delta`` to the part's quantity and write the ledger row, in the caller's transaction.

    The update is one guarded SQL statement (``qty = qty + delta WHERE qty + delta >= 0``),
    so two processes changing the same part cannot drive it negative.

    Raises
    ------
    PickerError
        If the result would be negative (nothing is changed), or the reason is blank.
    """
    if not isinstance(delta, int) or isinstance(delta, bool):
        raise TypeError(f"delta must be an int, got {delta!r}")
    if not reason or not reason.strip():
        raise PickerError("a reason is required for every quantity change")
    if part.id is None:
        session.flush()
    result = session.execute(
        update(Part)
        .where(Part.id == part.id, Part.qty + delta >= 0)
        .values(qty=Part.qty + delta)
        .execution_options(synchronize_session=False)
    )
    session.refresh(part, ["qty"])
    if result.rowcount != 1:
        raise PickerError(
            f"cannot change {describe(part)} by {delta:+d}: the result would be {part.qty + delta}, below zero"
        )
    entry = LedgerEntry(
        part_id=part.id,
        delta=delta,
        reason=reason.strip(),
        created_at=dt.datetime.now(dt.timezone.utc),
        user=current_user(session),
    )
    session.add(entry)
    session.flush()
    return entry


def find_same(session: Session, spec: PartSpec) -> Part | None:
    """The stored part whose every attribute but qty equals ``spec``, if any."""
    stmt = select(Part).where(Part.kind == spec.kind, Part.bin == spec.bin).order_by(Part.id)
    key = spec.key()
    for part in session.scalars(stmt):
        if spec_of(part).key() == key:
            return part
    return None


def add_stock(session: Session, spec: PartSpec, qty: int, reason: str) -> tuple[Part, bool]:
    """Add ``qty`` pieces of ``spec``: merge into the identical stored part or create one.

    Returns
    -------
    part, created
    """
    part = find_same(session, spec)
    created = part is None
    if created:
        part = Part(**spec.as_dict(), qty=0)
        session.add(part)
        session.flush()
    change_qty(session, part, qty, reason)
    return part, created


def get_part(session: Session, part_id: int) -> Part:
    """The part with this id; PickerError if there is none."""
    part = session.get(Part, part_id)
    if part is None:
        hi = session.scalar(select(func.max(Part.id)))
        hint = f"ids run 1..{hi}" if hi else "the store is empty"
        raise PickerError(f"no part with id {part_id} ({hint}; see 'picker stock list')")
    return part


def history(session: Session, part_id: int) -> list[LedgerEntry]:
    """Ledger rows of one part, oldest first."""
    get_part(session, part_id)
    return list(session.scalars(select(LedgerEntry).where(LedgerEntry.part_id == part_id).order_by(LedgerEntry.id)))


def ledger_balance_ok(session: Session) -> list[str]:
    """Problems with the ledger invariant; an empty list when every part balances.

    Checks, for every part: ``qty`` equals the sum of its deltas, ``qty >= 0``,
    and no running balance in ledger order dips below zero.
    """
    problems: list[str] = []
    sums = dict(
        session.execute(select(LedgerEntry.part_id, func.coalesce(func.sum(LedgerEntry.delta), 0)).group_by(LedgerEntry.part_id)).all()
    )
    for part in session.scalars(select(Part).order_by(Part.id)):
        total = int(sums.pop(part.id, 0))
        if part.qty != total:
            problems.append(f"part {part.id}: qty {part.qty} but ledger sums to {total}")
        if part.qty < 0:
            problems.append(f"part {part.id}: qty {part.qty} is negative")
    for part_id in sums:
        problems.append(f"ledger rows for missing part {part_id}")
    running: dict[int, int] = {}
    for pid, delta, eid in session.execute(select(LedgerEntry.part_id, LedgerEntry.delta, LedgerEntry.id).order_by(LedgerEntry.id)):
        running[pid] = running.get(pid, 0) + delta
        if running[pid] < 0:
            problems.append(f"part {pid}: balance {running[pid]} after ledger row {eid}")
    return problems
