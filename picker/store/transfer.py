"""Copy a whole store to another database (``picker stock migrate --to URL``).

Typical use: move a SQLite file onto a PostgreSQL server so a club or lab shares
one store.  Every table of the schema is copied with its ids (parts, ledger,
suppliers, catalog items, price breaks, orders and their lines, builds and their
lines, the last find, and any table a later schema adds to the models), in
foreign-key order, in **one transaction on the target**: the target gets the
schema, the rows, its id sequences moved past the copied ids (PostgreSQL), and
the copy is verified before the commit; any failure rolls all of it back, so the
target is left as it was.

Verification (inside that transaction): the row count of every table equals the
source's, every part's quantity and ledger sum equal the source's, and the
target's ledger balances (:func:`picker.store.ledger.ledger_balance_ok`).

The source is read in one transaction (SQLite: under its write lock, so nobody
changes it meanwhile; a server: ``REPEATABLE READ``, one consistent snapshot).
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlalchemy import exc, func, insert, select, text
from sqlalchemy.engine import Connection
from sqlalchemy.orm import Session

from picker.errors import PickerError
from picker.store import migrate
from picker.store.engine import Store, display_url, make_engine, sqlite_path
from picker.store.ledger import ledger_balance_ok
from picker.store.models import SCHEMA_VERSION, Base, LedgerEntry, Part

#: Rows inserted per statement.
CHUNK_ROWS = 2000


@dataclass
class CopyReport:
    """What :func:`copy_store` did: rows per table (equal on both sides) and the ledger check."""

    source: str
    target: str
    rows: dict[str, int] = field(default_factory=dict)
    pieces: int = 0  # sum of qty over all parts, on both sides
    ledger_rows: int = 0
    sequences_reset: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return {"source": self.source, "target": self.target, "schema_version": SCHEMA_VERSION,
                "rows": dict(self.rows), "pieces": self.pieces, "ledger_rows": self.ledger_rows,
                "ledger_balanced": True, "sequences_reset": list(self.sequences_reset)}


def data_tables():
    """The schema's tables holding data (all but ``schema_version``), parents before children."""
    return [t for t in Base.metadata.sorted_tables if t.name != "schema_version"]


def _counts(conn: Connection) -> dict[str, int]:
    return {t.name: int(conn.scalar(select(func.count()).select_from(t))) for t in data_tables()}


def _part_figures(conn: Connection) -> dict[int, tuple[int, int]]:
    """Per part id: (qty, sum of its ledger deltas)."""
    sums = dict(conn.execute(select(LedgerEntry.part_id, func.sum(LedgerEntry.delta))
                             .group_by(LedgerEntry.part_id)).all())
    return {int(pid): (int(q), int(sums.get(pid) or 0)) for pid, q in conn.execute(select(Part.id, Part.qty))}


def _check_target_empty(conn: Connection, shown: str) -> bool:
    """True if the target needs the schema created; PickerError if it holds anything."""
    version = migrate.read_version(conn)  # PickerError for a database that is not a picker store
    if version is None:
        return True
    if version != SCHEMA_VERSION:
        raise PickerError(f"target {shown} is a picker store at schema v{version}, this picker writes "
                          f"v{SCHEMA_VERSION}: migrate into an empty database")
    full = {n: c for n, c in _counts(conn).items() if c}
    if full:
        listed = ", ".join(f"{n} {c}" for n, c in full.items())
        raise PickerError(f"target {shown} is not empty ({listed} rows): migrate only into an empty "
                          "database (create a new one on the server)")
    return False


def _reset_sequences(conn: Connection) -> list[str]:
    """Move each table's id sequence past the highest copied id (PostgreSQL; SQLite needs nothing)."""
    if conn.dialect.name != "postgresql":
        return []
    done = []
    for t in data_tables():
        if "id" not in t.c:
            continue
        seq = conn.scalar(text("SELECT pg_get_serial_sequence(:t, 'id')"), {"t": t.name})
        if seq is None:
            continue
        top = conn.scalar(select(func.max(t.c.id)))
        # next nextval() returns max+1 (or 1 for an empty table)
        conn.execute(text("SELECT setval(CAST(:s AS regclass), :v, :called)"),
                     {"s": seq, "v": int(top) if top else 1, "called": bool(top)})
        done.append(t.name)
    return done


def copy_store(source: Store, target_url: str) -> CopyReport:
    """Copy every row of ``source`` into the empty database at ``target_url`` (see module docstring).

    Raises
    ------
    PickerError
        Target is the source, not empty, not a picker store, unreachable, refuses a row
        (e.g. a text longer than its column, which SQLite does not enforce), or the
        verification fails; the target is then unchanged.
    """
    src_shown, dst_shown = display_url(source.url), display_url(target_url)
    if target_url == source.url:
        raise PickerError(f"target {dst_shown} is the store being migrated")
    path = sqlite_path(target_url)
    if path is not None and not path.parent.is_dir():
        raise PickerError(f"store directory {path.parent} does not exist (target {path})")
    new_file = path is not None and not path.exists()
    report = CopyReport(src_shown, dst_shown)
    target = make_engine(target_url)
    ok = False
    try:
        src_conn = source.engine.connect()
        if source.engine.dialect.name != "sqlite":
            src_conn = src_conn.execution_options(isolation_level="REPEATABLE READ")
        try:
            with src_conn.begin(), target.begin() as dst:
                if _check_target_empty(dst, dst_shown):
                    migrate.create_fresh(dst)
                want = _counts(src_conn)
                for t in data_tables():
                    order = [c for c in t.primary_key.columns] or list(t.c)
                    rows = src_conn.execute(select(t).order_by(*order)).mappings()
                    while True:
                        chunk = [dict(r) for r in rows.fetchmany(CHUNK_ROWS)]
                        if not chunk:
                            break
                        try:
                            dst.execute(insert(t), chunk)
                        except exc.DBAPIError as e:
                            raise PickerError(f"target {dst_shown} refused a row of table {t.name}: "
                                              f"{str(e.orig or e).strip()} (nothing was written)") from None
                report.sequences_reset = _reset_sequences(dst)
                got = _counts(dst)
                if got != want:
                    diff = ", ".join(f"{n} {want[n]} -> {got.get(n)}" for n in want if got.get(n) != want[n])
                    raise PickerError(f"copy check failed, row counts differ ({diff}); nothing was written")
                src_parts, dst_parts = _part_figures(src_conn), _part_figures(dst)
                if src_parts != dst_parts:
                    raise PickerError("copy check failed: quantities or ledger sums differ; nothing was written")
                with Session(bind=dst) as check:
                    problems = ledger_balance_ok(check)
                if problems:
                    raise PickerError("copy check failed, the ledger does not balance on the target ("
                                      + "; ".join(problems[:5]) + "); nothing was written")
                report.rows = got
                report.pieces = sum(q for q, _ in dst_parts.values())
                report.ledger_rows = got.get("ledger", 0)
        finally:
            src_conn.close()
        ok = True
    except exc.OperationalError as e:
        raise PickerError(f"cannot migrate to {dst_shown}: {str(e.orig or e).strip()}") from None
    finally:
        target.dispose()
        if new_file and not ok and path.exists() and path.stat().st_size == 0:
            path.unlink()  # connecting created the file; leave no empty store behind
    return report
