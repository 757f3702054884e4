"""The design sheet: files written, the deck is check's deck, BOM rows, histogram spec limits, cautions."""

from __future__ import annotations

import csv
import io
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from picker.builds.model import design_from_json
from picker.circuit.spice import deck
from picker.report import picklist as pl
from picker.report.sheet import (BOM_COLUMNS, GID_FREQ_HIGH, GID_FREQ_LOW, GID_MARGIN_MIN, GID_MARGIN_START,
                                 GID_TARGET, bom_csv, montecarlo_figure, write_sheet)
from tests.report.build_fixtures import LINES, make_record

MC = 400


@pytest.fixture(scope="module")
def sheet(tmp_path_factory):
    rec = make_record(boards=3)
    fig = pl.design_figures(rec, mc=MC, seed=5)
    out = tmp_path_factory.mktemp("sheet") / "build-7"
    return rec, fig, write_sheet(rec, out, figures=fig)


def test_every_file_is_written_and_readable(sheet):
    rec, fig, files = sheet
    assert set(files) == {"deck", "bode_png", "bode_svg", "montecarlo_png", "montecarlo_svg", "bom", "schematic",
                          "picklist", "cautions"}
    for key, path in files.items():
        data = path.read_bytes()
        assert data, key
        if key.endswith("png"):
            assert data[:8] == b"\x89PNG\r\n\x1a\n"
        if key.endswith("svg") or key == "schematic":
            ET.fromstring(data)  # well-formed XML


def test_deck_is_the_one_check_exports(sheet):
    rec, fig, files = sheet
    assert files["deck"].read_text(encoding="utf-8") == deck(design_from_json(rec.design))


def test_bom_has_one_row_per_designator_with_its_line(sheet):
    rec, fig, files = sheet
    rows = list(csv.DictReader(io.StringIO(files["bom"].read_text(encoding="utf-8"))))
    assert tuple(rows[0]) == BOM_COLUMNS
    want_refs = ["R1", "R2", "RC", "RE1", "RE", "CE", "CC1", "C1", "L1", "C2", "CC2", "Q1"]  # topology order
    assert [r["designator"] for r in rows] == want_refs
    by_ref = {r["designator"]: r for r in rows}
    for pid, refs, kind, value, tol, *_, bin_, per_board, have in LINES:
        for ref in refs:
            r = by_ref[ref]
            assert (r["part_id"], r["bin"], r["kind"]) == (str(pid), bin_, kind)
            assert int(r["qty_per_board"]) == 1 and int(r["qty_total"]) == 3  # one piece per position per board
    assert by_ref["RC"]["rkm"] == "2k2" and by_ref["RC"]["value"] == "2.2 kΩ" and by_ref["RC"]["tolerance"] == "1%"
    assert by_ref["C1"]["rating"] == "100 V C0G" and by_ref["Q1"]["value"] == "npn-bench"


def test_bom_keeps_a_position_no_line_fills():
    rec = make_record()
    rec = type(rec)(**{**rec.__dict__, "lines": tuple(ln for ln in rec.lines if ln.part_id != 24)})  # no C2 line
    fig = pl.Figures(design=design_from_json(rec.design), evaluation=None, temps_c=(25.0,), target_hz=None,
                     tol=None, min_margin=None, yield_=None, mc_freq_hz=None, mc_margin=None, warnings=())
    row = next(r for r in csv.DictReader(io.StringIO(bom_csv(rec, fig))) if r["designator"] == "C2")
    assert (row["value"], row["rkm"], row["part_id"], row["bin"], row["qty_total"]) == ("47 nF", "47n", "", "", "2")


def _line(fig, gid):
    found = [ln for ax in fig.axes for ln in ax.get_lines() if ln.get_gid() == gid]
    assert len(found) == 1, gid
    return found[0]


def test_histograms_mark_the_spec_limits_and_count_every_sample():
    rng = np.random.default_rng(0)
    f = 100e3 * (1 + 0.02 * rng.standard_normal(500))
    f[:7] = np.nan  # no crossing: left out of the histogram, counted in the title
    m = 2.5 + 0.3 * rng.standard_normal(500)
    fig = montecarlo_figure(f, m, target_hz=100e3, tol=0.01, min_margin=2.0)
    assert _line(fig, GID_TARGET).get_xdata()[0] == 100e3
    assert _line(fig, GID_FREQ_LOW).get_xdata()[0] == pytest.approx(99e3)
    assert _line(fig, GID_FREQ_HIGH).get_xdata()[0] == pytest.approx(101e3)
    assert _line(fig, GID_MARGIN_START).get_xdata()[0] == 1.0
    assert _line(fig, GID_MARGIN_MIN).get_xdata()[0] == 2.0
    ax_f, ax_m = fig.axes[:2]
    assert sum(p.get_height() for p in ax_f.patches) == 493
    assert sum(p.get_height() for p in ax_m.patches) == 500
    inside = np.count_nonzero(np.abs(f / 100e3 - 1) <= 0.01)
    assert f"{inside / 500 * 100:.1f}% in tolerance" in ax_f.get_title()
    assert "7 without a crossing" in ax_f.get_title()


def test_histograms_without_target_or_min_margin_mark_only_margin_1():
    fig = montecarlo_figure(np.full(10, 1e5), np.full(10, 3.0))
    gids = {ln.get_gid() for ax in fig.axes for ln in ax.get_lines()}
    assert gids == {GID_MARGIN_START}


def test_sheet_histogram_svg_carries_the_limits_of_the_record(sheet):
    rec, fig, files = sheet
    svg = files["montecarlo_svg"].read_text(encoding="utf-8")
    for gid in (GID_TARGET, GID_FREQ_LOW, GID_FREQ_HIGH, GID_MARGIN_START, GID_MARGIN_MIN):
        assert f'id="{gid}"' in svg
    assert len(fig.mc_freq_hz) == MC


def test_cautions_list_the_engine_warnings_and_the_safety_text(sheet):
    rec, fig, files = sheet
    text = files["cautions"].read_text(encoding="utf-8")
    assert fig.warnings  # the fixture's tank is loaded (tank-loading)
    flat = " ".join(text.split())
    for code, msg in fig.warnings:
        assert f"{code}: {' '.join(msg.split())}" in flat
    for para in pl.SAFETY_TEXT:
        assert " ".join(para.split()) in flat
    assert max(len(ln) for ln in text.splitlines()) <= 78


def test_write_sheet_refuses_no_samples(tmp_path):
    with pytest.raises(ValueError, match="Monte Carlo"):
        write_sheet(make_record(), tmp_path, mc=0)
