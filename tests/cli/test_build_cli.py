"""``picker build`` end to end (CliRunner) on a small store: find -> build new --from-find -> show -> done ->
undo, with the stock quantities after each step, and the user mistakes as one-line errors.

The store is the small drawer of tests/search/test_find.py; the search targets the frequency of its
known common-emitter Colpitts, so ``find`` has candidates (one search for the whole module).
"""

import json
import shutil

import pytest

from cli_helpers import assert_user_error
from conftest import Run
from picker.store import ledger_balance_ok, open_store, resolve_db_url
from tests.search.test_find import _target
from tests.server_db import install_store_file, store_exists

STOCK = """kind,value,qty,bin,tolerance,unit_cost,voltage_v,power_w,dielectric,dcr_ohm,name,hfe_min,hfe_max
resistor,100,20,R-1,5%,0.1,,0.25,,,,,
resistor,1k,20,R-2,5%,0.1,,0.25,,,,,
resistor,2k2,20,R-3,5%,0.1,,0.25,,,,,
resistor,4k7,20,R-4,5%,0.1,,0.25,,,,,
resistor,10k,20,R-5,5%,0.1,,0.25,,,,,
resistor,33k,20,R-6,5%,0.1,,0.25,,,,,
resistor,100k,20,R-7,5%,0.1,,0.25,,,,,
capacitor,1n,20,C-1,5%,0.1,63,,film,,,,
capacitor,4n7,20,C-2,5%,0.1,63,,film,,,,
capacitor,10n,20,C-3,5%,0.1,63,,film,,,,
capacitor,47n,20,C-4,5%,0.1,63,,film,,,,
capacitor,100n,20,C-5,5%,0.1,63,,film,,,,
capacitor,1u,20,C-6,5%,0.1,63,,film,,,,
inductor,470u,20,L-1,5%,0.1,,,,5,,,
inductor,1m,20,L-2,5%,0.1,,,,5,,,
npn,,20,Q-1,,0.2,,,,,npn-generic,100,300
"""
FIND = ("--tol", "1%", "--topology", "colpitts-ce", "--min-margin", "1.5", "--top", "2", "--mc", "0")


@pytest.fixture(scope="module")
def found_files(tmp_path_factory):
    """(store with the stock only, the same store after one find, the find's JSON)."""
    d = tmp_path_factory.mktemp("builds")
    (d / "stock.csv").write_text(STOCK)
    plain = d / "plain.sqlite"
    r = Run(plain)("stock", "import", d / "stock.csv")
    assert r.exit_code == 0, r.stderr
    after = d / "found.sqlite"
    shutil.copyfile(plain, after)
    r = Run(after)("find", "--freq", f"{_target():.6g}", *FIND, "--json")
    assert r.exit_code == 0, r.stderr
    cands = json.loads(r.stdout)
    assert cands
    return plain, after, cands


@pytest.fixture
def found(run, found_files):
    install_store_file(found_files[1], run.db)
    return run, found_files[2]


def _qty(run) -> dict:
    return {p["id"]: p["qty"] for p in json.loads(run("stock", "list", "--json").stdout)}


def _demand(parts: dict, boards: int) -> dict:
    out = {}
    for p in parts.values():
        for key in ("part_id", "part2_id"):
            if p.get(key) is not None:
                out[p[key]] = out.get(p[key], 0) + boards
    return out


def test_find_then_reserve_show_done_undo(found, tmp_path):
    run, cands = found
    start = _qty(run)
    r = run("build", "new", "--from-find", "1", "--boards", "2", "--name", "bench tone", "--json")
    assert r.exit_code == 0, r.stderr
    b = json.loads(r.stdout)
    assert (b["id"], b["name"], b["boards"], b["status"]) == (1, "bench tone", 2, "reserved")
    # per designator: the part find chose, quantity for all boards
    assert b["parts"] == {ref: {"part_id": p["part_id"], "qty": 2} for ref, p in cands[0]["parts"].items()}
    assert b["design"]["predicted"]["freq_hz"] == pytest.approx(cands[0]["freq_hz"])
    assert b["design"]["target"]["tol"] == 0.01
    demand = _demand(cands[0]["parts"], 2)
    assert {ln["part_id"]: ln["qty"] for ln in b["lines"]} == demand
    assert _qty(run) == start  # reserved, still on hand

    s = run("build", "show", "1", "--json", "--design", tmp_path / "saved.json")
    assert s.exit_code == 0, s.stderr
    shown = json.loads(s.stdout)
    assert shown["status"] == "reserved" and shown["parts"] == b["parts"]
    assert json.loads((tmp_path / "saved.json").read_text()) == b["design"]
    listed = json.loads(run("build", "list", "--json").stdout)
    assert [(x["id"], x["status"], x["boards"]) for x in listed] == [(1, "reserved", 2)]

    d = run("build", "done", "1", "--json")
    assert d.exit_code == 0, d.stderr
    assert json.loads(d.stdout)["status"] == "done" and json.loads(d.stdout)["done_at"]
    after = _qty(run)
    assert after == {i: q - demand.get(i, 0) for i, q in start.items()}
    hist = json.loads(run("stock", "history", str(next(iter(demand))), "--json").stdout)
    assert hist[-1]["reason"] == "build 1 done (bench tone, 2 board(s))"

    u = run("build", "undo", "1")
    assert u.exit_code == 0, u.stderr
    assert "build 1 'bench tone' undone" in u.stdout
    assert _qty(run) == start
    assert json.loads(run("build", "show", "1", "--json").stdout)["status"] == "undone"
    st = open_store(resolve_db_url(str(run.db)))
    with st.Session.begin() as sess:
        assert ledger_balance_ok(sess) == []
    st.close()


def test_saved_design_file_makes_a_build_and_the_table_output(found, tmp_path):
    run, cands = found
    assert run("build", "new", "--from-find", "1", "--boards", "1", "--name", "first").exit_code == 0
    assert run("build", "show", "1", "--design", tmp_path / "d.json").exit_code == 0
    r = run("build", "new", "--design", tmp_path / "d.json", "--boards", "3", "--name", "filed")
    assert r.exit_code == 0, r.stderr
    assert "reserved build 2" in r.stdout and "bench" not in r.stdout
    assert cands[0]["parts"]["L1"]["bin"] in r.stdout
    t = run("build", "list")
    assert t.exit_code == 0 and "filed" in t.stdout and "2 build(s)" in t.stdout
    c = run("build", "cancel", "2")
    assert c.exit_code == 0 and "cancelled" in c.stdout
    if len(cands) > 1:
        r2 = run("build", "new", "--from-find", "2", "--boards", "1", "--name", "second best", "--json")
        assert r2.exit_code == 0, r2.stderr
        assert {k: v["part_id"] for k, v in json.loads(r2.stdout)["parts"].items()} == \
            {k: v["part_id"] for k, v in cands[1]["parts"].items()}


def test_reservation_short_of_stock_names_the_part(found):
    run, cands = found
    demand = _demand(cands[0]["parts"], 1)
    pid = max(demand, key=demand.get)  # the part used at the most positions
    uses = demand[pid]
    boards = 20 // uses + 1  # 20 of each on hand
    part = next(p for p in json.loads(run("stock", "list", "--json").stdout) if p["id"] == pid)
    r = run("build", "new", "--from-find", "1", "--boards", boards, "--name", "too many")
    assert_user_error(r, f"part {pid} (", f"in bin {part['bin']}", f"needs {boards * uses}, 20 available",
                      f"short by {boards * uses - 20}")
    assert len(r.stderr.strip().splitlines()) == 1
    # a second build fits only in what the first left available
    assert run("build", "new", "--from-find", "1", "--boards", 20 // uses, "--name", "most").exit_code == 0
    r = run("build", "new", "--from-find", "1", "--boards", "1", "--name", "one more")
    assert_user_error(r, f"part {pid} (", f"reserved by other builds")
    assert json.loads(run("build", "list", "--json").stdout)[-1]["name"] == "most"


def test_unknown_id_and_wrong_status(found):
    run, _ = found
    assert_user_error(run("build", "show", "7"), "no build with id 7 (there are no builds yet")
    assert run("build", "new", "--from-find", "1", "--boards", "1", "--name", "x").exit_code == 0
    assert_user_error(run("build", "done", "7", "--json"), "no build with id 7 (ids run 1..1")
    assert_user_error(run("build", "undo", "1"), "build 1 (x) is reserved: only a done build can be undone")
    assert run("build", "done", "1").exit_code == 0
    assert_user_error(run("build", "cancel", "1"), "build 1 (x) is done: only a reserved build can be cancelled")
    assert_user_error(run("build", "done", "1"), "is done: only a reserved build can be done")


def test_from_find_without_a_saved_find_and_rank_out_of_range(run, found_files):
    install_store_file(found_files[0], run.db)  # stock imported, never searched
    assert_user_error(run("build", "new", "--from-find", "1", "--boards", "1", "--name", "x"),
                      "--from-find: this store has no saved find; run 'picker find ...' first")
    install_store_file(found_files[1], run.db)
    n = len(found_files[2])
    assert_user_error(run("build", "new", "--from-find", n + 1, "--boards", "1", "--name", "x"),
                      f"--from-find {n + 1}: the last find", f"has {n} candidate(s); expected a rank from 1 to {n}")
    for bad in ("0", "-1", "first"):
        assert_user_error(run("build", "new", "--from-find", bad, "--boards", "1", "--name", "x"), "--from-find")


def test_argument_mistakes(found, tmp_path):
    run, _ = found
    assert_user_error(run("build", "new", "--boards", "1", "--name", "x"),
                      "exactly one of --from-find RANK or --design FILE")
    assert_user_error(run("build", "new", "--from-find", "1", "--design", tmp_path / "d.json", "--boards", "1",
                          "--name", "x"), "exactly one of")
    assert_user_error(run("build", "new", "--from-find", "1", "--boards", "0", "--name", "x"), "--boards")
    assert_user_error(run("build", "new", "--from-find", "1", "--boards", "1", "--name", " "), "--name")
    assert_user_error(run("build", "list", "--status", "lost"), "unknown build status 'lost'")


@pytest.mark.parametrize("edit, fragment", [
    (lambda d: d["values"].update(C1="4n7"), "values.C1: got '4n7'; expected a number"),
    (lambda d: d["parts"]["C2"].update(part_id=999), "parts.C2.part_id: no part with id 999 in the store"),
    (lambda d: d["parts"].update(R9={"part_id": 1}), "parts.R9: not a position of colpitts-ce"),
    (lambda d: d.update(topology="pierce"), "topology: got 'pierce'"),
    (lambda d: d.pop("format"), "not a saved design"),
    (lambda d: d["parts"].update(L1={"part_id": 1}), "parts.L1.part_id: part 1 is a resistor, L1 takes a inductor"),
])  # fmt: skip
def test_bad_design_file_names_the_file_and_the_field(found, tmp_path, edit, fragment):
    run, _ = found
    assert run("build", "new", "--from-find", "1", "--boards", "1", "--name", "x").exit_code == 0
    good = tmp_path / "good.json"
    assert run("build", "show", "1", "--design", good).exit_code == 0
    data = json.loads(good.read_text())
    edit(data)
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(data))
    assert_user_error(run("build", "new", "--design", bad, "--boards", "1", "--name", "y"),
                      f"--design {bad}: {fragment}")
    assert len(json.loads(run("build", "list", "--json").stdout)) == 1


def test_design_file_that_is_missing_or_not_json(found, tmp_path):
    run, _ = found
    missing = tmp_path / "nope.json"
    assert_user_error(run("build", "new", "--design", missing, "--boards", "1", "--name", "x"),
                      f"--design {missing}: cannot read")
    junk = tmp_path / "junk.json"
    junk.write_text("{\"format\": ")
    assert_user_error(run("build", "new", "--design", junk, "--boards", "1", "--name", "x"),
                      f"--design {junk}: not JSON (line 1")


def test_build_commands_need_a_store(run):
    assert_user_error(run("build", "list"), "no store at")
    assert not store_exists(run.db)


def test_design_file_with_nan(found, tmp_path):
    run, _ = found
    f = tmp_path / "nan.json"
    f.write_text('{"format": "picker-design/1", "vcc_v": NaN}')
    assert_user_error(run("build", "new", "--design", f, "--boards", "1", "--name", "x"),
                      f"--design {f}: NaN is not a number a saved design may hold")


def test_adjusting_a_reserved_part_below_its_reservation_keeps_the_count_and_names_the_builds(found):
    """The count follows what is really in the drawer; the note says which reserved builds are
    now short, and ``build done`` refuses the short one with nothing consumed."""
    run, cands = found
    pid = cands[0]["parts"]["L1"]["part_id"]
    assert run("build", "new", "--from-find", "1", "--boards", "4", "--name", "club kits").exit_code == 0
    before = _qty(run)
    r = run("stock", "adjust", str(pid), "-18", "--reason", "used for a repair")
    assert r.exit_code == 0, r.stderr
    assert _qty(run)[pid] == before[pid] - 18 == 2
    assert f"part {pid} now has 2 on hand but reserved builds hold 4: 1 (club kits, 4)" in r.stderr
    assert "restock 2" in r.stderr
    ok = run("stock", "adjust", str(pid), "+2", "--reason", "restocked")
    assert ok.exit_code == 0 and "reserved builds hold" not in ok.stderr  # 4 on hand covers the 4 held
    run("stock", "adjust", str(pid), "-1", "--reason", "dropped one")
    d = run("build", "done", "1")
    assert_user_error(d, "below zero")
    assert _qty(run) == {**before, pid: 3}
