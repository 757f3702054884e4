"""Schema v4: build jobs (reservations, then consumption) and the last find.

``builds`` holds one job: its name, board count, status (``reserved``, ``done``,
``cancelled``, ``undone``: ``picker.builds.model.STATUSES``), the saved-design
JSON it was made from, when and by whom.  ``build_lines`` lists the stock lines
it takes, one row per part with every designator it fills and the quantity for
all boards.  A reserved build's lines hold stock without consuming it: the
parts' ``qty`` changes only when the build is done (through the ledger).

``last_finds`` / ``last_find_candidates`` keep what the latest ``picker find``
printed (its spec and, per rank, the saved-design JSON), so ``picker build new
--from-find RANK`` can use it; only the latest find is kept.
"""

from sqlalchemy import (
    CheckConstraint,
    Column,
    DateTime,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.engine import Connection

VERSION = 4

STATUSES = ("reserved", "done", "cancelled", "undone")  # copy of picker.builds.model.STATUSES at v4


def _tables(metadata: MetaData) -> list[Table]:
    # Stand-in for the existing parts table so the foreign key resolves; it is not created here.
    Table("parts", metadata, Column("id", Integer, primary_key=True))
    builds = Table(
        "builds",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("name", String(200), nullable=False),
        Column("boards", Integer, nullable=False),
        Column("status", String(16), nullable=False),
        Column("design", Text, nullable=False),
        Column("created_at", DateTime, nullable=False),
        Column("done_at", DateTime),
        Column("user_name", String(64)),
        CheckConstraint("boards >= 1", name="ck_builds_boards"),
        CheckConstraint("status IN (" + ", ".join(f"'{s}'" for s in STATUSES) + ")", name="ck_builds_status"),
    )
    lines = Table(
        "build_lines",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("build_id", Integer, ForeignKey("builds.id"), nullable=False, index=True),
        Column("part_id", Integer, ForeignKey("parts.id"), nullable=False, index=True),
        Column("designators", Text, nullable=False),
        Column("qty", Integer, nullable=False),
        UniqueConstraint("build_id", "part_id", name="uq_build_lines_part"),
        CheckConstraint("qty >= 1", name="ck_build_lines_qty"),
    )
    finds = Table(
        "last_finds",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("created_at", DateTime, nullable=False),
        Column("user_name", String(64)),
        Column("spec", Text, nullable=False),
    )
    candidates = Table(
        "last_find_candidates",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("find_id", Integer, ForeignKey("last_finds.id"), nullable=False, index=True),
        Column("rank", Integer, nullable=False),
        Column("design", Text, nullable=False),
        UniqueConstraint("find_id", "rank", name="uq_last_find_candidates_rank"),
        CheckConstraint("rank >= 1", name="ck_last_find_candidates_rank"),
    )
    return [builds, lines, finds, candidates]


def upgrade(connection: Connection) -> None:
    """Create the build and last-find tables."""
    metadata = MetaData()
    new = _tables(metadata)
    metadata.create_all(connection, tables=new)
