"""Supplier catalogs and orders in the store: CSV validation, import/replace, load, record, receive."""

import csv

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from picker.errors import PickerError
from picker.planning.catalog import CatalogItem, Purchase
from picker.store import LedgerEntry, Part, add_stock, get_part, ledger_balance_ok, parse_part, read_stock_csv
from picker.store.catalog import (
    format_prices,
    import_catalog,
    incoming_orders,
    list_orders,
    list_suppliers,
    load_suppliers,
    parse_prices,
    receive_order,
    record_order,
)
from picker.store.catalog_csv import CATALOG_COLUMNS, demo_data_path, demo_suppliers, read_catalog_csv
from picker.store.models import CatalogItemRow, PriceBreak

from store_helpers import DEMO_CSV, REPO

DATA = REPO / "data"


def _demo_list():
    with (DATA / "demo_suppliers.csv").open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def import_demo(store):
    with store.Session.begin() as s:
        for row in _demo_list():
            import_catalog(s, DATA / row["file"], row["supplier"], float(row["order_charge"]))


def by_sku(suppliers):
    return {(i.supplier, i.sku): i for sup in suppliers for i in sup.items}


# ---- the demo catalogs ---------------------------------------------------------------


def test_demo_catalog_round_trips_through_the_store(store):
    import_demo(store)
    with store.Session.begin() as s:
        stored = load_suppliers(s)
        listed = list_suppliers(s)
    assert stored == demo_suppliers()
    assert [(d["name"], d["order_charge"], d["items"]) for d in listed] == [
        (sup.name, sup.order_charge, len(sup.items)) for sup in stored
    ]
    # the demo list itself: three suppliers with different order charges
    assert sorted(float(r["order_charge"]) for r in _demo_list()) == [0.0, 3.5, 6.0]
    assert demo_data_path("demo_suppliers.csv").read_bytes() == (DATA / "demo_suppliers.csv").read_bytes()


def test_demo_values_follow_the_rkm_code_and_agree_across_spellings():
    items = by_sku(demo_suppliers())
    q = "Quillmoor Parts"  # writes values as RKM codes
    # IEC 60062 RKM code: the letter is the multiplier and the decimal point (4K7 = 4.7 kΩ,
    # 1M0 = 1 MΩ, 10R = 10 Ω, 4n7 = 4.7 nF; examples from memory of the standard).
    assert items[(q, "QM-R-4K7-J")].get("value") == 4.7e3
    assert items[(q, "QM-R-1M0-J")].get("value") == 1e6
    assert items[(q, "QM-R-10R-J")].get("value") == 10.0
    assert items[(q, "QM-C-4N7-J-C0G")].get("value") == 4.7e-9
    assert items[(q, "QM-C-1U0-K-FLM")].get("value") == 1e-6
    assert items[(q, "QM-L-4U7-J")].get("value") == 4.7e-6  # u on an inductor: µH
    assert items[(q, "QM-L-10M-J")].get("value") == 10e-3  # m on an inductor: mH
    # the other two write 4.7k / 4.7nF and 4700 / 4.7n: the same floats come out
    values = {}
    for (sup, _), it in items.items():
        if it.kind == "resistor" and it.get("tolerance") == 0.05:
            values.setdefault(sup, set()).add(it.get("value"))
    assert len(values) == 3 and values["Quillmoor Parts"] == values["Fennick Tarr Supply"] == values["Hollowmere Bulk"]
    assert 4700.0 in values["Hollowmere Bulk"] and len(values["Hollowmere Bulk"]) == 61  # E12, 10 Ω..1 MΩ


def test_demo_catalog_covers_the_ranges_asked_for():
    for sup in demo_suppliers():
        kinds = {}
        for it in sup.items:
            kinds.setdefault(it.kind, []).append(it)
        r = kinds["resistor"]
        assert {i.get("tolerance") for i in r} == {0.01, 0.05} and {i.get("power_w") for i in r} == {0.25}
        assert min(i.get("value") for i in r) == 10.0 and max(i.get("value") for i in r) == 1e6
        caps = kinds["capacitor"]
        c0g = [i for i in caps if i.get("dielectric") == "C0G"]
        assert min(i.get("value") for i in c0g) == 10e-12 and max(i.get("value") for i in c0g) == pytest.approx(10e-9)
        assert {i.get("voltage_v") for i in c0g} == {50.0}
        above = [i for i in caps if i.get("dielectric") in ("film", "X7R")]
        assert min(i.get("value") for i in above) > 10e-9 and max(i.get("value") for i in above) == pytest.approx(1e-6)
        elec = [i for i in caps if i.get("dielectric") == "electrolytic"]
        assert sorted(i.get("value") for i in elec) == pytest.approx([10e-6, 22e-6, 47e-6, 100e-6])
        assert {i.get("voltage_v") for i in elec} == {25.0}
        ind = sorted(kinds["inductor"], key=lambda i: i.get("value"))
        assert ind[0].get("value") == pytest.approx(1e-6) and ind[-1].get("value") == pytest.approx(10e-3)
        dcr = [i.get("dcr_ohm") for i in ind]
        assert dcr == sorted(dcr) and dcr[0] < dcr[-1]
        for it in sup.items:
            assert it.breaks[0][0] <= it.min_order and all(p > 0 for _, p in it.breaks)
    packs = {sup.name: {i.pack for i in sup.items if i.kind == "resistor"} for sup in demo_suppliers()}
    assert len({frozenset(p) for p in packs.values()}) == 3  # singles, tens, hundreds


def test_demo_npn_items_are_the_demo_stock_profiles():
    fields = ("hfe_min", "hfe_max", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vceo_v", "pd_w")
    stock = {r.spec.name: tuple(getattr(r.spec, f) for f in fields) for r in read_stock_csv(DEMO_CSV).rows
             if r.spec.kind == "npn"}  # fmt: skip
    seen = set()
    for it in (i for sup in demo_suppliers() for i in sup.items if i.kind == "npn"):
        assert tuple(it.get(f) for f in fields) == stock[it.get("name")], it.sku
        seen.add(it.get("name"))
    assert seen == set(stock)


# ---- price breaks and packs ---------------------------------------------------------------


def _one_item(write_csv, pack="10", min_order="25", prices="10:0.10 100:0.04 1000:0.02"):
    path = write_csv(f"sku,kind,value,tolerance,pack,min_order,prices\nX1,resistor,4k7,5%,{pack},{min_order},{prices}\n")
    [item] = read_catalog_csv(path, "Test Parts").items
    return item


def test_pack_and_price_break_arithmetic_by_hand(write_csv):
    item = _one_item(write_csv)
    assert (item.pack, item.min_order, item.breaks) == (10, 25, ((10, 0.10), (100, 0.04), (1000, 0.02)))
    # order_qty: at least min_order, rounded up to whole packs of 10
    assert [item.order_qty(n) for n in (0, -3, 1, 25, 30, 31, 95)] == [0, 0, 30, 30, 30, 40, 100]
    # unit price: the highest break reached, for all units (all-units break)
    assert [item.unit_price(n) for n in (30, 99, 100, 999, 1000, 5000)] == [0.10, 0.10, 0.04, 0.04, 0.02, 0.02]
    # cost: 30 x 0.10 = 3.00; 90 x 0.10 = 9.00 costs more than 100 x 0.04 = 4.00
    assert item.cost(0) == 0.0
    assert item.cost(30) == pytest.approx(3.00)
    assert item.cost(90) == pytest.approx(9.00)
    assert item.cost(100) == pytest.approx(4.00)
    assert item.cost(1000) == pytest.approx(20.00)


def test_pack_and_min_order_defaults(write_csv):
    item = _one_item(write_csv, pack="", min_order="", prices="1:0.5")
    assert (item.pack, item.min_order) == (1, 1) and item.order_qty(7) == 7 and item.cost(7) == 3.5
    item = _one_item(write_csv, pack="4", min_order="", prices="4:0.25 8:0.125")
    assert (item.pack, item.min_order) == (4, 4)  # min_order defaults to one pack
    assert [item.order_qty(n) for n in (1, 5, 8)] == [4, 8, 8] and item.cost(8) == 1.0


BREAKS = st.lists(
    st.tuples(st.integers(1, 10**9), st.floats(min_value=1e-12, max_value=1e6, allow_nan=False, allow_infinity=False)),
    min_size=1, max_size=8, unique_by=lambda b: b[0],
).map(lambda bs: tuple(sorted(bs)))  # fmt: skip


@settings(derandomize=True, max_examples=200, deadline=None)
@given(breaks=BREAKS, sep=st.sampled_from([" ", "  ", "\t", " \t "]))
def test_price_breaks_format_then_parse_is_the_identity(breaks, sep):
    text = format_prices(breaks)
    assert parse_prices(text) == breaks
    assert parse_prices(sep + text.replace(" ", sep) + sep) == breaks


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("", "no price breaks"),
        ("1-0.10", "is not QTY:PRICE"),
        ("1:0.10,100:0.04", "is not a plain number"),
        ("one:0.10", "is not a whole number"),
        ("0:0.10", "is below 1"),
        ("1:$0.10", "is not a plain number"),
        ("1:0", "is not above zero"),
        ("1:0.1 100:0.05 100:0.04", "rise strictly, found 100 then 100"),
        ("1:0.1 100:0.05 50:0.07", "rise strictly, found 100 then 50"),
    ],
)
def test_bad_price_strings(text, fragment):
    with pytest.raises(PickerError) as exc:
        parse_prices(text)
    msg = str(exc.value)
    assert fragment in msg and f"(got {text!r}; expected price breaks QTY:PRICE" in msg


# ---- validation of a catalog file --------------------------------------------------------

BAD = """sku,kind,value,tolerance,dielectric,voltage_v,pack,min_order,prices
R1,resistor,4k7,5%,,,10,,10:0.05 100:0.02
R1,resistor,1k,5%,,,10,,10:0.05
R2,resistor,1k,5%,,,10,,10-0.05
R3,resistor,1k,5%,,,10,,10:0.05 100:0.02 50:0.03
R4,resistor,1k,5%,,,10,,100:0.02
R5,resistor,1k,5%,,,0,,1:0.05
R6,diode,1k,5%,,,1,,1:0.05
R7,resistor,4x7,5%,,,1,,1:0.05
,resistor,1k,5%,,,1,,1:0.05
C1,capacitor,1n,5%,C0G,fifty,1,ten,1:0.05
C2,capacitor,1n,5%,C0G,50,1,,
"""

EXPECTED_BAD = [
    ("row 3, column sku:", "sku already used in row 2", "'R1'"),
    ("row 4, column prices:", "is not QTY:PRICE", "'10-0.05'"),
    ("row 5, column prices:", "rise strictly, found 100 then 50", "'10:0.05 100:0.02 50:0.03'"),
    ("row 6, column prices:", "first price break is for 100 units but min_order (default: pack) is 10", "'100:0.02'"),
    ("row 7, column pack:", "pack must be at least 1", "'0'"),
    ("row 8, column kind:", "unknown kind", "'diode'"),
    ("row 9, column value:", "not an RKM code letter", "'4x7'"),
    ("row 10, column sku:", "sku is required", "''"),
    ("row 11, column voltage_v:", "", "'fifty'"),
    ("row 11, column min_order:", "min_order is not a whole number", "'ten'"),
    ("row 12, column prices:", "prices is required", "''"),
]


def test_bad_catalog_names_every_row_and_column_and_writes_nothing(store, write_csv):
    good = write_csv("sku,kind,value,prices\nA,resistor,1k,1:0.05\nB,resistor,2k2,1:0.05\n", "good.csv")
    with store.Session.begin() as s:
        import_catalog(s, good, "Test Parts", 1.0)
    path = write_csv(BAD, "bad.csv")
    with pytest.raises(PickerError) as exc:
        with store.Session.begin() as s:
            import_catalog(s, path, "Test Parts", 9.0)
    lines = str(exc.value).splitlines()
    assert lines[0] == f"{path}: {len(EXPECTED_BAD)} problem(s) in 10 row(s); nothing imported"
    assert len(lines) - 1 == len(EXPECTED_BAD)
    for (prefix, fragment, got), line in zip(EXPECTED_BAD, lines[1:]):
        assert line.startswith(prefix) and fragment in line, line
        assert f"(got {got}; expected" in line, line
    with store.Session.begin() as s:
        [sup] = load_suppliers(s)
    assert (sup.order_charge, [i.sku for i in sup.items]) == (1.0, ["A", "B"])


def test_catalog_header_problems(write_csv):
    path = write_csv("sku,kind,value,qty,bin,prices,prices\nA,resistor,1k,3,R-1,1:0.1,1:0.1\n")
    with pytest.raises(PickerError) as exc:
        read_catalog_csv(path, "Test Parts")
    msg = str(exc.value)
    assert "row 1, column qty: unknown column (qty is a stock CSV column" in msg
    assert "row 1, column bin: unknown column" in msg and "row 1, column prices: column appears twice" in msg
    assert f"expected one of: {', '.join(CATALOG_COLUMNS)})" in msg
    with pytest.raises(PickerError, match="row 1, column prices: required column missing"):
        read_catalog_csv(write_csv("sku,kind,value\nA,resistor,1k\n"), "Test Parts")
    with pytest.raises(PickerError, match="file is empty .*sku, kind, prices"):
        read_catalog_csv(write_csv("\n\n"), "Test Parts")
    with pytest.raises(PickerError, match="file not found"):
        read_catalog_csv(write_csv("x").parent / "missing.csv", "Test Parts")


def test_part_columns_are_read_as_in_the_stock_csv(write_csv):
    path = write_csv(
        "sku,kind,value,tolerance,dielectric,voltage_v,dcr_ohm,isat_a,name,hfe_min,hfe_max,ft_hz,cob_f,prices\n"
        "C,capacitor,4n7,±5 %,cog,50V,,,,,,,,1:0.1\n"
        "L,inductor,1m,10%,,,4.3,134m,,,,,,1:0.3\n"
        "Q,npn,,,,,,,npn-rf,60,180,1G,2p,1:0.3\n"
        "X,resistor,1k,,,,0.5,,,,,,,1:0.1\n"
    )
    with pytest.raises(PickerError) as exc:
        read_catalog_csv(path, "Test Parts")
    [line] = str(exc.value).splitlines()[1:]
    assert line.startswith("row 5, column dcr_ohm: dcr_ohm does not apply to a resistor")
    items = read_catalog_csv(write_csv(path.read_text().rsplit("X,", 1)[0], "ok.csv"), "Test Parts").items
    cap, ind, npn = items
    assert (cap.get("value"), cap.get("tolerance"), cap.get("dielectric"), cap.get("voltage_v")) == (4.7e-9, 0.05, "C0G", 50.0)
    for kind, cells in (("capacitor", {"value": "4n7", "tolerance": "±5 %", "dielectric": "cog", "voltage_v": "50V"}),
                        ("inductor", {"value": "1m", "tolerance": "10%", "dcr_ohm": "4.3", "isat_a": "134m"})):  # fmt: skip
        spec, _, errors = parse_part({"kind": kind, "qty": "1", "bin": "B", **cells})
        item = cap if kind == "capacitor" else ind
        assert not errors and all(item.get(f) == getattr(spec, f) for f in item.attrs)
    assert (ind.get("value"), ind.get("isat_a")) == (1e-3, 0.134)  # 1m on an inductor is 1 mH
    assert (npn.get("name"), npn.get("ft_hz"), npn.get("cob_f"), npn.get("value")) == ("npn-rf", 1e9, 2e-12, None)


# ---- import, re-import ---------------------------------------------------------------------


def test_reimport_replaces_the_items_and_keeps_the_charge(store, write_csv):
    first = write_csv("sku,kind,value,prices\nA,resistor,1k,1:0.05\nB,resistor,2k2,1:0.05 10:0.03\n", "first.csv")
    second = write_csv("sku,kind,value,pack,prices\nB,resistor,2k2,10,10:0.02\nC,capacitor,1n,1,1:0.1\n", "second.csv")
    with store.Session.begin() as s:
        r1 = import_catalog(s, first, "Test Parts", 2.5)
    assert (r1["created"], r1["items"], r1["price_breaks"], r1["replaced"]) == (True, 2, 3, 0)
    with store.Session.begin() as s:
        r2 = import_catalog(s, second, " Test Parts ")
    assert (r2["created"], r2["items"], r2["price_breaks"], r2["replaced"], r2["order_charge"]) == (False, 2, 2, 2, 2.5)
    with store.Session.begin() as s:
        [sup] = load_suppliers(s)
        assert s.scalar(select(func.count(CatalogItemRow.id))) == 2
        assert s.scalar(select(func.count(PriceBreak.id))) == 2  # the old breaks went with their items
        [listed] = list_suppliers(s)
    assert [(i.sku, i.pack, i.breaks) for i in sup.items] == [("B", 10, ((10, 0.02),)), ("C", 1, ((1, 0.1),))]
    assert sup.order_charge == 2.5 and listed["source"] == "second.csv"
    with store.Session.begin() as s:
        assert import_catalog(s, second, "Test Parts", 0.0)["order_charge"] == 0.0
    with pytest.raises(PickerError, match="differs only in letter case from the stored supplier 'Test Parts'"):
        with store.Session.begin() as s:
            import_catalog(s, second, "test parts")


def test_unknown_supplier_names_the_stored_ones(store, write_csv):
    with store.Session.begin() as s:
        with pytest.raises(PickerError, match="no suppliers stored"):
            load_suppliers(s, ["Nobody"])
        assert load_suppliers(s) == ()
        import_catalog(s, write_csv("sku,kind,value,prices\nA,resistor,1k,1:0.05\n"), "Test Parts")
        with pytest.raises(PickerError, match=r"unknown supplier 'Nobody' \(stored: Test Parts\)"):
            load_suppliers(s, ["Test Parts", "Nobody"])
    with pytest.raises(PickerError, match="order charge"):
        with store.Session.begin() as s:
            import_catalog(s, write_csv("sku,kind,value,prices\nA,resistor,1k,1:0.05\n"), "Test Parts", -1.0)


# ---- orders: record and receive --------------------------------------------------------------

SMALL = """sku,kind,value,tolerance,power_w,voltage_v,dielectric,pack,prices
R47,resistor,4k7,5%,0.25,,,4,4:0.5 40:0.25
C47,capacitor,4n7,5%,,50,C0G,1,1:0.125
"""


def _spec(**cells):
    spec, _, errors = parse_part({"qty": "0", **cells})
    assert not errors, errors
    return spec


def _setup_order(store, write_csv, *, existing_cost="0.01"):
    """Stock: 4k7 5% 0.25 W in R-C9 (16 pieces) and in TRAY-1 (3); a catalog; an order of 8 R47 + 5 C47."""
    with store.Session.begin() as s:
        a, _ = add_stock(s, _spec(kind="resistor", value="4k7", tolerance="5%", power_w="0.25", bin="R-C9",
                                  unit_cost=existing_cost), 16, "add")  # fmt: skip
        add_stock(s, _spec(kind="resistor", value="4.7k", tolerance="5%", power_w="250m", bin="TRAY-1"), 3, "add")
        import_catalog(s, write_csv(SMALL), "Test Parts", 2.0)
        items = {i.sku: i for i in load_suppliers(s)[0].items}
        r, c = items["R47"], items["C47"]
        purchases = [Purchase(r, 2, 8, r.cost(8)), Purchase(c, 5, 5, c.cost(5))]
        order_id = record_order(s, purchases, "bench restock")
    return order_id, a.id


def test_record_then_receive_books_through_the_ledger(store, write_csv):
    order_id, r_c9 = _setup_order(store, write_csv)
    with store.Session.begin() as s:
        [o] = incoming_orders(s)
    assert (o["id"], o["status"], o["note"], o["received_at"]) == (order_id, "incoming", "bench restock", None)
    assert o["total_cost"] == pytest.approx(8 * 0.5 + 5 * 0.125 + 2.0)  # lines plus the order charge
    assert [(x["sku"], x["packs"], x["qty"], x["cost"], x["part_id"]) for x in o["lines"]] == [
        ("R47", 2, 8, 4.0, None), ("C47", 5, 5, 0.625, None)]  # fmt: skip
    with store.Session.begin() as s:
        booked = receive_order(s, order_id, "IN-1")
    with store.Session.begin() as s:
        (rid, rq), (cid, cq) = booked
        res, cap = get_part(s, rid), get_part(s, cid)
        # same spec as the R-C9 line but another unit cost: a new line in that bin (the fuller of the two)
        assert (rq, res.bin, res.qty, res.unit_cost, res.value) == (8, "R-C9", 8, 0.5, 4700.0) and rid != r_c9
        # no capacitor like it on hand: the default bin
        assert (cq, cap.bin, cap.qty, cap.unit_cost, cap.dielectric) == (5, "IN-1", 5, 0.125, "C0G")
        assert [e.reason for e in res.ledger] == [f"order {order_id}: Test Parts R47"]
        assert get_part(s, r_c9).qty == 16
        assert ledger_balance_ok(s) == []
        assert incoming_orders(s) == []
        [done] = list_orders(s, "received")
        assert done.received_at is not None and [x.part_id for x in done.lines] == [rid, cid]


def test_receive_merges_into_an_identical_part(store, write_csv):
    order_id, r_c9 = _setup_order(store, write_csv, existing_cost="0.5")
    with store.Session.begin() as s:
        booked = receive_order(s, order_id, "IN-1")
        assert booked[0] == (r_c9, 8) and get_part(s, r_c9).qty == 24
        assert [e.delta for e in get_part(s, r_c9).ledger] == [16, 8]
        assert ledger_balance_ok(s) == []


def test_double_receive_is_refused_and_changes_nothing(store, write_csv):
    order_id, _ = _setup_order(store, write_csv)
    with store.Session.begin() as s:
        receive_order(s, order_id, "IN-1")
    with store.Session.begin() as s:
        before = (s.scalar(select(func.count(LedgerEntry.id))), s.scalar(select(func.sum(Part.qty))))
    with pytest.raises(PickerError, match=f"order {order_id} was already received"):
        with store.Session.begin() as s:
            receive_order(s, order_id, "IN-1")
    with store.Session.begin() as s:
        assert (s.scalar(select(func.count(LedgerEntry.id))), s.scalar(select(func.sum(Part.qty)))) == before
        assert ledger_balance_ok(s) == []


def test_receive_without_a_bin_for_a_new_part_writes_nothing(store, write_csv):
    order_id, _ = _setup_order(store, write_csv)
    with store.Session.begin() as s:
        before = s.scalar(select(func.count(LedgerEntry.id)))
    with pytest.raises(PickerError) as exc:
        with store.Session.begin() as s:
            receive_order(s, order_id, None)
    msg = str(exc.value)
    assert "1 line(s) match no part" in msg and "line 2 (capacitor 4.7 nF, Test Parts C47)" in msg and "--bin" in msg
    with store.Session.begin() as s:
        assert s.scalar(select(func.count(LedgerEntry.id))) == before
        assert [o["id"] for o in incoming_orders(s)] == [order_id]
    with pytest.raises(PickerError, match="no order with id 99 \\(incoming: 1;"):
        with store.Session.begin() as s:
            receive_order(s, 99, "IN-1")


def test_record_order_refusals(store, write_csv):
    demo = {i.sku: i for sup in demo_suppliers() for i in sup.items}
    item = demo["QM-R-4K7-J"]
    with store.Session.begin() as s:
        with pytest.raises(PickerError, match="nothing to order"):
            record_order(s, [], None)
        # a demo supplier is not in the store: its charge must be given
        with pytest.raises(PickerError, match="order charge unknown for supplier 'Quillmoor Parts'"):
            record_order(s, [Purchase(item, 3, 3, item.cost(3))], None)
        oid = record_order(s, [Purchase(item, 3, 3, item.cost(3))], None, order_charges={"Quillmoor Parts": 1.25})
        [o] = incoming_orders(s)
        assert o["id"] == oid and o["total_cost"] == pytest.approx(item.cost(3) + 1.25)
        np_id = record_order(s, [Purchase(item, np.int64(2), np.int64(2), np.float64(item.cost(2)))], None,
                             order_charges={"Quillmoor Parts": 0.0})  # numpy scalars from a solver
        assert [x["qty"] for x in incoming_orders(s)[1]["lines"]] == [2] and np_id == oid + 1
        bulk = demo["HB/R/4k7/5"]  # packs of 100, at least 100
        with pytest.raises(ValueError, match="is not 1 packs of 100"):
            record_order(s, [Purchase(bulk, 1, 50, bulk.cost(50))], None, order_charges={"Hollowmere Bulk": 6.0})
        odd = CatalogItem("Hollowmere Bulk", "X", "resistor", {"value": 1e3}, 10, 30, ((10, 0.1),))
        with pytest.raises(ValueError, match="below the minimum order 30"):
            record_order(s, [Purchase(odd, 2, 20, 2.0)], None, order_charges={"Hollowmere Bulk": 6.0})
