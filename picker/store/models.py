"""ORM models of the parts store (schema version ``SCHEMA_VERSION``).

The tables are created and changed by the migration scripts in the top-level
``db/migrations`` package; these classes must describe the schema those scripts
leave behind (``tests/store/test_migrate.py`` compares the two).

All numbers are SI base units (ohm, farad, henry, volt, watt, ampere, hertz);
tolerances are fractions (0.05 for 5 %).  Timestamps are stored as naive UTC
and come back timezone-aware (UTC).
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import (
    CheckConstraint,
    DateTime,
    Double,
    ForeignKey,
    Integer,
    String,
    Text,
    TypeDecorator,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

#: Schema version this code reads and writes; the highest migration in db/migrations.
SCHEMA_VERSION = 2


class UTCDateTime(TypeDecorator):
    """A timestamp stored as naive UTC on every backend, returned as aware UTC."""

    impl = DateTime
    cache_ok = True

    def process_bind_param(self, value, dialect):
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to a UTC column")
        return value.astimezone(dt.timezone.utc).replace(tzinfo=None)

    def process_result_value(self, value, dialect):
        if value is None:
            return None
        return value.replace(tzinfo=dt.timezone.utc)


class Base(DeclarativeBase):
    """Declarative base of the store's tables."""


class SchemaVersion(Base):
    """One row holding the store's schema version."""

    __tablename__ = "schema_version"

    # The table has no key column of its own (it holds one row); the ORM needs one.
    version: Mapped[int] = mapped_column(Integer, primary_key=True)


class Part(Base):
    """One kind of part in one bin.

    ``qty`` always equals the sum of the part's ledger deltas; change it only
    through :func:`picker.store.ledger.change_qty`.
    """

    __tablename__ = "parts"
    __table_args__ = (
        CheckConstraint("qty >= 0", name="ck_parts_qty_nonnegative"),
        CheckConstraint(
            "kind IN ('resistor', 'capacitor', 'inductor', 'npn')", name="ck_parts_kind"
        ),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    kind: Mapped[str] = mapped_column(String(16))
    value: Mapped[float | None] = mapped_column(Double)  # ohm / F / H; NULL for npn
    tolerance: Mapped[float | None] = mapped_column(Double)  # fraction
    qty: Mapped[int] = mapped_column(Integer)
    bin: Mapped[str] = mapped_column(String(64))
    unit_cost: Mapped[float | None] = mapped_column(Double)
    voltage_v: Mapped[float | None] = mapped_column(Double)
    power_w: Mapped[float | None] = mapped_column(Double)
    dielectric: Mapped[str | None] = mapped_column(String(16))
    dcr_ohm: Mapped[float | None] = mapped_column(Double)
    isat_a: Mapped[float | None] = mapped_column(Double)
    name: Mapped[str | None] = mapped_column(String(64))  # npn profile name
    hfe_min: Mapped[float | None] = mapped_column(Double)
    hfe_max: Mapped[float | None] = mapped_column(Double)
    vbe_v: Mapped[float | None] = mapped_column(Double)
    ft_hz: Mapped[float | None] = mapped_column(Double)
    cob_f: Mapped[float | None] = mapped_column(Double)
    vaf_v: Mapped[float | None] = mapped_column(Double)
    vceo_v: Mapped[float | None] = mapped_column(Double)
    pd_w: Mapped[float | None] = mapped_column(Double)
    note: Mapped[str | None] = mapped_column(Text)  # v2

    ledger: Mapped[list[LedgerEntry]] = relationship(
        back_populates="part", order_by="LedgerEntry.id"
    )

    def __repr__(self) -> str:
        return f"Part(id={self.id}, kind={self.kind!r}, value={self.value!r}, bin={self.bin!r}, qty={self.qty})"


class LedgerEntry(Base):
    """One change of a part's quantity on hand."""

    __tablename__ = "ledger"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    part_id: Mapped[int] = mapped_column(ForeignKey("parts.id"), index=True)
    delta: Mapped[int] = mapped_column(Integer)
    reason: Mapped[str] = mapped_column(Text)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    # "user" is reserved on server databases, so the column is user_name.  v2.
    user: Mapped[str | None] = mapped_column("user_name", String(64))

    part: Mapped[Part] = relationship(back_populates="ledger")
