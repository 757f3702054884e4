"""Build jobs in the store: reserve a design's parts for N boards, then consume them (or cancel, or undo).

A build moves ``reserved -> done -> undone`` or ``reserved -> cancelled``
(``picker.builds.model.STATUSES``).  A reserved build holds its lines without
changing any quantity: the parts stay on hand but are not *available*
(available = ``qty`` minus what reserved builds hold, :func:`reserved_qty`).
``done`` consumes the lines through :func:`picker.store.ledger.change_qty`
(one ledger row per line, reason naming the build) and ``undo`` writes the
compensating rows; both happen in the caller's one transaction, so a build is
consumed completely or not at all.

Concurrency: every function here runs in the caller's transaction.  On SQLite
the store's transactions begin with ``BEGIN IMMEDIATE`` (``picker.store.engine``)
and wait up to the busy timeout, so reservations are serialised by the write
lock.  On a server database the build row and the parts rows are locked with
``SELECT ... FOR UPDATE`` (parts ordered by id, so two builds never deadlock)
before the availability or the status is read, and the check and the write
happen in the same transaction.

The last find (``picker find``'s ranked candidates as saved-design dicts) is
kept here as well, for ``picker build new --from-find RANK``.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import os
import time
from pathlib import Path

from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session

from picker import units
from picker.builds.model import STATUSES, BuildLine, BuildRecord
from picker.errors import PickerError
from picker.store.ledger import change_qty, current_user
from picker.store.models import BuildLineRow, BuildRow, LastFind, LastFindCandidate, Part

#: Test-only hook of :func:`done_build`: seconds to sleep after the first line is consumed.
PAUSE_ENV_VAR = "PICKER_TEST_PAUSE_AFTER_FIRST_CONSUME"
#: Test-only: file the hook writes (the process id) before it sleeps, so a test knows it is inside.
PAUSE_MARKER_ENV_VAR = "PICKER_TEST_PAUSE_MARKER"

#: Longest build name.
NAME_MAX = 200
#: Relative difference allowed between a part's value and the design's value at its position.
VALUE_RTOL = 1e-6


class DesignFieldError(PickerError):
    """A field of a saved-design dict is missing or wrong (the message starts with the field)."""


class ShortageError(PickerError):
    """A reservation refused because parts are short; nothing was written."""


# ---- the last find ---------------------------------------------------------------------


def save_last_find(session: Session, spec_dict: dict, designs: list[dict]) -> int:
    """Replace the stored last find by this one.

    Parameters
    ----------
    spec_dict : dict
        The search's spec (JSON-able: numbers, text, lists).
    designs : list of dict
        Saved-design dicts (``picker.builds.model``) in rank order (rank 1 first),
        each with ``parts`` and ``predicted``.

    Returns
    -------
    int
        The id of the stored find.
    """
    session.execute(delete(LastFindCandidate))
    session.execute(delete(LastFind))
    row = LastFind(created_at=dt.datetime.now(dt.timezone.utc), user=current_user(session),
                   spec=json.dumps(spec_dict, allow_nan=False, default=_json_default))
    row.candidates = [LastFindCandidate(rank=k, design=json.dumps(d, allow_nan=False, default=_json_default))
                      for k, d in enumerate(designs, 1)]
    session.add(row)
    session.flush()
    return row.id


def last_find(session: Session) -> dict | None:
    """The stored last find, or None: ``{"id", "created_at", "user", "spec", "designs"}`` (designs by rank)."""
    row = session.scalars(select(LastFind).order_by(LastFind.id.desc()).limit(1)).first()
    if row is None:
        return None
    return {"id": row.id, "created_at": row.created_at, "user": row.user, "spec": json.loads(row.spec),
            "designs": [json.loads(c.design) for c in row.candidates]}


def _json_default(x):
    if hasattr(x, "item"):  # numpy scalar
        return x.item()
    if isinstance(x, (tuple, set)):
        return list(x)
    raise TypeError(f"not JSON-able: {x!r}")


# ---- reading builds --------------------------------------------------------------------


def reserved_qty(session: Session, part_ids=None) -> dict[int, int]:
    """Pieces held by reserved builds, per part id (parts with none are left out)."""
    stmt = (select(BuildLineRow.part_id, func.sum(BuildLineRow.qty))
            .join(BuildRow, BuildRow.id == BuildLineRow.build_id)
            .where(BuildRow.status == "reserved")
            .group_by(BuildLineRow.part_id))
    if part_ids is not None:
        stmt = stmt.where(BuildLineRow.part_id.in_(list(part_ids)))
    return {int(pid): int(q) for pid, q in session.execute(stmt).all() if q}


def reserved_holders(session: Session, part_id: int) -> list[tuple[int, str, int]]:
    """Reserved builds holding ``part_id``: (build id, name, pieces held), oldest first."""
    stmt = (select(BuildRow.id, BuildRow.name, func.sum(BuildLineRow.qty))
            .join(BuildLineRow, BuildRow.id == BuildLineRow.build_id)
            .where(BuildRow.status == "reserved", BuildLineRow.part_id == part_id)
            .group_by(BuildRow.id, BuildRow.name)
            .order_by(BuildRow.id))
    return [(int(i), str(n), int(q)) for i, n, q in session.execute(stmt).all() if q]


def _record(row: BuildRow) -> BuildRecord:
    lines = []
    for ln in row.lines:
        p = ln.part
        lines.append(BuildLine(part_id=p.id, designators=tuple(ln.designators.split(",")), kind=p.kind,
                               value=p.value, name=p.name, tolerance=p.tolerance, voltage_v=p.voltage_v,
                               power_w=p.power_w, dielectric=p.dielectric, dcr_ohm=p.dcr_ohm, bin=p.bin,
                               qty=ln.qty, qty_on_hand=p.qty, note=p.note))
    return BuildRecord(id=row.id, name=row.name, boards=row.boards, status=row.status, created_at=row.created_at,
                       user=row.user, design=json.loads(row.design), lines=tuple(lines))


def _build_row(session: Session, build_id: int, *, lock: bool = False) -> BuildRow:
    stmt = lock_build_stmt(build_id) if lock else select(BuildRow).where(BuildRow.id == build_id)
    row = session.scalars(stmt).first()
    if row is None:
        hi = session.scalar(select(func.max(BuildRow.id)))
        hint = f"ids run 1..{hi}" if hi else "there are no builds yet"
        raise PickerError(f"no build with id {build_id} ({hint}; see 'picker build list')")
    return row


def get_build(session: Session, build_id: int) -> BuildRecord:
    """The build with its lines in the order the design lists them; PickerError for an unknown id."""
    return _record(_build_row(session, build_id))


def list_builds(session: Session, status: str | None = None) -> list[BuildRecord]:
    """Every build (or those with ``status``), oldest first."""
    if status is not None and status not in STATUSES:
        raise PickerError(f"unknown build status {status!r} (accepted: {', '.join(STATUSES)})")
    stmt = select(BuildRow).order_by(BuildRow.id)
    if status is not None:
        stmt = stmt.where(BuildRow.status == status)
    return [_record(r) for r in session.scalars(stmt)]


def done_times(session: Session, build_ids) -> dict[int, dt.datetime | None]:
    """When each build was done (None if it never was): ``BuildRecord`` has no such field."""
    ids = list(build_ids)
    if not ids:
        return {}
    return dict(session.execute(select(BuildRow.id, BuildRow.done_at).where(BuildRow.id.in_(ids))).all())


# ---- the design's parts ----------------------------------------------------------------


def design_parts(design: dict) -> list[tuple[str, int, int | None, str | None]]:
    """``(ref, part_id, part2_id, how)`` per position of ``design["parts"]``, in the design's order.

    Checks the whole saved design (``picker.builds.model.design_from_json``) and the
    shape of ``parts``; raises :class:`DesignFieldError` naming the first bad field.
    """
    from picker.builds.model import design_from_json
    from picker.circuit.topology import get_topology

    info = design.get("part_info") if isinstance(design, dict) else None
    if info is not None and not isinstance(info, dict):
        raise DesignFieldError(f"part_info: got {info!r}; expected an object of designator -> part attributes")
    for ref, item in (info or {}).items():
        if not isinstance(item, dict):
            raise DesignFieldError(f"part_info.{ref}: got {item!r}; expected an object such as {{\"tolerance\": 0.05}}")
    try:
        design_from_json(design)
    except ValueError as e:
        raise DesignFieldError(str(e)) from None
    try:
        json.dumps(design, allow_nan=False, default=_json_default)
    except (TypeError, ValueError) as e:
        raise DesignFieldError(f"not storable as JSON ({e}); saved designs hold finite numbers, text, "
                               "lists and objects") from None
    parts = design.get("parts")
    if not isinstance(parts, dict) or not parts:
        raise DesignFieldError("parts: expected an object of designator -> {\"part_id\": N} with at least one part")
    refs = {p.ref for p in get_topology(design["topology"]).positions if p.kind != "coupling"} | {"Q1"}
    out = []
    for ref, entry in parts.items():
        if ref not in refs:
            raise DesignFieldError(f"parts.{ref}: not a position of {design['topology']} "
                                   f"(accepted: {', '.join(sorted(refs))})")
        if not isinstance(entry, dict):
            raise DesignFieldError(f"parts.{ref}: got {entry!r}; expected {{\"part_id\": N}}")
        pid = _part_id(entry.get("part_id"), f"parts.{ref}.part_id")
        pid2, how = entry.get("part2_id"), entry.get("how")
        if pid2 is not None:
            pid2 = _part_id(pid2, f"parts.{ref}.part2_id")
            if how not in ("series", "parallel"):
                raise DesignFieldError(f"parts.{ref}.how: got {how!r}; expected \"series\" or \"parallel\" "
                                       "(a position with part2_id is a pair)")
            if ref == "Q1":
                raise DesignFieldError("parts.Q1.part2_id: a transistor position takes one part")
        if ref != "Q1" and ref not in design["values"]:
            raise DesignFieldError(f"values.{ref}: missing (parts.{ref} names a part, so the design needs its value)")
        out.append((ref, pid, pid2, how if pid2 is not None else None))
    return out


def _part_id(v, field: str) -> int:
    if not isinstance(v, int) or isinstance(v, bool) or v < 1:
        raise DesignFieldError(f"{field}: got {v!r}; expected a part id from the store (a whole number >= 1)")
    return v


def _pair_value(kind: str, how: str, a: float, b: float) -> float:
    adds = (kind == "capacitor") == (how == "parallel")  # C in parallel, R and L in series: values add
    return a + b if adds else a * b / (a + b)


def _check_parts_match(design: dict, refs, parts: dict[int, Part]) -> None:
    """Every named part exists, is of the position's kind and has the design's value (DesignFieldError)."""
    from picker.circuit.topology import get_topology

    topo = get_topology(design["topology"])
    for ref, pid, pid2, how in refs:
        kind = "npn" if ref == "Q1" else topo.position(ref).kind
        for field, i in (("part_id", pid), ("part2_id", pid2)):
            if i is None:
                continue
            if i not in parts:
                raise DesignFieldError(f"parts.{ref}.{field}: no part with id {i} in the store")
            if parts[i].kind != kind:
                raise DesignFieldError(f"parts.{ref}.{field}: part {i} is a {parts[i].kind}, {ref} takes a {kind}")
        if ref == "Q1":
            want = str((design.get("npn") or {}).get("name") or "")
            if want and (parts[pid].name or "").casefold() != want.casefold():
                raise DesignFieldError(f"parts.Q1.part_id: part {pid} is npn {parts[pid].name!r}, "
                                       f"the design's npn is {want!r}")
            continue
        a = parts[pid].value
        got = a if pid2 is None else (None if a is None or parts[pid2].value is None
                                      else _pair_value(kind, how, a, parts[pid2].value))
        want = float(design["values"][ref])
        if got is None or not math.isclose(got, want, rel_tol=VALUE_RTOL):
            shown = "no value" if got is None else units.format_value(got, kind)
            raise DesignFieldError(f"parts.{ref}: part {pid}{'' if pid2 is None else f' {how} {pid2}'} is {shown}, "
                                   f"but values.{ref} is {units.format_value(want, kind)}")


def _lock_parts(session: Session, part_ids) -> dict[int, Part]:
    """The parts, locked FOR UPDATE in id order on server databases (SQLite: the write lock is already held)."""
    return {p.id: p for p in session.scalars(lock_parts_stmt(part_ids))}


def lock_parts_stmt(part_ids):
    """``SELECT parts ... WHERE id IN (...) ORDER BY id FOR UPDATE`` (SQLite renders no FOR UPDATE)."""
    return (select(Part).where(Part.id.in_(sorted(set(part_ids)))).order_by(Part.id).with_for_update()
            .execution_options(populate_existing=True))


def lock_build_stmt(build_id: int):
    """``SELECT builds ... WHERE id = :id FOR UPDATE``: a status change reads the status under this lock."""
    return (select(BuildRow).where(BuildRow.id == build_id).with_for_update()
            .execution_options(populate_existing=True))


def _what(part: Part) -> str:
    what = part.name if part.kind == "npn" else units.format_value(part.value, part.kind)
    return f"part {part.id} ({part.kind} {what} in bin {part.bin})"


# ---- changing builds -------------------------------------------------------------------


def new_build(session: Session, design: dict, boards: int, name: str, user: str | None = None) -> BuildRecord:
    """Reserve the design's parts for ``boards`` boards as a new build, in the caller's transaction.

    Parts come from ``design["parts"]``: ``part_id`` and, for a series/parallel pair,
    ``part2_id``; each counts ``boards`` pieces per position (a part at two positions
    counts twice).  Available is ``qty`` minus what reserved builds hold.

    Raises
    ------
    DesignFieldError
        A bad field in the design (unknown position, no such part, wrong kind or value).
    ShortageError
        A part is short: the message names every short part (id, kind, value, bin) and
        by how much.  Nothing is written.
    PickerError
        Bad board count or name.
    """
    if not isinstance(boards, int) or isinstance(boards, bool) or boards < 1:
        raise PickerError(f"--boards: expected a whole number of at least 1 (got {boards!r})")
    name = (name or "").strip()
    if not name or len(name) > NAME_MAX or "\n" in name:
        raise PickerError(f"--name: expected one line of 1..{NAME_MAX} characters (got {name!r})")
    refs = design_parts(design)
    demand: dict[int, list] = {}  # part id -> [designators, qty], in design order
    for ref, pid, pid2, _how in refs:
        for i in (pid, pid2):
            if i is None:
                continue
            slot = demand.setdefault(i, [[], 0])
            if ref not in slot[0]:
                slot[0].append(ref)
            slot[1] += boards
    parts = _lock_parts(session, demand)
    _check_parts_match(design, refs, parts)
    held = reserved_qty(session, demand)
    short = []
    for pid, (refs_of, need) in demand.items():
        p = parts[pid]
        avail = max(p.qty - held.get(pid, 0), 0)  # below 0 if stock was taken by hand since
        if need > avail:
            short.append(f"{_what(p)} at {','.join(refs_of)} needs {need}, {avail} available "
                         f"({p.qty} on hand, {held.get(pid, 0)} reserved by other builds): short by {need - avail}")
    if short:
        raise ShortageError(f"not enough stock for {boards} board(s) of build {name!r}: " + "; ".join(short))
    row = BuildRow(name=name, boards=boards, status="reserved",
                   design=json.dumps(design, allow_nan=False, default=_json_default),
                   created_at=dt.datetime.now(dt.timezone.utc), user=user or current_user(session))
    row.lines = [BuildLineRow(part_id=pid, designators=",".join(r), qty=q) for pid, (r, q) in demand.items()]
    session.add(row)
    session.flush()
    return _record(row)


def _require(row: BuildRow, status: str, action: str) -> None:
    if row.status != status:
        raise PickerError(f"build {row.id} ({row.name}) is {row.status}: only a {status} build can be {action}")


def cancel_build(session: Session, build_id: int) -> BuildRecord:
    """Cancel a reserved build: its parts are available again; no quantity changes."""
    row = _build_row(session, build_id, lock=True)
    _require(row, "reserved", "cancelled")
    row.status = "cancelled"
    session.flush()
    return _record(row)


def done_build(session: Session, build_id: int) -> BuildRecord:
    """Consume a reserved build's parts through the ledger (one row per line) and mark it done.

    All lines change in the caller's one transaction: if anything fails (or the
    process dies) nothing of the build is consumed.

    Test-only hook: when the environment variable ``PICKER_TEST_PAUSE_AFTER_FIRST_CONSUME``
    holds a number of seconds, the function writes its process id to the file named by
    ``PICKER_TEST_PAUSE_MARKER`` (if set) and sleeps that long after the first line is
    consumed, inside the open transaction.  It lets ``tests/store/test_build_concurrency.py``
    kill the process mid-transaction; never set it otherwise.
    """
    row = _build_row(session, build_id, lock=True)
    _require(row, "reserved", "done")
    parts = _lock_parts(session, [ln.part_id for ln in row.lines])
    reason = f"build {row.id} done ({row.name}, {row.boards} board(s))"
    for k, ln in enumerate(row.lines):
        change_qty(session, parts[ln.part_id], -ln.qty, reason)
        if k == 0:
            _test_pause()
    row.status = "done"
    row.done_at = dt.datetime.now(dt.timezone.utc)
    session.flush()
    return _record(row)


def _test_pause() -> None:
    pause = os.environ.get(PAUSE_ENV_VAR)
    if not pause:
        return
    marker = os.environ.get(PAUSE_MARKER_ENV_VAR)
    if marker:
        Path(marker).write_text(str(os.getpid()), encoding="utf-8")
    time.sleep(float(pause))


def undo_build(session: Session, build_id: int) -> BuildRecord:
    """Put a done build's parts back (compensating ledger rows) and mark it undone."""
    row = _build_row(session, build_id, lock=True)
    _require(row, "done", "undone")
    parts = _lock_parts(session, [ln.part_id for ln in row.lines])
    reason = f"undo build {row.id} ({row.name}, {row.boards} board(s))"
    for ln in row.lines:
        change_qty(session, parts[ln.part_id], ln.qty, reason)
    row.status = "undone"
    session.flush()
    return _record(row)
