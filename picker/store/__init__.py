"""The parts store: SQLAlchemy models, ledger, CSV import/export, migrations glue.

The only package of picker that touches SQL.  Commands open a :class:`Store`
with :func:`open_store`, own the transaction (``with store.Session.begin() as
session:``) and pass the session to the functions here.  The search reads stock
through :func:`load_pool`.
"""

from picker.store.csvio import apply_import, plan_import, read_stock_csv, write_stock_csv
from picker.store.engine import Store, default_db_path, open_store, resolve_db_url
from picker.store.ledger import add_stock, change_qty, get_part, history, ledger_balance_ok
from picker.store.models import SCHEMA_VERSION, LedgerEntry, Part
from picker.store.pool import VALUE_COLUMN, load_pool
from picker.store.query import list_parts, natural_key, part_dict
from picker.store.spec import PartSpec, parse_part

__all__ = [
    "SCHEMA_VERSION", "LedgerEntry", "Part", "PartSpec", "Store", "VALUE_COLUMN",
    "add_stock", "apply_import", "change_qty", "default_db_path", "get_part", "history",
    "ledger_balance_ok", "list_parts", "load_pool", "natural_key", "open_store",
    "parse_part", "part_dict", "plan_import", "read_stock_csv", "resolve_db_url",
    "write_stock_csv",
]  # fmt: skip
