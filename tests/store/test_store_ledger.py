"""Ledger invariant: qty == sum of deltas, never negative, refused changes change nothing."""

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from picker.errors import PickerError
from picker.store import LedgerEntry, Part, add_stock, change_qty, get_part, ledger_balance_ok, open_store, parse_part


def spec(kind="resistor", value="4k7", bin="R-A1", **extra):
    cells = {"kind": kind, "value": value, "qty": "0", "bin": bin} | extra
    s, _, errors = parse_part(cells)
    assert not errors, errors
    return s


def test_change_qty_writes_ledger_and_updates_qty(store):
    with store.Session.begin() as s:
        part, created = add_stock(s, spec(), 10, "add")
        assert created
        change_qty(s, part, -4, "used on bench")
    with store.Session.begin() as s:
        part = get_part(s, part.id)
        assert part.qty == 6
        assert [(e.delta, e.reason) for e in part.ledger] == [(10, "add"), (-4, "used on bench")]
        assert all(e.user and e.created_at.tzinfo is not None for e in part.ledger)
        assert ledger_balance_ok(s) == []


def test_negative_result_is_refused_with_part_details(store):
    with store.Session.begin() as s:
        part, _ = add_stock(s, spec(bin="R-B7"), 3, "add")
        pid = part.id
    with pytest.raises(PickerError) as exc:
        with store.Session.begin() as s:
            change_qty(s, get_part(s, pid), -5, "too many")
    msg = str(exc.value)
    assert f"part {pid}" in msg and "4.7 kΩ" in msg and "R-B7" in msg and "3 on hand" in msg
    with store.Session.begin() as s:
        assert get_part(s, pid).qty == 3
        assert s.scalar(select(func.count(LedgerEntry.id))) == 1


def test_identical_spec_tops_up_the_same_part(store):
    with store.Session.begin() as s:
        a, created_a = add_stock(s, spec(tolerance="5%"), 2, "add")
        b, created_b = add_stock(s, spec(tolerance="5%"), 3, "add")
        c, created_c = add_stock(s, spec(tolerance="1%"), 1, "add")
        assert (created_a, created_b, created_c) == (True, False, True)
        assert a.id == b.id != c.id and a.qty == 5


def test_unknown_part_id(store):
    with store.Session.begin() as s:
        with pytest.raises(PickerError, match="no part with id 99"):
            get_part(s, 99)


def test_balance_check_catches_a_tampered_qty(store):
    # The check must be able to fail: bypass change_qty on purpose.
    with store.Session.begin() as s:
        part, _ = add_stock(s, spec(), 5, "add")
        part.qty = 7
    with store.Session.begin() as s:
        problems = ledger_balance_ok(s)
    assert problems == [f"part {part.id}: qty 7 but ledger sums to 5"]


OPS = st.lists(
    st.tuples(st.sampled_from(["add", "adjust"]), st.integers(0, 3), st.integers(-30, 30)),
    min_size=1,
    max_size=15,
)


@settings(derandomize=True, max_examples=30, deadline=None)
@given(ops=OPS)
def test_random_adds_and_adjusts_keep_the_ledger_balanced(ops):
    st_ = open_store("sqlite://")  # in-memory: a fresh store per example, no disk syncs
    try:
        expected: dict[int, int] = {}  # model: part id -> qty
        bins = ["R-A1", "R-A2", "R-A10", "TRAY-1"]
        for op, which, delta in ops:
            if op == "add" or not expected:
                with st_.Session.begin() as s:
                    part, _ = add_stock(s, spec(bin=bins[which]), abs(delta), "add")
                    expected[part.id] = expected.get(part.id, 0) + abs(delta)
                continue
            pid = sorted(expected)[which % len(expected)]
            if delta == 0:
                continue
            refused = expected[pid] + delta < 0
            with st_.Session.begin() as s:
                n_before = s.scalar(select(func.count(LedgerEntry.id)))
            try:
                with st_.Session.begin() as s:
                    change_qty(s, get_part(s, pid), delta, "adjust")
            except PickerError:
                assert refused
                with st_.Session.begin() as s:
                    assert s.scalar(select(func.count(LedgerEntry.id))) == n_before
            else:
                assert not refused
                expected[pid] += delta
        with st_.Session.begin() as s:
            assert ledger_balance_ok(s) == []
            got = dict(s.execute(select(Part.id, Part.qty)).all())
            assert got == expected
            assert min(got.values()) >= 0
    finally:
        st_.close()
