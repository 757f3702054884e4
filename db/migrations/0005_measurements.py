"""Schema v5: measurements of built boards (``picker build measured``).

``measurements`` holds one reading per row: the build, the board number (1..the build's
boards), the measured frequency in hertz, optionally the amplitude (volt peak to peak),
when and by whom.  A board measured again keeps every reading; the retune fit uses the
latest per board (``picker.store.measurements``).
"""

from sqlalchemy import CheckConstraint, Column, DateTime, Double, ForeignKey, Integer, MetaData, String, Table
from sqlalchemy.engine import Connection

VERSION = 5


def _tables(metadata: MetaData) -> list[Table]:
    # Stand-in for the existing builds table so the foreign key resolves; it is not created here.
    Table("builds", metadata, Column("id", Integer, primary_key=True))
    measurements = Table(
        "measurements",
        metadata,
        Column("id", Integer, primary_key=True, autoincrement=True),
        Column("build_id", Integer, ForeignKey("builds.id"), nullable=False, index=True),
        Column("board", Integer, nullable=False),
        Column("freq_hz", Double, nullable=False),
        Column("amplitude_vpp", Double),
        Column("created_at", DateTime, nullable=False),
        Column("user_name", String(64)),
        CheckConstraint("board >= 1", name="ck_measurements_board"),
        CheckConstraint("freq_hz > 0", name="ck_measurements_freq"),
        CheckConstraint("amplitude_vpp IS NULL OR amplitude_vpp >= 0", name="ck_measurements_amplitude"),
    )
    return [measurements]


def upgrade(connection: Connection) -> None:
    """Create the measurements table."""
    metadata = MetaData()
    metadata.create_all(connection, tables=_tables(metadata))
