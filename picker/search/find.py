"""``find``: the workable oscillators the drawer can build for a target, best first.

Pipeline (all vectorised; the only Python loops run over topologies and
transistor profiles, over a fixed handful of positions, and over the few
reported candidates):

1. offers: distinct values per position with their best line (``stock``);
2. tanks inside the screen window, by binary search (``space.tanks``);
3. bias networks meeting the divider/current/headroom rules (``space.biases``),
   with coupling and bypass capacitors picked by reactance;
4. meet: every tank with every bias network, screened by the hand loop gain and
   ordered by a screen score (for the split-capacitor tanks with the frequency the
   bias network's loading gives, ``space.loaded_freq_hz``);
5. refine, in one stream over all topologies and transistors (:func:`_refine_stream`):
   the engine's phase-zero frequency and margin (``engine.small_signal``) at
   nominal, then, by branch and bound on the score, the hFE/temperature corners
   and the first-order tolerance derating of the worst corner;
6. rank: best bias network per tank by :func:`score`; the top candidates get
   the full evaluation (steady state, envelope dynamics, ratings checks) and
   are dropped if it rejects them;
7. Monte Carlo yield of the reported candidates (``montecarlo``).

The score is ``w_error * |freq_error| / tol + w_margin * max(0, 1 - margin_worst
/ goal) + w_cost * cost`` with ``goal = 1.5 * min_margin`` and cost the sum of
unit costs per board; ties go to fewer parts, then fuller bins.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np

from picker.circuit.design import Design, DesignBatch, PartInfo, complete_values, style_stray_f
from picker.circuit.device import NpnProfile
from picker.circuit.engine import NEAR, small_signal
from picker.circuit import mna
from picker.circuit.evaluate import check_designs, loaded_q_of
from picker.circuit.checks import CAP_DERATE, COUPLING_FRACTION, MIN_LOADED_Q
from picker.circuit.bias import HAND_VT_V
from picker.circuit.topology import get_topology
from picker.search import space
from picker.search.stock import Lines, Offer, best_lines, stable_mask, with_pairs

#: Tank positions per topology; the last is the trim position found by binary search
#: (and the one ``--combine`` may fill with a pair).
TANK_REFS = {"colpitts-ce": ("L1", "C1", "C2"), "clapp": ("L1", "C1", "C2", "C3"),
             "hartley": ("L1", "L2", "C1"), "colpitts-cb": ("L1", "C1", "C2")}
TRIM = {"colpitts-ce": "C2", "clapp": "C3", "hartley": "C1", "colpitts-cb": "C2"}
#: Coupling and bypass positions and what they feed.
COUPLING_REFS = {"colpitts-ce": ("CC1", "CC2", "CE"), "clapp": ("CC1", "CC2", "CE"),
                 "hartley": ("CC1", "CC2", "CE"), "colpitts-cb": ("CB",)}
#: The coupling rule is applied with this safety factor on COUPLING_FRACTION, so that
#: the engine's own impedances (slightly different from the hand figures) still pass.
COUPLING_SAFETY = 0.5
#: The hand return ratio (:func:`hand_return_ratio`) can exceed the engine's margin,
#: never the reverse by more than this factor (tests/search/test_screen.py measures at
#: most 1.20 for the common-emitter Colpitts, 1.01 for the Clapp and 1.02 for the Hartley,
#: medians 0.83 / 0.62 / 0.81; the common-base form has its own hand figure and is not measured).
SCREEN_FACTOR = 1.5
#: Work limits: tanks kept (best screen error, then cost), bias networks kept
#: (:func:`_thin_biases`), pairs kept per (topology, transistor) for refining.
TANK_MAX = 400
BIAS_MAX = 3000
REFINE_MAX = 40_000
#: Pairs are refined in chunks of this many, in the order :func:`_refine_stream` gives
#: (PER_TANK bias networks per tank at a time, best screen score first), until the sum of
#: the ENOUGH_TANKS x top best tank scores has not improved for STALE_CHUNKS chunks, or
#: REFINE_BUDGET pairs were taken.  Measured on the bench's 1,000-line drawer (455 kHz,
#: 1 %, top 20): the mean of the best 40 ranked scores is 0.152 against 0.147 when every
#: kept pair is refined, with 2 % of the engine rows (44,000 against 2.4 million).
REFINE_CHUNK = 1000
ENOUGH_TANKS = 4
PER_TANK = 64
REFINE_BUDGET = 60_000
STALE_CHUNKS = 2
#: The screen's ordering estimates the engine's margin as this fraction of the hand
#: figure (the median engine/hand ratio tests/search/test_screen.py measures is 0.7).
HAND_TYPICAL = 0.7
#: The hybrid-pi fields carried from the nominal refine to the loaded-Q check.
HYBRID = tuple(mna.Hybrid.__dataclass_fields__)
#: Relative step for the tolerance sensitivities.
SENS_STEP = 0.01
#: Positions whose tolerance derates the worst-case margin.
VARIED_KINDS = ("resistor", "capacitor", "inductor")
#: How far (a factor either way) to look for the nearest achievable frequency when none fits.
NEAREST_SPAN = 30.0


@dataclass(frozen=True)
class Npn:
    """A transistor line in the drawer."""

    profile: NpnProfile
    part_id: int | None
    qty: int
    cost: float
    bin: str


@dataclass(frozen=True)
class Drawer:
    """Everything on hand: lines per kind and the transistors."""

    lines: dict  # kind -> Lines
    npns: tuple  # Npn


@dataclass(frozen=True)
class FindSpec:
    freq_hz: float
    tol: float
    topologies: tuple[str, ...]
    min_margin: float = 2.5
    vcc_v: float = 12.0
    ie_a: tuple[float, float] = (0.5e-3, 3e-3)
    npn: str | None = None  # profile name; None = any
    boards: int = 1
    style: str = "breadboard"
    temps_c: tuple[float, ...] = (0.0, 50.0)
    nominal_c: float = 25.0
    combine: bool = False
    top: int = 10
    weights: dict = field(default_factory=lambda: {"error": 1.0, "margin": 1.0, "cost": 0.2})
    mc: int = 2000
    seed: int = 1

    @property
    def goal_margin(self) -> float:
        return 1.5 * self.min_margin


@dataclass(frozen=True)
class Candidate:
    rank: int
    topology: str
    npn: str
    design: Design
    parts: dict  # ref -> {part_id, value, bin, qty_left, part2_id, how}
    freq_hz: float
    freq_error: float
    margin: float
    margin_worst: float
    cost: float
    score: float
    n_parts: int
    yield_: float | None = None
    warnings: tuple = ()
    evaluation: object = None

    def as_json(self) -> dict:
        return {"rank": self.rank, "topology": self.topology, "npn": self.npn,
                "parts": {r: dict(p) for r, p in self.parts.items()},
                "freq_hz": self.freq_hz, "freq_error": self.freq_error, "margin": self.margin,
                "margin_worst": self.margin_worst, "yield": self.yield_, "cost": self.cost,
                "score": self.score, "warnings": [w.as_dict() for w in self.warnings]}


@dataclass(frozen=True)
class FindResult:
    candidates: tuple
    reasons: tuple  # one line per reason when nothing (or too little) fits
    stats: dict


def score(spec: FindSpec, freq_error, margin_worst, cost):
    """The ranking score (lower is better); see the module docstring."""
    w = spec.weights
    short = np.maximum(0.0, 1.0 - np.asarray(margin_worst) / spec.goal_margin)
    return (w.get("error", 0.0) * np.abs(freq_error) / spec.tol + w.get("margin", 0.0) * short
            + w.get("cost", 0.0) * np.asarray(cost))


# ---- offers -------------------------------------------------------------------


def _offers(topology: str, drawer: Drawer, spec: FindSpec) -> dict[str, Offer]:
    topo = get_topology(topology)
    out = {}
    for ref in TANK_REFS[topology]:
        kind = topo.position(ref).kind
        lines = drawer.lines.get(kind)
        if lines is None or lines.n == 0:
            out[ref] = None
            continue
        mask = stable_mask(lines) if kind == "capacitor" else None
        off = best_lines(lines, spec.boards, mask)
        if spec.combine and ref == TRIM[topology]:
            off = with_pairs(off, lines, spec.boards)
        out[ref] = off
    return out


def _coupling_offer(drawer: Drawer, spec: FindSpec) -> Offer | None:
    lines = drawer.lines.get("capacitor")
    if lines is None or lines.n == 0:
        return None
    derate = np.array([CAP_DERATE.get(d, 0.8) for d in lines.dielectric])
    ok = ~np.isfinite(lines.voltage_v) | (lines.voltage_v * derate >= spec.vcc_v)
    return best_lines(lines, spec.boards, ok)


def _pick_coupling(coff: Offer, c_min: np.ndarray) -> np.ndarray:
    """Smallest offered value >= c_min (index, -1 if none): a bigger coupling or bypass
    capacitor only costs more and slows the bias's recovery (bursting)."""
    k = np.searchsorted(coff.value, c_min, "left")
    return np.where(k < coff.n, k, -1)


# ---- the search ---------------------------------------------------------------


def find(drawer: Drawer, spec: FindSpec, progress: Callable[[str, float], None] | None = None) -> FindResult:
    """Search ``drawer`` for ``spec``; see the module docstring."""
    tick = progress or (lambda what, frac: None)
    reasons, stats, nearest = [], _new_stats(), []
    cands = ranked(drawer, spec, stats, reasons, nearest, tick)
    tick("checking the best", 0.8)
    final = _final(cands, spec, drawer, stats, reasons)
    if final:
        tick("Monte Carlo yield", 0.9)
        from picker.search.montecarlo import yield_of

        final = [replace(c, yield_=yield_of(c.design, spec, c.evaluation)) for c in final]
    if not final:
        _explain(spec, stats, nearest, reasons)
    tick("done", 1.0)
    return FindResult(tuple(final), tuple(reasons), stats)


def _new_stats() -> dict:
    return {"tanks": 0, "biases": 0, "pairs_screened": 0, "refined_rows": 0, "kept": 0}


def ranked(drawer: Drawer, spec: FindSpec, stats: dict | None = None, reasons: list | None = None,
           nearest: list | None = None, tick: Callable[[str, float], None] | None = None) -> list:
    """Steps 1-6 up to the ranking (before the full evaluation): entries
    ``(score, parts, pool, row, figures)`` best first, one per tank and
    (topology, transistor).  :func:`entry_values` gives an entry's values."""
    tick = tick or (lambda what, frac: None)
    stats = _new_stats() if stats is None else stats
    reasons = [] if reasons is None else reasons
    nearest = [] if nearest is None else nearest
    npns = _distinct_npns([n for n in drawer.npns if n.qty >= spec.boards
                           and (spec.npn is None or n.profile.name.casefold() == spec.npn.casefold())])
    if not npns:
        reasons.append(f"no npn transistor with {spec.boards} on hand"
                       + (f" named {spec.npn}" if spec.npn else ""))
    pools = []
    plan = [(t, n) for t in spec.topologies for n in npns]
    for k, (topology, npn) in enumerate(plan):
        tick(f"searching {topology} with {npn.profile.name}", k / max(len(plan), 1) * 0.7)
        got = _search_one(topology, npn, drawer, spec, stats, nearest)
        if got is not None:
            pools.append(got)
    tick("ranking", 0.7)
    return _rank(pools, spec, drawer, stats)


def entry_values(entry) -> dict:
    """Designator -> value of a :func:`ranked` entry (RE1 = 0 when absent)."""
    _, _, pool, row, _ = entry
    return {r: float(a[0]) for r, a in _values(pool, np.array([row])).items()}


def _distinct_npns(npns: list[Npn]) -> list[Npn]:
    """One line per distinct transistor profile: the cheapest, then the fullest bin."""
    best: dict = {}
    for n in npns:
        p = n.profile
        key = (p.name, p.hfe_min, p.hfe_max, p.vbe_v, p.ft_hz, p.cob_f, p.vaf_v, p.vceo_v, p.pd_w)
        if key not in best or (n.cost, -n.qty) < (best[key].cost, -best[key].qty):
            best[key] = n
    return list(best.values())


def hand_return_ratio(gm_s, rc_ohm, r_in_ohm, re1_ohm, l_h, dcr_ohm, omega, fb):
    """The screen's hand figure for a common-emitter Colpitts: the return ratio at gm,
    ``gm (Ro fb / (1 + fb^2 Ro / Ri) - RE1)``, with Ro = RC parallel to the coil's loss
    resistance (omega L)^2/DCR, Ri the base's input resistance and fb = C1/C2.

    From the two-node analysis of the loop (collector node: Ro and C1; base node: Ri
    and C2; L between) at its phase zero, the loop gain is gm Ro fb / (1 + fb^2 Ro/Ri)
    (a textbook derivation, done here by hand); the engine's margin is that return ratio
    (how far gm may fall before the loop stops starting), and an unbypassed RE1 lowers it
    by about gm RE1 (not by the factor 1 + gm RE1 of the degenerated voltage gain).
    """
    with np.errstate(divide="ignore"):
        loss = np.where(dcr_ohm > 0, dcr_ohm / (omega * l_h) ** 2, 0.0)
    ro = 1.0 / (1.0 / rc_ohm + loss)
    return gm_s * (ro * fb / (1.0 + fb**2 * ro / r_in_ohm) - re1_ohm)


def _thin_biases(strength, rth_ohm, degeneration, cost) -> np.ndarray:
    """Indices of at most BIAS_MAX bias networks: the cheapest per step of hand strength
    (gm RC), divider resistance and degeneration (gm RE1), the step widened (10 %, 20 %,
    40 %, ...) until few enough remain, so the survivors still span every kind of bias."""
    step = 1.1
    while True:
        lg = np.log(step)
        keep = space.cheapest_per_step(cost, ((np.log(strength), lg), (np.log(rth_ohm), lg),
                                               (np.log1p(degeneration), lg)))
        if keep.size <= BIAS_MAX:
            return keep
        step = step**2


def _search_one(topology, npn: Npn, drawer: Drawer, spec: FindSpec, stats, nearest):
    topo = get_topology(topology)
    offers = _offers(topology, drawer, spec)
    if any(o is None or o.n == 0 for o in offers.values()):
        return None
    stray = style_stray_f(spec.style)
    ie_mid = float(np.sqrt(spec.ie_a[0] * spec.ie_a[1]))
    caps = space.DeviceCaps.estimate(npn.profile, ie_mid)
    tk = space.tanks(topology, offers, *space.screen_window(spec.freq_hz, spec.tol), stray, caps)
    if tk.n == 0:
        wide = space.tanks(topology, offers, spec.freq_hz / NEAREST_SPAN, spec.freq_hz * NEAREST_SPAN, stray, caps)
        if wide.n:
            j = int(np.argmin(np.abs(np.log(wide.freq_hz / spec.freq_hz))))
            nearest.append(float(wide.freq_hz[j]))
        return None
    err_s = tk.freq_hz / spec.freq_hz - 1
    if tk.n > TANK_MAX:
        keep = np.lexsort((tk.cost, np.abs(err_s)))[:TANK_MAX]
        tk, err_s = tk.take(keep), err_s[keep]
    stats["tanks"] += tk.n
    res_lines = drawer.lines.get("resistor")
    if res_lines is None or res_lines.n == 0:
        return None
    roff = best_lines(res_lines, spec.boards)
    ce = topology != "colpitts-cb"
    if ce:
        bs = space.biases(roff, npn.profile, spec.vcc_v, *spec.ie_a, common_emitter=True,
                          min_gain=spec.min_margin / SCREEN_FACTOR, fb_max=space.FEEDBACK_CE[1])
    else:
        ind = drawer.lines["inductor"]
        # the tank inductor carries the collector current: biases with the smallest DCR among
        # the tanks here, each pair with its own tank's DCR at the meet below
        dcr_cb = float(np.min(ind.dcr_ohm[offers["L1"].line[tk.index["L1"]]]))
        bs = space.biases(roff, npn.profile, spec.vcc_v, *spec.ie_a, common_emitter=False, rc_dc_ohm=dcr_cb)
    if bs.n == 0:
        return None
    coff = _coupling_offer(drawer, spec)
    if coff is None or coff.n == 0:
        return None
    # coupling and bypass per bias network (hand figures, nominal hFE)
    beta = npn.profile.hfe_nominal
    gm = bs.ie_a / HAND_VT_V
    re1 = np.where(bs.index.get("RE1", np.full(bs.n, -1)) >= 0,
                   roff.value[np.maximum(bs.index.get("RE1", np.zeros(bs.n, int)), 0)], 0.0)
    r_in = 1.0 / (1.0 / bs.rth_ohm + 1.0 / (beta / gm + (beta + 1) * re1))
    omega = 2 * np.pi * spec.freq_hz
    feeds = {"base": r_in, "emitter": np.minimum(roff.value[bs.index["RE"]], 1.0 / gm + re1)}
    if ce:
        feeds["collector"] = roff.value[bs.index["RC"]]
    cidx = {}
    for ref in COUPLING_REFS[topology]:
        z = feeds[topo.position(ref).feeds]
        cidx[ref] = _pick_coupling(coff, 1.0 / (omega * COUPLING_SAFETY * COUPLING_FRACTION * z))
    ok = np.all([a >= 0 for a in cidx.values()], axis=0)
    bs = bs.take(ok)
    cidx = {r: a[ok] for r, a in cidx.items()}
    gm, re1, r_in = gm[ok], re1[ok], r_in[ok]
    if bs.n == 0:
        return None
    bcost = bs.cost + sum(coff.cost[a] for a in cidx.values())
    bparts = bs.parts + len(cidx)
    # hand strength: gm * load (RC; the tank's loss resistance for common base)
    strength = gm * roff.value[bs.index["RC"]] if ce else gm
    if bs.n > BIAS_MAX:
        keep = _thin_biases(strength, bs.rth_ohm, gm * re1, bcost)
        bs, bcost, bparts, strength, gm, re1, r_in = (bs.take(keep), bcost[keep], bparts[keep], strength[keep],
                                                      gm[keep], re1[keep], r_in[keep])
        cidx = {r: a[keep] for r, a in cidx.items()}
    stats["biases"] += bs.n
    # meet: every tank with every bias network, screened by the hand loop gain
    it, ib = (a.ravel() for a in np.meshgrid(np.arange(tk.n), np.arange(bs.n), indexing="ij"))
    if ce:
        hand = hand_return_ratio(gm[ib], roff.value[bs.index["RC"]][ib], r_in[ib], re1[ib],
                                 offers["L1"].value[tk.index["L1"]][it],
                                 drawer.lines["inductor"].dcr_ohm[offers["L1"].line[tk.index["L1"]]][it],
                                 2 * np.pi * tk.freq_hz[it], tk.feedback[it])
    else:  # common base: gm * (omega L)^2/DCR (Q = 100 if unknown) * C1/(C1+C2)
        lv = offers["L1"].value[tk.index["L1"]]
        dcr = drawer.lines["inductor"].dcr_ohm[offers["L1"].line[tk.index["L1"]]]
        xl = omega * lv
        rp = np.where(dcr > 0, xl**2 / np.where(dcr > 0, dcr, 1.0), 100.0 * xl)
        hand = strength[ib] * rp[it] * tk.feedback[it]
    stats["pairs_screened"] += it.size
    pass_ = hand * SCREEN_FACTOR >= spec.min_margin
    if not ce:  # VCE at DC with the pair's own coil (the biases were formed with the smallest DCR)
        beta_min = npn.profile.hfe_min
        ic = bs.ie_a[ib] * beta_min / (beta_min + 1)
        pass_ &= bs.vce_v[ib] - ic * (dcr[it] - dcr_cb) >= space.VCE_MIN_V
    it, ib = it[pass_], ib[pass_]
    if it.size == 0:
        stats.setdefault("weak", 0)
        stats["weak"] += 1
        return None
    # best first by the screen's own figures (refined in that order, in chunks); the
    # split-capacitor tanks' error with the bias network's loading (space.loaded_freq_hz)
    err_p = err_s[it]
    if topology in ("colpitts-ce", "clapp"):
        err_p = _loaded_error(topology, offers, tk, it, ib, roff, bs, gm, re1, r_in, drawer, spec, stray, caps)
    sc = score(spec, err_p, HAND_TYPICAL * hand[pass_], tk.cost[it] + bcost[ib] + npn.cost)
    keep = _smallest(sc, REFINE_MAX)
    it, ib = it[keep], ib[keep]
    return dict(topology=topology, npn=npn, offers=offers, roff=roff, coff=coff, tanks=tk, biases=bs,
                cidx=cidx, it=it, ib=ib, screen=sc[keep], cost=tk.cost[it] + bcost[ib] + npn.cost,
                parts=tk.parts[it] + bparts[ib] + 1, omega_s=2 * np.pi * tk.freq_hz[it])


def _smallest(x: np.ndarray, k: int) -> np.ndarray:
    """Indices of the ``k`` smallest of ``x`` in the order of a stable sort (ties by
    index): ``np.argsort(x, kind="stable")[:k]``, with a partition first so that only
    the few kept are sorted."""
    if x.size <= k:
        return np.argsort(x, kind="stable")
    thr = np.partition(x, k - 1)[k - 1]
    if np.isnan(thr):
        return np.argsort(x, kind="stable")[:k]
    cand = np.flatnonzero(x <= thr)
    return cand[np.argsort(x[cand], kind="stable")][:k]


def _loaded_error(topology, offers, tk, it, ib, roff, bs, gm, re1, r_in, drawer, spec, stray, caps):
    """Per (tank, bias) pair: the frequency error :func:`space.loaded_freq_hz` predicts, with
    C_pi at the pair's own current and bootstrapped by an unbypassed RE1 (C_pi / (1 + gm RE1))."""
    v = {r: offers[r].value[tk.index[r][it]] for r in tk.index}
    dcr = drawer.lines["inductor"].dcr_ohm[offers["L1"].line[tk.index["L1"][it]]]
    cpi = (caps.tf_s * gm[ib] + caps.cj_f) / (1.0 + gm[ib] * re1[ib])
    c1 = v["C1"] + stray + caps.cmu_f
    c2 = v["C2"] + stray + caps.cmu_f + cpi
    c3 = v["C3"] + stray if topology == "clapp" else None
    f = space.loaded_freq_hz(v["L1"], dcr, c1, c2, 1.0 / roff.value[bs.index["RC"]][ib], 1.0 / r_in[ib], c3)
    return f / spec.freq_hz - 1


# ---- refine with the engine ---------------------------------------------------


def _values(pool, rows) -> dict[str, np.ndarray]:
    """Designator -> value arrays of pool rows ``rows``."""
    tk, bs, it, ib = pool["tanks"], pool["biases"], pool["it"][rows], pool["ib"][rows]
    vals = {r: pool["offers"][r].value[tk.index[r][it]] for r in tk.index}
    for r, a in bs.index.items():
        if r == "RE1":
            k = a[ib]
            vals[r] = np.where(k >= 0, pool["roff"].value[np.maximum(k, 0)], 0.0)
        else:
            vals[r] = pool["roff"].value[a[ib]]
    for r, a in pool["cidx"].items():
        vals[r] = pool["coff"].value[a[ib]]
    if pool["topology"] == "hartley":
        vals["K"] = np.zeros(len(rows))
    return vals


def _tols(pool, rows) -> dict[str, np.ndarray]:
    tk, bs, it, ib = pool["tanks"], pool["biases"], pool["it"][rows], pool["ib"][rows]
    tol = {r: pool["offers"][r].tol[tk.index[r][it]] for r in tk.index}
    for r, a in bs.index.items():
        k = a[ib]
        tol[r] = np.where(k >= 0, pool["roff"].tol[np.maximum(k, 0)], 0.0)
    return tol


def _batch(pool, rows, spec: FindSpec, hfe, temp_c, values=None) -> DesignBatch:
    topo = get_topology(pool["topology"])
    npn = pool["npn"].profile
    vals = values if values is not None else _values(pool, rows)
    n = len(rows)
    ind = pool["offers"]
    dcr = {}
    for p in topo.by_kind("inductor"):
        off = ind[p.ref]
        lines = pool["_ind_lines"]  # tank inductors are single parts (never a --combine pair)
        dcr[p.ref] = lines.dcr_ohm[off.line[pool["tanks"].index[p.ref][pool["it"][rows]]]]
    full = lambda x: np.full(n, float(x))  # noqa: E731
    return DesignBatch(topology=topo, values=vals, dcr_ohm=dcr, hfe=np.broadcast_to(hfe, (n,)).astype(float),
                       vbe_v=full(npn.vbe_v), ft_hz=full(npn.ft_hz), cob_f=full(npn.cob_f),
                       vaf_v=full(npn.vaf_v), vcc_v=full(spec.vcc_v),
                       temp_c=np.broadcast_to(temp_c, (n,)).astype(float), stray_f=full(style_stray_f(spec.style)))


def refine(pool, spec: FindSpec, drawer: Drawer, stats, rows: np.ndarray | None = None) -> dict:
    """Engine figures for the pool's ``rows`` (default all): nominal, corners,
    tolerance-derated worst case."""
    out = _nominal(pool, spec, drawer, stats, rows)
    out["worst"] = _worst(pool, spec, stats, out["rows"], out["omega"], out["margin"])
    out["loaded_q"] = _loaded_q(pool, spec, out["rows"], out)
    return out


def _nominal(pool, spec: FindSpec, drawer: Drawer, stats, rows: np.ndarray | None = None) -> dict:
    """The engine's phase-zero frequency and margin at nominal for the pool's ``rows``;
    only the rows that pass (frequency in tolerance and pulled at most FREQ_SLACK from
    the tank, margin >= min_margin, not saturated) are returned."""
    rows = np.arange(pool["it"].size) if rows is None else np.asarray(rows)
    return _nominal_many([(pool, rows)], spec, drawer, stats)[0]


def _nominal_many(jobs, spec: FindSpec, drawer: Drawer, stats) -> list[dict]:
    """:func:`_nominal` of several (pool, rows), the engine run once per topology."""
    prep = []
    for pool, rows in jobs:
        pool["_ind_lines"] = drawer.lines["inductor"]
        prep.append(_batch(pool, rows, spec, pool["npn"].profile.hfe_nominal, spec.nominal_c))
        stats["refined_rows"] += rows.size
    omegas = [pool["omega_s"][rows] for pool, rows in jobs]
    # the frequencies the filter below accepts: the engine drops a row once its phase-zero
    # bracket lies outside them (most rows of a small drawer, whose tanks are sparse)
    w_t = 2 * np.pi * spec.freq_hz
    windows = [(np.maximum(w_t * (1 - spec.tol), w * (1 - space.FREQ_SLACK)),
                np.minimum(w_t * (1 + spec.tol), w * (1 + space.FREQ_SLACK))) for w in omegas]
    out = []
    for (pool, rows), omega_s, (f, margin, saturated, hy) in zip(jobs, omegas, _engine_many(prep, omegas, None, windows)):
        err = f / spec.freq_hz - 1
        pull = f / (omega_s / (2 * np.pi)) - 1  # from the tank's own resonance
        ok = (np.isfinite(f) & (np.abs(err) <= spec.tol) & (np.abs(pull) <= space.FREQ_SLACK)
              & (margin >= spec.min_margin) & ~saturated)
        out.append({"rows": rows[ok], "freq_hz": f[ok], "err": err[ok], "margin": margin[ok],
                    "omega": 2 * np.pi * f[ok], "hybrid": hy[ok]})
    return out


def _engine_many(batches: list[DesignBatch], guesses: list[np.ndarray], near: float | None = None,
                 windows: list[tuple] | None = None) -> list[tuple]:
    """``engine.small_signal`` of several batches, stacked into one call per topology (a
    call costs about 2.5 ms besides some 20 us per row, and the stream's batches are a
    few hundred rows); per batch (freq_hz, margin, saturated, hybrid (n, len(HYBRID))).
    ``windows``: per batch the (low, high) omega arrays of ``small_signal``'s ``within``."""
    out: list[tuple | None] = [None] * len(batches)
    groups: dict[str, list[int]] = {}
    for i, b in enumerate(batches):
        groups.setdefault(b.topology.name, []).append(i)
    for idx in groups.values():
        within = None if windows is None else tuple(np.concatenate([windows[i][k] for i in idx]) for k in (0, 1))
        ss = small_signal(DesignBatch.concat([batches[i] for i in idx]), np.concatenate([guesses[i] for i in idx]),
                          near=near, within=within)
        n = ss.margin.shape[0]
        hy = np.stack([np.broadcast_to(getattr(ss.hybrid, k), (n,)) for k in HYBRID], axis=1)
        cuts = np.cumsum([batches[i].n for i in idx])[:-1]
        pieces = (np.split(a, cuts) for a in (ss.freq_loop_hz, ss.margin, np.asarray(ss.dc.saturated), hy))
        for i, got in zip(idx, zip(*pieces)):
            out[i] = got
    return out


def _loaded_q(pool, spec: FindSpec, rows: np.ndarray, nom: dict) -> np.ndarray:
    """The full check's loaded tank Q (``evaluate.loaded_q_of``) of the pool's ``rows``
    from their nominal figures ``nom`` (same rows)."""
    hy = mna.Hybrid(*(nom["hybrid"][:, k] for k in range(len(HYBRID))))
    return loaded_q_of(_batch(pool, rows, spec, pool["npn"].profile.hfe_nominal, spec.nominal_c), hy, nom["freq_hz"])


def _worst(pool, spec: FindSpec, stats, rows: np.ndarray, omega: np.ndarray, margin: np.ndarray) -> np.ndarray:
    """Worst-case margin of the pool's ``rows`` (nominal figures ``omega``, ``margin``):
    the hFE min/typ/max corners at each temperature, then the first-order tolerance derating."""
    return _worst_many([(pool, rows, omega, margin)], spec, stats)[0]


def _worst_many(jobs, spec: FindSpec, stats) -> list[np.ndarray]:
    """:func:`_worst` of several (pool, rows, omega, margin), the engine run once per topology."""
    out: list[np.ndarray | None] = [np.zeros(0) if rows.size == 0 else None for _, rows, _, _ in jobs]
    live = [i for i, w in enumerate(out) if w is None]
    prep = [_worst_batch(*jobs[i][:3], spec) for i in live]
    for i, (b, _, ctx), got in zip(live, prep, _engine_many([p[0] for p in prep], [p[1] for p in prep], NEAR)):
        stats["refined_rows"] += b.n
        out[i] = _worst_of(ctx, jobs[i][3], got[1])
    return out


def _worst_batch(pool, rows: np.ndarray, omega: np.ndarray, spec: FindSpec):
    """The engine batch of :func:`_worst` (the corners with the values as they are, then one
    block per varied position with that value raised by SENS_STEP at nominal hFE and
    temperature), its frequency guesses, and what :func:`_worst_of` needs."""
    npn = pool["npn"].profile
    # hFE min/typ/max at each temperature (typ at nominal is the row above)
    corners = [(h, t) for t in dict.fromkeys((spec.nominal_c,) + tuple(spec.temps_c))
               for h in (npn.hfe_min, npn.hfe_nominal, npn.hfe_max)
               if not (h == npn.hfe_nominal and t == spec.nominal_c)]
    m = rows.size
    vals = _values(pool, rows)
    tols = _tols(pool, rows)
    topo = get_topology(pool["topology"])
    varied = [r for r in vals if r in tols and topo.position(r).kind in VARIED_KINDS and np.any(vals[r] > 0)]
    nc, nv = len(corners), len(varied)
    big = {r: np.tile(v, nc + nv) for r, v in vals.items()}
    for k, r in enumerate(varied):
        big[r][(nc + k) * m:(nc + k + 1) * m] *= 1 + SENS_STEP
    hfe = np.concatenate([np.repeat([c[0] for c in corners], m), np.full(nv * m, npn.hfe_nominal)])
    tmp = np.concatenate([np.repeat([c[1] for c in corners], m), np.full(nv * m, spec.nominal_c)])
    batch = _batch(pool, np.tile(rows, nc + nv), spec, hfe, tmp, values=big)
    return batch, np.tile(omega, nc + nv), (nc, [tols[r] for r in varied])


def _worst_of(ctx, margin: np.ndarray, corner_margin: np.ndarray) -> np.ndarray:
    """The worst-case margin from the nominal ``margin`` and the engine's margins of the
    :func:`_worst_batch` rows: the worst corner, derated to first order by the tolerances."""
    nc, tol_varied = ctx
    mm = corner_margin.reshape(-1, margin.size)
    worst = np.minimum(margin, mm[:nc].min(axis=0))
    # first-order tolerance derating: ln M_worst = ln M_corner - sum |dlnM/dlnx| ln(1+tol)
    with np.errstate(divide="ignore", invalid="ignore"):
        sens = (np.log(np.maximum(mm[nc:], 1e-300)) - np.log(margin)) / np.log1p(SENS_STEP)
    derate = sum(np.abs(np.nan_to_num(sens[k], nan=0.0)) * np.log1p(t) for k, t in enumerate(tol_varied))
    return worst * np.exp(-derate)


def _tank_rank(it: np.ndarray) -> np.ndarray:
    """Per row (rows in screen order): how many rows of the same tank come before it."""
    o = np.argsort(it, kind="stable")
    rank = np.empty(it.size, dtype=np.int64)
    rank[o] = _tank_rank_sorted(it[o])
    return rank


def _refine_stream(pools, spec: FindSpec, drawer: Drawer, stats) -> list[dict]:
    """The engine over every pool's rows in one stream, chunk by chunk, until the sum of
    the ENOUGH_TANKS x top best tank scores has not improved for STALE_CHUNKS chunks (or
    REFINE_BUDGET rows were taken); per pool the refined rows' figures, concatenated.

    The stream is ordered by (within-tank rank // PER_TANK, screen score): first the
    PER_TANK best-screened bias networks of every tank, best tanks first, across all
    topologies and transistors, then the next PER_TANK of each, and so on.  While fewer
    than ENOUGH_TANKS x top tanks pass, every row is taken (the search is then complete,
    as the exactness test needs).

    Each chunk gets the nominal figures first (:func:`_nominal`); the worst case
    (:func:`_worst`, about fifteen engine rows per row) only by branch and bound.  A
    row's score with its nominal margin is a lower bound of its score (the worst-case
    margin is never above the nominal), so a row is skipped once that bound exceeds the
    best score its tank already has, or the need-th best score over all tanks (it can
    then be neither its tank's best nor among the need best tanks).  Ties are kept.
    Before the nominal figures, the same test on the cost term alone (a lower bound of
    the score, as every weight is >= 0) drops the rows whose parts already cost too
    much, without the engine.
    """
    if not pools:
        return []
    need = ENOUGH_TANKS * spec.top
    pid = np.concatenate([np.full(p["it"].size, k) for k, p in enumerate(pools)])
    row = np.concatenate([np.arange(p["it"].size) for p in pools])
    bucket = np.concatenate([_tank_rank(p["it"]) // PER_TANK for p in pools])
    screen = np.concatenate([p["screen"] for p in pools])
    order = np.lexsort((row, pid, screen, bucket))
    pid, row = pid[order], row[order]
    parts: list[list[dict]] = [[] for _ in pools]
    best = [np.full(p["tanks"].n, np.inf) for p in pools]  # best score per tank so far
    w_cost = spec.weights.get("cost", 0.0)
    top_before, stale = np.inf, 0
    for start in range(0, order.size, REFINE_CHUNK):
        cp, cr = pid[start:start + REFINE_CHUNK], row[start:start + REFINE_CHUNK]
        pend = []
        low = _k_smallest(best, need)
        cut = np.inf if low is None else float(low[-1])
        jobs = []
        for k in np.unique(cp):
            mine = np.sort(cr[cp == k])
            # the cost term alone bounds the score from below: no engine for a row whose
            # cost already puts it above its tank's best or the need-th best tank
            mine = mine[w_cost * pools[k]["cost"][mine] <= np.minimum(best[k][pools[k]["it"][mine]], cut)]
            if mine.size:
                jobs.append((int(k), mine))
        for (k, _), nom in zip(jobs, _nominal_many([(pools[k], m) for k, m in jobs], spec, drawer, stats)):
            lb = score(spec, nom["err"], nom["margin"], pools[k]["cost"][nom["rows"]])
            pend.append([k, nom, lb, np.ones(lb.size, dtype=bool)])
        take = 1
        while any(p[3].any() for p in pend):
            low = _k_smallest(best, need)
            cut = np.inf if low is None else float(low[-1])
            picks = []
            for k, nom, lb, alive in pend:
                tank = pools[k]["it"][nom["rows"]]
                alive &= lb <= np.minimum(best[k][tank], cut)
                pick = _lowest_per_group(np.flatnonzero(alive), lb, tank, take)
                if pick.size:
                    alive[pick] = False
                    picks.append((k, nom, pick, tank))
            worsts = _worst_many([(pools[k], nom["rows"][pick], nom["omega"][pick], nom["margin"][pick])
                                  for k, nom, pick, _ in picks], spec, stats)
            for (k, nom, pick, tank), worst in zip(picks, worsts):
                got = {key: a[pick] for key, a in nom.items()}
                got["worst"] = worst
                got["loaded_q"] = _loaded_q(pools[k], spec, got["rows"], got)
                parts[k].append(got)
                ok = _admissible(got, spec)
                sc = score(spec, got["err"][ok], worst[ok], pools[k]["cost"][got["rows"][ok]])
                np.minimum.at(best[k], tank[pick][ok], sc)
            take *= 2
        low = _k_smallest(best, need)
        top_now = np.inf if low is None else float(low.sum())
        stale = stale + 1 if np.isfinite(top_now) and top_now >= top_before else 0
        top_before = top_now
        if stale >= STALE_CHUNKS or start + REFINE_CHUNK >= REFINE_BUDGET:
            break
    empty = {k: np.zeros(0, dtype=int if k == "rows" else float)
             for k in ("rows", "freq_hz", "err", "margin", "omega", "worst", "loaded_q")}
    empty["hybrid"] = np.zeros((0, len(HYBRID)))
    return [{k: np.concatenate([x[k] for x in ps]) for k in ps[0]} if ps else dict(empty) for ps in parts]


def _k_smallest(best: list[np.ndarray], k: int) -> np.ndarray | None:
    """The k smallest finite values over the arrays, the k-th smallest last (None when fewer than k)."""
    v = np.concatenate([b[np.isfinite(b)] for b in best])
    if v.size < k:
        return None
    return np.partition(v, k - 1)[:k]  # the k-th smallest lands at k - 1, the smaller before it


def _admissible(r: dict, spec: FindSpec) -> np.ndarray:
    """Refined rows that may be ranked: worst-case margin at least min_margin and a tank
    not loaded below the full check's MIN_LOADED_Q (which would reject it)."""
    return (r["worst"] >= spec.min_margin) & (r["loaded_q"] >= MIN_LOADED_Q)


def _lowest_per_group(idx: np.ndarray, key: np.ndarray, group: np.ndarray, m: int) -> np.ndarray:
    """Of the indices ``idx``: the ``m`` with the lowest ``key`` in each ``group`` (ties by index)."""
    if idx.size == 0:
        return idx
    o = idx[np.lexsort((idx, key[idx], group[idx]))]
    return o[_tank_rank_sorted(group[o]) < m]


def _tank_rank_sorted(g: np.ndarray) -> np.ndarray:
    """Position of each entry within its run of equal values (``g`` grouped)."""
    start = np.r_[0, np.flatnonzero(g[1:] != g[:-1]) + 1]
    return np.arange(g.size) - np.repeat(start, np.diff(np.r_[start, g.size]))


def _rank(pools, spec: FindSpec, drawer: Drawer, stats):
    """Refine the pools, keep the best bias network per tank, sort by score."""
    found = []
    for pool, r in zip(pools, _refine_stream(pools, spec, drawer, stats)):
        rows = r["rows"]
        ok = _admissible(r, spec)
        rows = rows[ok]
        if rows.size == 0:
            continue
        sc = score(spec, r["err"][ok], r["worst"][ok], pool["cost"][rows])
        # best per tank: sort by (tank, score, parts, fuller bins via cost tie -> index)
        tank = pool["it"][rows]
        order = np.lexsort((rows, pool["parts"][rows], sc, tank))
        first = np.ones(order.size, dtype=bool)
        first[1:] = tank[order][1:] != tank[order][:-1]
        pick = order[first]
        for j in pick:
            found.append((float(sc[j]), int(pool["parts"][rows[j]]), pool, int(rows[j]),
                          dict(freq_hz=float(r["freq_hz"][ok][j]), err=float(r["err"][ok][j]),
                               margin=float(r["margin"][ok][j]), worst=float(r["worst"][ok][j]))))
    stats["kept"] = len(found)
    found.sort(key=lambda x: (x[0], x[1], x[2]["topology"], x[3]))
    return found


# ---- final: full evaluation of the best --------------------------------------


def _design(pool, row: int, spec: FindSpec) -> tuple[Design, dict]:
    topo = get_topology(pool["topology"])
    vals = {r: float(a[0]) for r, a in _values(pool, np.array([row])).items()}
    if vals.get("RE1", 1.0) == 0.0:
        vals.pop("RE1")
    tk, bs = pool["tanks"], pool["biases"]
    it, ib = pool["it"][row], pool["ib"][row]
    where = {}
    for r in tk.index:
        off = pool["offers"][r]
        k = tk.index[r][it]
        where[r] = (topo.position(r).kind, int(off.line[k]), int(off.line2[k]), int(off.how[k]))
    for r, a in bs.index.items():
        if a[ib] >= 0:
            where[r] = ("resistor", int(pool["roff"].line[a[ib]]), -1, 0)
    for r, a in pool["cidx"].items():
        where[r] = ("capacitor", int(pool["coff"].line[a[ib]]), -1, 0)
    values, defaulted = complete_values(topo, vals)
    return values, where


def _final(found, spec: FindSpec, drawer: Drawer, stats, reasons) -> list[Candidate]:
    """Full evaluation of the best, in rank order, until ``top`` pass or the list ends."""
    out: list[Candidate] = []
    stats["rejected_final"] = {}
    start = 0
    while len(out) < spec.top and start < len(found):
        # generous chunks: the full check's cost is mostly per call, not per design
        chunk = found[start:start + 2 * max(spec.top - len(out), 1) + 4]
        start += len(chunk)
        groups: dict = {}
        for entry in chunk:
            groups.setdefault(entry[2]["topology"], []).append(entry)  # one engine batch per topology
        done = []
        for entries in groups.values():
            designs, metas = [], []
            for sc, nparts, pool, row, fig in entries:
                values, where = _design(pool, row, spec)
                qty_ok, parts_info, parts_json = _parts(where, drawer, spec, values)
                if not qty_ok:
                    stats["rejected_final"]["quantity"] = stats["rejected_final"].get("quantity", 0) + 1
                    continue
                npn = pool["npn"]
                parts_json["Q1"] = {"part_id": npn.part_id, "value": npn.profile.name, "bin": npn.bin,
                                    "qty_left": int(npn.qty - spec.boards)}
                d = Design(topology=pool["topology"], values=values, npn=npn.profile, vcc_v=spec.vcc_v,
                           temp_c=spec.nominal_c, style=spec.style, parts=parts_info)
                designs.append(d)
                metas.append((sc, nparts, pool, row, fig, parts_json))
            evs = check_designs(designs, tuple(spec.temps_c))
            for d, ev, meta in zip(designs, evs, metas):
                done.append(_judge(d, ev, meta, spec, stats))
        done = [c for c in done if c is not None]
        done.sort(key=lambda c: (c.score, c.n_parts, -min(p["qty_left"] for p in c.parts.values())))
        out.extend(done)
    out.sort(key=lambda c: (c.score, c.n_parts, -min(p["qty_left"] for p in c.parts.values())))
    return [replace(c, rank=k + 1) for k, c in enumerate(out[:spec.top])]


#: Warnings that rule a design out of ``find`` (the rest are shown with it).
REJECT = ("no-start", "corner-no-start", "saturated", "soft-divider", "cap-voltage", "res-power", "vceo",
          "q-power", "tank-loading", "coupling-reactance", "tank-dielectric", "bursts")


def _judge(design, ev, meta, spec, stats):
    sc, nparts, pool, row, fig, parts_json = meta
    codes = {w.code for w in ev.warnings}
    bad = sorted(codes & set(REJECT))
    err = ev.freq_hz / spec.freq_hz - 1 if np.isfinite(ev.freq_hz) else np.inf
    if abs(err) > spec.tol:
        bad.append("frequency")
    if bad:
        for b in bad:
            stats["rejected_final"][b] = stats["rejected_final"].get(b, 0) + 1
        return None
    worst = min(fig["worst"], ev.margin_worst)
    cost = float(pool["cost"][row])
    s = float(score(spec, err, worst, cost))
    return Candidate(rank=0, topology=design.topology, npn=design.npn.name, design=design, parts=parts_json,
                     freq_hz=float(ev.freq_hz), freq_error=float(err), margin=float(ev.margin),
                     margin_worst=float(worst), cost=cost, score=s, n_parts=nparts,
                     warnings=tuple(ev.warnings), evaluation=ev)


def _parts(where, drawer: Drawer, spec: FindSpec, values):
    """PartInfo per position, the JSON parts map, and whether the quantities suffice
    (a line used at two positions counts twice)."""
    demand: dict = {}
    for ref, (kind, a, b, how) in where.items():
        for line in (a, b) if b >= 0 else (a,):
            demand[(kind, line)] = demand.get((kind, line), 0) + spec.boards
    ok = all(drawer.lines[k].qty[l] >= q for (k, l), q in demand.items())
    info, js = {}, {}
    for ref, (kind, a, b, how) in where.items():
        L = drawer.lines[kind]
        info[ref] = PartInfo(part_id=int(L.id[a]), tolerance=float(L.tol[a]),
                             voltage_v=_f(L.voltage_v[a]) if b < 0 else _min2(L.voltage_v[a], L.voltage_v[b]),
                             power_w=_f(L.power_w[a]), dielectric=L.dielectric[a] or None,
                             dcr_ohm=float(L.dcr_ohm[a]) + (float(L.dcr_ohm[b]) if b >= 0 and how == 1 else 0.0),
                             bin=str(L.bin[a]))
        js[ref] = {"part_id": int(L.id[a]), "value": float(values[ref]), "bin": str(L.bin[a]),
                   "qty_left": int(L.qty[a] - demand[(kind, a)])}
        if b >= 0:
            js[ref].update(part2_id=int(L.id[b]), bin2=str(L.bin[b]), how="series" if how == 1 else "parallel",
                           value1=float(L.value[a]), value2=float(L.value[b]))
    return ok, info, js


def _f(x):
    return float(x) if np.isfinite(x) else None


def _min2(a, b):
    vals = [float(v) for v in (a, b) if np.isfinite(v)]
    return min(vals) if vals else None


def _explain(spec: FindSpec, stats, nearest, reasons):
    """One line per reason nothing fits."""
    from picker.units import format_eng

    if stats["tanks"] == 0:
        near = ""
        if nearest:
            f = min(nearest, key=lambda x: abs(np.log(x / spec.freq_hz)))
            near = f"; the nearest tank on hand gives about {format_eng(f, 'Hz')} ({f / spec.freq_hz - 1:+.1%})"
        reasons.append(f"no tank in tolerance: no set of the inductors and capacitors on hand "
                       f"(at least {spec.boards} each) comes within {spec.tol:.1%} of {format_eng(spec.freq_hz, 'Hz')}{near}")
    elif stats["biases"] == 0:
        reasons.append(f"no bias network: no resistors (and coupling capacitors) on hand give an emitter "
                       f"current of {format_eng(spec.ie_a[0], 'A')}..{format_eng(spec.ie_a[1], 'A')} with a stiff divider "
                       f"and {space.VCE_MIN_V:g} V of headroom at {format_eng(spec.vcc_v, 'V')}")
    elif stats["kept"] == 0:
        reasons.append(f"no bias reaching the margin: {stats['tanks']} tanks and {stats['biases']} bias networks "
                       f"were tried, none gives a worst-case margin of {spec.min_margin:g} within {spec.tol:.1%}")
    rej = stats.get("rejected_final", {})
    if rej.get("quantity"):
        reasons.append(f"not enough quantity for {spec.boards} boards: {rej['quantity']} designs would need "
                       "one part at two positions beyond its stock")
    other = {k: v for k, v in rej.items() if k != "quantity"}
    if other:
        reasons.append("the full check rejected the best designs: "
                       + ", ".join(f"{k} ({v})" for k, v in sorted(other.items())))
    reasons.append("see 'picker reorder' for the cheapest purchase that makes it work")
