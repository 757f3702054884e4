"""``picker catalog ...``, ``picker stock incoming`` and ``picker stock receive`` end to end (CliRunner)."""

import csv
import json
from pathlib import Path

import pytest

from cli_helpers import DEMO_CSV, assert_user_error
from tests.server_db import store_exists, store_snapshot
from picker.planning.catalog import Purchase
from picker.store import ledger_balance_ok, open_store, resolve_db_url
from picker.store.catalog import load_suppliers, record_order

DATA = Path(DEMO_CSV).parent


def _demo_list():
    with (DATA / "demo_suppliers.csv").open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def import_demo(run):
    for row in _demo_list():
        r = run("catalog", "import", DATA / row["file"], "--supplier", row["supplier"], "--order-charge", row["order_charge"])
        assert r.exit_code == 0, r.stderr


def json_of(run, *args):
    r = run(*args, "--json")
    assert r.exit_code == 0, r.stderr
    return json.loads(r.stdout)


def test_import_prints_one_line_and_list_shows_the_suppliers(run):
    r = run("catalog", "import", DATA / "demo_catalog_fennick.csv", "--supplier", "Fennick Tarr Supply", "--order-charge", "3.50")
    assert r.exit_code == 0, r.stderr
    lines = r.stdout.splitlines()
    assert len(lines) == 1 and lines[0].startswith("imported 276 items (828 price breaks) from ")
    assert "new supplier Fennick Tarr Supply, order charge 3.50" in lines[0]
    r = run("catalog", "import", DATA / "demo_catalog_fennick.csv", "--supplier", "Fennick Tarr Supply")
    assert r.exit_code == 0 and "replaced 276 items of Fennick Tarr Supply, order charge 3.50" in r.stdout
    import_demo(run)
    listed = json_of(run, "catalog", "list")
    assert [(d["name"], d["item_count"], d["order_charge"]) for d in listed] == [
        ("Fennick Tarr Supply", 276, 3.5), ("Hollowmere Bulk", 324, 6.0), ("Quillmoor Parts", 302, 0.0)]  # fmt: skip
    assert all("items" not in d for d in listed)
    table = run("catalog", "list")
    assert table.exit_code == 0 and "Hollowmere Bulk" in table.stdout and "6.00" in table.stdout


def test_list_items_json_and_table(run):
    import_demo(run)
    [sup] = json_of(run, "catalog", "list", "--items", "--supplier", "Quillmoor Parts")
    assert sup["name"] == "Quillmoor Parts" and sup["item_count"] == len(sup["items"]) == 302
    item = next(i for i in sup["items"] if i["sku"] == "QM-C-4N7-J-C0G")
    assert (item["kind"], item["value"], item["tolerance"], item["voltage_v"], item["dielectric"]) == (
        "capacitor", 4.7e-9, 0.05, 50.0, "C0G")  # fmt: skip
    assert "dcr_ohm" not in item and item["pack"] == 1 and item["breaks"][0]["min_qty"] == 1
    table = run("catalog", "list", "--items", "--supplier", "Hollowmere Bulk")
    assert table.exit_code == 0 and "Quillmoor" not in table.stdout
    hb = next(i for i in json_of(run, "catalog", "list", "--items")[1]["items"] if i["sku"] == "HB/R/4k7/5")
    assert "Hollowmere Bulk" in table.stdout and "4.7 kΩ" in table.stdout
    assert f"100:{hb['breaks'][0]['unit_price']}" in table.stdout  # one break per line


def test_bad_catalog_is_reported_by_row_and_column_and_writes_nothing(run, db, tmp_path):
    nokind = tmp_path / "nokind.csv"
    nokind.write_text("sku,value,prices\nA,1k,1:0.05\n")
    assert_user_error(run("catalog", "import", nokind, "--supplier", "X"), "row 2, column kind: kind is required")
    assert not store_exists(db)  # the file is checked before the store is opened
    import_demo(run)
    before = store_snapshot(db)
    bad = tmp_path / "bad.csv"
    bad.write_text(
        "sku,kind,value,pack,prices\n"
        "A,resistor,1k,10,10:0.05\n"
        "A,resistor,2k2,10,10:0.05\n"
        "B,resistor,1k,0,1:0.05\n"
        "C,resistor,1k,10,100:0.01\n"
        "D,resistor,1k,1,1:0.05 1:0.04\n"
    )
    r = run("catalog", "import", bad, "--supplier", "Quillmoor Parts")
    assert_user_error(r, "nothing imported")
    lines = r.stderr.splitlines()
    assert len(lines) == 5 and all(line.startswith("error: ") for line in lines)
    for prefix in ("row 3, column sku: ", "row 4, column pack: ", "row 5, column prices: ", "row 6, column prices: "):
        assert any(line.startswith(f"error: {prefix}") for line in lines), (prefix, r.stderr)
    assert store_snapshot(db) == before


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["catalog", "import", "no-such.csv", "--supplier", "X"], ["file not found: no-such.csv"]),
        (["catalog", "import", DATA / "demo_catalog_fennick.csv", "--supplier", "X", "--order-charge", "-2"],
         ["--order-charge: bad order charge (got '-2'"]),
        (["catalog", "import", DATA / "demo_catalog_fennick.csv", "--supplier", " "], ["supplier name is blank"]),
        (["catalog", "list", "--supplier", "Nobody"], ["unknown supplier 'Nobody'", "no suppliers stored"]),
        (["stock", "receive", "7"], ["no order with id 7", "no orders are incoming"]),
    ],
)
def test_user_errors(run, args, fragments):
    assert_user_error(run(*args), *fragments)


def _record(db, picks, note="for the 7 MHz VFO"):
    """Record an order through the store API (the reorder planner's job): picks = [(supplier, sku, packs)]."""
    st = open_store(resolve_db_url(str(db)))
    try:
        with st.Session.begin() as s:
            items = {(i.supplier, i.sku): i for sup in load_suppliers(s) for i in sup.items}
            purchases = []
            for sup, sku, packs in picks:
                it = items[(sup, sku)]
                qty = packs * it.pack
                purchases.append(Purchase(it, packs, qty, it.cost(qty)))
            return record_order(s, purchases, note)
    finally:
        st.close()


def test_incoming_then_receive_books_into_stock(run, db):
    assert run("stock", "import", DEMO_CSV).exit_code == 0
    import_demo(run)
    assert run("stock", "incoming").stdout.strip() == "no incoming orders"
    oid = _record(db, [("Quillmoor Parts", "QM-Q-RF", 4), ("Hollowmere Bulk", "HB/R/4k7/5", 1),
                       ("Fennick Tarr Supply", "FT10007", 2)])  # fmt: skip
    [order] = json_of(run, "stock", "incoming")
    assert (order["id"], order["status"], order["note"]) == (oid, "incoming", "for the 7 MHz VFO")
    assert [(x["sku"], x["packs"], x["qty"]) for x in order["lines"]] == [
        ("QM-Q-RF", 4, 4), ("HB/R/4k7/5", 1, 100), ("FT10007", 2, 20)]  # fmt: skip
    lines_cost = sum(x["cost"] for x in order["lines"])
    assert order["total_cost"] == pytest.approx(lines_cost + 0.0 + 6.0 + 3.5)
    table = run("stock", "incoming")
    assert table.exit_code == 0 and "QM-Q-RF" in table.stdout and "1 incoming order(s)" in table.stdout

    before = {d["id"]: d["qty"] for d in json_of(run, "stock", "list")}
    got = json_of(run, "stock", "receive", oid, "--bin", "IN-1")
    assert got["order_id"] == oid and [p["qty"] for p in got["parts"]] == [4, 100, 20]
    rf, res, r10 = got["parts"]
    # every line matches a demo stock line (same kind, value, tolerance, ratings): it goes to that bin
    assert (rf["kind"], rf["name"], rf["bin"]) == ("npn", "npn-rf", "Q-3")
    assert (res["value"], res["bin"]) == (4700.0, "R-C9") and (r10["value"], r10["bin"]) == (10.0, "R-A1")
    after = {d["id"]: d for d in json_of(run, "stock", "list")}
    for p in got["parts"]:
        assert after[p["part_id"]]["qty"] == before.get(p["part_id"], 0) + p["qty"] == p["on_hand"]
        assert after[p["part_id"]]["unit_cost"] is not None
    history = json_of(run, "stock", "history", rf["part_id"])
    assert history[-1]["reason"] == f"order {oid}: Quillmoor Parts QM-Q-RF" and history[-1]["delta"] == 4
    assert run("stock", "incoming").stdout.strip() == "no incoming orders"
    st = open_store(resolve_db_url(str(db)))
    with st.Session.begin() as s:
        assert ledger_balance_ok(s) == []
    st.close()

    again = run("stock", "receive", oid)
    assert_user_error(again, f"order {oid} was already received")


def test_receive_table_output_and_missing_bin(run, db):
    import_demo(run)
    oid = _record(db, [("Quillmoor Parts", "QM-C-4N7-J-C0G", 5)])
    assert_user_error(run("stock", "receive", oid), "match no part in the store", "give --bin BIN")
    r = run("stock", "receive", oid, "--bin", "C-NEW")
    assert r.exit_code == 0, r.stderr
    assert r.stdout.startswith(f"received order {oid}: 1 line(s), 5 piece(s) booked")
    assert "C-NEW" in r.stdout and "4.7 nF" in r.stdout
