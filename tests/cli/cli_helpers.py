"""Helpers shared by the CLI tests (imported as a plain module: tests/cli is on sys.path)."""

import datetime as dt
import hashlib
from pathlib import Path

from sqlalchemy import create_engine, text

from picker.store.migrate import create_fresh

DEMO_CSV = Path(__file__).resolve().parents[2] / "data" / "demo_stock.csv"


def file_hash(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def assert_user_error(result, *fragments):
    """Non-zero exit, 'error:' lines on stderr naming the fragments, nothing on stdout, no traceback."""
    assert result.exit_code != 0, result.output
    assert result.stdout == ""
    assert result.stderr.startswith("error: ")
    assert "Traceback" not in result.output and "Traceback" not in result.stderr
    for f in fragments:
        assert f in result.stderr, result.stderr


def make_v1_store(path):
    """A schema-v1 store (migration 0001 only) holding two parts (a SQLite path, or a URL of an empty database)."""
    engine = create_engine(path if "://" in str(path) else f"sqlite:///{path}")
    with engine.begin() as conn:
        create_fresh(conn, target=1)
        conn.execute(text("INSERT INTO parts (id, kind, value, qty, bin) VALUES (1, 'resistor', 4700, 3, 'R-A1')"))
        conn.execute(text("INSERT INTO parts (id, kind, value, qty, bin) VALUES (2, 'capacitor', 1e-9, 2, 'C-A1')"))
        for pid, q in [(1, 3), (2, 2)]:
            conn.execute(
                text("INSERT INTO ledger (part_id, delta, reason, created_at) VALUES (:p, :q, 'v1', :w)"),
                {"p": pid, "q": q, "w": dt.datetime(2024, 1, 1)},
            )
    engine.dispose()
