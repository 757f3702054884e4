"""End to end: picker find on a temporary demo store; user mistakes are one-line errors."""

import json

import pytest

from picker.circuit.evaluate import check_design
from tests.cli.cli_helpers import assert_user_error
from tests.cli.conftest import Run
from tests.server_db import install_store_file


@pytest.fixture(scope="module")
def demo_store_file(tmp_path_factory):
    """The demo store, built once (``demo --json`` fills it without running the demo's find)."""
    path = tmp_path_factory.mktemp("demo") / "demo.sqlite"
    r = Run(path)("demo", "--json")
    assert r.exit_code == 0, r.output
    return path


@pytest.fixture
def demo_db(run, demo_store_file):
    install_store_file(demo_store_file, run.db)
    return run


def test_find_json_on_the_demo_store(demo_db):
    r = demo_db("find", "--freq", "455k", "--tol", "1%", "--topology", "colpitts-ce", "--npn", "npn-general",
                "--top", "2", "--mc", "300", "--json")
    assert r.exit_code == 0, r.stderr
    data = json.loads(r.stdout)
    assert 1 <= len(data) <= 2
    for k, c in enumerate(data, 1):
        assert c["rank"] == k and c["topology"] == "colpitts-ce"
        assert set(c) >= {"rank", "topology", "parts", "freq_hz", "freq_error", "margin", "margin_worst", "yield", "cost"}
        assert abs(c["freq_error"]) <= 0.01 and abs(c["freq_hz"] / 455e3 - 1 - c["freq_error"]) < 1e-12
        assert c["margin_worst"] >= 2.5 and 0 <= c["yield"] <= 1
        for ref, p in c["parts"].items():
            assert {"part_id", "value", "bin"} <= set(p)


def test_find_table_and_check_agree(demo_db):
    r = demo_db("find", "--freq", "455k", "--topology", "colpitts-ce", "--npn", "npn-general", "--top", "1",
                "--mc", "200")
    assert r.exit_code == 0, r.stderr
    assert "picker find: 455 kHz" in r.stdout and "yield over 200 Monte Carlo samples" in r.stdout
    # the same candidate by JSON, re-checked by check --part id:N
    j = json.loads(demo_db("find", "--freq", "455k", "--topology", "colpitts-ce", "--npn", "npn-general",
                           "--top", "1", "--mc", "0", "--json").stdout)[0]
    args = []
    for ref, p in j["parts"].items():
        if ref != "Q1":
            args += ["--part", f"{ref}=id:{p['part_id']}"]
    c = demo_db("check", "--topology", "colpitts-ce", *args, "--npn", f"id:{j['parts']['Q1']['part_id']}",
                "--style", "breadboard", "--temp", "0..50", "--json")
    assert c.exit_code == 0, c.stderr
    ev = json.loads(c.stdout)
    assert abs(ev["freq_hz"] / j["freq_hz"] - 1) < 1e-6
    assert ev["margin_worst"] >= j["margin_worst"] - 1e-9


def test_nothing_fits_says_why(demo_db):
    r = demo_db("find", "--freq", "90M", "--topology", "colpitts-ce", "--npn", "npn-general", "--mc", "0")
    assert r.exit_code == 1
    assert "no tank in tolerance" in r.stdout and "picker reorder" in r.stdout


@pytest.mark.parametrize("args,fragments", [
    (["--freq", "455k", "--tol", "80%"], ["--tol", "between 0 and 50%"]),
    (["--freq", "455k", "--weights", "speed=1"], ["--weights", "unknown weight 'speed'", "error, margin, cost"]),
    (["--freq", "455k", "--ie", "3m..1m"], ["--ie", "low end"]),
    (["--freq", "455k", "--topology", "pierce"], ["--topology", "colpitts-ce"]),
    (["--freq", "455k", "--npn", "npn-nothing"], ["--npn npn-nothing", "npn-general"]),
    (["--freq", "455k", "--boards", "0"], ["--boards", "at least 1"]),
    (["--freq", "fast"], ["--freq"]),
])
def test_user_mistakes(demo_db, args, fragments):
    assert_user_error(demo_db("find", *args), *fragments)


def test_no_store(run):
    assert_user_error(run("find", "--freq", "455k"), "no store at")
