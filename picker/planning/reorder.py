"""``reorder``: the cheapest purchase that lets every planned build meet its spec.

1. A *virtual drawer* holds every line on hand (free, quantity not yet
   binding) and every catalog item (what it costs per board when bought for
   that build alone: packs, minimum and break included).  ``find`` searches it
   per build, with the same engine, worst-case rules and full check as a
   search of the drawer alone, ranking by that cost first
   (:data:`REORDER_WEIGHTS`), and keeps the best :data:`OPTIONS_PER_BUILD`
   designs per build as options.
2. Each option's positions become *keys*: kind, value and the tolerance and
   ratings the design was checked with.  A key may be filled by any stock line
   or catalog item of that kind and value that is at least as tight and at
   least as well rated (a tank capacitor's dielectric must stay stable; an
   inductor's DC resistance no higher; a transistor by profile name).
3. :func:`picker.planning.plan.solve` picks one option per build and the
   purchase (mixed-integer program, HiGHS) with real quantities on hand.

Pure: drawer and catalogs in, a :class:`Plan` out; nothing here touches the store.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from picker.circuit.device import NpnProfile
from picker.planning.catalog import CatalogItem, Purchase, Supplier
from picker.planning.plan import Option, Problem, Solution, solve
from picker.search.find import Drawer, FindSpec, Npn, find
from picker.search.stock import DEFAULT_TOL, STABLE_DIELECTRICS, Lines

#: Designs kept per build as options for the program.
OPTIONS_PER_BUILD = 8
#: Score weights of the searches: any design meeting the spec serves, so the searches rank
#: by what a board costs to buy, frequency error and margin only breaking near-ties.
REORDER_WEIGHTS = {"error": 0.2, "margin": 0.2, "cost": 1.0}
#: Quantity given to every line of the virtual drawer (the program enforces the real ones).
UNLIMITED = 10**6
#: Relative closeness at which two values are the same value.
SAME_VALUE = 1e-9
KINDS = ("resistor", "capacitor", "inductor")
#: The rating the full check judges per kind (cap-voltage, res-power): a key keeps only these.
RATED = {"resistor": "power_w", "capacitor": "voltage_v", "inductor": None}
NPN_FIELDS = ("hfe_min", "hfe_max", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vceo_v", "pd_w")


@dataclass(frozen=True)
class Target:
    """One planned build: a frequency, its tolerance and how many boards."""

    freq_hz: float
    tol: float
    boards: int


@dataclass(frozen=True)
class Source:
    """Where units can come from: a stock line (``part_id``) or a catalog item."""

    kind: str
    value: float | None
    tol: float
    voltage_v: float
    power_w: float
    dielectric: str
    dcr_ohm: float
    name: str | None  # npn profile
    qty: int  # on hand (stock) or 0 (catalog)
    part_id: int | None = None
    bin: str | None = None
    item: CatalogItem | None = None
    profile: NpnProfile | None = None  # npn only


@dataclass(frozen=True)
class Key:
    """A position's requirement, from the line its design was checked with."""

    kind: str
    value: float | None
    tol: float
    voltage_v: float
    power_w: float
    stable: bool
    dcr_ohm: float
    name: str | None


@dataclass(frozen=True)
class BuildPlan:
    target: Target
    candidate: object  # picker.search.find.Candidate (parts as found in the virtual drawer)
    refs: dict  # designator -> key index
    supply: dict  # key index -> list of (Source, units) for all boards


@dataclass(frozen=True)
class Plan:
    status: str  # optimal | limit | infeasible
    builds: tuple  # BuildPlan per target (empty when infeasible)
    purchases: tuple  # Purchase
    charges: dict  # supplier name -> fixed charge paid
    total_cost: float
    gap: float
    n_options: int
    options_per_build: tuple  # count per target
    reasons: tuple  # one line per reason, when infeasible
    stock_after: dict  # part_id -> qty left after every build (lines the plan uses)
    stock_used: tuple = ()  # (Source, units taken) per line the plan uses, source order


def _attr(item: CatalogItem, name: str, fill=np.nan):
    v = item.get(name)
    return fill if v is None else v


def sources_of(drawer: Drawer, suppliers: tuple) -> list[Source]:
    """Stock lines first (drawer order), then catalog items (supplier, file order)."""
    out = []
    for kind in KINDS:
        L = drawer.lines.get(kind)
        for k in range(L.n if L is not None else 0):
            out.append(Source(kind, float(L.value[k]), float(L.tol[k]), float(L.voltage_v[k]), float(L.power_w[k]),
                              str(L.dielectric[k] or ""), float(L.dcr_ohm[k]), None, int(L.qty[k]),
                              part_id=int(L.id[k]), bin=str(L.bin[k])))
    for n in drawer.npns:
        out.append(Source("npn", None, 0.0, np.nan, np.nan, "", 0.0, n.profile.name, int(n.qty),
                          part_id=n.part_id, bin=n.bin, profile=n.profile))
    for s in suppliers:
        for it in s.items:
            tol = _attr(it, "tolerance", DEFAULT_TOL.get(it.kind, 0.0))
            out.append(Source(it.kind, _attr(it, "value", None) if it.kind != "npn" else None, float(tol),
                              float(_attr(it, "voltage_v")), float(_attr(it, "power_w")),
                              str(_attr(it, "dielectric", "") or "").lower(), float(_attr(it, "dcr_ohm", 0.0)),
                              it.get("name"), 0, item=it, profile=_catalog_profile(it)))
    return out


def virtual_drawer(sources: list[Source], boards: int) -> tuple[Drawer, dict]:
    """The search's view: every source as a line with unlimited quantity; stock free,
    catalog at its unit price for ``boards`` units.  Returns the drawer and the map
    from the drawer's line ids to source indices."""
    ids: dict = {}
    lines = {}
    for kind in KINDS:
        idx = [k for k, s in enumerate(sources) if s.kind == kind]
        vid = np.array([k + 1 for k in idx], dtype=np.int64)  # ids are source index + 1
        src = [sources[k] for k in idx]
        cost = np.array([0.0 if s.item is None else _per_board(s.item, boards) for s in src])
        lines[kind] = Lines(kind=kind, id=vid, value=np.array([s.value for s in src], dtype=float),
                            tol=np.array([s.tol for s in src], dtype=float), qty=np.full(len(src), UNLIMITED),
                            cost=cost, bin=np.array([s.bin if s.item is None else f"{s.item.supplier}:{s.item.sku}"
                                                     for s in src], dtype=object),
                            voltage_v=np.array([s.voltage_v for s in src], dtype=float),
                            power_w=np.array([s.power_w for s in src], dtype=float),
                            dielectric=np.array([s.dielectric for s in src], dtype=object),
                            dcr_ohm=np.array([s.dcr_ohm for s in src], dtype=float))
        ids.update({int(i): k for i, k in zip(vid, idx)})
    npns, seen = [], set()
    for k, s in enumerate(sources):  # one search per profile name (stock first: it is free)
        if s.kind != "npn" or s.name.casefold() in seen:
            continue
        seen.add(s.name.casefold())
        prof = s.profile
        cost = 0.0 if s.item is None else _per_board(s.item, boards)
        npns.append(Npn(prof, k + 1, UNLIMITED, cost, s.bin or f"{s.item.supplier}:{s.item.sku}"))
        ids[k + 1] = k
    return Drawer(lines, tuple(npns)), ids


def _per_board(item: CatalogItem, boards: int) -> float:
    """What one board's unit of ``item`` costs when bought for ``boards`` boards alone
    (whole packs, the minimum order and the break reached), shared out over the boards."""
    return item.cost(item.order_qty(boards)) / boards


def _catalog_profile(it: CatalogItem) -> NpnProfile | None:
    if it.kind != "npn":
        return None
    return NpnProfile(name=it.get("name"), **{f: float(it.get(f)) for f in NPN_FIELDS if it.get(f) is not None})


def key_of(kind: str, info, value, name=None) -> Key:
    """The requirement a position's checked line sets (``info``: its PartInfo)."""
    if kind == "npn":
        return Key("npn", None, 0.0, np.nan, np.nan, False, 0.0, name.casefold())
    nan = np.nan
    volts = info.voltage_v if RATED[kind] == "voltage_v" and info.voltage_v is not None else nan
    watts = info.power_w if RATED[kind] == "power_w" and info.power_w is not None else nan
    return Key(kind, float(value), float(info.tolerance if info.tolerance is not None else DEFAULT_TOL[kind]),
               float(volts), float(watts),
               (info.dielectric or "").lower() in STABLE_DIELECTRICS, float(info.dcr_ohm or 0.0), None)


def fitting_sources(keys: list[Key], sources: list[Source]) -> tuple:
    """Per key, the indices of the sources that may fill it: same kind and value, at least
    as tight, at least as well rated where the key's line was rated, a stable dielectric
    where the key's was, a DC resistance no higher; a transistor by profile name.  One
    array comparison over every source per key."""
    kind = np.array([s.kind for s in sources], dtype=object)
    value = np.array([np.nan if s.value is None else s.value for s in sources], dtype=float)
    tol = np.array([s.tol for s in sources], dtype=float)
    volts = np.array([s.voltage_v for s in sources], dtype=float)
    watts = np.array([s.power_w for s in sources], dtype=float)
    stable = np.isin(np.array([s.dielectric for s in sources], dtype=object), STABLE_DIELECTRICS)
    dcr = np.array([s.dcr_ohm for s in sources], dtype=float)
    name = np.array([(s.name or "").casefold() for s in sources], dtype=object)
    out = []
    with np.errstate(invalid="ignore"):
        for key in keys:
            ok = kind == key.kind
            if key.kind == "npn":
                ok &= name == key.name
            else:
                ok &= np.isclose(value, key.value, rtol=SAME_VALUE, atol=0.0) & (tol <= key.tol + 1e-12)
                for need, have in ((key.voltage_v, volts), (key.power_w, watts)):
                    if np.isfinite(need):
                        ok &= have >= need  # NaN (unrated) compares False
                if key.stable:
                    ok &= stable
                ok &= dcr <= key.dcr_ohm * (1 + 1e-9) + 1e-12
            out.append(tuple(int(k) for k in np.flatnonzero(ok)))
    return tuple(out)


def plan(drawer: Drawer, suppliers: tuple, targets: list[Target], base: FindSpec,
         progress: Callable[[str, float], None] | None = None) -> Plan:
    """The cheapest plan for ``targets``; ``base`` gives every search option but the target."""
    tick = progress or (lambda what, frac: None)
    sources = sources_of(drawer, suppliers)
    keys: list[Key] = []
    key_index: dict = {}
    options, metas, per_build, reasons = [], [], [], []
    for b, t in enumerate(targets):
        vd, ids = virtual_drawer(sources, t.boards)
        spec = replace(base, freq_hz=t.freq_hz, tol=t.tol, boards=t.boards, top=OPTIONS_PER_BUILD, mc=0,
                       weights=dict(REORDER_WEIGHTS))
        found = find(vd, spec, progress=lambda what, frac, b=b: tick(f"build {b + 1}: {what}",
                                                                      (b + frac) / (len(targets) + 1)))
        if not found.candidates:
            reasons.append(f"build {b + 1} ({_target_text(t)}): nothing workable even with every catalog item: "
                           + "; ".join(r for r in found.reasons if "picker reorder" not in r))
        per_build.append(len(found.candidates))
        for cand in found.candidates:
            refs, needs = {}, {}
            for ref, pj in cand.parts.items():
                s = sources[ids[int(pj["part_id"])]]
                if ref == "Q1":
                    key = key_of("npn", None, None, s.name)
                else:
                    key = key_of(s.kind, cand.design.parts[ref], cand.design.values[ref])
                if key not in key_index:
                    key_index[key] = len(keys)
                    keys.append(key)
                r = key_index[key]
                refs[ref] = r
                needs[r] = needs.get(r, 0) + t.boards
            options.append(Option(b, needs, float(cand.score)))
            metas.append((cand, refs))
    n_stock = sum(1 for s in sources if s.item is None)
    stock = sources[:n_stock]
    items = [s.item for s in sources[n_stock:]]
    if reasons:
        return Plan("infeasible", (), (), {}, float("inf"), float("inf"), len(options), tuple(per_build),
                    tuple(reasons), {})
    tick("planning the purchase", len(targets) / (len(targets) + 1))
    key_sources = fitting_sources(keys, sources)
    names = [s.name for s in suppliers]
    prob = Problem(len(targets), tuple(options), key_sources, np.array([s.qty for s in stock], dtype=np.int64),
                   tuple(items), np.array([names.index(it.supplier) for it in items], dtype=np.int64),
                   np.array([s.order_charge for s in suppliers], dtype=float))
    sol = solve(prob)
    tick("done", 1.0)
    if sol.status == "infeasible":
        return Plan("infeasible", (), (), {}, float("inf"), float("inf"), len(options), tuple(per_build),
                    tuple(_why_infeasible(prob, targets)), {})
    builds = []
    for b, k in enumerate(sol.chosen):
        cand, refs = metas[k]
        supply = {}
        for (bb, r, s), u in sol.alloc.items():
            if bb == b:
                supply.setdefault(r, []).append((sources[s], u))
        builds.append(BuildPlan(targets[b], cand, refs, supply))
    used: dict = {}
    for (_, _, s), u in sol.alloc.items():
        if s < n_stock:
            used[s] = used.get(s, 0) + u
    after = {int(stock[s].part_id): int(stock[s].qty - u) for s, u in sorted(used.items())}
    return Plan(sol.status, tuple(builds), sol.purchases, {names[j]: c for j, c in sol.charges_paid.items()},
                sol.cost, sol.gap, len(options), tuple(per_build), (), after,
                tuple((stock[s], u) for s, u in sorted(used.items())))


def _target_text(t: Target) -> str:
    from picker.units import format_eng

    return f"{format_eng(t.freq_hz, 'Hz')} ±{t.tol:.1%} x {t.boards}"


def _why_infeasible(prob: Problem, targets: list[Target]) -> list[str]:
    """Each build alone: which cannot be met, and that the rest fail only together."""
    out = []
    for b, t in enumerate(targets):
        keep = [k for k, o in enumerate(prob.options) if o.build == b]
        alone = replace(prob, n_builds=1, options=tuple(replace(prob.options[k], build=0) for k in keep))
        if solve(alone).status == "infeasible":
            out.append(f"build {b + 1} ({_target_text(t)}): none of its {len(keep)} designs can be stocked: "
                       "a part they need is neither on hand in that quantity nor in any catalog")
    if not out:
        out.append("every build can be met alone, but not all together: they compete for parts on hand "
                   "that no catalog sells")
    return out
