"""The store -> search boundary (load_pool) and the part validation contract."""

import numpy as np
import pytest

from picker.store import add_stock, change_qty, load_pool, parse_part
from picker.store.pool import pool_columns
from picker.store.spec import DIELECTRICS


def _add(s, qty=5, **cells):
    spec, _, errors = parse_part({"qty": "0"} | cells)
    assert not errors, errors
    return add_stock(s, spec, qty, "add")[0]


def test_pool_columns_units_and_order(store):
    with store.Session.begin() as s:
        _add(s, kind="capacitor", value="10n", bin="C-1", tolerance="5%", voltage_v="50", dielectric="C0G")
        _add(s, kind="capacitor", value="1n", bin="C-2", unit_cost="0.1")
        empty = _add(s, kind="capacitor", value="2n2", bin="C-3")
        change_qty(s, empty, -5, "used up")
        _add(s, kind="resistor", value="4k7", bin="R-1")
        df = load_pool(s, "capacitor")
        everything = load_pool(s, "capacitor", in_stock_only=False)
    assert list(df.columns) == pool_columns("capacitor") == [
        "id", "c_f", "tolerance", "qty", "unit_cost", "bin", "voltage_v", "dielectric"]  # fmt: skip
    assert df["c_f"].tolist() == [1e-9, 1e-8]  # ordered by value, empty part left out
    assert df["id"].dtype == np.int64 and df["c_f"].dtype == np.float64
    assert np.isnan(df["tolerance"].iloc[0]) and df["tolerance"].iloc[1] == 0.05
    assert np.isnan(df["unit_cost"].iloc[1]) and df["unit_cost"].iloc[0] == 0.1
    assert df["dielectric"].tolist() == [None, "C0G"] and df["bin"].tolist() == ["C-2", "C-1"]
    assert len(everything) == 3


def test_npn_pool(store):
    with store.Session.begin() as s:
        _add(s, kind="npn", name="npn-rf", bin="Q-1", hfe_min="60", hfe_max="180", ft_hz="1G", cob_f="2p")
        df = load_pool(s, "npn")
    assert "value" not in df.columns and df["name"].tolist() == ["npn-rf"]
    assert df["ft_hz"].tolist() == [1e9] and df["cob_f"].tolist() == [2e-12]
    assert np.isnan(df["vaf_v"].iloc[0])


def test_empty_pool_has_the_columns(store):
    with store.Session.begin() as s:
        df = load_pool(s, "inductor")
    assert len(df) == 0 and list(df.columns) == ["id", "l_h", "tolerance", "qty", "unit_cost", "bin", "dcr_ohm", "isat_a"]


@pytest.mark.parametrize("text, canonical", [("cog", "C0G"), ("NPO", "NP0"), ("Film", "film"), ("x7r", "X7R")])
def test_dielectric_spelling(text, canonical):
    spec, _, errors = parse_part({"kind": "capacitor", "value": "1n", "qty": "1", "bin": "C", "dielectric": text})
    assert not errors and spec.dielectric == canonical and canonical in DIELECTRICS


def test_npn_requires_name_and_hfe_and_no_tolerance():
    _, _, errors = parse_part({"kind": "npn", "qty": "1", "bin": "Q", "tolerance": "5%"})
    assert sorted(e.column for e in errors) == ["hfe_max", "hfe_min", "name", "tolerance"]


@pytest.mark.parametrize("qty", ["-1", "1.5", "ten", "1e3"])
def test_qty_must_be_a_whole_number(qty):
    _, _, errors = parse_part({"kind": "resistor", "value": "1k", "qty": qty, "bin": "R"})
    assert [e.column for e in errors] == ["qty"] and f"'{qty}'" in errors[0].message
