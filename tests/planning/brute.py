"""Exhaustive reference for the purchase program (small problems only).

Enumerates every choice of one option per build and every purchasable
quantity of every item (0, or whole packs from the minimum order up to a bound
past the largest break), prices each with the item's own break rule and the
supplier charges, and keeps the cheapest whose demands can be met.  Whether
demands can be met is decided by Hall's condition on the bipartite graph of
(build, key) demands and sources: for every subset S of demands, the supply of
the sources adjacent to S covers the demand of S (Hall 1935; the
supply-demand form is Gale's theorem, Gale 1957).  No LP is used, so the
reference shares nothing with the program under test but the data.
"""

from __future__ import annotations

import itertools
import math


def item_quantities(item, bound_units: int) -> list[int]:
    top = item.order_qty(bound_units)
    qs = [0]
    q = item.order_qty(1)
    while q <= top:
        qs.append(q)
        q += item.pack
    return qs


def hall_ok(demand: dict, sources_of: dict, supply: dict) -> bool:
    nodes = [k for k, d in demand.items() if d > 0]
    for m in range(1, len(nodes) + 1):
        for sub in itertools.combinations(nodes, m):
            need = sum(demand[k] for k in sub)
            adj = set().union(*(sources_of[k] for k in sub))
            if need > sum(supply.get(s, 0) for s in adj):
                return False
    return True


def brute(p) -> tuple[float, tuple | None]:
    """(cheapest cost, chosen options) or (inf, None)."""
    by_build = [[k for k, o in enumerate(p.options) if o.build == b] for b in range(p.n_builds)]
    total_need = sum(max((sum(o.needs.values()) for o in (p.options[k] for k in ks)), default=0) for ks in by_build)
    best, arg = math.inf, None
    qty_choices = [item_quantities(it, total_need + max(q for q, _ in it.breaks)) for it in p.items]
    for combo in itertools.product(*by_build):
        demand = {}
        for k in combo:
            o = p.options[k]
            for r, n in o.needs.items():
                demand[(o.build, r)] = demand.get((o.build, r), 0) + n
        sources_of = {d: set(p.key_sources[d[1]]) for d in demand}
        for qs in itertools.product(*qty_choices):
            supply = {s: int(p.on_hand[s]) for s in range(p.n_stock)}
            supply.update({p.n_stock + i: q for i, q in enumerate(qs)})
            cost = sum(it.cost(q) for it, q in zip(p.items, qs))
            cost += sum(float(p.charges[j]) for j in {int(p.item_supplier[i]) for i, q in enumerate(qs) if q > 0})
            if cost < best - 1e-9 and hall_ok(demand, sources_of, supply):
                best, arg = cost, combo
    return best, arg
