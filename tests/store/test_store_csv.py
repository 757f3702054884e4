"""CSV import/export at the store level: validation, merging, exact round trip."""

import pytest
from sqlalchemy import func, select

from picker.errors import PickerError
from picker.store import (
    LedgerEntry,
    Part,
    apply_import,
    ledger_balance_ok,
    open_store,
    plan_import,
    read_stock_csv,
    resolve_db_url,
    write_stock_csv,
)
from picker.store.csvio import format_cell
from picker.store.spec import COLUMNS, SPEC_FIELDS

from store_helpers import DEMO_CSV, HEADER


def import_file(store, path):
    stock = read_stock_csv(path)
    with store.Session.begin() as s:
        plan = plan_import(s, stock)
        apply_import(s, plan)
    return plan


def snapshot(store):
    """Every part's attributes and qty, without ids, sorted."""
    with store.Session.begin() as s:
        rows = [tuple(getattr(p, f) for f in (*SPEC_FIELDS, "qty")) for p in s.scalars(select(Part))]
    return sorted(rows, key=repr)


BAD = """kind,value,qty,bin,tolerance,dcr_ohm,name,hfe_min,hfe_max,voltage_v,dielectric
resistor,4k7,10,R-A1,5%,,,,,,
resistor,4x7,10,R-A2,5%,,,,,,
capacitor,4.7uH,5,C-A1,5%,,,,,,
inductor,10u,-3,L-A1,10%,,,,,,

npn,,5,Q-1,,,,100,300,,
npn,100,5,Q-2,,,npn-rf,60,180,,
resistor,1k,5,R-A3,five,,,,,,
resistor,1k,5,R-A4,5%,0.5,,,,,
capacitor,1n,5,C-A2,5%,,,,,fifty,teflonish
capacitor,1n,5,C-A3,5%,,,,,50,C0G
"""

EXPECTED_BAD = [
    ("row 3, column value:", "4x7"),
    ("row 4, column value:", "unit H does not fit"),
    ("row 5, column qty:", "-3"),
    ("row 7, column name:", "name is required for npn"),
    ("row 8, column value:", "value must be blank for npn"),
    ("row 9, column tolerance:", "five"),
    ("row 10, column dcr_ohm:", "does not apply to a resistor"),
    ("row 11, column voltage_v:", "fifty"),
    ("row 11, column dielectric:", "teflonish"),
]


def test_bad_file_reports_every_bad_field_and_writes_nothing(store, write_csv):
    path = write_csv(BAD)
    with pytest.raises(PickerError) as exc:
        read_stock_csv(path)
    lines = str(exc.value).splitlines()
    assert lines[0].startswith(f"{path}: 9 problem(s) in 8 row(s); nothing imported")
    body = lines[1:]
    assert len(body) == len(EXPECTED_BAD)
    for (prefix, fragment), line in zip(EXPECTED_BAD, body):
        assert line.startswith(prefix) and fragment in line, line
        assert "(got '" in line and "expected" in line, line
    with store.Session.begin() as s:
        assert s.scalar(select(func.count(Part.id))) == 0


def test_unknown_column_is_named_with_the_accepted_ones(write_csv):
    path = write_csv("kind,value,qty,bin,colour\nresistor,1k,3,R-A1,brown\n")
    with pytest.raises(PickerError) as exc:
        read_stock_csv(path)
    msg = str(exc.value)
    assert "row 1, column colour: unknown column (expected one of: kind, value, qty, bin, tolerance" in msg
    assert "pd_w, note)" in msg


def test_header_problems(write_csv):
    with pytest.raises(PickerError) as exc:
        read_stock_csv(write_csv("kind,value,qty,qty\nresistor,1k,1,2\n"))
    msg = str(exc.value)
    assert "row 1, column qty: column appears twice" in msg
    assert "row 1, column bin: required column missing" in msg


def test_line_numbers_count_blank_lines_and_multiline_cells(write_csv):
    text = 'kind,value,qty,bin,note\n\nresistor,1k,1,R-A1,"two\nlines"\n\nresistor,1q,1,R-A2,\n'
    with pytest.raises(PickerError) as exc:
        read_stock_csv(write_csv(text))
    assert "row 6, column value:" in str(exc.value)


@pytest.mark.parametrize(
    "content, match",
    [
        (None, "file not found"),
        ("", "file is empty"),
        (b"\x89PNG\r\n\x1a\n\x00\x00\xff\xfe", "not a text CSV"),
        ("kind,value,qty,bin\nresistor,1k,1,R-A1,extra,more\n", "not a valid CSV"),
        ("kind,value,qty,bin\n", "no data rows"),
    ],
)
def test_unreadable_files_name_the_path(tmp_path, content, match):
    path = tmp_path / "stock.csv"
    if isinstance(content, bytes):
        path.write_bytes(content)
    elif content is not None:
        path.write_text(content)
    with pytest.raises(PickerError, match=match) as exc:
        read_stock_csv(path)
    assert str(path) in str(exc.value)


def test_kind_specific_rules(write_csv):
    path = write_csv(
        "kind,value,qty,bin,name,hfe_min,hfe_max,ft_hz,cob_f,dielectric,isat_a\n"
        "npn,,5,Q-1,npn-rf,300,100,300M,4p,,\n"  # hfe_max < hfe_min
        "inductor,1m,2,L-A1,,,,,,,0.2\n"  # fine: 1m on an inductor is 1 mH
        "capacitor,100n,2,C-A1,,,,,,X7R,0.2\n"  # isat on a capacitor
    )
    with pytest.raises(PickerError) as exc:
        read_stock_csv(path)
    lines = str(exc.value).splitlines()[1:]
    assert [line.split(":")[0] for line in lines] == ["row 2, column hfe_max", "row 4, column isat_a"]


def test_values_prefixes_and_canonical_dielectric(write_csv):
    path = write_csv(
        "kind,value,qty,bin,dielectric,voltage_v,isat_a,ft_hz,cob_f,name,hfe_min,hfe_max\n"
        "inductor,1m,2,L-A1,,,300m,,,,,\n"
        "capacitor,4n7,2,C-A1,cog,50V,,,,,,\n"
        "npn,,3,Q-1,,,,300M,4p,npn-rf,60,180\n"
    )
    rows = read_stock_csv(path).rows
    ind, cap, npn = (r.spec for r in rows)
    assert ind.value == 1e-3 and ind.isat_a == 0.3
    assert cap.value == 4.7e-9 and cap.dielectric == "C0G" and cap.voltage_v == 50.0
    assert npn.value is None and npn.ft_hz == 3e8 and npn.cob_f == 4e-12 and npn.name == "npn-rf"
    assert [r.line for r in rows] == [2, 3, 4]


def test_rows_merge_within_the_file_and_with_the_store(store, write_csv):
    first = write_csv(HEADER + "\n" + "resistor,1k,5,R-A1,5%" + "," * 16 + "\n", "first.csv")
    import_file(store, first)
    second = write_csv(
        "kind,value,qty,bin,tolerance\n"
        "resistor,1k,3,R-A1,5%\n"  # same as the stored part
        "resistor,1k0,4,R-A1,5%\n"  # same again, other spelling
        "resistor,2k2,1,R-A1,5%\n"  # new
        "resistor,2.2k,2,R-A1,5%\n"  # merges with the new one
        "resistor,2k2,2,R-A1,1%\n",  # differs in tolerance: new
        "second.csv",
    )
    plan = import_file(store, second)
    assert plan.summary() == {
        "file": str(second), "rows": 5, "new_parts": 2, "merged_rows": 3, "merged_into_existing": 2, "pieces": 12,
    }  # fmt: skip
    with store.Session.begin() as s:
        parts = {(p.value, p.tolerance): p for p in s.scalars(select(Part))}
        assert parts[(1000.0, 0.05)].qty == 12
        assert parts[(2200.0, 0.05)].qty == 3
        assert parts[(2200.0, 0.01)].qty == 2
        reasons = [e.reason for e in parts[(1000.0, 0.05)].ledger]
        assert reasons == ["import first.csv row 2", "import second.csv row 2", "import second.csv row 3"]
        assert s.scalar(select(func.count(LedgerEntry.id))) == 6
        assert ledger_balance_ok(s) == []


def test_dry_run_plan_writes_nothing(store, write_csv):
    stock = read_stock_csv(write_csv("kind,value,qty,bin\nresistor,1k,5,R-A1\n"))
    with store.Session.begin() as s:
        plan = plan_import(s, stock)
    assert plan.new_parts == 1
    with store.Session.begin() as s:
        assert s.scalar(select(func.count(Part.id))) == 0


def test_demo_round_trip_gives_an_identical_store(tmp_path, store):
    import_file(store, DEMO_CSV)
    out = tmp_path / "export.csv"
    write_stock_csv_session(store, out)
    other = open_store(resolve_db_url(str(tmp_path / "other.sqlite")))
    try:
        import_file(other, out)
        assert snapshot(other) == snapshot(store)
        out2 = tmp_path / "export2.csv"
        write_stock_csv_session(other, out2)
        assert out2.read_text() == out.read_text()
    finally:
        other.close()


def write_stock_csv_session(store, path):
    with store.Session.begin() as s:
        return write_stock_csv(s, path)


def test_export_refuses_to_overwrite(tmp_path, store):
    target = tmp_path / "x.csv"
    target.write_text("keep me")
    with store.Session.begin() as s:
        with pytest.raises(PickerError, match="already exists"):
            write_stock_csv(s, target)
    assert target.read_text() == "keep me"


@pytest.mark.parametrize(
    "column, value, kind",
    [
        ("value", 4.7e-9, "capacitor"),
        ("value", 1 / 3 * 1e4, "resistor"),  # needs all 17 digits
        ("value", 2.2e-7, "inductor"),
        ("tolerance", 0.05, "resistor"),
        ("tolerance", 0.0123456789, "resistor"),
        ("ft_hz", 3e8, "npn"),
        ("cob_f", 3.3e-12, "npn"),
        ("unit_cost", 0.1 + 0.2, "resistor"),
        ("isat_a", 1.23456789e-3, "inductor"),
    ],
)
def test_exported_cells_read_back_exactly(write_csv, column, value, kind):
    cells = {"kind": kind, "qty": "1", "bin": "X-1"}
    if kind == "npn":
        cells |= {"name": "npn-general", "hfe_min": "100", "hfe_max": "300"}
    else:
        cells |= {"value": "1k" if kind == "resistor" else ("1n" if kind == "capacitor" else "1u")}
    cells[column] = format_cell(column, value, kind)
    header = ",".join(cells)
    spec = read_stock_csv(write_csv(header + "\n" + ",".join(cells.values()) + "\n")).rows[0].spec
    assert getattr(spec, column) == value, cells[column]


def test_export_header_is_the_contract():
    assert ",".join(COLUMNS) == HEADER
