"""``picker stock migrate --to URL``: a populated SQLite store copied onto another database.

The source is always a SQLite file holding the demo stock, the demo supplier catalogs,
two orders (one received), builds in every status and a saved last find.  The target
is a new SQLite file, and (when ``PICKER_TEST_SERVER_URL`` is set, as in the CI's
PostgreSQL pass) a new PostgreSQL database.  Afterwards every listing is identical on
both sides (``stock list --json`` and the rest), the ledger is the same row for row, new
rows on the target continue after the copied ids, and a second migrate is refused.
"""

import getpass
import json

import pytest
from sqlalchemy import select, text

from cli_helpers import DEMO_CSV, assert_user_error
from conftest import Run
from picker.store import LedgerEntry, add_stock, ledger_balance_ok, open_store, resolve_db_url
from picker.store.builds import cancel_build, done_build, list_builds, new_build, save_last_find, undo_build
from test_catalog_cli import _record, import_demo
from tests.server_db import create_database, drop_database, server_url, store_exists, store_snapshot
from tests.store.test_builds import STOCK, _spec, design

LISTINGS = [
    ("stock", "list", "--json"),
    ("catalog", "list", "--items", "--json"),
    ("stock", "incoming", "--json"),
    ("build", "list", "--json"),
]


@pytest.fixture(scope="module")
def source(tmp_path_factory):
    """(a populated SQLite store's path, the part ids of the build stock by its test_builds bin)."""
    d = tmp_path_factory.mktemp("migrate")
    path = d / "source.sqlite"
    run = Run(path)
    assert run("stock", "import", DEMO_CSV).exit_code == 0
    import_demo(run)
    first = _record(path, [("Quillmoor Parts", _first_sku(run, "Quillmoor Parts"), 2)], "received one")
    _record(path, [("Hollowmere Bulk", "HB/R/4k7/5", 1)], "still incoming")
    r = run("stock", "receive", first, "--bin", "NEW-1")
    assert r.exit_code == 0, r.stderr
    assert run("--user", "alice", "stock", "adjust", "3", "-2", "--reason", "used two").exit_code == 0
    st = open_store(resolve_db_url(str(path)), user="bob")
    try:
        with st.Session.begin() as s:
            ids = {}
            for kind, value, qty, bin in STOCK + [("npn", "npn-test", 5, "Q-1")]:
                part, _ = add_stock(s, _spec(kind, value, "B" + bin), qty, "add")
                ids[bin] = part.id
        dsg = design(ids)
        with st.Session.begin() as s:  # one build in every status (7 x 100 nF: 2 per board)
            done_build(s, new_build(s, dsg, 1, "board set done").id)
            rec = new_build(s, dsg, 1, "board set undone")
            done_build(s, rec.id)
            undo_build(s, rec.id)
            cancel_build(s, new_build(s, dsg, 1, "board set cancelled").id)
            new_build(s, dsg, 1, "board set reserved")
            save_last_find(s, {"freq_hz": 20e3, "tol": 0.01}, [dsg, design(ids, RE1=None)])
    finally:
        st.close()
    return path, ids


def _first_sku(run, supplier):
    r = run("catalog", "list", "--items", "--supplier", supplier, "--json")
    assert r.exit_code == 0, r.stderr
    return json.loads(r.stdout)[0]["items"][0]["sku"]


@pytest.fixture(params=["sqlite", "server"])
def target(request, tmp_path):
    if request.param == "sqlite":
        yield str(tmp_path / "target.sqlite")
        return
    url = create_database("picker_mig")  # skips without PICKER_TEST_SERVER_URL
    yield url
    drop_database(url)


def _ledger(url):
    st = open_store(resolve_db_url(url), create=False)
    try:
        with st.Session.begin() as s:
            rows = [(e.id, e.part_id, e.delta, e.reason, e.created_at, e.user)
                    for e in s.scalars(select(LedgerEntry).order_by(LedgerEntry.id))]
            return rows, ledger_balance_ok(s)
    finally:
        st.close()


def _out(run, *args):
    r = run(*args)
    assert r.exit_code == 0, r.stderr
    return r.stdout


def test_migrated_store_lists_identically_with_the_same_ledger(source, target):
    source, build_ids = source
    src, dst = Run(source), Run(target)
    before = store_snapshot(source)
    r = src("stock", "migrate", "--to", target, "--json")
    assert r.exit_code == 0, r.stderr
    report = json.loads(r.stdout)
    assert store_snapshot(source) == before  # the source is only read
    assert report["ledger_balanced"] is True and report["rows"]["parts"] > 290
    assert report["rows"]["builds"] == 4 and report["rows"]["last_find_candidates"] == 2
    assert report["rows"]["orders"] == 2 and report["rows"]["price_breaks"] > 0

    for args in LISTINGS:
        assert json.loads(_out(dst, *args)) == json.loads(_out(src, *args)), args
    parts = json.loads(_out(src, "stock", "list", "--json"))
    assert sum(p["qty"] for p in parts) == report["pieces"]
    for p in parts[::7]:
        args = ("stock", "history", p["id"], "--json")
        assert _out(dst, *args) == _out(src, *args)
    src_ledger, dst_ledger = _ledger(str(source)), _ledger(target)
    assert dst_ledger == src_ledger and src_ledger[1] == []
    assert {row[5] for row in dst_ledger[0]} >= {"alice", "bob"}
    assert report["rows"]["ledger"] == len(src_ledger[0])

    # the target is a working store: new ids continue after the copied ones
    top = max(p["id"] for p in parts)
    out = _out(dst, "--user", "carol", "stock", "add", "resistor", "6k8", "--qty", "5", "--bin", "NEW-9")
    assert out.startswith(f"added part {top + 1} ")
    st = open_store(resolve_db_url(target), create=False)
    try:
        with st.Session.begin() as s:
            last = max(b.id for b in list_builds(s))
            rec = new_build(s, design(build_ids), 1, "on the target")
            assert rec.id == last + 1
    finally:
        st.close()

    # a second migrate into the now full target is refused and changes nothing
    snap = store_snapshot(target)
    assert_user_error(src("stock", "migrate", "--to", target), "is not empty", "parts")
    assert store_snapshot(target) == snap


def test_migrate_refuses_the_same_store_and_a_missing_source(tmp_path):
    path = tmp_path / "s.sqlite"
    run = Run(path)
    assert_user_error(run("stock", "migrate", "--to", tmp_path / "t.sqlite"), "no store at", "nothing to migrate")
    assert not (tmp_path / "t.sqlite").exists()
    assert run("stock", "add", "resistor", "1k", "--qty", "2", "--bin", "R-1").exit_code == 0
    assert_user_error(run("stock", "migrate", "--to", path), "is the store being migrated")
    assert_user_error(run("stock", "migrate", "--to", tmp_path / "nodir" / "t.sqlite"), "does not exist")


def test_a_row_the_server_refuses_leaves_the_target_empty(tmp_path):
    """SQLite does not enforce VARCHAR lengths; PostgreSQL does: the copy stops and nothing is written."""
    url = create_database("picker_mig")  # skips without a server
    try:
        path = tmp_path / "s.sqlite"
        run = Run(path)
        assert run("stock", "import", DEMO_CSV).exit_code == 0
        st = open_store(resolve_db_url(str(path)))
        try:
            with st.engine.begin() as conn:
                conn.execute(text("UPDATE parts SET bin = :b WHERE id = 5"), {"b": "X" * 80})
        finally:
            st.close()
        assert_user_error(run("stock", "migrate", "--to", url), "refused a row of table parts", "nothing was written")
        assert not store_exists(url)  # not even the schema: it was made in the same transaction
    finally:
        drop_database(url)


def test_user_option_is_recorded_in_the_ledger(run, db):
    """``--user`` names who made a change (either back end); without it, the OS user."""
    assert run("--user", "alice", "stock", "add", "resistor", "4k7", "--qty", "10", "--bin", "R-1").exit_code == 0
    assert run("stock", "adjust", "1", "-3", "--reason", "built one").exit_code == 0
    assert run("--user", " bob ", "stock", "adjust", "1", "+1", "--reason", "one back").exit_code == 0
    rows = json.loads(_out(run, "stock", "history", "1", "--json"))
    assert [(r["delta"], r["user"]) for r in rows] == [(10, "alice"), (-3, getpass.getuser()), (1, "bob")]
    for bad in ("", "   ", "x" * 65, "two\nlines"):
        assert_user_error(run("--user", bad, "stock", "list"), "--user: expected one line of 1..64 characters")
    assert [r["user"] for r in json.loads(_out(run, "stock", "history", "1", "--json"))] == ["alice", getpass.getuser(), "bob"]
    # builds, their consumption and orders record the store's user too
    st = open_store(resolve_db_url(str(db)), user="carol")
    try:
        with st.Session.begin() as s:
            ids = {}
            for kind, value, qty, bin in STOCK + [("npn", "npn-test", 5, "Q-1")]:
                ids[bin] = add_stock(s, _spec(kind, value, bin), qty, "add")[0].id
        with st.Session.begin() as s:
            rec = new_build(s, design(ids), 1, "carol's")
            done_build(s, rec.id)
        assert rec.user == "carol"
        with st.Session.begin() as s:
            took = s.scalars(select(LedgerEntry).where(LedgerEntry.reason.like(f"build {rec.id} done%"))).all()
        assert took and {e.user for e in took} == {"carol"}
    finally:
        st.close()
    assert server_url() is None or str(db).startswith("postgresql")
