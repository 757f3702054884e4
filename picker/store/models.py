"""ORM models of the parts store (schema version ``SCHEMA_VERSION``).

The tables are created and changed by the migration scripts in the top-level
``db/migrations`` package; these classes must describe the schema those scripts
leave behind (``tests/store/test_store_migrations.py`` compares the two).

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
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

#: Schema version this code reads and writes; the highest migration in db/migrations.
SCHEMA_VERSION = 5


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


# ---- v3: supplier catalogs and orders (db/migrations/0003_catalogs_orders.py) ----------


class SupplierRow(Base):
    """A supplier whose catalog was imported (``picker catalog import``)."""

    __tablename__ = "suppliers"
    __table_args__ = (CheckConstraint("order_charge >= 0", name="ck_suppliers_order_charge"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    name: Mapped[str] = mapped_column(String(64), unique=True)
    order_charge: Mapped[float] = mapped_column(Double)  # fixed charge per order placed
    imported_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    source: Mapped[str | None] = mapped_column(Text)  # file name of the last import

    items: Mapped[list[CatalogItemRow]] = relationship(back_populates="supplier", order_by="CatalogItemRow.id")


class PartAttributes:
    """What a part is, besides its kind (SI units; None when unknown): the columns a catalog
    item and an order line share with the stock's parts (``parts`` declares its own, in
    the order of migration 0001)."""

    value: Mapped[float | None] = mapped_column(Double)
    tolerance: Mapped[float | None] = mapped_column(Double)
    voltage_v: Mapped[float | None] = mapped_column(Double)
    power_w: Mapped[float | None] = mapped_column(Double)
    dielectric: Mapped[str | None] = mapped_column(String(16))
    dcr_ohm: Mapped[float | None] = mapped_column(Double)
    isat_a: Mapped[float | None] = mapped_column(Double)
    name: Mapped[str | None] = mapped_column(String(64))
    hfe_min: Mapped[float | None] = mapped_column(Double)
    hfe_max: Mapped[float | None] = mapped_column(Double)
    vbe_v: Mapped[float | None] = mapped_column(Double)
    ft_hz: Mapped[float | None] = mapped_column(Double)
    cob_f: Mapped[float | None] = mapped_column(Double)
    vaf_v: Mapped[float | None] = mapped_column(Double)
    vceo_v: Mapped[float | None] = mapped_column(Double)
    pd_w: Mapped[float | None] = mapped_column(Double)


class CatalogItemRow(PartAttributes, Base):
    """One purchasable item of a supplier (one catalog CSV row)."""

    __tablename__ = "catalog_items"
    __table_args__ = (
        UniqueConstraint("supplier_id", "sku", name="uq_catalog_items_sku"),
        CheckConstraint("pack >= 1", name="ck_catalog_items_pack"),
        CheckConstraint("min_order >= 1", name="ck_catalog_items_min_order"),
        CheckConstraint(
            "kind IN ('resistor', 'capacitor', 'inductor', 'npn')", name="ck_catalog_items_kind"
        ),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    supplier_id: Mapped[int] = mapped_column(ForeignKey("suppliers.id"), index=True)
    sku: Mapped[str] = mapped_column(String(64))
    kind: Mapped[str] = mapped_column(String(16))
    pack: Mapped[int] = mapped_column(Integer)
    min_order: Mapped[int] = mapped_column(Integer)

    supplier: Mapped[SupplierRow] = relationship(back_populates="items")
    breaks: Mapped[list[PriceBreak]] = relationship(back_populates="item", order_by="PriceBreak.min_qty")


class PriceBreak(Base):
    """Unit price of a catalog item once at least ``min_qty`` units are bought."""

    __tablename__ = "price_breaks"
    __table_args__ = (
        UniqueConstraint("item_id", "min_qty", name="uq_price_breaks_qty"),
        CheckConstraint("min_qty >= 1", name="ck_price_breaks_min_qty"),
        CheckConstraint("unit_price > 0", name="ck_price_breaks_unit_price"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    item_id: Mapped[int] = mapped_column(ForeignKey("catalog_items.id"), index=True)
    min_qty: Mapped[int] = mapped_column(Integer)
    unit_price: Mapped[float] = mapped_column(Double)

    item: Mapped[CatalogItemRow] = relationship(back_populates="breaks")


class Order(Base):
    """An order placed with suppliers: expected (``incoming``) until booked into stock (``received``)."""

    __tablename__ = "orders"
    __table_args__ = (CheckConstraint("status IN ('incoming', 'received')", name="ck_orders_status"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    status: Mapped[str] = mapped_column(String(16))
    received_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    user: Mapped[str | None] = mapped_column("user_name", String(64))  # as the ledger
    total_cost: Mapped[float] = mapped_column(Double)  # lines plus each supplier's order charge
    note: Mapped[str | None] = mapped_column(Text)

    lines: Mapped[list[OrderLine]] = relationship(back_populates="order", order_by="OrderLine.id")


class OrderLine(PartAttributes, Base):
    """One line of an order: a copy of the item bought (no link to the catalog, which may be re-imported)."""

    __tablename__ = "order_lines"
    __table_args__ = (
        CheckConstraint("packs >= 1", name="ck_order_lines_packs"),
        CheckConstraint("qty >= 1", name="ck_order_lines_qty"),
        CheckConstraint("cost >= 0", name="ck_order_lines_cost"),
        CheckConstraint(
            "kind IN ('resistor', 'capacitor', 'inductor', 'npn')", name="ck_order_lines_kind"
        ),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    order_id: Mapped[int] = mapped_column(ForeignKey("orders.id"), index=True)
    supplier: Mapped[str] = mapped_column(String(64))
    sku: Mapped[str] = mapped_column(String(64))
    kind: Mapped[str] = mapped_column(String(16))
    packs: Mapped[int] = mapped_column(Integer)
    qty: Mapped[int] = mapped_column(Integer)
    cost: Mapped[float] = mapped_column(Double)
    part_id: Mapped[int | None] = mapped_column(ForeignKey("parts.id"))  # set when received

    order: Mapped[Order] = relationship(back_populates="lines")


# ---- v4: build jobs and the last find (db/migrations/0004_builds.py) --------------------

_BUILD_STATUSES = ("reserved", "done", "cancelled", "undone")  # picker.builds.model.STATUSES


class BuildRow(Base):
    """A build job: ``reserved`` (its lines hold stock) until ``done`` (consumed), ``cancelled`` or ``undone``.

    ``design`` is the saved-design JSON text (``picker.builds.model``) the build was made from.
    """

    __tablename__ = "builds"
    __table_args__ = (
        CheckConstraint("boards >= 1", name="ck_builds_boards"),
        CheckConstraint("status IN (" + ", ".join(f"'{s}'" for s in _BUILD_STATUSES) + ")", name="ck_builds_status"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    name: Mapped[str] = mapped_column(String(200))
    boards: Mapped[int] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16))
    design: Mapped[str] = mapped_column(Text)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    done_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime)
    user: Mapped[str | None] = mapped_column("user_name", String(64))  # as the ledger

    lines: Mapped[list[BuildLineRow]] = relationship(back_populates="build", order_by="BuildLineRow.id")


class BuildLineRow(Base):
    """One stock line a build takes: every designator it fills and the quantity for all boards."""

    __tablename__ = "build_lines"
    __table_args__ = (
        UniqueConstraint("build_id", "part_id", name="uq_build_lines_part"),
        CheckConstraint("qty >= 1", name="ck_build_lines_qty"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    build_id: Mapped[int] = mapped_column(ForeignKey("builds.id"), index=True)
    part_id: Mapped[int] = mapped_column(ForeignKey("parts.id"), index=True)
    designators: Mapped[str] = mapped_column(Text)  # comma-separated, in design order
    qty: Mapped[int] = mapped_column(Integer)

    build: Mapped[BuildRow] = relationship(back_populates="lines")
    part: Mapped[Part] = relationship()


class LastFind(Base):
    """The latest ``picker find`` that found something (only one is kept)."""

    __tablename__ = "last_finds"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    user: Mapped[str | None] = mapped_column("user_name", String(64))
    spec: Mapped[str] = mapped_column(Text)  # JSON of the FindSpec

    candidates: Mapped[list[LastFindCandidate]] = relationship(
        back_populates="find", order_by="LastFindCandidate.rank", cascade="all, delete-orphan"
    )


class LastFindCandidate(Base):
    """One ranked candidate of the last find, as saved-design JSON text (with parts and predicted figures)."""

    __tablename__ = "last_find_candidates"
    __table_args__ = (
        UniqueConstraint("find_id", "rank", name="uq_last_find_candidates_rank"),
        CheckConstraint("rank >= 1", name="ck_last_find_candidates_rank"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    find_id: Mapped[int] = mapped_column(ForeignKey("last_finds.id"), index=True)
    rank: Mapped[int] = mapped_column(Integer)
    design: Mapped[str] = mapped_column(Text)

    find: Mapped[LastFind] = relationship(back_populates="candidates")


# ---- v5: measurements of built boards (db/migrations/0005_measurements.py) --------------


class MeasurementRow(Base):
    """One reading of a built board: frequency (and amplitude, volt peak to peak), when and by whom."""

    __tablename__ = "measurements"
    __table_args__ = (
        CheckConstraint("board >= 1", name="ck_measurements_board"),
        CheckConstraint("freq_hz > 0", name="ck_measurements_freq"),
        CheckConstraint("amplitude_vpp IS NULL OR amplitude_vpp >= 0", name="ck_measurements_amplitude"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    build_id: Mapped[int] = mapped_column(ForeignKey("builds.id"), index=True)
    board: Mapped[int] = mapped_column(Integer)
    freq_hz: Mapped[float] = mapped_column(Double)
    amplitude_vpp: Mapped[float | None] = mapped_column(Double)
    created_at: Mapped[dt.datetime] = mapped_column(UTCDateTime)
    user: Mapped[str | None] = mapped_column("user_name", String(64))
