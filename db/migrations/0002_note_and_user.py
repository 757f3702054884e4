"""Schema v2: a free-text ``note`` on parts and the OS user name on ledger rows.

The ledger column is ``user_name`` (``user`` is a reserved word on server
databases).  Rows written before v2 keep ``user_name`` NULL: nobody knows who
made them.
"""

from sqlalchemy import Column, String, Text
from sqlalchemy.engine import Connection

VERSION = 2


def _add_column(connection: Connection, table: str, column: Column) -> None:
    """``ALTER TABLE ... ADD COLUMN`` for a nullable column, in portable SQL."""
    prep = connection.dialect.identifier_preparer
    col_type = column.type.compile(dialect=connection.dialect)
    connection.exec_driver_sql(
        f"ALTER TABLE {prep.quote(table)} ADD COLUMN {prep.quote(column.name)} {col_type}"
    )


def upgrade(connection: Connection) -> None:
    """Add ``parts.note`` and ``ledger.user_name``."""
    _add_column(connection, "parts", Column("note", Text))
    _add_column(connection, "ledger", Column("user_name", String(64)))
