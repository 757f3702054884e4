"""reorder end to end on small drawers: the search's options, the program, and an independent re-check."""

from __future__ import annotations

import numpy as np
import pytest

from picker.circuit.design import Design, PartInfo
from picker.circuit.evaluate import check_design
from picker.planning.catalog import CatalogItem, Supplier
from picker.planning.reorder import Target, plan
from picker.search.find import Drawer, FindSpec
from tests.search.test_find import TEMPS, _target, drawer

BASE = FindSpec(freq_hz=1.0, tol=0.01, topologies=("colpitts-ce",), min_margin=1.5, temps_c=TEMPS)


def cap(sku, c_f, price, dielectric="film", supplier="Alder Row"):
    return CatalogItem(supplier, sku, "capacitor", {"value": c_f, "tolerance": 0.05, "voltage_v": 63.0,
                                                   "dielectric": dielectric}, 1, 1, ((1, price),))


def suppliers():
    return (Supplier("Alder Row", 0.0, (cap("C47N", 47e-9, 0.30), cap("C4N7", 4.7e-9, 0.50, "c0g"),
                                        CatalogItem("Alder Row", "L1M", "inductor", {"value": 1e-3, "tolerance": 0.05,
                                                                                     "dcr_ohm": 5.0}, 1, 1, ((1, 2.0),)))),)


def without_47n(qty_47n=0):
    d = drawer()
    c = d.lines["capacitor"]
    keep = ~np.isclose(c.value, 47e-9) if qty_47n == 0 else np.ones(c.n, bool)
    qty = np.where(np.isclose(c.value, 47e-9), qty_47n, c.qty) if qty_47n else c.qty
    lines = type(c)(**{f: (getattr(c, f)[keep] if isinstance(getattr(c, f), np.ndarray) else getattr(c, f))
                       for f in c.__dataclass_fields__} | {"qty": qty[keep]})
    return Drawer(d.lines | {"capacitor": lines}, d.npns)


@pytest.fixture(scope="module")
def f_known():
    return _target()


def recheck(build):
    """An independent check_design of the chosen design with the checked parts' tolerances."""
    cand = build.candidate
    d = Design(cand.topology, cand.design.values, npn=cand.design.npn, style="breadboard",
               parts={r: PartInfo(**{k: getattr(p, k) for k in ("tolerance", "voltage_v", "power_w", "dielectric",
                                                                  "dcr_ohm")})
                      for r, p in cand.design.parts.items()})
    ev = check_design(d, TEMPS, integrate=False)
    assert abs(ev.freq_hz / build.target.freq_hz - 1) <= build.target.tol
    assert ev.margin_worst >= BASE.min_margin


def test_nothing_to_buy_when_the_drawer_can_do_it(f_known):
    p = plan(drawer(), suppliers(), [Target(f_known, 0.01, 1)], BASE)
    assert p.status == "optimal" and p.purchases == () and p.total_cost == 0.0
    recheck(p.builds[0])


def test_one_cheap_part_unlocks_the_build(f_known):
    p = plan(without_47n(), suppliers(), [Target(f_known, 0.01, 1)], BASE)
    assert p.status == "optimal", p.reasons
    assert [(pc.item.sku, pc.qty) for pc in p.purchases] == [("C47N", 1)]
    assert p.total_cost == pytest.approx(0.30)
    assert p.builds[0].candidate.design.values["C2"] == pytest.approx(47e-9)
    recheck(p.builds[0])


def test_two_builds_cannot_share_one_unit_on_hand(f_known):
    # one 47 nF on hand, two one-board builds that want it: one takes it, the other buys one
    p = plan(without_47n(qty_47n=1), suppliers(), [Target(f_known, 0.01, 1), Target(f_known, 0.01, 1)], BASE)
    assert p.status == "optimal", p.reasons
    assert [(pc.item.sku, pc.qty) for pc in p.purchases] == [("C47N", 1)]
    # the single 47 nF on hand (at whatever position) serves one build; the other build's 47 nF is bought
    from_stock = [sum(u for lst in b.supply.values() for s, u in lst if s.item is None and s.value == 47e-9)
                  for b in p.builds]
    bought = [sum(u for lst in b.supply.values() for s, u in lst if s.item is not None) for b in p.builds]
    assert sorted(from_stock) == [0, 1] and sorted(bought) == [0, 1]
    assert p.stock_after[104] == 0
    for b in p.builds:
        recheck(b)


def test_unreachable_target_names_the_build():
    p = plan(drawer(), suppliers(), [Target(60e6, 0.01, 1)], BASE)
    assert p.status == "infeasible" and p.builds == ()
    assert p.reasons and p.reasons[0].startswith("build 1 (60 MHz")
