"""A straightforward brute-force reference for ``find``'s ranking (common-emitter Colpitts).

It forms the full product of every stocked line at every position (L1, C1, C2,
R1, R2, RE, RE1 or none, RC), keeps the designs that meet the stated design
rules (the rules that define a result, not the search's screens), fills the
coupling and bypass positions by their stated rule, runs the engine on every
survivor with the global phase-zero search (no frequency guess, no window),
derives the worst-case margin over hFE, temperature and part tolerances, and
ranks by the score.  Nothing of the search's decomposition is used: no
screen frequency, no hand-gain screen, no binary search, no buckets.

The rules re-stated here (and in the README under "What find returns"):

* tank capacitors of a stable dielectric; feedback C1/C2 inside
  ``space.FEEDBACK_CE``;
* divider: VB between VBE + 0.3 V and 70 % of the supply, divider current at
  most the top of the current window, RTh/(hFE_min + 1) <= 0.1 (RE + RE1);
* emitter current (hand method at hFE_min) inside the window; RE1 none or an
  on-hand value of 10 ohm..1 kohm and not above RE; VCE at DC >= 1.5 V;
* coupling and bypass: the smallest on-hand capacitor (rated for the supply)
  whose reactance at the target is at most half the coupling fraction of the
  impedance it feeds (hand figures);
* the loop frequency pulled at most ``space.FREQ_SLACK`` from the tank's own
  resonance (strays and transistor capacitance included);
* frequency within tolerance, nominal margin and tolerance-derated worst-case
  margin at least ``min_margin``, transistor not saturated.

Slow on purpose; used by tests/search/test_exact.py and bench/find.py.
"""

from __future__ import annotations

import numpy as np

from picker.circuit.bias import HAND_VT_V
from picker.circuit.checks import CAP_DERATE, COUPLING_FRACTION
from picker.circuit.design import DesignBatch, style_stray_f
from picker.circuit.engine import small_signal
from picker.circuit.topology import get_topology
from picker.search import space
from picker.search.stock import STABLE_DIELECTRICS

TANK = ("L1", "C1", "C2")
BIAS = ("R1", "R2", "RE", "RE1", "RC")


def _usable(lines, boards):
    return np.flatnonzero(lines.qty >= boards)


def space_size(drawer, spec) -> int:
    """Designs in the full product of positions (every line at every position, coupling
    and bypass included), per transistor line, common-emitter Colpitts."""
    n = {k: int(_usable(drawer.lines[k], spec.boards).size) for k in ("resistor", "capacitor", "inductor")}
    npn = sum(1 for q in drawer.npns if q.qty >= spec.boards)
    return n["inductor"] * n["capacitor"] ** 5 * n["resistor"] ** 4 * (n["resistor"] + 1) * npn


def brute_force(drawer, spec) -> list[dict]:
    """Every result by score (best first), one per tank and transistor line:
    dicts with ``score, parts, values, freq_hz, margin, worst, evaluated``."""
    out = []
    for npn in drawer.npns:
        if npn.qty < spec.boards or (spec.npn and npn.profile.name.casefold() != spec.npn.casefold()):
            continue
        out.extend(_one_npn(drawer, spec, npn))
    out.sort(key=lambda d: (d["score"], d["parts"]))
    return out


def _one_npn(drawer, spec, npn):
    p = npn.profile
    R, C, L = drawer.lines["resistor"], drawer.lines["capacitor"], drawer.lines["inductor"]
    ir, ic, il = (_usable(x, spec.boards) for x in (R, C, L))
    ic_tank = ic[np.isin(C.dielectric[ic].astype(str), STABLE_DIELECTRICS)]
    re1_opts = np.concatenate([[-1], ir[(R.value[ir] >= 10.0) & (R.value[ir] <= 1e3)]])
    # full product of the tank and bias positions (line indices; -1 = no RE1)
    grids = np.meshgrid(il, ic_tank, ic_tank, ir, ir, ir, re1_opts, ir, indexing="ij")
    g = dict(zip(TANK + BIAS, (a.ravel() for a in grids)))
    v = {r: (L if r == "L1" else C).value[g[r]] for r in TANK}
    for r in BIAS:
        v[r] = np.where(g[r] >= 0, R.value[np.maximum(g[r], 0)], 0.0)
    beta, vcc = p.hfe_min, spec.vcc_v
    vb = vcc * v["R2"] / (v["R1"] + v["R2"])
    rth = v["R1"] * v["R2"] / (v["R1"] + v["R2"])
    ie = (vb - p.vbe_v) / (v["RE"] + v["RE1"] + rth / (beta + 1))
    vce = vcc - ie * beta / (beta + 1) * v["RC"] - ie * (v["RE"] + v["RE1"])
    fb = v["C1"] / v["C2"]
    ok = ((fb >= space.FEEDBACK_CE[0]) & (fb <= space.FEEDBACK_CE[1])
          & (vb >= p.vbe_v + 0.3) & (vb <= 0.7 * vcc) & (vcc / (v["R1"] + v["R2"]) <= spec.ie_a[1])
          & (ie >= spec.ie_a[0]) & (ie <= spec.ie_a[1]) & (rth / (beta + 1) <= 0.1 * (v["RE"] + v["RE1"]))
          & (v["RE1"] <= v["RE"]) & (vce >= 1.5))
    g = {r: a[ok] for r, a in g.items()}
    v = {r: a[ok] for r, a in v.items()}
    ie, rth = ie[ok], rth[ok]
    # coupling and bypass by their rule
    derate = np.array([CAP_DERATE.get(d, 0.8) for d in C.dielectric])
    cc = ic[~np.isfinite(C.voltage_v[ic]) | (C.voltage_v[ic] * derate[ic] >= vcc)]
    cc = cc[np.argsort(C.value[cc], kind="stable")]
    gm = ie / HAND_VT_V
    r_in = 1.0 / (1.0 / rth + 1.0 / (p.hfe_nominal / gm + (p.hfe_nominal + 1) * v["RE1"]))
    feeds = {"CC1": v["RC"], "CC2": r_in, "CE": np.minimum(v["RE"], 1.0 / gm + v["RE1"])}
    omega = 2 * np.pi * spec.freq_hz
    keep = np.ones(ie.size, dtype=bool)
    for r, z in feeds.items():
        need = 1.0 / (omega * 0.5 * COUPLING_FRACTION * z)
        k = np.searchsorted(C.value[cc], need, "left")
        keep &= k < cc.size
        g[r] = cc[np.minimum(k, cc.size - 1)]
        v[r] = C.value[g[r]]
    g = {r: a[keep] for r, a in g.items()}
    v = {r: a[keep] for r, a in v.items()}
    n = keep.sum()
    if n == 0:
        return []
    tols = {r: (L if r == "L1" else C).tol[g[r]] for r in TANK}
    for r in BIAS:
        tols[r] = np.where(g[r] >= 0, R.tol[np.maximum(g[r], 0)], 0.0)
    dcr = L.dcr_ohm[g["L1"]]

    def engine(rows, values, hfe, temp_c):
        m = rows.size
        full = lambda x: np.full(m, float(x))  # noqa: E731
        b = DesignBatch(topology=get_topology("colpitts-ce"), values={r: a[rows] for r, a in values.items()},
                        dcr_ohm={"L1": dcr[rows]}, hfe=full(hfe), vbe_v=full(p.vbe_v), ft_hz=full(p.ft_hz),
                        cob_f=full(p.cob_f), vaf_v=full(p.vaf_v), vcc_v=full(vcc), temp_c=full(temp_c),
                        stray_f=full(style_stray_f(spec.style)))
        return small_signal(b)  # global phase-zero search

    rows = np.arange(n)
    ss = engine(rows, v, p.hfe_nominal, spec.nominal_c)
    err = ss.freq_loop_hz / spec.freq_hz - 1
    # the tank's own resonance: strays on both sides, the transistor's Cmu on the collector
    # side and Cpi + Cmu on the base side (estimated at the middle of the current window)
    caps = space.DeviceCaps.estimate(p, float(np.sqrt(spec.ie_a[0] * spec.ie_a[1])))
    stray = style_stray_f(spec.style)
    ca, cb = v["C1"] + stray + caps.cmu_f, v["C2"] + stray + caps.cpi_f + caps.cmu_f
    f_tank = 1.0 / (2 * np.pi * np.sqrt(v["L1"] * ca * cb / (ca + cb)))
    pull = ss.freq_loop_hz / f_tank - 1
    good = (np.isfinite(ss.freq_loop_hz) & (np.abs(err) <= spec.tol) & (ss.margin >= spec.min_margin)
            & (np.abs(pull) <= space.FREQ_SLACK) & ~ss.dc.saturated)
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
    for r in TANK + BIAS:
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
    kind_lines = {r: (L if r == "L1" else R if r in BIAS else C) for r in g}
    cost = npn.cost + sum(np.where(g[r][rows] >= 0, kind_lines[r].cost[np.maximum(g[r][rows], 0)], 0.0) for r in g)
    parts = 1 + sum((g[r][rows] >= 0).astype(int) for r in g)
    w = spec.weights
    score = (w.get("error", 0.0) * np.abs(err[rows]) / spec.tol
             + w.get("margin", 0.0) * np.maximum(0.0, 1 - worst / (1.5 * spec.min_margin)) + w.get("cost", 0.0) * cost)
    best: dict = {}
    for j in np.lexsort((parts, score)):
        key = tuple(int(g[r][rows[j]]) for r in TANK)
        if key not in best:
            best[key] = {"score": float(score[j]), "parts": int(parts[j]), "npn": npn.part_id,
                         "values": {r: float(a[rows[j]]) for r, a in v.items()},
                         "freq_hz": float(ss.freq_loop_hz[rows[j]]), "margin": float(nominal[j]),
                         "worst": float(worst[j])}
    return list(best.values())
