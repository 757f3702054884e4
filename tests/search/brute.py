"""A straightforward brute-force reference for ``find``'s ranking (common-emitter
Colpitts, Clapp, Hartley and common-base Colpitts).

Per topology it forms the full product of every stocked line at every tank
and bias position (common-emitter Colpitts: L1, C1, C2; Clapp: L1, C1, C2,
C3; Hartley: L1, L2, C1; then R1, R2, RE, RE1 or none, RC; common base: L1, C1,
C2, then R1, R2, RE), keeps the designs
that meet the stated design rules (the rules that define a result, not the
search's screens), fills the coupling and bypass positions by their stated
rule, runs the engine on every survivor with the global phase-zero search (no
frequency guess, no window), derives the worst-case margin over hFE,
temperature and part tolerances, and ranks by the score.  Nothing of the
search's decomposition is used: no screen frequency window, no hand-gain
screen, no binary search, no buckets.  (The tank rules involve only tank
positions and the bias rules only bias positions, so the product is formed as
the tank product's survivors times the bias product's survivors: the same
designs as filtering the whole product, without holding it in memory.)

The rules re-stated here (the common ones also in the README under "What counts as
a result", which does not yet state the Clapp and Hartley tank rules):

* tank capacitors of a stable dielectric;
* common-emitter Colpitts: feedback C1/C2 inside ``space.FEEDBACK_CE``;
* Clapp: feedback C1/C2 inside ``space.FEEDBACK_CE`` and the series capacitor
  C3 at most ``space.CLAPP_C3_FRACTION`` x min(C1, C2) (nominal values);
* Hartley: two separate coils L1 (collector side) and L2 (base side), K = 0,
  feedback L2/L1 inside ``space.FEEDBACK_CE``; each coil's own DCR;
* common base: feedback C1/(C1 + C2) inside ``space.FEEDBACK_CB``; no RC and no
  RE1: the tank coil L1 carries the collector current, so the VCE rule counts
  its DCR; CB (base to ground) is the one bypass capacitor and feeds the base;
  its tank resonance is L1 with stray + Cmu across C1 in series with C2 + stray + Cpi;
* divider: VB between VBE + 0.3 V and 70 % of the supply, divider current at
  most the top of the current window, RTh/(hFE_min + 1) <= 0.1 (RE + RE1);
* emitter current (hand method at hFE_min) inside the window; RE1 none or an
  on-hand value of 10 ohm..1 kohm and not above RE; VCE at DC >= 1.5 V;
* coupling and bypass (CC1 feeds the collector, CC2 the base, CE the
  emitter): the smallest on-hand capacitor (rated for the supply) whose
  reactance at the target is at most half the coupling fraction of the
  impedance it feeds (hand figures);
* the loop frequency pulled at most ``space.FREQ_SLACK`` from the tank's own
  resonance, with the strays (``style_stray_f`` per node) and the transistor's
  capacitance (``space.DeviceCaps.estimate`` at the middle of the current
  window: Cmu on the collector side, Cpi + Cmu on the base side) included:
  Colpitts L1 with C1 + stray + Cmu in series with C2 + stray + Cpi + Cmu;
  Clapp the same with C3 + stray also in series; Hartley L1 + L2 with C1 plus
  the two end capacitances (stray + Cmu and stray + Cpi + Cmu) in series
  across it;
* frequency within tolerance, nominal margin and tolerance-derated worst-case
  margin at least ``min_margin``, transistor not saturated;
* with ``combine``: the trim position (``TRIM``) may hold, besides any single
  line, any unordered pair of tank-fit lines in series or in parallel (a line
  with itself only if it holds twice the boards); a pair's tolerance is the
  worse of the two, its cost the sum, and it counts as two parts;
* the tank's loaded Q at nominal (``evaluate.loaded_q_of``, the figure the full
  check judges) at least ``checks.MIN_LOADED_Q``.

Slow on purpose; used by tests/search/test_exact.py and bench/find.py.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from picker.circuit.bias import HAND_VT_V
from picker.circuit.checks import CAP_DERATE, COUPLING_FRACTION, MIN_LOADED_Q
from picker.circuit.design import DesignBatch, style_stray_f
from picker.circuit.engine import small_signal
from picker.circuit.evaluate import loaded_q_of
from picker.circuit.topology import get_topology
from picker.search import space
from picker.search.stock import STABLE_DIELECTRICS

#: Tank positions per topology (a designator starting with L is an inductor, with C a capacitor).
TANKS = {"colpitts-ce": ("L1", "C1", "C2"), "clapp": ("L1", "C1", "C2", "C3"), "hartley": ("L1", "L2", "C1"),
         "colpitts-cb": ("L1", "C1", "C2")}
BIAS = ("R1", "R2", "RE", "RE1", "RC")
COUPLING = ("CC1", "CC2", "CE")
#: The common-base form: no RC (the tank coil carries the collector current), no RE1,
#: and one bypass capacitor CB from the base to ground.
CB_BIAS = ("R1", "R2", "RE")
CB_COUPLING = ("CB",)
#: The trim position per topology: the one ``--combine`` may fill with a pair (find.TRIM).
TRIM = {"colpitts-ce": "C2", "clapp": "C3", "hartley": "C1", "colpitts-cb": "C2"}
#: Designs per engine call (memory only; the results do not depend on it).
ENGINE_CHUNK = 20_000


def _usable(lines, boards):
    return np.flatnonzero(lines.qty >= boards)


def _topologies(spec):
    missing = [t for t in spec.topologies if t not in TANKS]
    if missing:
        raise ValueError(f"no brute-force reference for {', '.join(missing)} (covered: {', '.join(TANKS)})")
    return tuple(spec.topologies)


def space_size(drawer, spec) -> int:
    """Designs in the full product of positions (every line at every position, coupling
    and bypass included), per transistor line, summed over the spec's topologies."""
    n = {k: int(_usable(drawer.lines[k], spec.boards).size) for k in ("resistor", "capacitor", "inductor")}
    npn = sum(1 for q in drawer.npns if q.qty >= spec.boards)
    total = 0
    for t in _topologies(spec):
        tank = TANKS[t]
        nl = sum(r.startswith("L") for r in tank)
        if t == "colpitts-cb":
            nc, nr = sum(r.startswith("C") for r in tank) + len(CB_COUPLING), n["resistor"] ** 3
        else:
            nc, nr = sum(r.startswith("C") for r in tank) + len(COUPLING), n["resistor"] ** 4 * (n["resistor"] + 1)
        total += n["inductor"] ** nl * n["capacitor"] ** nc * nr
    return total * npn


def brute_force(drawer, spec) -> list[dict]:
    """Every result by score (best first), one per tank, topology and transistor line:
    dicts with ``score, parts, topology, npn, values, freq_hz, margin, worst``."""
    out = []
    for topology in _topologies(spec):
        for npn in drawer.npns:
            if npn.qty < spec.boards or (spec.npn and npn.profile.name.casefold() != spec.npn.casefold()):
                continue
            out.extend(_one(drawer, spec, npn, topology))
    out.sort(key=lambda d: (d["score"], d["parts"]))
    return out


def trim_choices(C, ic_tank, boards):
    """``--combine``'s choices at the trim position, as a table of virtual lines: every
    tank-fit line alone, then every unordered pair of them (a line with itself only if it
    holds twice the boards) in series and in parallel.  A pair's tolerance is the worse of
    the two, its cost the sum, its parts 2."""
    i, j = np.triu_indices(ic_tank.size)
    a, b = ic_tank[i], ic_tank[j]
    ok = (a != b) | (C.qty[a] >= 2 * boards)
    a, b = a[ok], b[ok]
    va, vb = C.value[a], C.value[b]
    tol, cost = np.maximum(C.tol[a], C.tol[b]), C.cost[a] + C.cost[b]
    return SimpleNamespace(  # singles, then the series pairs, then the parallel pairs
        value=np.concatenate([C.value[ic_tank], va * vb / (va + vb), va + vb]),
        tol=np.concatenate([C.tol[ic_tank], tol, tol]),
        cost=np.concatenate([C.cost[ic_tank], cost, cost]),
        parts=np.concatenate([np.ones(ic_tank.size, int), np.full(2 * a.size, 2)]),
        line=np.concatenate([ic_tank, a, a]), line2=np.concatenate([np.full(ic_tank.size, -1), b, b]))


def _tank_product(drawer, spec, topology):
    """Every tank of stocked lines meeting the tank rules, and the table each position's
    indices point into: the drawer's lines, except with ``spec.combine`` at the trim
    position, whose indices point into :func:`trim_choices`."""
    C, L = drawer.lines["capacitor"], drawer.lines["inductor"]
    ic, il = _usable(C, spec.boards), _usable(L, spec.boards)
    ic_tank = ic[np.isin(C.dielectric[ic].astype(str), STABLE_DIELECTRICS)]
    tank = TANKS[topology]
    opts = {r: il if r.startswith("L") else ic_tank for r in tank}
    table = {r: L if r.startswith("L") else C for r in tank}
    if spec.combine:
        trim = trim_choices(C, ic_tank, spec.boards)
        opts[TRIM[topology]], table[TRIM[topology]] = np.arange(trim.value.size), trim
    grids = np.meshgrid(*[opts[r] for r in tank], indexing="ij")
    g = dict(zip(tank, (a.ravel() for a in grids)))
    v = {r: table[r].value[g[r]] for r in tank}
    lo, hi = space.FEEDBACK_CE
    if topology == "hartley":
        fb = v["L2"] / v["L1"]
        ok = (fb >= lo) & (fb <= hi)
    elif topology == "colpitts-cb":
        fb = v["C1"] / (v["C1"] + v["C2"])
        ok = (fb >= space.FEEDBACK_CB[0]) & (fb <= space.FEEDBACK_CB[1])
    else:
        fb = v["C1"] / v["C2"]
        ok = (fb >= lo) & (fb <= hi)
        if topology == "clapp":
            ok &= v["C3"] <= space.CLAPP_C3_FRACTION * np.minimum(v["C1"], v["C2"])
    return {r: a[ok] for r, a in g.items()}, table


def _tank_resonance_hz(topology, v, stray_f, caps):
    """The tank's own resonance, strays and transistor capacitance included (see the docstring)."""
    coll, base = stray_f + caps.cmu_f, stray_f + caps.cpi_f + caps.cmu_f
    if topology == "colpitts-cb":  # collector side stray + Cmu across, C1 in series with C2 + stray + Cpi
        emit = stray_f + caps.cpi_f
        c = coll + 1.0 / (1.0 / v["C1"] + 1.0 / (v["C2"] + emit))
        return 1.0 / (2 * np.pi * np.sqrt(v["L1"] * c))
    if topology == "hartley":
        c = v["C1"] + coll * base / (coll + base)
        return 1.0 / (2 * np.pi * np.sqrt((v["L1"] + v["L2"]) * c))
    inv = 1.0 / (v["C1"] + coll) + 1.0 / (v["C2"] + base)
    if topology == "clapp":
        inv = inv + 1.0 / (v["C3"] + stray_f)
    return 1.0 / (2 * np.pi * np.sqrt(v["L1"] / inv))


def _one(drawer, spec, npn, topology):
    p = npn.profile
    tank = TANKS[topology]
    R, C, L = drawer.lines["resistor"], drawer.lines["capacitor"], drawer.lines["inductor"]
    ir, ic = _usable(R, spec.boards), _usable(C, spec.boards)
    # the bias product and its rules
    cb = topology == "colpitts-cb"
    bias_refs, coupling_refs = (CB_BIAS, CB_COUPLING) if cb else (BIAS, COUPLING)
    if cb:  # R1, R2, RE; no RE1 (-1) and no RC (the coil's DCR, checked per design below)
        grids = np.meshgrid(ir, ir, ir, [-1], [-1], indexing="ij")
    else:
        re1_opts = np.concatenate([[-1], ir[(R.value[ir] >= 10.0) & (R.value[ir] <= 1e3)]])
        grids = np.meshgrid(ir, ir, ir, re1_opts, ir, indexing="ij")
    gb = dict(zip(BIAS, (a.ravel() for a in grids)))
    vb_ = {r: np.where(gb[r] >= 0, R.value[np.maximum(gb[r], 0)], 0.0) for r in BIAS}
    beta, vcc = p.hfe_min, spec.vcc_v
    vb = vcc * vb_["R2"] / (vb_["R1"] + vb_["R2"])
    rth = vb_["R1"] * vb_["R2"] / (vb_["R1"] + vb_["R2"])
    ie = (vb - p.vbe_v) / (vb_["RE"] + vb_["RE1"] + rth / (beta + 1))
    vce = vcc - ie * beta / (beta + 1) * vb_["RC"] - ie * (vb_["RE"] + vb_["RE1"])
    ok = ((vb >= p.vbe_v + 0.3) & (vb <= 0.7 * vcc) & (vcc / (vb_["R1"] + vb_["R2"]) <= spec.ie_a[1])
          & (ie >= spec.ie_a[0]) & (ie <= spec.ie_a[1]) & (rth / (beta + 1) <= 0.1 * (vb_["RE"] + vb_["RE1"]))
          & (vb_["RE1"] <= vb_["RE"]) & (vce >= 1.5))
    gb = {r: a[ok] for r, a in gb.items()}
    vb_ = {r: a[ok] for r, a in vb_.items()}
    ie, rth = ie[ok], rth[ok]
    # coupling and bypass by their rule (they depend on the bias network only)
    derate = np.array([CAP_DERATE.get(d, 0.8) for d in C.dielectric])
    cc = ic[~np.isfinite(C.voltage_v[ic]) | (C.voltage_v[ic] * derate[ic] >= vcc)]
    cc = cc[np.argsort(C.value[cc], kind="stable")]
    gm = ie / HAND_VT_V
    r_in = 1.0 / (1.0 / rth + 1.0 / (p.hfe_nominal / gm + (p.hfe_nominal + 1) * vb_["RE1"]))
    feeds = ({"CB": r_in} if cb else
             {"CC1": vb_["RC"], "CC2": r_in, "CE": np.minimum(vb_["RE"], 1.0 / gm + vb_["RE1"])})
    omega = 2 * np.pi * spec.freq_hz
    keep = np.ones(ie.size, dtype=bool)
    for r, z in feeds.items():
        need = 1.0 / (omega * 0.5 * COUPLING_FRACTION * z)
        k = np.searchsorted(C.value[cc], need, "left")
        keep &= k < cc.size
        gb[r] = cc[np.minimum(k, cc.size - 1)]
    gb = {r: a[keep] for r, a in gb.items() if r in bias_refs + coupling_refs}
    ie = ie[keep]
    # the tank product and its rules, then every tank with every bias network
    gt, tank_lines = _tank_product(drawer, spec, topology)
    nt, nb = next(iter(gt.values())).size, keep.sum()
    if nt == 0 or nb == 0:
        return []
    it, ib = (a.ravel() for a in np.meshgrid(np.arange(nt), np.arange(nb), indexing="ij"))
    if cb:  # VCE at DC >= 1.5 V with the design's own coil carrying the collector current
        re_ohm = R.value[gb["RE"][ib]]
        vce = vcc - ie[ib] * beta / (beta + 1) * L.dcr_ohm[gt["L1"][it]] - ie[ib] * re_ohm
        it, ib = it[vce >= 1.5], ib[vce >= 1.5]
        if it.size == 0:
            return []
    g = {r: a[it] for r, a in gt.items()} | {r: a[ib] for r, a in gb.items()}
    kind_lines = tank_lines | {r: R for r in bias_refs} | {r: C for r in coupling_refs}
    v = {r: np.where(a >= 0, kind_lines[r].value[np.maximum(a, 0)], 0.0) for r, a in g.items()}
    tols = {r: np.where(g[r] >= 0, kind_lines[r].tol[np.maximum(g[r], 0)], 0.0) for r in tank + bias_refs}
    coils = [r for r in tank if r.startswith("L")]
    dcr = {r: L.dcr_ohm[g[r]] for r in coils}
    if topology == "hartley":
        v["K"] = np.zeros(it.size)  # two separate coils
    n = it.size
    topo = get_topology(topology)

    def engine(rows, values, hfe, temp_c, with_q=False):
        """Loop frequency, margin, saturation and (``with_q``) loaded tank Q of ``rows`` (in
        chunks, to bound the memory)."""
        parts = []
        for start in range(0, rows.size, ENGINE_CHUNK):
            sub = rows[start:start + ENGINE_CHUNK]
            full = lambda x: np.full(sub.size, float(x))  # noqa: E731
            b = DesignBatch(topology=topo, values={r: a[sub] for r, a in values.items()},
                            dcr_ohm={r: a[sub] for r, a in dcr.items()}, hfe=full(hfe), vbe_v=full(p.vbe_v),
                            ft_hz=full(p.ft_hz), cob_f=full(p.cob_f), vaf_v=full(p.vaf_v), vcc_v=full(vcc),
                            temp_c=full(temp_c), stray_f=full(style_stray_f(spec.style)))
            ss = small_signal(b)  # global phase-zero search
            q = loaded_q_of(b, ss.hybrid, ss.freq_loop_hz) if with_q else np.zeros(sub.size)
            parts.append((ss.freq_loop_hz, ss.margin, ss.dc.saturated, q))
        f, m, sat, q = (np.concatenate(x) for x in zip(*parts))
        return SimpleNamespace(freq_loop_hz=f, margin=m, saturated=sat, loaded_q=q)

    rows = np.arange(n)
    ss = engine(rows, v, p.hfe_nominal, spec.nominal_c, with_q=True)
    err = ss.freq_loop_hz / spec.freq_hz - 1
    caps = space.DeviceCaps.estimate(p, float(np.sqrt(spec.ie_a[0] * spec.ie_a[1])))
    f_tank = _tank_resonance_hz(topology, v, style_stray_f(spec.style), caps)
    pull = ss.freq_loop_hz / f_tank - 1
    good = (np.isfinite(ss.freq_loop_hz) & (np.abs(err) <= spec.tol) & (ss.margin >= spec.min_margin)
            & (np.abs(pull) <= space.FREQ_SLACK) & ~ss.saturated & (ss.loaded_q >= MIN_LOADED_Q))
    rows = rows[good]
    if rows.size == 0:
        return []
    nominal = ss.margin[rows]
    worst = nominal.copy()
    for t in dict.fromkeys((spec.nominal_c,) + tuple(spec.temps_c)):
        for h in (p.hfe_min, p.hfe_nominal, p.hfe_max):
            if h == p.hfe_nominal and t == spec.nominal_c:
                continue
            worst = np.minimum(worst, engine(rows, v, h, t).margin)
    step = 0.01
    derate = np.zeros(rows.size)
    for r in tank + bias_refs:
        if not np.any(v[r][rows] > 0):
            continue
        bumped = dict(v)
        bumped[r] = v[r] * (1 + step)
        m = engine(rows, bumped, p.hfe_nominal, spec.nominal_c).margin
        with np.errstate(divide="ignore", invalid="ignore"):
            sens = (np.log(np.maximum(m, 1e-300)) - np.log(nominal)) / np.log1p(step)
        derate += np.abs(np.nan_to_num(sens, nan=0.0)) * np.log1p(tols[r][rows])
    worst = worst * np.exp(-derate)
    good = worst >= spec.min_margin
    rows, worst, nominal = rows[good], worst[good], nominal[good]
    if rows.size == 0:
        return []
    cost = npn.cost + sum(np.where(g[r][rows] >= 0, kind_lines[r].cost[np.maximum(g[r][rows], 0)], 0.0) for r in g)
    parts = 1 + sum((g[r][rows] >= 0).astype(int) for r in g)
    if spec.combine:  # a pair at the trim position is two parts
        parts = parts + kind_lines[TRIM[topology]].parts[g[TRIM[topology]][rows]] - 1
    w = spec.weights
    score = (w.get("error", 0.0) * np.abs(err[rows]) / spec.tol
             + w.get("margin", 0.0) * np.maximum(0.0, 1 - worst / (1.5 * spec.min_margin)) + w.get("cost", 0.0) * cost)
    best: dict = {}
    for j in np.lexsort((parts, score)):
        key = tuple(int(g[r][rows[j]]) for r in tank)
        if key not in best:
            best[key] = {"score": float(score[j]), "parts": int(parts[j]), "topology": topology, "npn": npn.part_id,
                         "values": {r: float(a[rows[j]]) for r, a in v.items()},
                         "freq_hz": float(ss.freq_loop_hz[rows[j]]), "margin": float(nominal[j]),
                         "worst": float(worst[j])}
    return list(best.values())
