"""Schema v1: parts, a quantity ledger and the schema version table.

v1 has no ``note`` on parts and no user name on ledger rows (both came in v2).
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
)
from sqlalchemy.engine import Connection

VERSION = 1


def _tables(metadata: MetaData) -> None:
    Table(
        "schema_version",
        metadata,
        Column("version", Integer, nullable=False),
    )
    Table(
        "parts",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("kind", String(16), nullable=False),
        Column("value", Double),
        Column("tolerance", Double),
        Column("qty", Integer, nullable=False),
        Column("bin", String(64), nullable=False),
        Column("unit_cost", Double),
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
        CheckConstraint("qty >= 0", name="ck_parts_qty_nonnegative"),
        CheckConstraint(
            "kind IN ('resistor', 'capacitor', 'inductor', 'npn')", name="ck_parts_kind"
        ),
    )
    Table(
        "ledger",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("part_id", Integer, ForeignKey("parts.id"), nullable=False, index=True),
        Column("delta", Integer, nullable=False),
        Column("reason", Text, nullable=False),
        Column("created_at", DateTime, nullable=False),
    )


def upgrade(connection: Connection) -> None:
    """Create the v1 tables (on an empty database)."""
    metadata = MetaData()
    _tables(metadata)
    metadata.create_all(connection)
