"""The decomposed search space: tanks from sorted values by binary search, bias networks vectorised.

The tank sets the frequency, the bias network sets gm, and both meet in the
margin.  Tanks are enumerated over the outer positions as a mesh and over the
trim position (the last capacitor or inductor the frequency depends on) by
``numpy.searchsorted`` on its sorted values, so only value sets inside the
frequency window are ever formed.  Bias networks are formed the same way:
divider pairs as a mesh, the emitter resistor by binary search on the
emitter-current window, the collector resistor by binary search on the
headroom window.  No Python loop runs over combinations.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.device import NpnProfile, junction_c, model_from_profile
from picker.circuit.device import MJE, VJE_V
from picker.circuit.bias import HAND_VT_V
from picker.search.stock import Offer

#: How far (fraction) the loop's frequency may be pulled from the tank's own resonance
#: (strays and transistor capacitance included, the screen figure) by loading.  A
#: design pulled further has its frequency set by the bias resistors and the
#: transistor rather than by the tank (it drifts with hFE and temperature), and is
#: not a result.  So the screen window [f(1-tol)/(1+s), f(1+tol)/(1-s)] loses nothing.
FREQ_SLACK = 0.05

#: Feedback ratios searched (common practice for these circuits: C1/C2 or L2/L1 of
#: about 0.1-0.5 for common emitter; the window is wider so the engine decides).
FEEDBACK_CE = (0.05, 1.0)
FEEDBACK_CB = (0.05, 0.75)
#: A Clapp's series capacitor is at most this fraction of the smaller of C1, C2
#: (what makes it a Clapp: C3 sets the frequency).
CLAPP_C3_FRACTION = 0.5
#: Divider rules: VB between VBE + 0.3 V and 70 % of the supply; the divider
#: draws at most the emitter current; stiff: RTh/(hFE_min + 1) <= STIFF * RE.
VB_MIN_ABOVE_VBE_V = 0.3
VB_MAX_FRACTION = 0.7
STIFF = 0.1
#: Collector headroom at DC (hand method), volt (common practice: room for the swing).
VCE_MIN_V = 1.5
#: Unbypassed emitter resistance offered, ohm (none, or an on-hand value in this range).
RE1_RANGE_OHM = (10.0, 1e3)
#: Collector resistors tried per bias core: at most this many, spread evenly over the
#: values between the one that can reach the margin and the one that leaves VCE_MIN_V
#: of headroom.  Applied only when the (core, RC) pairs would exceed RC_PAIRS_LIMIT.
RC_PER_CORE = 6
RC_PAIRS_LIMIT = 200_000
#: Work limits of the bias enumeration for large drawers (an E96 drawer has ~480
#: resistor values): divider pairs above DIVIDER_LIMIT keep the cheapest per 2 % step
#: of VB and 10 % step of RTh (the RTh step of the core buckets, CORE_LIMIT); RE1 values
#: above RE1_MAX the cheapest per 20 % step; RE choices above
#: RE_PAIRS_LIMIT at most RE_PER_CORE per (divider, RE1), spread over the window.
DIVIDER_LIMIT = 20_000
RE1_MAX = 24
RE_PAIRS_LIMIT = 2_000_000
RE_PER_CORE = 8
#: Bias cores (R1, R2, RE, RE1) are bucketed (the cheapest per 5 % step of emitter
#: current, 10 % step of divider resistance and RE1 value) only above this count;
#: below it the enumeration is complete (tests/search/test_exact.py proves the search
#: equals a brute force there).
CORE_LIMIT = 20_000


def screen_window(freq_hz: float, tol: float, slack: float = FREQ_SLACK) -> tuple[float, float]:
    """Tank resonances that can give a loop frequency within ``tol`` of ``freq_hz`` when
    the pull is at most ``slack``."""
    return freq_hz * (1 - tol) / (1 + slack), freq_hz * (1 + tol) / (1 - slack)


def expand_spread(start: np.ndarray, stop: np.ndarray, limit: int, per: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`expand`, but when it would give more than ``limit`` pairs, at most about
    ``per`` inner indices per outer one, evenly spread over its range (every
    ``ceil(count / per)``-th from its start).  Only the pairs kept are ever formed."""
    count = np.maximum(stop - start, 0)
    if int(count.sum()) <= limit:
        return expand(start, stop)
    stride = np.maximum(1, -(-count // per))
    picks = -(-count // stride)
    outer = np.repeat(np.arange(start.size), picks)
    offsets = np.cumsum(picks) - picks
    inner = start[outer] + stride[outer] * (np.arange(outer.size) - offsets[outer])
    return outer, inner


def expand(start: np.ndarray, stop: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All (outer, inner) index pairs with start[outer] <= inner < stop[outer], vectorised."""
    count = np.maximum(stop - start, 0)
    outer = np.repeat(np.arange(start.size), count)
    offsets = np.cumsum(count) - count
    inner = start[outer] + (np.arange(outer.size) - offsets[outer])
    return outer, inner


def _between(sorted_values: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index ranges of ``sorted_values`` inside [lo, hi] (binary search)."""
    return np.searchsorted(sorted_values, lo, "left"), np.searchsorted(sorted_values, hi, "right")


@dataclass(frozen=True)
class DeviceCaps:
    """Transistor capacitances the screen adds to the tank, farad (at the middle of the current
    window), and the two parts of C_pi: transit time tf_s (times gm) and the junction's cj_f."""

    cpi_f: float
    cmu_f: float
    tf_s: float = 0.0
    cj_f: float = 0.0

    @classmethod
    def estimate(cls, npn: NpnProfile, ie_a: float) -> "DeviceCaps":
        m = model_from_profile(np.array([npn.hfe_nominal]), np.array([npn.vbe_v]), np.array([npn.ft_hz]),
                               np.array([npn.cob_f]), np.array([npn.vaf_v]))
        gm = ie_a / HAND_VT_V
        cj = float(junction_c(m.cje_f, np.array([npn.vbe_v]), VJE_V, MJE)[0])
        return cls(float(m.tf_s[0] * gm + cj), float(npn.cob_f), float(m.tf_s[0]), cj)


def loaded_freq_hz(l_h, dcr_ohm, c1_f, c2_f, g1_s, g2_s, c3_f=None):
    """Loop frequency of the split-capacitor tank loaded by conductances ``g1_s`` (collector
    side, across ``c1_f``) and ``g2_s`` (base side, across ``c2_f``), the coil's loss as
    its series ``dcr_ohm``, and for a Clapp ``c3_f`` in series with the coil.

    Two-node analysis of the loop cut at the transistor's current source: the transfer
    to the base is 1/D with D = Y1 + Y2 + Y1 Y2 Z (Y1, Y2 the node admittances, Z the
    coil branch), and the loop's phase zero is Im D = 0.  For the Colpitts that gives
    omega^2 = (C1 + C2 + L G1 G2 + r (G1 C2 + G2 C1)) / (L C1 C2) (derived here by hand;
    with no loading it is the textbook 1/(L C1 C2 / (C1 + C2))); for the Clapp the same
    with Z = r + j(omega L - 1/(omega C3)) is a quadratic in omega^2, whose larger root is
    the tank's.  Used only to order the screen's candidates; the engine decides.
    """
    lg = l_h * g1_s * g2_s
    rg = dcr_ohm * (g1_s * c2_f + g2_s * c1_f)
    if c3_f is None:
        w2 = (c1_f + c2_f + lg + rg) / (l_h * c1_f * c2_f)
    else:
        a = l_h * c1_f * c2_f * c3_f
        b = c3_f * (c1_f + c2_f) + c1_f * c2_f + c3_f * (lg + rg)
        w2 = (b + np.sqrt(np.maximum(b * b - 4 * a * g1_s * g2_s, 0.0))) / (2 * a)
    return np.sqrt(w2) / (2 * np.pi)


@dataclass(frozen=True)
class Tanks:
    """Tank value sets of one topology: per position an index into its offer, plus screen figures."""

    topology: str
    index: dict  # ref -> index array into that position's offer
    freq_hz: np.ndarray  # closed-form screen frequency (strays and transistor capacitance included)
    feedback: np.ndarray
    cost: np.ndarray
    parts: np.ndarray

    @property
    def n(self) -> int:
        return int(self.freq_hz.size)

    def take(self, k: np.ndarray) -> "Tanks":
        return Tanks(self.topology, {r: a[k] for r, a in self.index.items()}, self.freq_hz[k],
                     self.feedback[k], self.cost[k], self.parts[k])


def _c_window(freq_lo, freq_hi, l_h):
    w_lo, w_hi = 2 * np.pi * freq_lo, 2 * np.pi * freq_hi
    return 1.0 / (l_h * w_hi**2), 1.0 / (l_h * w_lo**2)


def _series_needed(c_total, *others):
    """The capacitance that, in series with ``others``, gives ``c_total`` (inf if impossible)."""
    inv = 1.0 / c_total - sum(1.0 / o for o in others)
    with np.errstate(divide="ignore"):
        return np.where(inv > 0, 1.0 / np.where(inv > 0, inv, 1.0), np.inf)


def tanks(topology: str, offers: dict[str, Offer], freq_lo: float, freq_hi: float,
          stray_f: float, caps: DeviceCaps) -> Tanks:
    """Every tank of ``topology`` whose screen frequency lies in [freq_lo, freq_hi].

    ``offers`` maps the tank designators to their offers; the last-named trim
    position is found by binary search.
    """
    if topology in ("colpitts-ce", "clapp"):
        return _colpitts_like(topology, offers, freq_lo, freq_hi, stray_f, caps)
    if topology == "hartley":
        return _hartley(offers, freq_lo, freq_hi, stray_f, caps)
    if topology == "colpitts-cb":
        return _cb(offers, freq_lo, freq_hi, stray_f, caps)
    raise ValueError(f"no tank search for topology {topology!r}")


def _colpitts_like(topology, offers, freq_lo, freq_hi, stray_f, caps) -> Tanks:
    lo_, c1o, c2o = offers["L1"], offers["C1"], offers["C2"]
    x1 = stray_f + caps.cmu_f  # collector side (through CC1)
    x2 = stray_f + caps.cpi_f + caps.cmu_f  # base side (through CC2)
    if topology == "colpitts-ce":
        il, i1 = (a.ravel() for a in np.meshgrid(np.arange(lo_.n), np.arange(c1o.n), indexing="ij"))
        l, c1 = lo_.value[il], c1o.value[i1] + x1
        c_lo, c_hi = _c_window(freq_lo, freq_hi, l)
        s, e = _between(c2o.value + x2, np.minimum(_series_needed(c_lo, c1), _series_needed(c_hi, c1)),
                        np.maximum(_series_needed(c_lo, c1), _series_needed(c_hi, c1)))
        o, i2 = expand(s, e)
        idx = {"L1": il[o], "C1": i1[o], "C2": i2}
        ct = 1.0 / (1.0 / (c1o.value[idx["C1"]] + x1) + 1.0 / (c2o.value[i2] + x2))
    else:  # clapp: (L1, C1, C2) mesh, C3 by binary search
        c3o = offers["C3"]
        i1, i2 = (a.ravel() for a in np.meshgrid(np.arange(c1o.n), np.arange(c2o.n), indexing="ij"))
        fb = c1o.value[i1] / c2o.value[i2]
        keep = (fb >= FEEDBACK_CE[0]) & (fb <= FEEDBACK_CE[1])
        i1, i2 = i1[keep], i2[keep]
        il, k = (a.ravel() for a in np.meshgrid(np.arange(lo_.n), np.arange(i1.size), indexing="ij"))
        i1, i2 = i1[k], i2[k]
        l, c1, c2 = lo_.value[il], c1o.value[i1] + x1, c2o.value[i2] + x2
        c_lo, c_hi = _c_window(freq_lo, freq_hi, l)
        cap_max = CLAPP_C3_FRACTION * np.minimum(c1o.value[i1], c2o.value[i2])
        s, e = _between(c3o.value + stray_f, _series_needed(c_lo, c1, c2), _series_needed(c_hi, c1, c2))
        e = np.minimum(e, np.searchsorted(c3o.value, cap_max, "right"))
        o, i3 = expand(s, e)
        idx = {"L1": il[o], "C1": i1[o], "C2": i2[o], "C3": i3}
        ct = 1.0 / (1.0 / (c1o.value[i1[o]] + x1) + 1.0 / (c2o.value[i2[o]] + x2)
                    + 1.0 / (c3o.value[i3] + stray_f))
    l = lo_.value[idx["L1"]]
    f = 1.0 / (2 * np.pi * np.sqrt(l * ct))
    fb = c1o.value[idx["C1"]] / c2o.value[idx["C2"]]
    keep = (fb >= FEEDBACK_CE[0]) & (fb <= FEEDBACK_CE[1]) & (f >= freq_lo) & (f <= freq_hi)
    return _finish(topology, offers, idx, f, fb, keep)


def _hartley(offers, freq_lo, freq_hi, stray_f, caps) -> Tanks:
    l1o, l2o, c1o = offers["L1"], offers["L2"], offers["C1"]
    i1, i2 = (a.ravel() for a in np.meshgrid(np.arange(l1o.n), np.arange(l2o.n), indexing="ij"))
    fb = l2o.value[i2] / l1o.value[i1]
    keep = (fb >= FEEDBACK_CE[0]) & (fb <= FEEDBACK_CE[1])
    i1, i2 = i1[keep], i2[keep]
    l = l1o.value[i1] + l2o.value[i2]  # separate coils: K = 0
    ct_, cf_ = stray_f + caps.cmu_f, stray_f + caps.cpi_f + caps.cmu_f
    across = ct_ * cf_ / (ct_ + cf_)  # the end capacitances in series, across C1
    c_lo, c_hi = _c_window(freq_lo, freq_hi, l)
    s, e = _between(c1o.value + across, c_lo, c_hi)
    o, ic = expand(s, e)
    idx = {"L1": i1[o], "L2": i2[o], "C1": ic}
    f = 1.0 / (2 * np.pi * np.sqrt((l1o.value[idx["L1"]] + l2o.value[idx["L2"]]) * (c1o.value[ic] + across)))
    fbk = l2o.value[idx["L2"]] / l1o.value[idx["L1"]]
    return _finish("hartley", offers, idx, f, fbk, (f >= freq_lo) & (f <= freq_hi))


def _cb(offers, freq_lo, freq_hi, stray_f, caps) -> Tanks:
    lo_, c1o, c2o = offers["L1"], offers["C1"], offers["C2"]
    il, i1 = (a.ravel() for a in np.meshgrid(np.arange(lo_.n), np.arange(c1o.n), indexing="ij"))
    l, c1 = lo_.value[il], c1o.value[i1]
    xc, xe = stray_f + caps.cmu_f, stray_f + caps.cpi_f
    c_lo, c_hi = _c_window(freq_lo, freq_hi, l)
    # total = xc + series(C1, C2 + xe)
    a = _series_needed(np.maximum(c_lo - xc, 1e-18), c1)
    b = _series_needed(np.maximum(c_hi - xc, 1e-18), c1)
    s, e = _between(c2o.value + xe, np.minimum(a, b), np.maximum(a, b))
    o, i2 = expand(s, e)
    idx = {"L1": il[o], "C1": i1[o], "C2": i2}
    c1v, c2v = c1o.value[idx["C1"]], c2o.value[i2]
    ct = xc + 1.0 / (1.0 / c1v + 1.0 / (c2v + xe))
    f = 1.0 / (2 * np.pi * np.sqrt(lo_.value[idx["L1"]] * ct))
    fb = c1v / (c1v + c2v)
    keep = (fb >= FEEDBACK_CB[0]) & (fb <= FEEDBACK_CB[1]) & (f >= freq_lo) & (f <= freq_hi)
    return _finish("colpitts-cb", offers, idx, f, fb, keep)


def _finish(topology, offers, idx, f, fb, keep) -> Tanks:
    idx = {r: a[keep] for r, a in idx.items()}
    cost = sum(offers[r].cost[a] for r, a in idx.items()) if idx else np.zeros(0)
    parts = sum(offers[r].parts[a] for r, a in idx.items()) if idx else np.zeros(0, int)
    return Tanks(topology, idx, f[keep], fb[keep], np.asarray(cost, float), np.asarray(parts))


@dataclass(frozen=True)
class Biases:
    """Bias networks: indices into the resistor offer (RE1 = -1 when absent) and hand figures."""

    index: dict  # "R1", "R2", "RE", "RC" (common emitter), "RE1"
    ie_a: np.ndarray  # hand method with hFE_min
    rth_ohm: np.ndarray
    vce_v: np.ndarray
    cost: np.ndarray
    parts: np.ndarray

    @property
    def n(self) -> int:
        return int(self.ie_a.size)

    def take(self, k) -> "Biases":
        return Biases({r: a[k] for r, a in self.index.items()}, self.ie_a[k], self.rth_ohm[k],
                      self.vce_v[k], self.cost[k], self.parts[k])


def cheapest_per_step(cost: np.ndarray, cells: tuple) -> np.ndarray:
    """Sorted indices of the cheapest entry (then the lowest index) per cell; ``cells``
    holds (quantity, step) pairs, the quantity cut into steps of that size."""
    key = np.zeros(cost.size, dtype=np.int64)
    for x, step in cells:
        k = np.rint(x / step).astype(np.int64)  # as np.round (half to even), without its overhead
        k -= k.min()
        key = key * (int(k.max()) + 1) + k
    cost = np.asarray(cost, float)
    n = cost.size
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    if key.max() >= 4 * n:  # sparse cells: number them densely first
        key = np.unique(key, return_inverse=True)[1]
    cost = np.where(np.isnan(cost), np.inf, cost)  # an unpriced entry loses to any priced one
    # scatter, no sort: the lowest cost per cell, then the lowest index among the entries
    # at it (2-3x faster than pandas' hash groupby idxmin on the 10^6 entries of a big drawer)
    cells_n = int(key.max()) + 1
    low = np.full(cells_n, np.inf)
    np.minimum.at(low, key, cost)
    hit = np.flatnonzero(cost == low[key])
    first = np.full(cells_n, n, dtype=np.int64)
    np.minimum.at(first, key[hit], hit)
    return np.sort(first[first < n])


def biases(res: Offer, npn: NpnProfile, vcc_v: float, ie_lo_a: float, ie_hi_a: float,
           common_emitter: bool, rc_dc_ohm: float = 0.0, min_gain: float = 0.0, fb_max: float = 1.0) -> Biases:
    """Every bias network from ``res`` meeting the divider, current and headroom rules.

    ``rc_dc_ohm`` is the collector's DC resistance when there is no RC (the
    common-base tank inductor's DCR).
    """
    v = res.value
    beta = npn.hfe_min
    i1, i2 = (a.ravel() for a in np.meshgrid(np.arange(res.n), np.arange(res.n), indexing="ij"))
    r1, r2 = v[i1], v[i2]
    vth = vcc_v * r2 / (r1 + r2)
    rth = r1 * r2 / (r1 + r2)
    ok = (vth >= npn.vbe_v + VB_MIN_ABOVE_VBE_V) & (vth <= VB_MAX_FRACTION * vcc_v) & (vcc_v / (r1 + r2) <= ie_hi_a)
    i1, i2, vth, rth = i1[ok], i2[ok], vth[ok], rth[ok]
    if i1.size > DIVIDER_LIMIT:  # the cheapest pair per 2 % step of VB and 10 % step of RTh
        keep = cheapest_per_step(res.cost[i1] + res.cost[i2],
                                  ((np.log(vth), np.log(1.02)), (np.log(rth), np.log(1.1))))
        i1, i2, vth, rth = i1[keep], i2[keep], vth[keep], rth[keep]
    # RE1: none (-1) or an on-hand value in RE1_RANGE_OHM (common emitter only)
    opts = np.flatnonzero((v >= RE1_RANGE_OHM[0]) & (v <= RE1_RANGE_OHM[1])) if common_emitter else np.zeros(0, int)
    if opts.size > RE1_MAX:  # the cheapest per 20 % step (E12-like spacing)
        opts = opts[cheapest_per_step(res.cost[opts], ((np.log(v[opts]), np.log(1.2)),))]
    opts = np.concatenate([[-1], opts])
    p, q = (a.ravel() for a in np.meshgrid(np.arange(i1.size), np.arange(opts.size), indexing="ij"))
    i1, i2, vth, rth, ie1 = i1[p], i2[p], vth[p], rth[p], opts[q]
    re1 = np.where(ie1 >= 0, v[np.maximum(ie1, 0)], 0.0)
    # total emitter resistance window from the current window (hand method, hFE_min)
    head = vth - npn.vbe_v
    re_lo = head / ie_hi_a - rth / (beta + 1) - re1
    re_hi = head / ie_lo_a - rth / (beta + 1) - re1
    # stiffness: RTh/(beta+1) <= STIFF * (RE + RE1)
    re_lo = np.maximum(re_lo, rth / (beta + 1) / STIFF - re1)
    s, e = _between(v, re_lo, re_hi)
    o, ire = expand_spread(s, e, RE_PAIRS_LIMIT, RE_PER_CORE)
    i1, i2, vth, rth, ie1, re1 = i1[o], i2[o], vth[o], rth[o], ie1[o], re1[o]
    re_tot = v[ire] + re1
    ie = head[o] / (re_tot + rth / (beta + 1))
    keep = re1 <= v[ire]  # the unbypassed part no larger than the bypassed
    core = np.flatnonzero(keep)
    if core.size > CORE_LIMIT:
        # one core per 5 % step of emitter current, 10 % step of divider resistance and
        # RE1 value: the cheapest (then lowest indices); near-equal cores give
        # near-equal oscillators
        cost0 = res.cost[i1] + res.cost[i2] + res.cost[ire] + np.where(ie1 >= 0, res.cost[np.maximum(ie1, 0)], 0.0)
        sub = cheapest_per_step(cost0[core], ((np.log(ie[core]), np.log(1.05)), (np.log(rth[core]), np.log(1.1)),
                                               (ie1[core].astype(float), 1.0)))
        core = core[sub]
    i1, i2, ire, ie1, re1, rth, re_tot, ie = (a[core] for a in (i1, i2, ire, ie1, re1, rth, re_tot, ie))
    idx = {"R1": i1, "R2": i2, "RE": ire, "RE1": ie1}
    ic = ie * beta / (beta + 1)
    if common_emitter:
        # RC: from the smallest that can reach min_gain (the screen's hand return ratio
        # gm (RC fb - RE1) at the largest feedback ratio fb_max) up to RC_PER_CORE values,
        # and never past VCE_MIN_V of headroom
        rc_lo = (min_gain * HAND_VT_V / ie + re1) / fb_max
        rc_hi = (vcc_v - ie * re_tot - VCE_MIN_V) / np.maximum(ic, 1e-12)
        s, e = np.searchsorted(v, rc_lo, "left"), np.searchsorted(v, rc_hi, "right")
        o, irc = expand_spread(s, e, RC_PAIRS_LIMIT, RC_PER_CORE)
        idx = {k: a[o] for k, a in idx.items()}
        idx["RC"] = irc
        ie, rth, re_tot, ic = ie[o], rth[o], re_tot[o], ic[o]
        vce = vcc_v - ic * v[irc] - ie * re_tot
    else:
        idx.pop("RE1")
        vce = vcc_v - ic * rc_dc_ohm - ie * re_tot
        ok = vce >= VCE_MIN_V
        idx = {k: a[ok] for k, a in idx.items()}
        ie, rth, vce = ie[ok], rth[ok], vce[ok]
    cost = sum(np.where(a >= 0, res.cost[np.maximum(a, 0)], 0.0) for a in idx.values())
    parts = sum((a >= 0).astype(int) for a in idx.values())
    return Biases(idx, ie, rth, vce, np.asarray(cost, float), np.asarray(parts))

