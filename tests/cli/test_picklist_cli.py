"""``picker picklist`` and ``picker build sheet`` end to end (CliRunner) on a small store with one build
reserved from a saved-design file; user mistakes as one-line errors."""

import csv
import io
import json

import pytest

from cli_helpers import assert_user_error
from picker.builds.model import DESIGN_FORMAT

# Bins chosen so that the store's order (by id) and the walking order differ: R-10 after R-9.
STOCK = """kind,value,qty,bin,tolerance,voltage_v,power_w,dielectric,dcr_ohm,name,hfe_min,hfe_max,note
resistor,33k,10,R-10,5%,,0.25,,,,,,
resistor,10k,10,R-9,5%,,0.25,,,,,,
resistor,2k2,10,R-2,1%,,0.25,,,,,,
resistor,100,10,R-1,5%,,0.25,,,,,,<b>cut leads</b>
capacitor,100n,10,C-10,10%,50,,X7R,,,,,
capacitor,4n7,10,C-2,2%,100,,C0G,,,,,
capacitor,47n,10,C-3,5%,63,,film,,,,,
capacitor,1u,10,C-11,20%,50,,X7R,,,,,
inductor,1m,4,L-1,10%,,,,12,,,,
npn,,5,Q-1,,,,,,npn-bench,110,400,
"""
BINS = {"R1": "R-10", "R2": "R-9", "RC": "R-2", "RE": "R-2", "RE1": "R-1", "CC1": "C-10", "CC2": "C-10",
        "C1": "C-2", "C2": "C-3", "CE": "C-11", "L1": "L-1", "Q1": "Q-1"}
VALUES = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "CE": 1e-6, "CC1": 100e-9,
          "C1": 4.7e-9, "L1": 1e-3, "C2": 47e-9, "CC2": 100e-9}
WALK = ["C-2", "C-3", "C-10", "C-11", "L-1", "Q-1", "R-1", "R-2", "R-9", "R-10"]


@pytest.fixture
def built(run, tmp_path):
    """The store with STOCK and build 1 (2 boards) reserved from a saved-design file."""
    (tmp_path / "stock.csv").write_text(STOCK)
    assert run("stock", "import", tmp_path / "stock.csv").exit_code == 0
    ids = {p["bin"]: p["id"] for p in json.loads(run("stock", "list", "--json").stdout)}
    design = {"format": DESIGN_FORMAT, "topology": "colpitts-ce", "values": VALUES,
              "npn": {"name": "npn-bench", "hfe_min": 110, "hfe_max": 400}, "vcc_v": 12.0, "style": "perfboard",
              "temps_c": [0, 50], "nominal_c": 25, "target": {"freq_hz": 77e3, "tol": 0.05},
              "parts": {ref: {"part_id": ids[b]} for ref, b in BINS.items()}}
    (tmp_path / "design.json").write_text(json.dumps(design))
    r = run("build", "new", "--boards", "2", "--name", "tone <i>77k</i>", "--design", tmp_path / "design.json")
    assert r.exit_code == 0, r.stderr
    return run, tmp_path


def test_picklist_csv_walks_the_bins_with_quantities_left(built):
    run, _ = built
    r = run("picklist", "1", "--format", "csv")
    assert r.exit_code == 0, r.stderr
    rows = list(csv.DictReader(io.StringIO(r.stdout)))
    assert [x["bin"] for x in rows] == WALK
    by_bin = {x["bin"]: x for x in rows}
    assert (by_bin["R-2"]["designators"], by_bin["R-2"]["qty"], by_bin["R-2"]["qty_left"]) == ("RC, RE", "4", "6")
    assert (by_bin["L-1"]["rkm"], by_bin["L-1"]["qty"], by_bin["L-1"]["qty_left"]) == ("1m0", "2", "2")
    assert by_bin["R-1"]["note"] == "<b>cut leads</b>"


def test_picklist_text_is_the_default_and_fits_80_columns(built):
    run, _ = built
    r = run("picklist", "1")
    assert r.exit_code == 0, r.stderr
    assert 'build 1 "tone <i>77k</i>"' in r.stdout
    assert max(len(ln) for ln in r.stdout.splitlines()) <= 80


def test_picklist_html_to_a_file(built):
    run, tmp = built
    out = tmp / "pick.html"
    r = run("picklist", "1", "--format", "html", "--out", out)
    assert r.exit_code == 0, r.stderr
    assert f"to {out}" in r.stdout
    page = out.read_text(encoding="utf-8")
    assert "tone &lt;i&gt;77k&lt;/i&gt;" in page and "&lt;b&gt;cut leads&lt;/b&gt;" in page
    assert "<i>" not in page and "<b>" not in page


def test_build_sheet_writes_the_folder(built):
    run, tmp = built
    out = tmp / "sheet"
    r = run("build", "sheet", "1", "--out", out, "--mc", "100")
    assert r.exit_code == 0, r.stderr
    for name in ("deck.cir", "bode.png", "bode.svg", "montecarlo.png", "montecarlo.svg", "bom.csv",
                 "schematic.svg", "picklist.html", "cautions.txt"):
        assert (out / name).stat().st_size > 0, name
        assert name in r.stdout


@pytest.mark.parametrize(("args", "fragment"), [
    (("picklist", "1", "--format", "pdf"), "--format: unknown format"),
    (("picklist", "9"), "no build with id 9"),
    (("picklist", "1", "--out", "/nonexistent-dir/x.csv"), "does not exist"),
    (("build", "sheet", "9", "--out", "SHEET"), "no build with id 9"),
    (("build", "sheet", "1", "--out", "SHEET", "--mc", "0"), "--mc"),
])
def test_user_mistakes_are_one_line_errors(built, args, fragment):
    run, tmp = built
    args = tuple(str(tmp / "sheet") if a == "SHEET" else a for a in args)
    assert_user_error(run(*args), fragment)


def test_sheet_into_a_file_is_refused(built):
    run, tmp = built
    (tmp / "afile").write_text("x")
    assert_user_error(run("build", "sheet", "1", "--out", tmp / "afile"), "is a file")


def test_no_store_is_a_one_line_error(run):
    assert_user_error(run("picklist", "1"), "no store")
