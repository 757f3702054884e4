"""Schema v3: supplier catalogs (suppliers, items, price breaks) and orders (expected, then received).

Order lines copy the item they bought (supplier name, sku, kind, part
attributes) instead of pointing at the catalog: re-importing a supplier's
catalog replaces its items, and an order placed before must not change.
``order_lines.part_id`` is filled when the order is booked into stock.
"""

from sqlalchemy import (
    CheckConstraint,
    Column,
    DateTime,
    Double,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.engine import Connection

VERSION = 3

_KINDS = "kind IN ('resistor', 'capacitor', 'inductor', 'npn')"


def _attribute_columns() -> list[Column]:
    """The part attributes a catalog item and an order line carry (picker.planning.catalog.ITEM_FIELDS)."""
    return [
        Column("value", Double),
        Column("tolerance", Double),
        Column("voltage_v", Double),
        Column("power_w", Double),
        Column("dielectric", String(16)),
        Column("dcr_ohm", Double),
        Column("isat_a", Double),
        Column("name", String(64)),
        Column("hfe_min", Double),
        Column("hfe_max", Double),
        Column("vbe_v", Double),
        Column("ft_hz", Double),
        Column("cob_f", Double),
        Column("vaf_v", Double),
        Column("vceo_v", Double),
        Column("pd_w", Double),
    ]


def _tables(metadata: MetaData) -> list[Table]:
    # Stand-in for the existing parts table so the foreign key resolves; it is not created here.
    Table("parts", metadata, Column("id", Integer, primary_key=True))
    suppliers = Table(
        "suppliers",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("name", String(64), nullable=False, unique=True),
        Column("order_charge", Double, nullable=False),
        Column("imported_at", DateTime, nullable=False),
        Column("source", Text),
        CheckConstraint("order_charge >= 0", name="ck_suppliers_order_charge"),
    )
    items = Table(
        "catalog_items",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("supplier_id", Integer, ForeignKey("suppliers.id"), nullable=False, index=True),
        Column("sku", String(64), nullable=False),
        Column("kind", String(16), nullable=False),
        *_attribute_columns(),
        Column("pack", Integer, nullable=False),
        Column("min_order", Integer, nullable=False),
        UniqueConstraint("supplier_id", "sku", name="uq_catalog_items_sku"),
        CheckConstraint("pack >= 1", name="ck_catalog_items_pack"),
        CheckConstraint("min_order >= 1", name="ck_catalog_items_min_order"),
        CheckConstraint(_KINDS, name="ck_catalog_items_kind"),
    )
    breaks = Table(
        "price_breaks",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("item_id", Integer, ForeignKey("catalog_items.id"), nullable=False, index=True),
        Column("min_qty", Integer, nullable=False),
        Column("unit_price", Double, nullable=False),
        UniqueConstraint("item_id", "min_qty", name="uq_price_breaks_qty"),
        CheckConstraint("min_qty >= 1", name="ck_price_breaks_min_qty"),
        CheckConstraint("unit_price > 0", name="ck_price_breaks_unit_price"),
    )
    orders = Table(
        "orders",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("created_at", DateTime, nullable=False),
        Column("status", String(16), nullable=False),
        Column("received_at", DateTime),
        Column("user_name", String(64)),
        Column("total_cost", Double, nullable=False),
        Column("note", Text),
        CheckConstraint("status IN ('incoming', 'received')", name="ck_orders_status"),
    )
    lines = Table(
        "order_lines",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("order_id", Integer, ForeignKey("orders.id"), nullable=False, index=True),
        Column("supplier", String(64), nullable=False),
        Column("sku", String(64), nullable=False),
        Column("kind", String(16), nullable=False),
        *_attribute_columns(),
        Column("packs", Integer, nullable=False),
        Column("qty", Integer, nullable=False),
        Column("cost", Double, nullable=False),
        Column("part_id", Integer, ForeignKey("parts.id")),
        CheckConstraint("packs >= 1", name="ck_order_lines_packs"),
        CheckConstraint("qty >= 1", name="ck_order_lines_qty"),
        CheckConstraint("cost >= 0", name="ck_order_lines_cost"),
        CheckConstraint(_KINDS, name="ck_order_lines_kind"),
    )
    return [suppliers, items, breaks, orders, lines]


def upgrade(connection: Connection) -> None:
    """Create the catalog and order tables."""
    metadata = MetaData()
    new = _tables(metadata)
    metadata.create_all(connection, tables=new)
