"""``picker reorder`` end to end (CliRunner) on a small store and a small imported catalog.

The store is the small drawer of tests/search/test_find.py without its 47 nF, so the
known common-emitter Colpitts design needs exactly one bought part.
"""

import csv
import json

import pytest

from cli_helpers import assert_user_error
from picker.store import ledger_balance_ok, open_store, resolve_db_url
from tests.search.test_find import _target

STOCK = """kind,value,qty,bin,tolerance,unit_cost,voltage_v,power_w,dielectric,dcr_ohm
resistor,100,20,R-1,5%,0.1,,0.25,,
resistor,1k,20,R-2,5%,0.1,,0.25,,
resistor,2k2,20,R-3,5%,0.1,,0.25,,
resistor,4k7,20,R-4,5%,0.1,,0.25,,
resistor,10k,20,R-5,5%,0.1,,0.25,,
resistor,33k,20,R-6,5%,0.1,,0.25,,
resistor,100k,20,R-7,5%,0.1,,0.25,,
capacitor,1n,20,C-1,5%,0.1,63,,film,
capacitor,4n7,20,C-2,5%,0.1,63,,film,
capacitor,10n,20,C-3,5%,0.1,63,,film,
capacitor,100n,20,C-5,5%,0.1,63,,film,
capacitor,1u,20,C-6,5%,0.1,63,,film,
inductor,470u,20,L-1,5%,0.1,,,,5
inductor,1m,20,L-2,5%,0.1,,,,5
"""
NPN = "\nnpn,,20,Q-1,,0.2,,,,,npn-generic,100,300\n"
CATALOG = """sku,kind,value,tolerance,voltage_v,dielectric,dcr_ohm,pack,min_order,prices
AR-47N,capacitor,47n,5%,63,film,,1,1,1:0.30 10:0.20
AR-4N7,capacitor,4n7,5%,63,C0G,,1,1,1:0.50
AR-1M,inductor,1m,5%,,,5,1,1,1:2.00
"""


@pytest.fixture(scope="module")
def f_known():
    return _target()


@pytest.fixture
def stocked(run, tmp_path):
    stock = tmp_path / "stock.csv"
    header, body = STOCK.split("\n", 1)
    stock.write_text(header + ",name,hfe_min,hfe_max\n" + body.replace("\n", ",,,\n") + NPN.strip() + "\n")
    assert run("stock", "import", stock).exit_code == 0
    cat = tmp_path / "alder.csv"
    cat.write_text(CATALOG)
    r = run("catalog", "import", cat, "--supplier", "Alder Row", "--order-charge", "1.50")
    assert r.exit_code == 0, r.stderr
    return run


def _target_arg(f_hz, boards=1):
    return f"{f_hz:.6g}:1%:{boards}"


def test_json_plan_buys_the_one_missing_part_and_commit_then_receive_books_it(stocked, tmp_path, f_known, db):
    out = tmp_path / "list.csv"
    r = stocked("reorder", "--target", _target_arg(f_known), "--topology", "colpitts-ce", "--min-margin", "1.5",
                "--json", "--out", out, "--commit")
    assert r.exit_code == 0, r.stderr
    plan = json.loads(r.stdout)
    assert [(p["supplier"], p["sku"], p["qty"]) for p in plan["purchases"]] == [("Alder Row", "AR-47N", 1)]
    assert plan["total_cost"] == pytest.approx(0.30 + 1.50)  # the part and the supplier's order charge
    assert plan["charges"] == {"Alder Row": 1.5}
    b = plan["builds"][0]
    assert abs(b["freq_hz"] / f_known - 1) <= 0.01 and b["margin_worst"] >= 1.5
    c2 = [p for p in b["parts"].values() if p["bought"]]
    assert len(c2) == 1 and c2[0]["value"] == pytest.approx(47e-9)
    assert plan["solver"]["gap"] <= 1e-9 and plan["solver"]["candidate_designs"] >= 1
    rows = list(csv.DictReader(out.open()))
    assert [(x["supplier"], x["sku"], x["qty"], x["cost"]) for x in rows] == [("Alder Row", "AR-47N", "1", "0.30")]
    # the order is incoming, then received into stock through the ledger
    order_id = plan["order_id"]
    inc = json.loads(stocked("stock", "incoming", "--json").stdout)
    assert [o["id"] for o in inc] == [order_id]
    r = stocked("stock", "receive", order_id, "--bin", "C-4", "--json")
    assert r.exit_code == 0, r.stderr
    listed = json.loads(stocked("stock", "list", "--kind", "capacitor", "--json").stdout)
    got = [p for p in listed if p["value"] == pytest.approx(47e-9)]
    assert len(got) == 1 and got[0]["qty"] == 1 and got[0]["bin"] == "C-4"
    store = open_store(resolve_db_url(str(db)), create=False)
    with store.Session() as s:
        assert ledger_balance_ok(s) == []
    store.close()
    # with the part now on hand nothing needs buying
    r = stocked("reorder", "--target", _target_arg(f_known), "--topology", "colpitts-ce", "--min-margin", "1.5", "--json")
    assert json.loads(r.stdout)["purchases"] == [] and json.loads(r.stdout)["total_cost"] == 0.0


def test_text_plan_shows_the_order_and_the_sources(stocked, f_known):
    r = stocked("reorder", "--target", _target_arg(f_known), "--topology", "colpitts-ce", "--min-margin", "1.5")
    assert r.exit_code == 0, r.stderr
    text = r.stdout
    assert "order from Alder Row (order charge 1.50)" in text and "AR-47N" in text
    assert "total 1.80" in text and "proven optimal" in text
    assert "caution:" in text and "local radio rules" in text


def test_unreachable_target_exits_1_and_names_the_build(stocked):
    r = stocked("reorder", "--target", "60M:1%:1", "--topology", "colpitts-ce")
    assert r.exit_code == 1
    assert "build 1 (60 MHz" in r.stdout


@pytest.mark.parametrize("args,fragments", [
    (["--target", "455k"], ["--target", "FREQ:TOL:BOARDS", "'455k'"]),
    (["--target", "455k:1%:0"], ["board count", "'0'"]),
    (["--target", "455k:90%:2"], ["tolerance", "'90%'"]),
    (["--target", "4x5k:1%:2"], ["--target", "4x5k"]),
    (["--target", "455k:1%:2", "--catalog", "Nobody"], ["unknown supplier 'Nobody'", "Alder Row"]),
    (["--target", "455k:1%:2", "--out", "list.txt"], ["--out", ".csv"]),
])
def test_user_mistakes_are_one_line(stocked, args, fragments):
    assert_user_error(stocked("reorder", *args), *fragments)


def test_no_catalog_imported_says_how_to_get_one(run, tmp_path):
    stock = tmp_path / "s.csv"
    stock.write_text("kind,value,qty,bin\nresistor,1k,5,R-1\n")
    assert run("stock", "import", stock).exit_code == 0
    assert_user_error(run("reorder", "--target", "455k:1%:1"), "no supplier catalogs", "picker catalog import",
                      "--catalog demo")
