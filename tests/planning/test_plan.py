"""The purchase program against hand-worked cases and an exhaustive reference (tests/planning/brute.py)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from picker.planning.catalog import CatalogItem
from picker.planning.plan import Option, Problem, solve
from tests.planning.brute import brute

COST_TOL = 1e-6  # money; both sides price the same breaks


def item(sku, breaks, pack=1, min_order=None, supplier="s0"):
    return CatalogItem(supplier=supplier, sku=sku, kind="resistor", attrs={}, pack=pack,
                       min_order=pack if min_order is None else min_order, breaks=tuple(breaks))


def problem(options, key_sources, on_hand=(), items=(), item_supplier=(), charges=(0.0,)):
    n_builds = 1 + max(o.build for o in options)
    return Problem(n_builds, tuple(options), tuple(tuple(s) for s in key_sources), np.array(on_hand, dtype=np.int64),
                   tuple(items), np.array(item_supplier, dtype=np.int64), np.array(charges, dtype=float))


def verify(p: Problem, s) -> float:
    """Check a solution against the problem's rules independently; return its recomputed cost."""
    assert s.status == "optimal" and s.gap <= 1e-6
    assert len(s.chosen) == p.n_builds
    for b, k in enumerate(s.chosen):
        o = p.options[k]
        assert o.build == b
        for r, n in o.needs.items():
            got = sum(u for (bb, rr, src), u in s.alloc.items() if bb == b and rr == r)
            assert got == n, (b, r, got, n)  # exactly what the boards need, no unit set aside twice
    for (b, r, src), u in s.alloc.items():
        assert src in p.key_sources[r] and u > 0
    for line in range(p.n_stock):
        assert sum(u for (_, _, src), u in s.alloc.items() if src == line) <= p.on_hand[line]
    bought = {p.items.index(pc.item): pc for pc in s.purchases}
    for i, it in enumerate(p.items):
        used = sum(u for (_, _, src), u in s.alloc.items() if src == p.n_stock + i)
        q = bought[i].qty if i in bought else 0
        assert q >= used
        if q:
            assert q % it.pack == 0 and q >= it.min_order and bought[i].packs * it.pack == q
    suppliers = {int(p.item_supplier[i]) for i in bought}
    cost = sum(it.cost(bought[i].qty) for i, it in enumerate(p.items) if i in bought)
    cost += sum(float(p.charges[j]) for j in suppliers)
    assert s.cost == pytest.approx(cost, abs=COST_TOL)
    return cost


def test_buying_nothing_is_optimal_when_stock_covers():
    p = problem([Option(0, {0: 4}), Option(0, {1: 4})], [(0, 1), (2,)], on_hand=[3, 2],
                items=[item("a", [(1, 0.10)])], item_supplier=[0])
    s = solve(p)
    assert verify(p, s) == 0.0 and s.purchases == () and s.chosen == (0,)


def test_a_key_is_served_from_the_fullest_bin_when_it_suffices():
    p = problem([Option(0, {0: 6})], [(0, 1, 2)], on_hand=[7, 40, 6])
    s = solve(p)
    assert verify(p, s) == 0.0 and s.alloc == {(0, 0, 1): 6}


def test_one_cheap_part_unlocks_the_build():
    # option 0 needs 4 units of key 0 (3 on hand) -> buy exactly one single at 0.05;
    # option 1 needs a key only an expensive item can fill
    p = problem([Option(0, {0: 4}), Option(0, {1: 1})], [(0, 1), (2,)], on_hand=[3],
                items=[item("cheap", [(1, 0.05)]), item("dear", [(1, 2.00)])], item_supplier=[0, 0])
    s = solve(p)
    assert verify(p, s) == pytest.approx(0.05)
    assert s.chosen == (0,) and len(s.purchases) == 1
    assert s.purchases[0].item.sku == "cheap" and s.purchases[0].qty == 1


def test_price_break_makes_a_larger_quantity_cheaper():
    # need 70: 70 x 0.10 = 7.00, but 100 x 0.05 = 5.00 (all-units break at 100)
    it = item("r", [(1, 0.10), (100, 0.05)])
    p = problem([Option(0, {0: 70})], [(0,)], items=[it], item_supplier=[0])
    s = solve(p)
    assert verify(p, s) == pytest.approx(5.00)
    assert s.purchases[0].qty == 100


def test_pack_rounding_and_minimum_order():
    # packs of 25, minimum order 50: need 3 -> 50 units at 0.02 = 1.00
    it = item("r", [(1, 0.02)], pack=25, min_order=50)
    p = problem([Option(0, {0: 3})], [(0,)], items=[it], item_supplier=[0])
    s = solve(p)
    assert verify(p, s) == pytest.approx(1.00)
    assert (s.purchases[0].packs, s.purchases[0].qty) == (2, 50)


def test_supplier_charge_moves_the_order():
    # supplier 0 is cheaper per part but charges 5.00 per order; 10 parts: 10 x 0.20 + 5 = 7 vs 10 x 0.50 = 5
    p = problem([Option(0, {0: 10})], [(0, 1)],
                items=[item("a", [(1, 0.20)], supplier="s0"), item("b", [(1, 0.50)], supplier="s1")],
                item_supplier=[0, 1], charges=[5.0, 0.0])
    s = solve(p)
    assert verify(p, s) == pytest.approx(5.00)
    assert [pc.item.sku for pc in s.purchases] == ["b"] and s.charges_paid == {1: 0.0}
    # with 40 parts the charge pays for itself: 40 x 0.20 + 5 = 13 < 20
    p2 = problem([Option(0, {0: 40})], [(0, 1)], items=p.items, item_supplier=[0, 1], charges=[5.0, 0.0])
    s2 = solve(p2)
    assert verify(p2, s2) == pytest.approx(13.00) and s2.charges_paid == {0: 5.0}


def test_two_builds_compete_for_a_scarce_part_on_hand():
    # 4 units on hand of key 0; build 0 needs 4 of it (or 4 of key 1 at 1.00 each);
    # build 1 needs 4 of it (or 4 of key 2 at 0.10 each).  Best: build 0 takes the stock, build 1 buys.
    p = problem([Option(0, {0: 4}), Option(0, {1: 4}), Option(1, {0: 4}), Option(1, {2: 4})],
                [(0,), (1,), (2,)], on_hand=[4],
                items=[item("k1", [(1, 1.00)]), item("k2", [(1, 0.10)])], item_supplier=[0, 0])
    s = solve(p)
    assert verify(p, s) == pytest.approx(0.40)
    assert s.chosen == (0, 3)
    assert brute(p)[0] == pytest.approx(0.40)


def test_infeasible_when_no_source_suffices():
    p = problem([Option(0, {0: 5})], [(0,)], on_hand=[4])
    assert solve(p).status == "infeasible"
    assert brute(p)[0] == float("inf")


@st.composite
def problems(draw):
    n_keys = draw(st.integers(1, 3))
    n_builds = draw(st.integers(1, 2))
    options = []
    for b in range(n_builds):
        for _ in range(draw(st.integers(1, 2))):
            keys = draw(st.lists(st.integers(0, n_keys - 1), min_size=1, max_size=2, unique=True))
            options.append(Option(b, {r: draw(st.integers(1, 12)) for r in keys}, draw(st.floats(0, 5))))
    n_stock = draw(st.integers(0, 2))
    on_hand = [draw(st.integers(0, 10)) for _ in range(n_stock)]
    n_sup = draw(st.integers(1, 2))
    charges = [draw(st.sampled_from([0.0, 1.0, 3.5, 6.0])) for _ in range(n_sup)]
    items, sup = [], []
    for i in range(draw(st.integers(0, 3))):
        pack = draw(st.sampled_from([1, 5, 10]))
        mo = pack * draw(st.integers(1, 2))
        n_breaks = draw(st.integers(1, 3))
        qs = [1] + sorted(draw(st.lists(st.sampled_from([10, 20, 50]), min_size=n_breaks - 1,
                                        max_size=n_breaks - 1, unique=True)))
        # any order: a break may even raise the price (unusual data the rule must still price right)
        prices = [draw(st.sampled_from([0.05, 0.1, 0.2, 0.3, 0.5])) for _ in qs]
        j = draw(st.integers(0, n_sup - 1))
        items.append(item(f"i{i}", list(zip(qs, prices)), pack=pack, min_order=mo, supplier=f"s{j}"))
        sup.append(j)
    n_src = n_stock + len(items)
    key_sources = [draw(st.lists(st.integers(0, max(n_src - 1, 0)), max_size=n_src, unique=True)) if n_src else []
                   for _ in range(n_keys)]
    return problem(options, key_sources, on_hand, items, sup, charges)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(problems())
def test_program_matches_exhaustive_reference(p):
    ref_cost, _ = brute(p)
    s = solve(p)
    if ref_cost == float("inf"):
        assert s.status == "infeasible"
        return
    assert verify(p, s) == pytest.approx(ref_cost, abs=COST_TOL)
