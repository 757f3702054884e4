"""``picker build measured`` / ``build retune`` and ``find --style calibrated:ID`` end to end (CliRunner)
on a small store: a build of the known common-emitter Colpitts from a saved design, one board measured
10 % high, the fit and the suggestion; the user mistakes as one-line errors."""

import json

import pytest

from cli_helpers import assert_user_error
from picker.builds.model import design_to_json
from picker.circuit.design import Design, PartInfo
from picker.circuit.device import NpnProfile
from picker.circuit.evaluate import check_design
from tests.cli.test_build_cli import STOCK

# part ids of STOCK in import order (resistors 1-7, capacitors 8-13, inductors 14-15, npn 16)
IDS = {"R1": 6, "R2": 5, "RC": 3, "RE1": 1, "RE": 3, "C1": 9, "L1": 15, "C2": 11, "CC1": 12, "CC2": 12, "CE": 13,
       "Q1": 16}
VALUES = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "C1": 4.7e-9, "L1": 1e-3, "C2": 47e-9,
          "CC1": 100e-9, "CC2": 100e-9, "CE": 1e-6}


@pytest.fixture(scope="module")
def saved_design():
    info = {r: PartInfo(part_id=i, tolerance=0.05, dcr_ohm=5.0 if r == "L1" else None)
            for r, i in IDS.items() if r != "Q1"}
    d = Design("colpitts-ce", VALUES, npn=NpnProfile(name="npn-generic", hfe_min=100, hfe_max=300),
               style="breadboard", parts=info)
    f = check_design(d, (0.0, 50.0), integrate=False).freq_hz
    return design_to_json(d, parts={r: {"part_id": i} for r, i in IDS.items()}, predicted={"freq_hz": f},
                          target={"freq_hz": f, "tol": 0.01, "min_margin": 1.5}), f


@pytest.fixture
def built(run, tmp_path, saved_design):
    (tmp_path / "stock.csv").write_text(STOCK)
    assert run("stock", "import", tmp_path / "stock.csv").exit_code == 0
    (tmp_path / "design.json").write_text(json.dumps(saved_design[0]))
    r = run("build", "new", "--design", tmp_path / "design.json", "--boards", "2", "--name", "tone")
    assert r.exit_code == 0, r.stderr
    return run, saved_design[1]


def test_measure_then_retune_suggests_a_parallel_capacitor(built):
    run, f = built
    r = run("build", "measured", "1", "--freq", f"{f * 1.1:.6g}", "--amplitude", "2.1Vpp", "--json")
    assert r.exit_code == 0, r.stderr
    m = json.loads(r.stdout)
    assert (m["build_id"], m["board"], m["amplitude_vpp"]) == (1, 1, 2.1)
    assert m["freq_hz"] == pytest.approx(f * 1.1, rel=1e-5)
    r = run("build", "retune", "1", "--json")
    assert r.exit_code == 0, r.stderr
    out = json.loads(r.stdout)
    fit, sug = out["fit"], out["suggestions"]
    assert fit["offset"] == pytest.approx(0.10, rel=1e-3) and not fit["explained_by_tolerances"]
    assert sug["change_warranted"] and sug["board"] == 1
    best = sug["changes"][0]
    assert best["action"] == "parallel" and best["meets_margin"] and best["margin_worst"] >= 1.5
    assert abs(best["freq_error"]) <= 0.01 and best["part_id"] in (8, 9, 10, 11, 12, 13)
    # text form names the change and the margin
    r = run("build", "retune", "1")
    assert r.exit_code == 0, r.stderr
    assert "across C1" in r.stdout and "margin worst" in r.stdout and "beyond" in r.stdout


def test_second_board_and_calibrated_find(built):
    run, f = built
    for k, x in ((1, 1.004), (2, 0.998)):
        assert run("build", "measured", "1", "--freq", f"{f * x:.6g}", "--board", str(k)).exit_code == 0
    r = run("build", "retune", "1", "--json")
    assert r.exit_code == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["fit"]["boards"] == [1, 2] and out["fit"]["explained_by_tolerances"]
    assert out["suggestions"]["board"] is None and not out["suggestions"]["change_warranted"]
    stray = out["fit"]["stray_f"]
    r = run("find", "--freq", f"{f:.6g}", "--tol", "1%", "--topology", "colpitts-ce", "--min-margin", "1.5",
            "--top", "1", "--mc", "0", "--style", "calibrated:1", "--json")
    assert r.exit_code == 0, r.stderr
    assert json.loads(r.stdout)
    r = run("build", "new", "--from-find", "1", "--boards", "1", "--name", "calibrated", "--json")
    assert r.exit_code == 0, r.stderr
    style = json.loads(r.stdout)["design"]["style"]
    assert style.startswith("calibrated:") and float(style.split(":")[1]) == pytest.approx(stray, rel=1e-5)


@pytest.mark.parametrize("args,fragments", [
    (("build", "measured", "1", "--freq", "fast"), ("--freq",)),
    (("build", "measured", "1", "--freq", "0"), ("--freq",)),
    (("build", "measured", "1", "--freq", "86k", "--amplitude", "loud"), ("--amplitude",)),
    (("build", "measured", "9", "--freq", "86k"), ("no build with id 9",)),
    (("build", "measured", "1", "--freq", "86k", "--board", "3"), ("--board", "1..2")),
    (("build", "measured", "1", "--freq", "86k", "--board", "0"), ("--board",)),
    (("build", "retune", "1"), ("no measurement yet", "picker build measured 1")),
    (("build", "retune", "9"), ("no build with id 9",)),
    (("find", "--freq", "77k", "--style", "calibrated:1"), ("--style calibrated:1", "no measurement yet")),
    (("find", "--freq", "77k", "--style", "calibrated:x"), ("calibrated:BUILD_ID",)),
])
def test_user_mistakes_are_one_line_errors(built, args, fragments):
    run, _ = built
    assert_user_error(run(*args), *fragments)


def test_cancelled_build_cannot_be_measured_and_retune_board_must_be_measured(built):
    run, f = built
    assert run("build", "measured", "1", "--freq", f"{f:.6g}", "--board", "2").exit_code == 0
    assert_user_error(run("build", "retune", "1", "--board", "1"), "--board 1", "board(s) 2 only")
    assert run("build", "cancel", "1").exit_code == 0
    assert_user_error(run("build", "measured", "1", "--freq", "86k"), "cancelled")
