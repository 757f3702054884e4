"""The pick list of a build job: walking order, codes, quantities, the four formats, escaping, printing.

Records are made by hand (tests/report/build_fixtures.py); no store is involved.
"""

from __future__ import annotations

import csv
import io
import re
import subprocess
from dataclasses import replace
from html.parser import HTMLParser

import pytest

from picker.report import picklist as pl
from tests.report.build_fixtures import LINES, line, make_record

#: The fixture's bins in the order a person walks the cabinet: letters first, then the
#: number as a number (A2 < A9 < A10 < B1), worked out by hand from LINES.
WALK = ["C-A1", "C-A20", "C-B3", "C-B12", "L-1", "Q-3", "R-A2", "R-A9", "R-A10", "R-B1"]


def test_natural_key_compares_digit_runs_as_numbers_and_letters_case_blind():
    bins = ["R-A10", "R-A2", "r-a3", "R-B1", "R-A1", "R-A02b", "C-9"]
    assert sorted(bins, key=pl.natural_key) == ["C-9", "R-A1", "R-A2", "R-A02b", "r-a3", "R-A10", "R-B1"]


def test_lines_come_in_walking_order_in_every_format():
    rec = make_record()
    assert [r.bin for r in pl.pick_rows(rec)] == WALK
    text = pl.picklist_text(rec)
    positions = [text.index(f"[ ] {b} ") for b in WALK]
    assert positions == sorted(positions)
    assert [row["bin"] for row in csv.DictReader(io.StringIO(pl.picklist_csv(rec)))] == WALK
    md_bins = [ln.split("|")[2].strip() for ln in pl.picklist_md(rec).splitlines() if ln.startswith("| [ ]")]
    assert md_bins == WALK


def test_same_bin_orders_by_kind_then_designator():
    rec = replace(make_record(), lines=(
        line(1, ("R10",), "resistor", 1e3, "A-1", 1, 5), line(2, ("C1",), "capacitor", 1e-9, "A-1", 1, 5),
        line(3, ("R2",), "resistor", 2e3, "A-1", 1, 5)))
    assert [r.refs for r in pl.pick_rows(rec)] == ["R2", "R10", "C1"]


# IEC 60062:2016, letter and digit code (RKM) for resistance and capacitance values: the examples
# printed with the code (from memory, as in tests/reference/test_iec60063.py): 4K7, R47, 1M0, 2R2, 4n7.
# picker writes kilo as lower-case k (common practice).
IEC_EXAMPLES = [("resistor", 4.7e3, "4k7"), ("resistor", 0.47, "R47"), ("resistor", 1e6, "1M0"),
                ("resistor", 2.2, "2R2"), ("capacitor", 4.7e-9, "4n7")]


def test_code_column_is_the_iec60062_letter_and_digit_code():
    lines = tuple(line(k + 1, (f"X{k}",), kind, value, f"B-{k}", 1, 9) for k, (kind, value, _) in enumerate(IEC_EXAMPLES))
    rec = replace(make_record(), lines=lines)
    assert [r.code for r in pl.pick_rows(rec)] == [code for _, _, code in IEC_EXAMPLES]
    rows = list(csv.DictReader(io.StringIO(pl.picklist_csv(rec))))
    assert [r["rkm"] for r in rows] == [code for _, _, code in IEC_EXAMPLES]


def test_values_in_engineering_notation_and_npn_by_profile_name():
    by_bin = {r.bin: r for r in pl.pick_rows(make_record())}
    assert by_bin["R-A10"].value == "33 kΩ" and by_bin["R-A10"].code == "33k"
    assert by_bin["C-A1"].value == "4.7 nF" and by_bin["C-A1"].rating == "100 V C0G"
    assert by_bin["L-1"].value == "1 mH" and by_bin["L-1"].code == "1m0" and by_bin["L-1"].rating == "DCR 12 Ω"
    assert by_bin["R-B1"].value == "100 Ω" and by_bin["R-B1"].code == "100R" and by_bin["R-B1"].rating == "125 mW"
    assert by_bin["Q-3"].value == "npn-bench"
    assert by_bin["R-A9"].refs == "RC, RE" and by_bin["R-A9"].tolerance == "1%"


@pytest.mark.parametrize("boards", [1, 3])
def test_quantity_for_all_boards_and_left_after(boards):
    rec = make_record(boards=boards)
    rows = {r.part_id: r for r in pl.pick_rows(rec)}
    for pid, refs, *_, per_board, have in LINES:
        assert rows[pid].qty == per_board * boards
        assert rows[pid].left == have - per_board * boards
    # L1: 2 on hand; three boards need 3, so the line is one short, and the text says so.
    if boards == 3:
        assert rows[31].left_text == "SHORT 1"
        assert "short: L-1 (L1) by 1" in pl.picklist_text(rec)
    else:
        assert "short" not in pl.picklist_text(rec)


def test_done_build_shows_what_is_on_hand_as_left():
    rec = replace(make_record(boards=2), status="done")
    rows = {r.part_id: r for r in pl.pick_rows(rec)}
    for pid, *_, have in LINES:
        assert rows[pid].left == have


def test_text_fits_80_columns_even_with_long_store_text():
    rec = make_record(name="A very long build name " * 5, notes={23: "hand-picked for the low tempco " * 6},
                      bins={11: "DRAWER-LEFT-SECOND-ROW-BOX-17"}, npn_name="npn-with-a-rather-long-profile-name")
    text = pl.picklist_text(rec)
    assert max(len(ln) for ln in text.splitlines()) <= pl.TEXT_WIDTH
    lines = text.splitlines()

    def column(first: str, start: int, width: int) -> str:
        """A wrapped cell read back: its slice of the row's first line and of the continuation lines."""
        k = next(i for i, ln in enumerate(lines) if ln.startswith(first))
        out = [lines[k][start:start + width]]
        for ln in lines[k + 1:]:
            if not ln.startswith(" " * 4) or ln.startswith("    note:"):
                break
            out.append(ln[start:start + width])
        return "".join(c.strip() for c in out)

    assert column("[ ] DRAWER", 4, 9) == "DRAWER-LEFT-SECOND-ROW-BOX-17"  # wrapped, not cut
    assert column("[ ] Q-3", 26, 10) == "npn-with-a-rather-long-profile-name"
    assert "hand-picked for the low tempco" in text


def test_csv_is_well_formed_and_round_trips_awkward_notes():
    note = 'has "quotes", commas,\nand a second line'
    rec = make_record(notes={12: note})
    rows = list(csv.reader(io.StringIO(pl.picklist_csv(rec))))
    assert tuple(rows[0]) == pl.CSV_COLUMNS
    assert all(len(r) == len(pl.CSV_COLUMNS) for r in rows)
    assert len(rows) == 1 + len(LINES)
    recs = list(csv.DictReader(io.StringIO(pl.picklist_csv(rec))))
    assert next(r for r in recs if r["part_id"] == "12")["note"] == note
    want = {str(pid): (per * 2, have - per * 2) for pid, *_, per, have in LINES}
    assert {r["part_id"]: (int(r["qty"]), int(r["qty_left"])) for r in recs} == want


def test_markdown_table_is_well_formed_and_escapes_cells():
    rec = make_record(notes={23: "a | b <b>x</b>\nnext"}, bins={12: "R|A2"})
    md = pl.picklist_md(rec)
    table = [ln for ln in md.splitlines() if ln.startswith("|")]
    cols = len(pl.MD_COLUMNS)
    for ln in table:  # cells are separated by unescaped pipes only
        assert len(re.findall(r"(?<!\\)\|", ln)) == cols + 1, ln
    assert len(table) == 2 + len(LINES)
    assert "a \\| b &lt;b&gt;x&lt;/b&gt; next" in md
    assert "R\\|A2" in md and "<b>" not in md


# ---- html ---------------------------------------------------------------------------

class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


HOSTILE = {"name": "<script>alert(1)</script> build", "note": "<b>bold</b> & <i>it</i>",
           "bin": "<img src=x onerror=alert(2)>R-A2", "npn": "<svg onload=alert(3)>npn", "user": "<u>me</u>"}


@pytest.fixture(scope="module")
def hostile_page():
    rec = make_record(name=HOSTILE["name"], notes={23: HOSTILE["note"]}, bins={12: HOSTILE["bin"]},
                      npn_name=HOSTILE["npn"], user=HOSTILE["user"])
    fig = pl.design_figures(rec, mc=300)
    return rec, fig, pl.picklist_html(rec, fig)


def test_html_renders_store_markup_as_text(hostile_page):
    rec, fig, page = hostile_page
    p = _Collect()
    p.feed(page)
    tags = [t for t, _ in p.tags]
    for injected in ("script", "b", "i", "img", "u"):
        assert injected not in tags, injected
    # one svg only: the schematic; the npn name's <svg ...> is text, also inside the schematic's labels
    assert tags.count("svg") == 1
    assert not any(k.startswith("on") for _, attrs in p.tags for k in attrs)
    text = "".join(p.text)
    for s in (HOSTILE["name"], HOSTILE["note"], HOSTILE["bin"], HOSTILE["user"]):
        assert s in text
    assert HOSTILE["npn"] in text


def test_html_is_self_contained_and_has_the_parts(hostile_page):
    rec, fig, page = hostile_page
    p = _Collect()
    p.feed(page)
    assert not [t for t, a in p.tags if t in ("script", "link", "iframe", "img", "object")]
    assert not [a for _, a in p.tags if "src" in a or "href" in a]
    assert "@media print" in page and "@page" in page
    rows = [a for t, a in p.tags if t == "tr" and a.get("class") == "line"]
    assert len(rows) == len(rec.lines)
    text = "".join(p.text)
    ev = fig.evaluation
    for _, value in pl.figure_rows(fig):
        assert value in text
    assert f"{ev.margin:.2f}" in text and f"{ev.margin_worst:.2f}" in text
    for code, _ in fig.warnings:
        assert code in text
    assert "Radiated RF" in text and "polarised" in text and "licensed practice" in text


def test_figures_match_the_engine_and_the_search_yield(hostile_page):
    from picker.circuit.evaluate import check_design
    from picker.search import montecarlo

    rec, fig, _ = hostile_page
    ev = check_design(fig.design, fig.temps_c)
    assert fig.evaluation.freq_hz == ev.freq_hz and fig.evaluation.margin_worst == ev.margin_worst
    assert [w for w, _ in fig.warnings] == [w.code for w in ev.warnings]  # 77 kHz: no RF caution added

    class Spec:  # what find passes to the yield (freq, tol, samples, temperatures, seed)
        freq_hz, tol, mc, temps_c, seed = 77e3, 0.05, 300, fig.temps_c, pl.DEFAULT_SEED

    assert fig.yield_ == montecarlo.yield_of(fig.design, Spec)
    assert 0.0 < fig.yield_ <= 1.0


def test_figures_saved_by_find_are_shown_beside_the_engine_s():
    rec = make_record()
    design = dict(rec.design, predicted={"freq_hz": 77.1e3, "margin": 3.1, "margin_worst": 2.8, "yield": 0.9})
    fig = pl.design_figures(replace(rec, design=design), mc=0)
    assert ("when found", "77.1 kHz, margin 3.10, worst 2.80, yield 90.0%") in pl.figure_rows(fig)
    assert "when found" not in dict(pl.figure_rows(pl.design_figures(rec, mc=0)))


def test_rf_caution_is_added_above_1mhz():
    from picker.builds.model import design_to_json
    from picker.circuit.design import Design, complete_values
    from picker.circuit.topology import get_topology

    # ce-2M of tests/reference/designs.py: about 2 MHz
    vals, _ = complete_values(get_topology("colpitts-ce"), dict(L1=10e-6, C1=680e-12, C2=3.3e-9, CC1=1e-9,
                                                                CC2=1e-9, CE=10e-9, RE1=47, RC=1e3))
    rec = replace(make_record(), design=design_to_json(Design(topology="colpitts-ce", values=vals, style="pcb")))
    fig = pl.design_figures(rec, mc=0)
    assert "radiated-rf" in [c for c, _ in fig.warnings]
    assert fig.yield_ is None


def test_html_prints_to_pdf_in_chromium_with_every_part_line(chromium_bin, tmp_path):
    import pypdf

    rec = make_record(notes={23: "<b>hand-picked</b>"})
    html_file = tmp_path / "picklist.html"
    html_file.write_text(pl.picklist_html(rec, pl.design_figures(rec, mc=200)), encoding="utf-8")
    pdf = tmp_path / "picklist.pdf"
    proc = subprocess.run([chromium_bin, "--headless", "--no-sandbox", "--disable-gpu", "--no-pdf-header-footer",
                           f"--user-data-dir={tmp_path / 'profile'}", f"--print-to-pdf={pdf}",
                           html_file.as_uri()], capture_output=True, text=True, timeout=120)
    assert pdf.exists() and pdf.stat().st_size > 0, proc.stderr[-2000:]
    reader = pypdf.PdfReader(str(pdf))
    text = "\n".join(page.extract_text() for page in reader.pages)
    lines = text.splitlines()
    for row in pl.pick_rows(rec):
        key = row.code if row.code != pl.DASH else row.value
        assert any(row.bin in ln and key in ln for ln in lines), (row.bin, key)
    assert "<b>hand-picked</b>" in text
    assert "Caution" in text and "Schematic" in text
