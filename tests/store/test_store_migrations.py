"""Schema versions: fresh stores, the v1 -> v2 upgrade with backup, refusals."""

import datetime as dt
import importlib
import sqlite3

import pytest
from sqlalchemy import create_engine, exc, inspect, text

from picker.errors import PickerError
from picker.store import SCHEMA_VERSION, get_part, ledger_balance_ok, open_store, resolve_db_url
from picker.store.migrate import load_migrations
from picker.store.models import Base


def _columns(engine):
    insp = inspect(engine)
    return {t: {c["name"]: c["nullable"] for c in insp.get_columns(t)} for t in insp.get_table_names()}


def test_migrations_are_numbered_without_gaps_up_to_current():
    assert [m.version for m in load_migrations()] == list(range(1, SCHEMA_VERSION + 1))
    assert SCHEMA_VERSION >= 2


def test_fresh_store_matches_the_models(store):
    with store.engine.connect() as conn:
        assert conn.execute(text("SELECT version FROM schema_version")).scalar_one() == SCHEMA_VERSION
    got = _columns(store.engine)
    expected = {t.name: {c.name for c in t.columns} for t in Base.metadata.sorted_tables}
    assert {t: set(cols) for t, cols in got.items()} == expected


def test_qty_check_constraint_and_foreign_keys_are_enforced(store):
    with store.engine.connect() as conn:
        conn.execute(text("INSERT INTO parts (kind, value, qty, bin) VALUES ('resistor', 1000, 1, 'R-A1')"))
        with pytest.raises(exc.IntegrityError):
            conn.execute(text("UPDATE parts SET qty = -1"))
        conn.rollback()
        with pytest.raises(exc.IntegrityError):
            conn.execute(
                text("INSERT INTO ledger (part_id, delta, reason, created_at) VALUES (999, 1, 'x', '2024-01-01')")
            )


def _make_v1_store(path):
    """A store built by migration 0001 only, with a few rows written as v1 code would."""
    engine = create_engine(f"sqlite:///{path}")
    v1 = importlib.import_module("db.migrations.0001_initial")
    with engine.begin() as conn:
        v1.upgrade(conn)
        conn.execute(text("INSERT INTO schema_version (version) VALUES (1)"))
        conn.execute(text(
            "INSERT INTO parts (id, kind, value, tolerance, qty, bin, voltage_v, dielectric) "
            "VALUES (1, 'capacitor', 4.7e-9, 0.05, 12, 'C-A9', 50, 'C0G')"
        ))  # fmt: skip
        conn.execute(text(
            "INSERT INTO parts (id, kind, qty, bin, name, hfe_min, hfe_max) "
            "VALUES (2, 'npn', 5, 'Q-1', 'npn-general', 100, 300)"
        ))  # fmt: skip
        when = dt.datetime(2024, 3, 1, 12, 0, 0)
        for pid, delta in [(1, 20), (1, -8), (2, 5)]:
            conn.execute(
                text("INSERT INTO ledger (part_id, delta, reason, created_at) VALUES (:p, :d, 'v1 era', :w)"),
                {"p": pid, "d": delta, "w": when},
            )
    engine.dispose()


def test_v1_store_is_upgraded_with_a_backup_and_data_intact(tmp_path):
    path = tmp_path / "bench.sqlite"
    _make_v1_store(path)
    v1_cols = _columns(create_engine(f"sqlite:///{path}"))
    assert "note" not in v1_cols["parts"] and "user_name" not in v1_cols["ledger"]

    st = open_store(resolve_db_url(str(path)))
    try:
        assert st.upgraded_from == 1
        backups = sorted(tmp_path.glob("bench.v1-backup-*.sqlite"))
        assert backups == [st.backup_path]
        # the backup is still a v1 store with the same rows
        con = sqlite3.connect(backups[0])
        assert con.execute("SELECT version FROM schema_version").fetchone() == (1,)
        assert con.execute("SELECT COUNT(*) FROM ledger").fetchone() == (3,)
        con.close()
        with st.engine.connect() as conn:
            assert conn.execute(text("SELECT version FROM schema_version")).scalar_one() == SCHEMA_VERSION
        with st.Session.begin() as s:
            cap, npn = get_part(s, 1), get_part(s, 2)
            assert (cap.kind, cap.value, cap.tolerance, cap.qty, cap.bin, cap.dielectric) == (
                "capacitor", 4.7e-9, 0.05, 12, "C-A9", "C0G")  # fmt: skip
            assert (npn.name, npn.hfe_min, npn.hfe_max, npn.qty) == ("npn-general", 100, 300, 5)
            assert cap.note is None
            assert [(e.delta, e.user) for e in cap.ledger] == [(20, None), (-8, None)]
            assert cap.ledger[0].created_at == dt.datetime(2024, 3, 1, 12, tzinfo=dt.timezone.utc)
            assert ledger_balance_ok(s) == []
    finally:
        st.close()
    # opening again does nothing more
    st2 = open_store(resolve_db_url(str(path)))
    assert st2.upgraded_from is None and st2.backup_path is None
    st2.close()
    assert len(list(tmp_path.glob("bench.v1-backup-*.sqlite"))) == 1


def test_store_newer_than_the_code_is_refused(tmp_path):
    path = tmp_path / "future.sqlite"
    open_store(resolve_db_url(str(path))).close()
    con = sqlite3.connect(path)
    con.execute("UPDATE schema_version SET version = ?", (SCHEMA_VERSION + 1,))
    con.commit()
    con.close()
    with pytest.raises(PickerError, match=f"schema version {SCHEMA_VERSION + 1}.*knows up to {SCHEMA_VERSION}"):
        open_store(resolve_db_url(str(path)))


def test_non_file_store_is_not_upgraded_without_permission(tmp_path):
    # A SQLite URI URL counts as "not a plain file" (like a server database): no backup is possible here.
    path = tmp_path / "uri.sqlite"
    _make_v1_store(path)
    url = f"sqlite:///file:{path}?uri=true"
    with pytest.raises(PickerError, match="stock upgrade --yes"):
        open_store(url)
    st = open_store(url, allow_upgrade=True)
    assert st.upgraded_from == 1 and st.backup_path is None
    st.close()


def test_foreign_database_is_refused(tmp_path):
    path = tmp_path / "other.sqlite"
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE invoices (id INTEGER)")
    con.commit()
    con.close()
    with pytest.raises(PickerError, match="not a picker store"):
        open_store(resolve_db_url(str(path)))


def test_file_that_is_not_a_database(tmp_path):
    path = tmp_path / "notes.sqlite"
    path.write_text("just some notes\n" * 50)
    with pytest.raises(PickerError, match="cannot open store"):
        open_store(resolve_db_url(str(path)))


def test_v2_store_is_upgraded_to_v3_with_catalog_and_order_tables(tmp_path, write_csv):
    from picker.store.catalog import import_catalog, load_suppliers
    from picker.store.migrate import create_fresh

    path = tmp_path / "v2.sqlite"
    engine = create_engine(f"sqlite:///{path}")
    with engine.begin() as conn:
        create_fresh(conn, target=2)
        conn.execute(text("INSERT INTO parts (id, kind, value, qty, bin, note) VALUES (1, 'resistor', 4700, 3, 'R-A1', 'kept')"))
        conn.execute(text(
            "INSERT INTO ledger (part_id, delta, reason, created_at, user_name) VALUES (1, 3, 'v2 era', :w, 'ann')"
        ), {"w": dt.datetime(2025, 5, 1)})  # fmt: skip
    assert "suppliers" not in inspect(engine).get_table_names()
    engine.dispose()
    st = open_store(resolve_db_url(str(path)))
    try:
        assert st.upgraded_from == 2 and st.backup_path.name.startswith("v2.v2-backup-")
        names = set(inspect(st.engine).get_table_names())
        assert {"suppliers", "catalog_items", "price_breaks", "orders", "order_lines"} <= names
        with st.Session.begin() as s:
            part = get_part(s, 1)
            assert (part.qty, part.note, part.ledger[0].user) == (3, "kept", "ann")
            assert ledger_balance_ok(s) == []
            import_catalog(s, write_csv("sku,kind,value,prices\nA,resistor,1k,1:0.05\n"), "Test Parts", 1.5)
        with st.Session.begin() as s:
            assert [(x.name, len(x.items)) for x in load_suppliers(s)] == [("Test Parts", 1)]
    finally:
        st.close()


@pytest.mark.parametrize(
    "sql",
    [
        "INSERT INTO suppliers (name, order_charge, imported_at) VALUES ('Neg', -1, '2025-01-01')",
        "INSERT INTO suppliers (name, order_charge, imported_at) VALUES ('Test Parts', 0, '2025-01-01')",  # name unique
        "INSERT INTO catalog_items (supplier_id, sku, kind, pack, min_order) VALUES (1, 'B', 'resistor', 0, 1)",
        "INSERT INTO catalog_items (supplier_id, sku, kind, pack, min_order) VALUES (1, 'A', 'resistor', 1, 1)",  # sku
        "INSERT INTO catalog_items (supplier_id, sku, kind, pack, min_order) VALUES (9, 'C', 'resistor', 1, 1)",  # FK
        "INSERT INTO price_breaks (item_id, min_qty, unit_price) VALUES (1, 5, 0)",
        "INSERT INTO orders (created_at, status, total_cost) VALUES ('2025-01-01', 'lost', 0)",
        "INSERT INTO order_lines (order_id, supplier, sku, kind, packs, qty, cost) VALUES (1, 'S', 'A', 'resistor', 1, 0, 1)",
    ],
)
def test_v3_constraints_are_enforced(store, sql):
    with store.engine.connect() as conn:
        conn.execute(text("INSERT INTO suppliers (id, name, order_charge, imported_at) VALUES (1, 'Test Parts', 0, '2025-01-01')"))
        conn.execute(text("INSERT INTO catalog_items (id, supplier_id, sku, kind, pack, min_order) VALUES (1, 1, 'A', 'resistor', 1, 1)"))
        conn.execute(text("INSERT INTO orders (id, created_at, status, total_cost) VALUES (1, '2025-01-01', 'incoming', 0)"))
        with pytest.raises(exc.IntegrityError):
            conn.execute(text(sql))


def test_v3_tables_match_the_models_in_nullability(store):
    got = _columns(store.engine)
    for name in ("suppliers", "catalog_items", "price_breaks", "orders", "order_lines"):
        table = Base.metadata.tables[name]
        expected = {c.name: c.nullable for c in table.columns if not c.primary_key}
        assert {c: n for c, n in got[name].items() if c in expected} == expected, name


def test_v3_store_is_upgraded_to_v4_with_build_and_last_find_tables(tmp_path):
    from picker.store.builds import list_builds, reserved_qty
    from picker.store.migrate import create_fresh

    path = tmp_path / "v3.sqlite"
    engine = create_engine(f"sqlite:///{path}")
    with engine.begin() as conn:
        create_fresh(conn, target=3)
        conn.execute(text("INSERT INTO parts (id, kind, value, qty, bin) VALUES (1, 'resistor', 4700, 3, 'R-A1')"))
        conn.execute(text(
            "INSERT INTO ledger (part_id, delta, reason, created_at, user_name) VALUES (1, 3, 'v3 era', :w, 'ann')"
        ), {"w": dt.datetime(2026, 1, 1)})  # fmt: skip
        conn.execute(text("INSERT INTO orders (id, created_at, status, total_cost) VALUES (1, '2026-01-01', 'incoming', 2.5)"))
    assert "builds" not in inspect(engine).get_table_names()
    engine.dispose()
    st = open_store(resolve_db_url(str(path)))
    try:
        assert st.upgraded_from == 3 and st.backup_path.name.startswith("v3.v3-backup-")
        names = set(inspect(st.engine).get_table_names())
        assert {"builds", "build_lines", "last_finds", "last_find_candidates"} <= names
        with st.Session.begin() as s:
            part = get_part(s, 1)
            assert (part.qty, part.ledger[0].user) == (3, "ann")
            assert ledger_balance_ok(s) == []
            assert list_builds(s) == [] and reserved_qty(s) == {}
            assert s.execute(text("SELECT total_cost FROM orders")).scalar_one() == 2.5
    finally:
        st.close()


@pytest.mark.parametrize(
    "sql",
    [
        "INSERT INTO builds (name, boards, status, design, created_at) VALUES ('b', 1, 'lost', '{}', '2026-01-01')",
        "INSERT INTO builds (name, boards, status, design, created_at) VALUES ('b', 0, 'reserved', '{}', '2026-01-01')",
        "INSERT INTO builds (name, boards, status, created_at) VALUES ('b', 1, 'reserved', '2026-01-01')",  # no design
        "INSERT INTO build_lines (build_id, part_id, designators, qty) VALUES (1, 1, 'R2', 0)",
        "INSERT INTO build_lines (build_id, part_id, designators, qty) VALUES (1, 1, 'R2', 1)",  # part twice
        "INSERT INTO build_lines (build_id, part_id, designators, qty) VALUES (9, 1, 'R1', 1)",  # FK build
        "INSERT INTO build_lines (build_id, part_id, designators, qty) VALUES (1, 9, 'R1', 1)",  # FK part
        "INSERT INTO last_find_candidates (find_id, rank, design) VALUES (1, 1, '{}')",  # rank unique
        "INSERT INTO last_find_candidates (find_id, rank, design) VALUES (1, 0, '{}')",
        "INSERT INTO last_find_candidates (find_id, rank, design) VALUES (9, 2, '{}')",  # FK find
    ],
)
def test_v4_constraints_are_enforced(store, sql):
    with store.engine.connect() as conn:
        conn.execute(text("INSERT INTO parts (id, kind, value, qty, bin) VALUES (1, 'resistor', 1000, 5, 'R-A1')"))
        conn.execute(text("INSERT INTO builds (id, name, boards, status, design, created_at) "
                          "VALUES (1, 'b', 1, 'reserved', '{}', '2026-01-01')"))
        conn.execute(text("INSERT INTO build_lines (build_id, part_id, designators, qty) VALUES (1, 1, 'R1', 1)"))
        conn.execute(text("INSERT INTO last_finds (id, created_at, spec) VALUES (1, '2026-01-01', '{}')"))
        conn.execute(text("INSERT INTO last_find_candidates (find_id, rank, design) VALUES (1, 1, '{}')"))
        with pytest.raises(exc.IntegrityError):
            conn.execute(text(sql))


def test_v4_tables_match_the_models_in_nullability(store):
    got = _columns(store.engine)
    for name in ("builds", "build_lines", "last_finds", "last_find_candidates"):
        table = Base.metadata.tables[name]
        expected = {c.name: c.nullable for c in table.columns if not c.primary_key}
        assert {c: n for c, n in got[name].items() if c in expected} == expected, name


def test_v4_status_check_matches_the_build_statuses(store):
    from picker.builds.model import STATUSES

    with store.engine.connect() as conn:
        for k, status in enumerate(STATUSES, 1):
            conn.execute(text("INSERT INTO builds (id, name, boards, status, design, created_at) "
                              "VALUES (:i, 'b', 1, :s, '{}', '2026-01-01')"), {"i": k, "s": status})
        assert conn.execute(text("SELECT COUNT(*) FROM builds")).scalar_one() == len(STATUSES)


# ---- v5: measurements of built boards (db/migrations/0005_measurements.py) ----------------


def test_v4_store_is_upgraded_to_v5_with_the_measurements_table(tmp_path):
    from picker.store.measurements import add_measurement, latest_per_board
    from picker.store.migrate import create_fresh

    path = tmp_path / "v4.sqlite"
    engine = create_engine(f"sqlite:///{path}")
    with engine.begin() as conn:
        create_fresh(conn, target=4)
        conn.execute(text("INSERT INTO builds (id, name, boards, status, design, created_at) "
                          "VALUES (1, 'b', 2, 'done', '{}', '2026-01-01')"))
    assert "measurements" not in inspect(engine).get_table_names()
    engine.dispose()
    st = open_store(resolve_db_url(str(path)))
    try:
        assert st.upgraded_from == 4 and st.backup_path.name.startswith("v4.v4-backup-")
        with st.Session.begin() as s:
            assert latest_per_board(s, 1) == []
            add_measurement(s, 1, 86.2e3, 2.1, board=2)
            add_measurement(s, 1, 86.4e3, None, board=2)
            assert [(m.board, m.freq_hz) for m in latest_per_board(s, 1)] == [(2, 86.4e3)]
    finally:
        st.close()


@pytest.mark.parametrize(
    "sql",
    [
        "INSERT INTO measurements (build_id, board, freq_hz, created_at) VALUES (1, 0, 1000, '2026-01-01')",
        "INSERT INTO measurements (build_id, board, freq_hz, created_at) VALUES (1, 1, 0, '2026-01-01')",
        "INSERT INTO measurements (build_id, board, freq_hz, amplitude_vpp, created_at) "
        "VALUES (1, 1, 1000, -1, '2026-01-01')",
        "INSERT INTO measurements (build_id, board, created_at) VALUES (1, 1, '2026-01-01')",  # no frequency
        "INSERT INTO measurements (build_id, board, freq_hz, created_at) VALUES (9, 1, 1000, '2026-01-01')",  # FK
    ],
)
def test_v5_constraints_are_enforced(store, sql):
    with store.engine.connect() as conn:
        conn.execute(text("INSERT INTO builds (id, name, boards, status, design, created_at) "
                          "VALUES (1, 'b', 1, 'reserved', '{}', '2026-01-01')"))
        conn.execute(text("INSERT INTO measurements (build_id, board, freq_hz, created_at) "
                          "VALUES (1, 1, 1000, '2026-01-01')"))
        with pytest.raises(exc.IntegrityError):
            conn.execute(text(sql))


def test_v5_tables_match_the_models_in_nullability(store):
    got = _columns(store.engine)
    table = Base.metadata.tables["measurements"]
    expected = {c.name: c.nullable for c in table.columns if not c.primary_key}
    assert {c: n for c, n in got["measurements"].items() if c in expected} == expected
