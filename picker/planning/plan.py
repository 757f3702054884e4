"""The purchase plan as a mixed-integer linear program (``scipy.optimize.milp``, HiGHS).

The search hands over, per build, a few candidate designs (:class:`Option`),
each needing so many units of so many *keys* (a key is one position's
requirement: kind, value, the tolerance and ratings it was checked with).
Every key lists the *sources* that may fill it: stock lines (free, limited
to what is on hand and not reserved) and catalog items (bought in whole packs,
at least the minimum order, at the price break the quantity reaches, plus a
fixed charge per supplier ordered from).

Variables (all integral)::

    x[o]      1 if build b(o) uses option o                 sum_o x[o] = 1 per build
    y[a]      units sent along arc a = (build, key, source)  sum_a y[a] = sum_o need[o, key] x[o]
                                                             per (build, key)
                                                             sum_a y[a] <= on_hand[line] per stock line
    k[i, t]   packs of item i bought at price tier t         pack_i sum_t k[i, t] >= sum_a y[a] per item
    z[i, t]   1 if item i is bought at tier t                lo_t z <= pack k <= hi_t z, sum_t z <= 1
    w[j]      1 if supplier j is ordered from                z[i, t] <= w[j(i)]

``lo_t`` is the tier's break (at least the minimum order), ``hi_t`` one below
the next break (so each quantity is priced at exactly the break it reaches:
all-units breaks) or, for the last tier, the most the plan could ever need.
The objective is the money spent, ``sum price_t pack_i k[i, t] + sum charge_j w[j]``,
plus ``EPS_SCORE`` times the chosen options' search scores so that among equal
costs the better designs win, plus ``EPS_LINE / (1 + on_hand)`` per unit taken
from a stock line so that a key is served from the fullest bin rather than split
over several.  Both are tie-breakers: together they stay under one cent for a
plan of up to 2,000 units (HiGHS ignores much smaller objective terms: at 1e-7
per unit the fullest bin was not preferred).

One unit on hand cannot serve two builds: each stock line's arcs over every
build share its quantity.

References
----------
Wolsey, L. A., *Integer Programming*, Wiley 1998, ch. 1 (fixed-charge and
piecewise (all-units discount) cost models with binary indicators).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import LinearConstraint, milp
from scipy.sparse import coo_matrix

from picker.planning.catalog import CatalogItem, Purchase

#: Weight of the search score in the objective (per unit score, in money).  The
#: scores of all builds together stay below 1e-5 in money for scores under 10.
EPS_SCORE = 1e-6
#: Solver limits: relative gap at which HiGHS may stop, and wall time (s).
#: Weight per unit taken from a stock line, divided by (1 + its quantity on hand).
EPS_LINE = 1e-5
MIP_REL_GAP = 1e-9
TIME_LIMIT_S = 60.0


@dataclass(frozen=True)
class Option:
    """A candidate design for build ``build``: units needed per key (all boards), and its score."""

    build: int
    needs: dict  # key index -> units
    score: float = 0.0


@dataclass(frozen=True)
class Problem:
    """Everything the program is made of.

    Sources ``0 .. len(on_hand)-1`` are stock lines, the next ``len(items)``
    catalog items.  ``key_sources[r]`` lists the sources that may fill key ``r``.
    ``item_supplier[i]`` indexes ``charges``.
    """

    n_builds: int
    options: tuple
    key_sources: tuple
    on_hand: np.ndarray
    items: tuple
    item_supplier: np.ndarray
    charges: np.ndarray

    @property
    def n_stock(self) -> int:
        return int(len(self.on_hand))


@dataclass(frozen=True)
class Solution:
    """The plan: one option per build, where each unit comes from, what is bought.

    ``status`` is ``optimal``, ``limit`` (stopped at the time limit with a
    feasible plan; ``gap`` says how far from optimal it can be) or
    ``infeasible``.  ``gap`` is the solver's relative MIP gap (0 when proven
    optimal).  ``cost`` is the money spent (purchases and supplier charges).
    """

    status: str
    chosen: tuple  # option index per build
    alloc: dict  # (build, key, source) -> units
    purchases: tuple  # Purchase per bought item, item order
    charges_paid: dict  # supplier index -> charge
    cost: float
    gap: float
    nodes: int


class _Vars:
    """Column bookkeeping for the program."""

    def __init__(self):
        self.lb, self.ub, self.c = [], [], []

    def add(self, n: int, lb, ub, c) -> np.ndarray:
        start = len(self.c)
        self.lb += list(np.broadcast_to(lb, n))
        self.ub += list(np.broadcast_to(ub, n))
        self.c += list(np.broadcast_to(c, n))
        return np.arange(start, start + n)


class _Rows:
    """Constraint rows as sparse triplets."""

    def __init__(self):
        self.r, self.col, self.v, self.lo, self.hi = [], [], [], [], []

    def add(self, cols, vals, lo, hi) -> None:
        row = len(self.lo)
        self.r += [row] * len(cols)
        self.col += list(cols)
        self.v += list(vals)
        self.lo.append(lo)
        self.hi.append(hi)

    def constraint(self, n_vars: int) -> LinearConstraint:
        a = coo_matrix((self.v, (self.r, self.col)), shape=(len(self.lo), n_vars)).tocsr()
        return LinearConstraint(a, np.array(self.lo, dtype=float), np.array(self.hi, dtype=float))


def _tiers(item: CatalogItem, most: int) -> list[tuple[int, int, float]]:
    """(lo, hi, unit price) quantity ranges of an item, in units, whole packs only."""
    out = []
    for t, (q, price) in enumerate(item.breaks):
        lo = max(q, item.min_order)
        nxt = item.breaks[t + 1][0] if t + 1 < len(item.breaks) else None
        hi = most if nxt is None else min(most, nxt - 1)
        lo = item.pack * math.ceil(lo / item.pack)
        hi = item.pack * (hi // item.pack)
        if lo <= hi:
            out.append((lo, hi, price))
    return out


def solve(p: Problem, time_limit_s: float = TIME_LIMIT_S) -> Solution:
    """Cheapest plan for ``p``; see the module docstring for the program."""
    v, rows = _Vars(), _Rows()
    opts = p.options
    x = v.add(len(opts), 0, 1, [EPS_SCORE * o.score for o in opts])
    # arcs: per (build, key) any key some option of that build needs
    pairs = sorted({(o.build, r) for o in opts for r in o.needs})
    arcs = [(b, r, s) for b, r in pairs for s in p.key_sources[r]]
    most_need = sum(max((o.needs.get(r, 0) for o in opts if o.build == b), default=0) for b, r in pairs)
    y = v.add(len(arcs), 0, np.inf, [EPS_LINE / (1.0 + p.on_hand[s]) if s < p.n_stock else 0.0 for _, _, s in arcs])
    arc_of = {a: y[k] for k, a in enumerate(arcs)}
    for b in range(p.n_builds):
        cols = [x[k] for k, o in enumerate(opts) if o.build == b]
        rows.add(cols, [1.0] * len(cols), 1, 1)
    for b, r in pairs:
        cols = [arc_of[(b, r, s)] for s in p.key_sources[r]]
        need = [(x[k], -float(o.needs[r])) for k, o in enumerate(opts) if o.build == b and r in o.needs]
        rows.add(cols + [c for c, _ in need], [1.0] * len(cols) + [n for _, n in need], 0, 0)
    by_source: dict[int, list[int]] = {}
    for a, col in arc_of.items():
        by_source.setdefault(a[2], []).append(col)
    for s in range(p.n_stock):
        if s in by_source:
            rows.add(by_source[s], [1.0] * len(by_source[s]), -np.inf, float(p.on_hand[s]))
    w = v.add(len(p.charges), 0, 1, p.charges)
    tiers_of = {}
    for i, item in enumerate(p.items):
        s = p.n_stock + i
        if s not in by_source:
            continue
        most = item.order_qty(most_need + max(q for q, _ in item.breaks) + item.min_order)
        tiers = _tiers(item, most)
        if not tiers:
            continue
        k = v.add(len(tiers), 0, [hi // item.pack for _, hi, _ in tiers], [pr * item.pack for _, _, pr in tiers])
        z = v.add(len(tiers), 0, 1, 0.0)
        tiers_of[i] = (tiers, k, z)
        rows.add(list(k) + by_source[s], [float(item.pack)] * len(k) + [-1.0] * len(by_source[s]), 0, np.inf)
        for (lo, hi, _), kc, zc in zip(tiers, k, z):
            rows.add([kc, zc], [float(item.pack), -float(lo)], 0, np.inf)
            rows.add([kc, zc], [float(item.pack), -float(hi)], -np.inf, 0)
            rows.add([zc, w[p.item_supplier[i]]], [1.0, -1.0], -np.inf, 0)
        rows.add(list(z), [1.0] * len(z), 0, 1)
    # a source with no tiers (an item that cannot be bought in range) must carry nothing
    for i in range(len(p.items)):
        s = p.n_stock + i
        if s in by_source and i not in tiers_of:
            rows.add(by_source[s], [1.0] * len(by_source[s]), 0, 0)
    n = len(v.c)
    res = milp(np.array(v.c, dtype=float), integrality=np.ones(n), bounds=(np.array(v.lb, float), np.array(v.ub, float)),
               constraints=rows.constraint(n) if rows.lo else None,
               options={"mip_rel_gap": MIP_REL_GAP, "time_limit": time_limit_s})
    if res.x is None:
        return Solution("infeasible", (), {}, (), {}, math.inf, math.inf, int(getattr(res, "mip_node_count", 0) or 0))
    sol = np.round(res.x).astype(np.int64)
    chosen = tuple(int(next(k for k, o in enumerate(opts) if o.build == b and sol[x[k]] == 1)) for b in range(p.n_builds))
    alloc = {a: int(sol[col]) for a, col in arc_of.items() if sol[col] > 0}
    purchases, bought_from = [], set()
    for i, (tiers, k, z) in tiers_of.items():
        packs = int(sol[k].sum())
        if packs:
            qty = packs * p.items[i].pack
            purchases.append(Purchase(p.items[i], packs, qty, p.items[i].cost(qty)))
            bought_from.add(int(p.item_supplier[i]))
    # a supplier flag can sit at 1 with nothing bought only when its charge is 0; drop it
    paid = {j: float(p.charges[j]) for j in range(len(p.charges)) if sol[w[j]] == 1 and j in bought_from}
    cost = sum(pc.cost for pc in purchases) + sum(paid.values())
    gap = float(getattr(res, "mip_gap", 0.0) or 0.0)
    status = "optimal" if res.status == 0 else "limit"
    return Solution(status, chosen, alloc, tuple(purchases), paid, float(cost), gap,
                    int(getattr(res, "mip_node_count", 0) or 0))
