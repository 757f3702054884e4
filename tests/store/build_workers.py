"""Worker processes for tests/store/test_build_concurrency.py (a plain module so ``spawn`` can import it).

A worker opens the store at a URL (a SQLite file or a PostgreSQL database) and runs random build operations, each in its own transaction, the way
separate ``picker build`` commands would.  It reports what it saw; the test
compares that with the store afterwards.
"""

from __future__ import annotations

import random
import re

from sqlalchemy import func, select

from picker.errors import PickerError
from picker.store import open_store
from picker.store.builds import (
    ShortageError,
    cancel_build,
    done_build,
    list_builds,
    new_build,
    undo_build,
)
from picker.store.models import BuildLineRow, BuildRow, Part

# "part 5 (capacitor 100 nF in bin C-1) at C1,CC1 needs 6, 5 available (7 on hand, 2 reserved by other builds):
# short by 1" -> (part id, need, available, on hand, reserved, short)
SHORT_RE = re.compile(r"part (\d+) \([^)]*\) at \S+ needs (\d+), (\d+) available \((\d+) on hand, "
                      r"(\d+) reserved by other builds\): short by (\d+)")
STATUS_RE = re.compile(r"^build \d+ \(.*\) is (reserved|done|cancelled|undone): only a (reserved|done) build can be")


def over_reserved(session) -> list[str]:
    """Parts whose reserved total exceeds the quantity on hand (should be none).

    One statement, so that both figures come from one snapshot: on a server at READ
    COMMITTED, two statements can straddle another worker's ``build done`` (its build
    leaves the reserved total and its pieces leave ``qty`` in one commit) and show a
    shortfall that never existed."""
    held = (select(BuildLineRow.part_id.label("part_id"), func.sum(BuildLineRow.qty).label("held"))
            .join(BuildRow, BuildRow.id == BuildLineRow.build_id)
            .where(BuildRow.status == "reserved").group_by(BuildLineRow.part_id).subquery())
    rows = session.execute(select(Part.id, Part.qty, held.c.held).join(held, held.c.part_id == Part.id)).all()
    return [f"part {pid}: {h} reserved, {q} on hand" for pid, q, h in rows if h > q]


def worker(url: str, seed: int, n_ops: int, design: dict, name: str, weights=(5, 1, 2, 1)) -> dict:
    """Run ``n_ops`` random operations (reserve, cancel, done, undo) and return what happened.

    ``weights`` are the relative chances of reserve, cancel, done and undo.  Each refused
    reservation is logged as its parsed shortfalls (``shortages``) and the board count it
    asked for (``short_boards``, same order).

    The target of cancel/done/undo is chosen in one transaction and acted on in the
    next, so another process may get there first: the loser must be refused with
    the build's status, never half-done.
    """
    rng = random.Random(seed)
    store = open_store(url, create=False)
    log = {"name": name, "reserve_tries": 0, "created": [], "shortages": [], "short_boards": [], "cancelled": [], "done": [],
           "undone": [], "refused_status": 0, "other_errors": [], "over_reserved": []}
    try:
        for k in range(n_ops):
            op = rng.choices(("reserve", "cancel", "done", "undo"), weights=weights)[0]
            if op == "reserve":
                log["reserve_tries"] += 1
                boards = rng.randint(1, 3)
                try:
                    with store.Session.begin() as s:
                        rec = new_build(s, design, boards, f"{name} op {k}", user=name)
                    log["created"].append(rec.id)
                except ShortageError as e:
                    log["shortages"].append([list(map(int, m)) for m in SHORT_RE.findall(str(e))])
                    log["short_boards"].append(boards)
            else:
                want = {"cancel": "reserved", "done": "reserved", "undo": "done"}[op]
                with store.Session.begin() as s:
                    ids = [b.id for b in list_builds(s, want)]
                if ids:
                    target = rng.choice(ids)
                    fn = {"cancel": cancel_build, "done": done_build, "undo": undo_build}[op]
                    try:
                        with store.Session.begin() as s:
                            fn(s, target)
                        log[{"cancel": "cancelled", "done": "done", "undo": "undone"}[op]].append(target)
                    except PickerError as e:
                        if STATUS_RE.match(str(e)):
                            log["refused_status"] += 1
                        else:
                            log["other_errors"].append(str(e))
            with store.Session.begin() as s:
                log["over_reserved"] += over_reserved(s)
    finally:
        store.close()
    return log
