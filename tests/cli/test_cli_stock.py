"""``picker stock ...`` end to end through the CLI (CliRunner, tmp_path stores)."""

import csv
import io
import json
import subprocess
import sys
from collections import Counter

import pytest
from rich.console import Console

from picker import units
from picker.cli.env import Env
from picker.store import SCHEMA_VERSION, resolve_db_url
from cli_helpers import DEMO_CSV, assert_user_error, make_v1_store
from tests.server_db import store_exists, store_snapshot


def list_json(run, *args):
    result = run("stock", "list", "--json", *args)
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def without_ids(items):
    return sorted((json.dumps({k: v for k, v in d.items() if k != "id"}, sort_keys=True) for d in items))


def test_round_trip_import_export_import(run, tmp_path):
    assert run("stock", "import", DEMO_CSV).exit_code == 0
    out = tmp_path / "exported.csv"
    result = run("stock", "export", out)
    assert result.exit_code == 0 and "exported 292 parts" in result.stdout
    other = run.__class__(tmp_path / "other.sqlite")
    assert other("stock", "import", out).exit_code == 0
    assert without_ids(list_json(other)) == without_ids(list_json(run))


def test_demo_store_quantities_match_the_csv(run):
    result = run("stock", "import", DEMO_CSV)
    assert result.exit_code == 0, result.stderr
    items = list_json(run)
    with DEMO_CSV.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    # rows equal in every cell but qty are one part (exact restock copies in the demo file)
    distinct = {tuple(v for k, v in r.items() if k != "qty") for r in rows}
    assert len(items) == len(distinct) == len(rows) - 4
    expected = Counter()
    for r in rows:
        ident = r["name"] if r["kind"] == "npn" else units.parse_value(r["value"], r["kind"])
        expected[(r["kind"], r["bin"], ident)] += int(r["qty"])
    got = Counter()
    for d in items:
        got[(d["kind"], d["bin"], d["name"] if d["kind"] == "npn" else d["value"])] += d["qty"]
    assert got == expected
    assert sum(got.values()) == sum(int(r["qty"]) for r in rows)
    keys = {"id", "kind", "value", "tolerance", "qty", "bin", "unit_cost"}
    assert all(keys <= d.keys() for d in items)
    cap = next(d for d in items if d["kind"] == "capacitor")
    assert {"voltage_v", "dielectric"} <= cap.keys() and "dcr_ohm" not in cap


def test_bad_file_lists_every_error_and_leaves_the_store_unchanged(run, db, tmp_path):
    assert run("stock", "import", DEMO_CSV).exit_code == 0
    before = store_snapshot(db)
    bad = tmp_path / "bad.csv"
    bad.write_text(
        "kind,value,qty,bin,tolerance,dcr_ohm,name,hfe_min,hfe_max\n"
        "resistor,4k7,10,R-A1,5%,,,,\n"
        "resistor,4x7,10,R-A2,5%,,,,\n"
        "capacitor,4.7uH,5,C-A1,5%,,,,\n"
        "inductor,10u,-3,L-A1,10%,,,,\n"
        "npn,,5,Q-1,,,,100,300\n"
        "npn,100,5,Q-2,,,npn-rf,60,180\n"
        "resistor,1k,5,R-A3,five,,,,\n"
        "resistor,1k,5,R-A4,5%,0.5,,,\n"
    )
    result = run("stock", "import", bad)
    assert_user_error(result, "nothing imported")
    lines = result.stderr.splitlines()
    for prefix in ["row 3, column value", "row 4, column value", "row 5, column qty", "row 6, column name",
                   "row 7, column value", "row 8, column tolerance", "row 9, column dcr_ohm"]:  # fmt: skip
        assert any(line.startswith(f"error: {prefix}: ") for line in lines), (prefix, result.stderr)
    assert len(lines) == 8 and all(line.startswith("error: ") for line in lines)
    assert store_snapshot(db) == before
    # dry run of a good file writes nothing either
    good = tmp_path / "good.csv"
    good.write_text("kind,value,qty,bin\nresistor,1k,5,R-Z1\n")
    dry = run("stock", "import", good, "--dry-run")
    assert dry.exit_code == 0 and "would import 1 rows" in dry.stdout and "1 new parts" in dry.stdout
    assert store_snapshot(db) == before


def test_unknown_column_is_an_error(run, db, tmp_path):
    bad = tmp_path / "colour.csv"
    bad.write_text("kind,value,qty,bin,colour\nresistor,1k,3,R-A1,brown\n")
    result = run("stock", "import", bad)
    assert_user_error(result, "row 1, column colour: unknown column (expected one of: kind, value, qty, bin")
    assert not store_exists(db)


def test_dry_run_on_a_missing_store_creates_nothing(run, db, tmp_path):
    good = tmp_path / "good.csv"
    good.write_text("kind,value,qty,bin\nresistor,1k,5,R-A1\nresistor,1k,2,R-A1\n")
    result = run("stock", "import", good, "--dry-run")
    assert result.exit_code == 0 and "1 rows merged" in result.stdout and "Rows that merge" in result.stdout
    assert not store_exists(db)


def test_list_filters_and_natural_bin_order(run):
    for b in ["A10", "A2", "B1", "A1"]:
        assert run("stock", "add", "resistor", "1k", "--qty", 1, "--bin", b).exit_code == 0
    assert run("stock", "add", "resistor", "100k", "--qty", 1, "--bin", "A3").exit_code == 0
    assert run("stock", "add", "capacitor", "100n", "--qty", 2, "--bin", "A3", "--dielectric", "x7r").exit_code == 0
    assert [d["bin"] for d in list_json(run, "--kind", "resistor")] == ["A1", "A2", "A3", "A10", "B1"]
    assert [d["value"] for d in list_json(run, "--kind", "resistor", "--min", "2k", "--max", "1M")] == [1e5]
    assert [d["kind"] for d in list_json(run, "--bin", "A3")] == ["resistor", "capacitor"]
    table = run("stock", "list", "--kind", "capacitor")
    assert table.exit_code == 0 and "100 nF" in table.stdout and "100n" in table.stdout and "X7R" in table.stdout


def test_add_adjust_history(run):
    r = run("stock", "add", "npn", "npn-rf", "--qty", 10, "--bin", "Q-3", "--hfe-min", 60, "--hfe-max", 180,
            "--set", "ft_hz=1G", "--set", "cob_f=2p")  # fmt: skip
    assert r.exit_code == 0 and "added part 1" in r.stdout
    r = run("stock", "add", "npn", "npn-rf", "--qty", 5, "--bin", "Q-3", "--hfe-min", 60, "--hfe-max", 180,
            "--set", "ft_hz=1000M", "--set", "cob_f=2pF")  # fmt: skip
    assert r.exit_code == 0 and "topped up part 1" in r.stdout and "15 on hand" in r.stdout
    r = run("stock", "adjust", 1, -4, "--reason", "built a Colpitts")
    assert r.exit_code == 0 and "15 -> 11" in r.stdout
    r = run("stock", "adjust", 1, "+2", "--reason", "found two")
    assert r.exit_code == 0 and "11 -> 13" in r.stdout
    hist = json.loads(run("stock", "history", 1, "--json").stdout)
    assert [(h["delta"], h["balance"], h["reason"]) for h in hist] == [
        (10, 10, "add"), (5, 15, "add"), (-4, 11, "built a Colpitts"), (2, 13, "found two")]  # fmt: skip
    assert all(h["user"] and h["created_at"].endswith("+00:00") for h in hist)
    [npn] = list_json(run, "--kind", "npn")
    assert (npn["qty"], npn["ft_hz"], npn["cob_f"], npn["value"]) == (13, 1e9, 2e-12, None)


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["stock", "adjust", 999, -1, "--reason", "x"], ["no part with id 999"]),
        (["stock", "history", 42], ["no part with id 42"]),
        (["stock", "adjust", 1, -50, "--reason", "x"], ["part 1", "4.7 kΩ", "R-A1", "5 on hand", "below zero"]),
        (["stock", "adjust", 1, "0", "--reason", "x"], ["bad DELTA"]),
        (["stock", "adjust", 1, "lots", "--reason", "x"], ["bad DELTA"]),
        (["stock", "add", "resistor", "4x7", "--qty", 1, "--bin", "B"], ["VALUE: ", "4x7"]),
        (["stock", "add", "capacitor", "4.7uH", "--qty", 1, "--bin", "B"], ["unit H does not fit"]),
        (["stock", "add", "transistor", "x", "--qty", 1, "--bin", "B"], ["unknown kind", "resistor, capacitor"]),
        (["stock", "add", "resistor", "1k", "--qty", "-2", "--bin", "B"], ["--qty: ", "whole number"]),
        (["stock", "add", "resistor", "1k", "--qty", 1, "--bin", "B", "--isat", "1"], ["--isat: ", "inductor"]),
        (["stock", "add", "npn", "npn-x", "--qty", 1, "--bin", "Q"], ["--hfe-min: ", "--hfe-max: "]),
        (["stock", "add", "npn", "npn-x", "--qty", 1, "--bin", "Q", "--hfe-min", 1, "--hfe-max", 2, "--set", "colour=red"],
         ["--set: "]),
        (["stock", "list", "--kind", "diode"], ["unknown kind"]),
        (["stock", "list", "--min", "1k"], ["--min/--max need --kind"]),
        (["stock", "list", "--kind", "resistor", "--min", "1uF"], ["--min: ", "unit F does not fit"]),
        (["stock", "import", "no-such-file.csv"], ["file not found: no-such-file.csv"]),
        (["stock", "export", "/no/such/dir/x.csv"], ["does not exist"]),
    ],
)
def test_user_errors_are_one_line_messages(run, args, fragments):
    assert run("stock", "add", "resistor", "4k7", "--qty", 5, "--bin", "R-A1").exit_code == 0
    assert_user_error(run(*args), *fragments)


def test_bad_store_urls(run, tmp_path):
    assert_user_error(run("--db", "nosuchdb://host/x", "stock", "list", db=False), "unknown database type")
    assert_user_error(run("--db", str(tmp_path / "nodir" / "s.sqlite"), "stock", "list", db=False), "does not exist")
    notdb = tmp_path / "notes.txt"
    notdb.write_text("hello\n" * 100)
    assert_user_error(run("--db", str(notdb), "stock", "list", db=False), "cannot open store")


def test_picker_db_env_var_is_used(tmp_path, monkeypatch):
    from typer.testing import CliRunner

    from picker.cli.app import app

    target = tmp_path / "from-env.sqlite"
    monkeypatch.setenv("PICKER_DB", str(target))
    r = CliRunner().invoke(app, ["stock", "add", "resistor", "1k", "--qty", "1", "--bin", "R"])
    assert r.exit_code == 0 and target.exists()


@pytest.mark.sqlite_only
def test_json_stdout_stays_clean_when_the_store_is_upgraded(run, db):
    make_v1_store(db)
    result = run("stock", "list", "--json")
    assert result.exit_code == 0
    assert [d["id"] for d in json.loads(result.stdout)] == [1, 2]
    assert "upgraded store" in result.stderr and "v1-backup-" in result.stderr


def test_tests_can_replace_the_env(tmp_path):
    from typer.testing import CliRunner

    from picker.cli.app import app

    out, err = io.StringIO(), io.StringIO()
    env = Env(out=Console(file=out, width=200), err=Console(file=err, width=200),
              db_url=resolve_db_url(str(tmp_path / "env.sqlite")))  # fmt: skip
    r = CliRunner().invoke(app, ["stock", "adjust", "1", "-1", "--reason", "x"], obj=env)
    assert r.exit_code == 2 and err.getvalue().startswith("error: no part with id 1")
    r = CliRunner().invoke(app, ["stock", "add", "inductor", "10u", "--qty", "3", "--bin", "L-B1"], obj=env)
    assert r.exit_code == 0 and "added part 1 (inductor 10 µH in bin L-B1, 3 on hand)" in out.getvalue()


def test_console_script_entry_prints_no_traceback(tmp_path):
    """The real entry point in a subprocess: error line on stderr, exit code 2."""
    cmd = [sys.executable, "-c", "from picker.cli.app import main; main()",
           "--db", str(tmp_path / "s.sqlite"), "stock", "adjust", "7", "-1", "--reason", "x"]  # fmt: skip
    p = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
    assert p.returncode == 2
    assert p.stderr.startswith("error: no part with id 7") and "Traceback" not in p.stderr
    assert p.stdout == ""


def test_export_to_stdout_matches_the_file(run, tmp_path):
    assert run("stock", "add", "capacitor", "4n7", "--qty", 3, "--bin", "C-A9", "--note", "a, b").exit_code == 0
    out = tmp_path / "x.csv"
    assert run("stock", "export", out).exit_code == 0
    r = run("stock", "export", "-")
    assert r.exit_code == 0 and r.stdout == out.read_text()
    assert r.stdout.splitlines()[1].startswith('capacitor,4.7n,3,C-A9,') and r.stdout.rstrip().endswith('"a, b"')


def test_server_style_store_needs_explicit_upgrade(run, tmp_path):
    path = tmp_path / "shared.sqlite"
    make_v1_store(path)
    url = f"sqlite:///file:{path}?uri=true"  # not a plain file path: treated like a server database
    assert_user_error(run("--db", url, "stock", "list", db=False), "schema version 1", "stock upgrade --yes")
    r = run("--db", url, "stock", "upgrade", "--yes", db=False)
    assert r.exit_code == 0 and f"schema v{SCHEMA_VERSION}" in r.stdout
    assert run("--db", url, "stock", "list", "--json", db=False).exit_code == 0


def test_postgresql_store_needs_explicit_upgrade(run, server_db):
    """A real server store at schema v1: refused until 'stock upgrade --yes', then upgraded in place."""
    make_v1_store(server_db)
    assert_user_error(run("--db", server_db, "stock", "list", db=False), "schema version 1", "stock upgrade --yes")
    r = run("--db", server_db, "stock", "upgrade", "--yes", db=False)
    assert r.exit_code == 0 and f"schema v{SCHEMA_VERSION}" in r.stdout, r.stderr
    listed = json.loads(run("--db", server_db, "stock", "list", "--json", db=False).stdout)
    assert [(d["id"], d["qty"], d["note"]) for d in listed] == [(1, 3, None), (2, 2, None)]
    history = json.loads(run("--db", server_db, "stock", "history", "1", "--json", db=False).stdout)
    assert [(h["delta"], h["user"]) for h in history] == [(3, None)]  # v1 rows: nobody knows who
