"""``picker demo``: throwaway store by default, explicit --db kept, data summary."""

import csv
import json

from cli_helpers import DEMO_CSV, assert_user_error
from tests.server_db import store_exists

from picker.cli.demo import demo_csv_path, run_demo


def _csv_rows():
    with DEMO_CSV.open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_demo_data_is_shipped_inside_the_package():
    # picker/data is the packaged view of data/ (a symlink in the source tree, a copy in wheels)
    assert demo_csv_path().read_bytes() == DEMO_CSV.read_bytes()


def test_demo_data_scenario_is_in_bounds():
    rows = _csv_rows()
    assert 250 <= len(rows) + 1 <= 400
    kinds = {r["kind"] for r in rows}
    assert kinds == {"resistor", "capacitor", "inductor", "npn"}
    assert all(r["name"].startswith("npn-") for r in rows if r["kind"] == "npn")
    assert all(0 <= int(r["qty"]) <= 100 for r in rows)


def test_run_demo_returns_a_summary_matching_the_csv():
    rows = _csv_rows()
    result = run_demo(None)
    assert result.throwaway
    assert result.import_summary["rows"] == len(rows)
    assert result.import_summary["pieces"] == sum(int(r["qty"]) for r in rows)
    by_kind = {k.kind: k for k in result.kinds}
    for kind in ("resistor", "capacitor", "inductor", "npn"):
        assert by_kind[kind].pieces == sum(int(r["qty"]) for r in rows if r["kind"] == kind)
    assert (by_kind["resistor"].value_min, by_kind["resistor"].value_max) == (10.0, 1e6)
    assert (by_kind["inductor"].value_min, by_kind["inductor"].value_max) == (1e-6, 1e-2)
    assert by_kind["npn"].value_min is None and "npn-rf" in by_kind["npn"].names
    assert sum(b.pieces for b in result.bins) == result.import_summary["pieces"]


def test_demo_command_default_is_throwaway(run, db):
    r = run("demo", db=False)
    assert r.exit_code == 0, r.stderr
    assert "throwaway store" in r.stdout and "Stock per kind" in r.stdout and "R-A1..R-A12" in r.stdout
    assert not store_exists(db)


def test_demo_json_and_explicit_store(run, db):
    r = run("demo", "--json")  # global --db given by the fixture: the demo store is kept there
    assert r.exit_code == 0, r.stderr
    data = json.loads(r.stdout)
    assert data["throwaway"] is False and store_exists(db)
    assert {k["kind"] for k in data["kinds"]} == {"resistor", "capacitor", "inductor", "npn"}
    listed = json.loads(run("stock", "list", "--json").stdout)
    assert sum(d["qty"] for d in listed) == data["import_summary"]["pieces"]
    # a second demo into the same (now full) store is refused
    assert_user_error(run("demo"), "holds", "parts")


def test_demo_local_db_option(run, tmp_path):
    target = tmp_path / "kept.sqlite"
    r = run("demo", "--db", target, db=False)
    assert r.exit_code == 0 and target.exists()


def test_demo_checks_a_design_built_from_demo_parts():
    """`picker demo` ends with a check of the demo design whose every part is a store part."""
    from picker.circuit.evaluate import check_design
    from picker.cli.demo import demo_store
    from picker.cli.demo_design import DEMO_VALUES, demo_design

    with demo_store(None) as (store, _):
        with store.Session.begin() as session:
            design = demo_design(session)
    assert set(DEMO_VALUES) <= set(design.parts)
    assert all(info.part_id is not None for info in design.parts.values())
    assert design.parts["L1"].dcr_ohm  # the store's inductor brings its DC resistance
    ev = check_design(design, (0.0, 50.0))
    assert ev.starts and ev.margin_worst > 2.0
    assert abs(ev.freq_hz / 77e3 - 1) < 0.05
