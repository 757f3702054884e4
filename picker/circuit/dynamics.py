"""Amplitude and bias dynamics: does the oscillation settle, or does it burst (squegging)?

The averaged (envelope) model has two parts, both batched over designs.

*Fast part, the tank amplitude.*  ``a`` is the amplitude of the drive across
the base and the bypassed emitter node (B to X, or B to E without RE1).  Its
logarithm grows at the real part ``sigma`` of the oscillation mode's natural
frequency, d ln a / dt = sigma(r, g), where the network is the small-signal
one with the transistor's current-borne parts (gm, g_pi, C_diff) scaled by the
describing-function ratio ``r`` and the base-collector junction, when the
swing forward-biases it, added as a conductance ``g`` with its reverse
transport.  ``sigma`` is tabulated once per design on a grid of (r, g) from
the eigenvalues and interpolated.

*Slow part, the bias network.*  The DC network (inductors shorted, every
capacitor kept) carries the transistor's *average* terminal currents, which
depend on the amplitude: the base-emitter junction (with any unbypassed RE1 in
series) and the base-collector junction rectify the swing and pump the bypass
and coupling capacitors.  When that pumping is slow against the envelope, the
amplitude overshoots, starves the bias and collapses, and the cycle repeats:
bursts.  When it is fast enough, the two settle together.

For every design of a batch, the running point of the two together and the
eigenvalues of the model linearised there decide whether it settles
(:func:`predict`).  The design ``check`` reports on is also integrated with
``scipy.integrate.solve_ivp`` (LSODA), which gives the settling time and the
burst period, and so are the corners the linearised verdict calls unsettled
(all of them together, :func:`simulate_many`); those envelopes are classified
with the same rules used on ngspice's waveforms (:mod:`picker.circuit.envelope`).

References
----------
Describing function of the junction and the squegging mechanism: K. K. Clarke
and D. T. Hess, "Communication Circuits: Analysis and Design" (1971), ch. 6-7
(chapter numbers from memory).
Transistor equations: the Ebers-Moll transport model as in the SPICE
Gummel-Poon model with no high-level injection (BR = 1, as in our model card).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse, special
from scipy.integrate import solve_ivp

from picker.circuit import envelope, mna
from picker.circuit.bias import DcPoint
from picker.circuit.design import DesignBatch
from picker.circuit.device import NpnModel, is_at, thermal_voltage
from picker.circuit.engine import degeneration_ohm, dominant_index, junction_current, model_of
from picker.circuit.topology import GROUND_NODES, merged_node

#: Grid of the transconductance ratio r = Gm / gm_quiescent for the sigma table.
R_GRID = np.array([0.0, 0.1, 0.2, 0.35, 0.5, 0.7, 1.0, 1.4, 2.0, 3.0, 5.0])
#: Grid of the base-collector fundamental conductance over gm_quiescent.
G_GRID = np.array([0.0, 1e-3, 3e-3, 1e-2, 3e-2, 0.1, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0])
#: Below this, the base-collector junction counts as off.
G_MIN = 1e-7
#: Drive amplitude at t = 0 (a kick of about this size), volt.
A0_V = 1e-3
#: Conductance tying each DC-floating node to ground, as the SPICE deck does, siemens.
G_FLOAT_S = 1e-9
#: Largest exponent allowed in the junction laws (keeps a wild trial step finite).
EXP_CAP = 80.0
#: Floor of ln(a) while the envelope collapses (about 2 nV).
U_FLOOR = -20.0
#: Largest change of a log current in one Newton step.
LOG_STEP = 3.0
#: The same for the log of the base-collector diode current (it spans hundreds when off).
LOG_STEP_R = 40.0
#: Residual (of the log currents) below which the bias balance counts as solved.
BALANCE_TOL = 1e-6


@dataclass(frozen=True)
class Dynamics:
    """Envelope-model results per design (arrays, SI units; NaN where not applicable).

    ``amplitude_settles`` is 1.0 or 0.0 for designs that start and NaN for
    those that do not (there is no amplitude to settle).
    """

    amplitude_settles: np.ndarray
    growth_rate: np.ndarray  # largest real part of the linearised envelope model, 1/s
    settle_time_s: np.ndarray
    burst_period_s: np.ndarray
    drive_v: np.ndarray  # running B-X drive amplitude of the averaged model, volt
    tau_bias_s: np.ndarray
    envelope_t_s: tuple = ()  # per integrated design: times, second
    envelope_rel: tuple = ()  # per integrated design: drive amplitude / running amplitude

    def settles(self) -> np.ndarray:
        """Boolean: starts and settles."""
        return np.nan_to_num(self.amplitude_settles, nan=0.0) > 0.5


@dataclass(frozen=True)
class SlowNetwork:
    """The bias network as ``C dv/dt = b - G v + injections`` (n, M, M)."""

    g: np.ndarray
    c: np.ndarray
    b: np.ndarray
    nodes: tuple[str, ...]
    ib: int
    ic: int
    ij: int  # the bypassed emitter node (X, or E without RE1)


def _groups(batch: DesignBatch) -> dict[str, str]:
    """DC node of every circuit node: inductors short, absent optionals merge."""
    topo, present = batch.topology, batch.present
    parent: dict[str, str] = {}

    def find(x: str) -> str:
        x = merged_node(topo, present, x)
        while parent.get(x, x) != x:
            x = parent[x]
        return x

    def union(a: str, b: str) -> None:
        ra, rb = find(a), find(b)
        if ra == rb:
            return
        if rb in GROUND_NODES:  # ground and supply stay the representatives
            ra, rb = rb, ra
        parent[rb] = ra

    for p in topo.by_kind("inductor"):
        if p.ref in present:
            union(p.a, p.b)
    nodes = {n for p in topo.positions if p.kind in ("resistor", "capacitor", "inductor")
             for n in (p.a, p.b)} | {"B", "C", "E"}
    return {n: find(n) for n in nodes}


def slow_network(batch: DesignBatch) -> SlowNetwork:
    """Assemble the DC network with its capacitors (the slow part of the model)."""
    topo, present, n = batch.topology, batch.present, batch.n
    group = _groups(batch)
    has_re1 = any(p.role == "degeneration" and p.ref in present for p in topo.positions)
    junction = group["X"] if has_re1 else group["E"]
    names = sorted({g for g in group.values() if g not in GROUND_NODES} - ({group["E"]} if has_re1 else set()))
    index = {g: k for k, g in enumerate(names)}
    m = len(names)
    g = np.zeros((n, m, m))
    c = np.zeros((n, m, m))
    b = np.zeros((n, m))

    def at(node: str) -> int:
        k = group[node]
        return index.get(k, -1)

    def supply(node: str):
        return group[node] == "VCC"

    for p in topo.positions:
        if p.ref not in present or p.kind not in ("resistor", "capacitor"):
            continue
        if p.role == "degeneration":
            continue  # RE1 is inside the junction's describing function
        val = batch.values[p.ref]
        i, j = at(p.a), at(p.b)
        mat = g if p.kind == "resistor" else c
        y = 1.0 / val if p.kind == "resistor" else val
        mna._stamp(mat, i, j, y)
        if p.kind == "resistor":  # a resistor to the supply is a current source
            if supply(p.a) and j >= 0:
                b[:, j] += y * batch.vcc_v
            if supply(p.b) and i >= 0:
                b[:, i] += y * batch.vcc_v
    for k in range(m):
        g[:, k, k] += G_FLOAT_S
    return SlowNetwork(g=g, c=c, b=b, nodes=tuple(names), ib=index[group["B"]],
                       ic=index[group["C"]] if group["C"] in index else -1, ij=index[junction])


def _log_i0_i1(x):
    """log I0(x) - x and 2 I1(x) / I0(x) for x >= 0, without overflow."""
    x = np.maximum(x, 1e-12)
    i0 = special.i0e(x)
    return np.log(i0), 2 * special.i1e(x) / i0


@dataclass(frozen=True)
class Junctions:
    """Per-design constants of the averaged transistor."""

    log_is: np.ndarray
    vt: np.ndarray
    bf: np.ndarray
    re1: np.ndarray
    ie_q: np.ndarray
    gm_q: np.ndarray

    def take(self, rows) -> "Junctions":
        return Junctions(self.log_is[rows], self.vt[rows], self.bf[rows], self.re1[rows],
                         self.ie_q[rows], self.gm_q[rows])


def junction_be(j: Junctions, a, vbe_dc):
    """Base-emitter junction (with any RE1 in series) driven by vbe_dc + a cos(theta).

    Returns (ln_f, r): the log of the average forward emitter current (A) and
    r = intrinsic fundamental transconductance / gm at the quiescent point.
    Closed form (Bessel functions) without RE1; with it the Wright omega
    solution of the series circuit, sampled over the cycle.
    """
    vt = j.vt
    li0, ratio = _log_i0_i1(a / vt)
    ln_f = j.log_is + (vbe_dc + a) / vt + li0
    ln_f1 = ln_f + np.log(ratio)
    deg = j.re1 > 0
    if np.any(deg):  # the engine's series junction law, over its phase samples
        i, theta = junction_current(a[deg], vbe_dc[deg], j.re1[deg], j.log_is[deg], vt[deg])
        ln_f = ln_f.copy()
        ln_f1 = ln_f1.copy()
        ln_f[deg] = np.log(np.maximum(i.mean(axis=1), 1e-300))
        ln_f1[deg] = np.log(np.maximum(2 * (i * np.cos(theta)).mean(axis=1), 1e-300))
    f_1 = np.exp(np.minimum(ln_f1, EXP_CAP))
    a_j = np.maximum(a - f_1 * j.re1, 1e-3 * a)  # fundamental across the junction itself
    return ln_f, f_1 / a_j / (j.ie_q / vt)


def _bc(log_is, vt, gm_q, a_bc, vbc_dc):
    """:func:`junction_bc` on bare arrays (any shapes that broadcast)."""
    li0, ratio = _log_i0_i1(a_bc / vt)
    ln_r = log_is + (vbc_dc + a_bc) / vt + li0
    g = np.exp(np.minimum(ln_r, EXP_CAP)) * ratio / np.maximum(a_bc, 1e-12) / gm_q
    return ln_r, g


def junction_bc(j: Junctions, a_bc, vbc_dc):
    """Base-collector junction driven by vbc_dc + a_bc cos(theta) (closed form).

    Returns (ln_r, g): the log of its average forward current (A) and its
    fundamental conductance over gm at the quiescent point.
    """
    return _bc(j.log_is, j.vt, j.gm_q, a_bc, vbc_dc)


def sigma_table(batch: DesignBatch, hy: mna.Hybrid, tf_s: np.ndarray, omega_ref: np.ndarray):
    """sigma (1/s) and |v_BC / v_BX| of the oscillation mode on the (r, g) grid: (n, R, G) each.

    ``tf_s`` is the transit time (the diffusion part of C_pi scales with r).
    """
    n = batch.n
    nr, ng = R_GRID.size, G_GRID.size
    sig = np.empty((n, nr, ng))
    rho = np.empty((n, nr, ng))
    for a_, r in enumerate(R_GRID):
        h = mna.Hybrid(gm_s=hy.gm_s * r, gpi_s=hy.gpi_s * r, go_s=hy.go_s,
                       cpi_f=hy.cpi_f - (1 - r) * tf_s * hy.gm_s, cmu_f=hy.cmu_f)
        mat = mna.assemble(batch, h)
        ib, ic, ie = mat.index["B"], mat.index["C"], mat.index["E"]
        ix = mat.index.get("X", ie)
        base = mat.g + (hy.gm_s * r)[:, None, None] * mat.gm_pattern
        rev = np.zeros(mat.gm_pattern.shape)  # reverse transport: g v_BC into C, out of E
        rev[ic, ib] -= 1.0
        rev[ic, ic] += 1.0
        rev[ie, ib] += 1.0
        rev[ie, ic] -= 1.0
        diode = np.zeros(mat.gm_pattern.shape)
        diode[ib, ib] += 1.0
        diode[ic, ic] += 1.0
        diode[ib, ic] -= 1.0
        diode[ic, ib] -= 1.0
        for b_, gg in enumerate(G_GRID):
            gbc = (gg * hy.gm_s)[:, None, None]
            lam, vec = np.linalg.eig(np.linalg.solve(mat.c, base + gbc * (diode + rev)))
            s = -lam
            k, _ = dominant_index(s, omega_ref)
            rows = np.arange(n)
            sig[:, a_, b_] = s[rows, k].real
            v = vec[rows, :, k]
            with np.errstate(invalid="ignore", divide="ignore"):
                rho[:, a_, b_] = np.abs((v[:, ib] - v[:, ic]) / (v[:, ib] - v[:, ix]))
    return sig, np.nan_to_num(rho, nan=1.0, posinf=1e3)


# Interpolation on the (R_GRID, G_GRID) tables.  The tables are read flat with
# precomputed cell offsets; the arithmetic is the plain bilinear formula.
_NR, _NG = R_GRID.size, G_GRID.size
_R_IN, _G_IN = R_GRID[1:-1], G_GRID[1:-1]  # interior knots: searchsorted gives the cell directly
_R_LO, _R_STEP = R_GRID[:-1], R_GRID[1:] - R_GRID[:-1]
_G_LO, _G_STEP = G_GRID[:-1], G_GRID[1:] - G_GRID[:-1]


def _r_part(rows: np.ndarray, r: np.ndarray):
    """Cell offsets into the flat (n * R * G) table and weights along r, for table rows ``rows``."""
    r = np.minimum(np.maximum(r, R_GRID[0]), R_GRID[-1])
    i = _R_IN.searchsorted(r)
    tr = (r - _R_LO[i]) / _R_STEP[i]
    return rows * (_NR * _NG) + i * _NG, tr, 1 - tr


def _g_part(g: np.ndarray):
    """Cell offsets and weights along g."""
    g = np.minimum(np.maximum(g, G_GRID[0]), G_GRID[-1])
    k = _G_IN.searchsorted(g)
    tg = (g - _G_LO[k]) / _G_STEP[k]
    return k, tg, 1 - tg


def _interp(flat: np.ndarray, rp, gp) -> np.ndarray:
    """Bilinear interpolation of a flattened (n, R, G) table; the parts broadcast."""
    base, tr, ur = rp
    k, tg, ug = gp
    c = base + k
    return (ur * ug * flat.take(c) + tr * ug * flat.take(c + _NG) + ur * tg * flat.take(c + 1)
            + tr * tg * flat.take(c + (_NG + 1)))


def _bilinear(table: np.ndarray, r: np.ndarray, g: np.ndarray) -> np.ndarray:
    """Interpolate (n, R, G) tables at one (r, g) per design."""
    return _interp(table.reshape(-1), _r_part(np.arange(table.shape[0]), r), _g_part(g))


@dataclass(frozen=True)
class Model:
    """Everything the right-hand side needs, per design."""

    net: SlowNetwork
    j: Junctions
    sig: np.ndarray
    rho: np.ndarray
    vcc_v: np.ndarray
    tau_s: np.ndarray


def _node_v(model: Model, v: np.ndarray, k: int, fixed: np.ndarray) -> np.ndarray:
    return v[:, k] if k >= 0 else fixed


#: The B-C junction's switched-off conductance ratio, as a g part of the table interpolation.
_G_OFF = _g_part(np.array(G_MIN))


def _device(mdl: Model, a, vbe, vbc, steps: int = 8, rows=None, lg0=None):
    """Averaged transistor at amplitude ``a`` with a self-consistent base-collector swing.

    The B-C swing is rho * a, where the mode-shape ratio rho falls as the
    forward-biased B-C junction loads the circuit (conductance ratio g); g
    itself grows with the swing.  Without ``lg0`` the fixed point
    g = G(rho(g) a) is its smallest root, found by bisection on log g; with
    ``lg0`` (n,) it is the root Newton reaches from log g = lg0 (the branch of
    a nearby balanced state).

    ``rows`` (default: every design) picks the model's design of each entry,
    so one call can evaluate several trial states of the same designs.
    Returns (ln_f, r, ln_r, g); see :func:`junction_be` and :func:`junction_bc`.
    """
    if lg0 is not None:
        return _device_tracked(mdl, np.arange(a.shape[0]) if rows is None else rows, a, vbe, vbc, lg0)
    if rows is None:
        rows, j = np.arange(a.shape[0]), mdl.j
    else:
        j = mdl.j.take(rows)
    flat = mdl.rho.reshape(-1)
    ln_f, r = junction_be(j, a, vbe)
    rp = _r_part(rows, r)
    ln_r, g = _bc(j.log_is, j.vt, j.gm_q, _interp(flat, rp, _G_OFF) * a, vbc)
    on = np.flatnonzero(g > G_MIN)  # rows whose B-C junction conducts: solve the fixed point
    if on.size and steps:
        rp_on = tuple(x[on] for x in rp)
        cj = (j.log_is[on], j.vt[on], j.gm_q[on])
        lg = _bc_fixed_point(flat, rp_on, cj, a[on], vbc[on], steps)
        ln_r[on], g[on] = _bc(*cj, _interp(flat, rp_on, _g_part(np.exp(lg))) * a[on], vbc[on])
    return ln_f, r, ln_r, g


def _device_tracked(mdl: Model, rows, a, vbe, vbc, lg, iterations: int = 6):
    """:func:`_device` on the B-C fixed point's branch through ``lg`` (Newton on log g)."""
    lg = np.clip(np.asarray(lg, dtype=float), -700.0, 5.0)
    h = 1e-6
    m = lg.shape[0]
    be = junction_be(mdl.j.take(rows), a, vbe)  # the B-E side does not change with g
    rr, aa, bc = (np.concatenate([x, x]) for x in (rows, a, vbc))
    be2 = tuple(np.concatenate([x, x]) for x in be)
    for _ in range(iterations):
        g = _device_with(mdl, rr, aa, None, bc, np.concatenate([lg, lg + h]), be=be2)[3]
        f = np.log(np.maximum(g, 1e-300)) - np.concatenate([lg, lg + h])
        d = (f[m:] - f[:m]) / h
        # Newton with the true slope (the root the balance converged to may have either sign);
        # a row already on its root, or with no usable slope, stays
        move = (np.abs(f[:m]) > 1e-12) & (np.abs(d) > 1e-12)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(move, np.clip(-f[:m] / d, -LOG_STEP_R, LOG_STEP_R), 0.0)
        lg = np.clip(lg + step, -700.0, 5.0)
    return _device_with(mdl, rows, a, vbe, vbc, lg, be=be)


#: Log-spaced trial values of g scanned for the first root of the B-C fixed point.
G_SCAN = np.geomspace(1e-7, 100.0, 48)
_LG_SCAN = np.log(G_SCAN)
_SCAN_PART = _g_part(G_SCAN)
#: Trial points (rows x midpoints) one bisection call of the B-C fixed point may evaluate:
#: up to 4 bisection steps are taken per call of the junction law, fewer on large batches.
_TREE_POINTS = 512


def _dyadic(lo: np.ndarray, hi: np.ndarray, depth: int) -> np.ndarray:
    """(n, 2**depth + 1) points from lo to hi, each the midpoint 0.5 (left + right) of its
    parents, i.e. exactly the midpoints a bisection of that depth may visit."""
    p = np.stack([lo, hi], axis=1)
    for _ in range(depth):
        q = np.empty((p.shape[0], 2 * p.shape[1] - 1))
        q[:, 0::2] = p
        q[:, 1::2] = 0.5 * (p[:, :-1] + p[:, 1:])
        p = q
    return p


def _bc_fixed_point(flat: np.ndarray, rp, cj, a, vbc, steps: int) -> np.ndarray:
    """log g with g = G(rho(r, g) a), the smallest root (the one a growing swing meets first).

    ``rp`` is the r part of the rho-table interpolation (:func:`_r_part`) and
    ``cj`` the junction constants (log IS, VT, gm_q) of each row.  The root is
    bracketed on the ``G_SCAN`` grid (rho need not be monotone in g, so there
    may be more than one), then refined by bisection and a Newton polish, so
    that the result is a smooth function of its inputs.  The bisection
    evaluates every midpoint it may visit in the next few steps at once, then
    takes its steps on those values.
    """
    n = a.shape[0]
    rp2 = tuple(x[:, None] for x in rp)  # everything below is (n, trials)
    cj2 = tuple(x[:, None] for x in cj)
    a2, vbc2 = a[:, None], vbc[:, None]

    def f(lg):
        rho = _interp(flat, rp2, _g_part(np.exp(lg)))
        return np.log(np.maximum(_bc(*cj2, rho * a2, vbc2)[1], 1e-300)) - lg

    k = G_SCAN.size
    scan = np.log(np.maximum(_bc(*cj2, _interp(flat, rp2, _SCAN_PART) * a2, vbc2)[1], 1e-300)) - _LG_SCAN
    down = (scan[:, :-1] > 0) & (scan[:, 1:] <= 0)
    first = np.where(down.any(axis=1), np.argmax(down, axis=1), k - 2)
    lo, hi = _LG_SCAN[first], _LG_SCAN[first + 1]

    rows = np.arange(n)
    left = steps
    while left > 0:
        depth = max(1, min(left, 4, int(np.log2(_TREE_POINTS / n + 1))))
        left -= depth
        m = 1 << depth
        p = _dyadic(lo, hi, depth)
        up = f(p[:, 1:-1]) > 0
        at_lo, at_hi = np.zeros(n, dtype=np.intp), np.full(n, m, dtype=np.intp)
        for _ in range(depth):
            mid = (at_lo + at_hi) >> 1
            u = up[rows, mid - 1]
            at_lo, at_hi = np.where(u, mid, at_lo), np.where(u, at_hi, mid)
        lo, hi = p[rows, at_lo], p[rows, at_hi]
    lg = 0.5 * (lo + hi)
    for _ in range(3):
        fx = f(np.stack([lg, lg + 1e-6], axis=1))
        f0 = fx[:, 0]
        d = (fx[:, 1] - f0) / 1e-6
        lg = np.minimum(np.maximum(lg - f0 / np.where(d < -1e-12, d, -1e-12), lo - 1e-3), hi + 1e-3)
    return lg


def _rates(model: Model, u: np.ndarray, v: np.ndarray, lg=None):
    """d ln a / dt (1/s) and the node injections (A) for states (n,), (n, M).

    ``lg`` (n,): follow the B-C fixed point's branch from this log g (a
    balanced state's); None: take its smallest root (a start-up's branch).
    """
    net = model.net
    vb = v[:, net.ib]
    vc = _node_v(model, v, net.ic, model.vcc_v)
    ln_f, r, ln_r, g = _device(model, np.exp(u), vb - v[:, net.ij], vb - vc, lg0=lg)
    sigma = _bilinear(model.sig, r, g)
    return sigma, _injections(model, np.exp(np.minimum(ln_f, EXP_CAP)), np.exp(np.minimum(ln_r, EXP_CAP)))


def _injections(model: Model, f_avg, r_avg):
    """Currents the transistor injects into the slow nodes (n, M), ampere."""
    net, j = model.net, model.j
    inj = np.zeros((f_avg.shape[0], net.g.shape[1]))
    ib_f = f_avg / (j.bf + 1)
    inj[:, net.ib] -= ib_f + r_avg
    if net.ic >= 0:
        inj[:, net.ic] -= f_avg - ib_f - 2 * r_avg
    inj[:, net.ij] += f_avg - r_avg
    return inj


def bias_time_constant(net: SlowNetwork) -> np.ndarray:
    """Longest time constant of the bias network (floating-node ties left out), second."""
    m = net.c.shape[1]
    g = net.g - G_FLOAT_S * np.eye(m)
    lam = np.linalg.eigvals(np.linalg.solve(net.c + 1e-18 * np.eye(m), g)).real
    big = np.abs(lam).max(axis=1, keepdims=True)
    slow = np.where(lam > 1e-9 * big, lam, np.inf)
    return 1.0 / np.min(slow, axis=1)


def _state_rates(mdl: Model, y: np.ndarray, lg=None) -> np.ndarray:
    """(n, K) time derivatives of the states (ln a, node voltages); ``lg`` as for :func:`_rates`."""
    u, v = y[:, 0], y[:, 1:]
    sigma, inj = _rates(mdl, np.clip(u, -60.0, 5.0), v, lg)
    dv = np.linalg.solve(mdl.net.c, (mdl.net.b - np.einsum("nij,nj->ni", mdl.net.g, v) + inj)[..., None])[..., 0]
    return np.concatenate([sigma[:, None], dv], axis=1)


def _fd_jacobian(f, y: np.ndarray, f0: np.ndarray, h: np.ndarray) -> np.ndarray:
    n, k = y.shape
    jac = np.empty((n, f0.shape[1], k))
    for i in range(k):
        yp = y.copy()
        yp[:, i] += h[i]
        jac[:, :, i] = (f(yp) - f0) / h[i]
    return jac


#: Rows (designs x trial states) one call of the device model may hold before its per-row
#: cost outweighs its fixed cost; sets how many backtracking trials are evaluated at once.
_BATCH_ROWS = 128


def _device_with(mdl: Model, rows, a, vbe, vbc, lg, be=None):
    """Averaged transistor at amplitude ``a`` with the B-C conductance ratio taken as e^lg.

    Returns (ln_f, r, ln_r, g) as :func:`_device` does; here ``g`` is the
    conductance ratio that the swing rho(r, e^lg) a gives, so lg is the
    self-consistent one where log g = lg.  ``be``: the B-E side (ln_f, r) of
    :func:`junction_be` when already known (``vbe`` is then not used).
    """
    j = mdl.j.take(rows)
    ln_f, r = junction_be(j, a, vbe) if be is None else be
    rho = _interp(mdl.rho.reshape(-1), _r_part(rows, r), _g_part(np.exp(lg)))
    ln_r, g = _bc(j.log_is, j.vt, j.gm_q, rho * a, vbc)
    return ln_f, r, ln_r, g


#: Number of unknowns of the bias balance: log forward current, log B-C diode current, log g.
_K = 3


def balance(mdl: Model, u: np.ndarray, iterations: int = 30, start=None, with_state=False):
    """Node voltages where the bias network carries the average currents at amplitude e^u.

    The network is linear, so the node voltages are an affine function of the
    two device currents (forward emitter current, base-collector diode
    current).  Newton runs on their logarithms, where the junction laws are
    nearly linear, together with the log of the base-collector conductance
    ratio g (the B-C swing depends on g through the mode shape, and g on the
    swing).  Taking g as an unknown keeps the residual smooth where the
    swing's fixed point has several roots; a warm start (``start``) follows
    one branch as the amplitude changes.  Steps are scaled down as a whole so
    that no log changes by more than LOG_STEP (LOG_STEP_R for the diode
    current and g, which span hundreds when the junction is off).

    Each design's steps are its own (the device model is row by row), so
    trial states are stacked into one call of the device model: the halvings
    of a backtracking step are tried several at once, and while no row
    backtracks the finite-difference neighbours of a trial point are
    evaluated with it (the next Jacobian comes with an accepted step).
    Returns the node voltages (n, M); with ``with_state`` also the state
    (n, 3) and whether each row's balance was solved.
    """
    net = mdl.net
    n = u.shape[0]
    a = np.exp(u)
    one = np.ones(n)
    jf = _injections(mdl, one, 0 * one)
    jr = _injections(mdl, 0 * one, one)
    solve = lambda rhs: np.linalg.solve(net.g, rhs[..., None])[..., 0]  # noqa: E731
    v0, zf, zr = solve(net.b), solve(jf), solve(jr)

    def volts(x):
        return v0 + zf * np.exp(x[:, 0])[:, None] + zr * np.exp(x[:, 1])[:, None]

    # the node voltages the device sees, as (offset, per forward current, per diode current)
    cols = [(v0[:, k], zf[:, k], zr[:, k]) for k in (net.ib, net.ij, net.ic) if k >= 0]
    vcc = mdl.vcc_v

    def terminals(rows, x):
        ef, er = np.exp(x[:, 0]), np.exp(x[:, 1])
        vb, vj, *vc = (c0[rows] + cf[rows] * ef + cr[rows] * er for c0, cf, cr in cols)
        return vb - vj, vb - (vc[0] if vc else vcc[rows])

    def resid(rows, x):
        """Residuals (m, 3) at states x (m, 3) of model rows ``rows``."""
        vbe, vbc = terminals(rows, x)
        ln_f, _, ln_r, g = _device_with(mdl, rows, a[rows], vbe, vbc, x[:, 2])
        return np.stack([ln_f - x[:, 0], ln_r - x[:, 1], np.log(np.maximum(g, 1e-300)) - x[:, 2]], axis=1)

    def clip(x):
        return np.concatenate([x[:, :1], np.clip(x[:, 1:], -700.0, 5.0)], axis=1)

    def norm(f, x):
        """Largest residual; the diode current's and g's do not count while the junction is off."""
        off = (x[:, 1] < -600) & (x[:, 2] < -600)
        return np.maximum(np.abs(f[:, 0]), np.where(off, 0.0, np.abs(f[:, 1:]).max(axis=1)))

    h = 1e-6
    eye = h * np.eye(_K)
    jac = np.empty((n, _K, _K))
    valid = np.zeros(n, dtype=bool)

    def with_jacobian(rows, x, f):
        """Residuals at x (``f`` None: evaluate them too) and the Jacobian there."""
        m = rows.size
        trial = [x + eye[i] for i in range(_K)] if f is not None else [x] + [x + eye[i] for i in range(_K)]
        r = resid(np.tile(rows, len(trial)), np.concatenate(trial)).reshape(len(trial), m, _K)
        if f is None:
            f, r = r[0], r[1:]
        jac[rows] = np.moveaxis((r - f[None]) / h, 0, 2)
        valid[rows] = True
        return f

    every = np.arange(n)
    if start is None:
        x = np.stack([np.log(mdl.j.ie_q), np.full(n, -700.0), np.full(n, -700.0)], axis=1)
        vbe, vbc = terminals(every, x)
        _, _, ln_r, g = _device(mdl, a, vbe, vbc)  # the smallest root of the B-C fixed point
        x[:, 1] = ln_r
        x[:, 2] = np.log(np.maximum(g, 1e-300))
        x = clip(x)
    else:
        x = clip(np.array(start, dtype=float))
    f = with_jacobian(every, x, None) if iterations > 0 else resid(every, x)
    limit = np.array([LOG_STEP, LOG_STEP_R, LOG_STEP_R])
    ahead = True  # evaluate the next Jacobian with the trial step
    for _ in range(iterations):
        stale = np.flatnonzero(~valid)
        if stale.size:
            with_jacobian(stale, x[stale], f[stale])
        # a tiny ridge, relative to each row's Jacobian, keeps an exactly singular row solvable
        ridge = 1e-14 * (np.abs(jac).max(axis=(1, 2)) + 1e-300)
        d = -np.linalg.solve(jac + ridge[:, None, None] * np.eye(_K), f[..., None])[..., 0]
        d = np.nan_to_num(d)
        d *= np.minimum(1.0, 1.0 / np.max(np.abs(d) / limit, axis=1, initial=1e-300))[:, None]
        old = norm(f, x)
        # a converged row stays where it is while others iterate: a row's result must not
        # depend on which other rows share its batch (further steps could leave its branch)
        d[old < 1e-9] = 0.0
        step = np.ones(n)
        nx = clip(x + d)
        valid[:] = False
        nf = with_jacobian(every, nx, None) if ahead else resid(every, nx)
        worse = np.flatnonzero(~(norm(nf, nx) <= old))
        ahead = worse.size == 0
        valid[worse] = False
        tries = 1
        while worse.size and tries < 8:  # backtracking: halve the step where the residual grew
            b = int(np.clip(_BATCH_ROWS // worse.size, 1, 8 - tries))
            tries += b
            sc = step[worse] / (2.0 ** np.arange(1, b + 1))[:, None]  # (b, rows): the next b halvings
            tx = clip((x[worse][None] + sc[..., None] * d[worse][None]).reshape(-1, _K)).reshape(b, -1, _K)
            r = resid(np.tile(worse, b), tx.reshape(-1, _K)).reshape(b, -1, _K)
            good = norm(r.reshape(-1, _K), tx.reshape(-1, _K)).reshape(b, -1) <= old[worse]
            done = good.any(axis=0)
            pick = np.where(done, np.argmax(good, axis=0), b - 1), np.arange(worse.size)
            step[worse], nx[worse], nf[worse] = sc[pick], tx[pick], r[pick]
            worse = worse[~done]
        x, f = nx, nf
        if np.all(norm(f, x) < 1e-9):
            break
    ok = norm(f, x) < BALANCE_TOL
    v = volts(x)
    return (v, x, ok) if with_state else v


def rest(mdl: Model) -> np.ndarray:
    """Node voltages at rest (amplitude A0_V, practically the DC point)."""
    return balance(mdl, np.full(mdl.vcc_v.shape[0], np.log(A0_V)))


#: Amplitudes (log-spaced from the kick to twice the supply) scanned for the running point.
U_SCAN = 20


def equilibrium(mdl: Model, steps: int = 14):
    """Running state (ln a, node voltages): sigma = 0 with the bias balanced at that amplitude.

    sigma is scanned along the balanced bias curve (amplitude rising from the
    kick, the balance warm-started from the previous amplitude, so that it
    follows one branch).  There may be several roots (a forward-biased
    base-collector junction pumps the bias to a second branch); the running
    point is the largest amplitude where sigma falls through zero, the one a
    start-up with lagging bias reaches.  It is refined by bisection.  Returns
    (y, starts, found, lg): ``starts`` is False where sigma < 0 already at rest,
    ``found`` is False where no running point was found (the verdict is then
    "does not settle", the cautious side), ``lg`` is the log of the B-C
    conductance ratio at the running state (its branch, for :func:`stability`).
    """
    n = mdl.vcc_v.shape[0]
    us = np.linspace(np.log(A0_V), np.log(np.maximum(2 * mdl.vcc_v, 1.0)), U_SCAN, axis=1)
    sig = np.empty((n, U_SCAN))
    states = np.empty((U_SCAN, n, _K))
    state = None
    good = np.zeros((n, U_SCAN), dtype=bool)
    for k in range(U_SCAN):
        v, state, good[:, k] = balance(mdl, us[:, k], start=state, with_state=True)
        bad = np.flatnonzero(~good[:, k])
        if bad.size:  # a warm start can end where its branch folds: start those rows afresh
            v2, st2, ok2 = balance(_take_model(mdl, bad), us[bad, k], with_state=True)
            fix = bad[ok2]
            v[fix] = v2[ok2]
            state = state.copy()
            state[fix] = st2[ok2]
            good[fix, k] = True
        sig[:, k] = _rates(mdl, us[:, k], v, lg=state[:, 2])[0]
        states[k] = state
    # roots between amplitudes whose bias balance was solved; failing that, any root
    cross = (sig[:, :-1] > 0) & (sig[:, 1:] <= 0)
    down = cross & good[:, :-1] & good[:, 1:]
    down = np.where(down.any(axis=1, keepdims=True), down, cross)
    found = down.any(axis=1)
    last = np.where(found, U_SCAN - 2 - np.argmax(down[:, ::-1], axis=1), 0)
    rows = np.arange(n)
    lo, hi = us[rows, last], us[rows, last + 1]
    state = states[last, rows]
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        v, state, _ = balance(mdl, mid, start=state, with_state=True)
        up = _rates(mdl, mid, v, lg=state[:, 2])[0] > 0
        lo = np.where(up, mid, lo)
        hi = np.where(up, hi, mid)
    u = 0.5 * (lo + hi)
    v, state, _ = balance(mdl, u, start=state, with_state=True)
    return np.concatenate([u[:, None], v], axis=1), sig[:, 0] > 0, found, state[:, 2]


def stability(mdl: Model, y_eq: np.ndarray, lg_eq=None) -> np.ndarray:
    """Eigenvalues (1/s) of the linearised envelope model at the running state, (n, K).

    ``lg_eq``: the B-C fixed point's branch at the running state (from :func:`equilibrium`).
    """
    m = mdl.net.c.shape[1]
    h = np.array([1e-4] + [1e-5] * m)
    f = lambda y: _state_rates(mdl, y, lg_eq)  # noqa: E731
    return np.linalg.eigvals(_fd_jacobian(f, y_eq, f(y_eq), h))


def build_model(batch: DesignBatch, model: NpnModel, dc: DcPoint, hy: mna.Hybrid,
                omega_ref: np.ndarray) -> Model:
    net = slow_network(batch)
    vt = thermal_voltage(batch.temp_c) + np.zeros(batch.n)
    j = Junctions(log_is=np.log(is_at(model, batch.temp_c)) + np.zeros(batch.n), vt=vt,
                  bf=np.broadcast_to(model.bf, (batch.n,)).astype(float), re1=degeneration_ohm(batch),
                  ie_q=np.maximum(dc.ie_a, 1e-12), gm_q=np.maximum(hy.gm_s, 1e-12))
    sig, rho = sigma_table(batch, hy, np.broadcast_to(model.tf_s, (batch.n,)), omega_ref)
    tau = bias_time_constant(net)
    return Model(net=net, j=j, sig=sig, rho=rho, vcc_v=batch.vcc_v + np.zeros(batch.n), tau_s=tau)


def _with_floor(mdl: Model, y: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Add a noise-level source to d ln a / dt, so a collapsed envelope rests near U_FLOOR."""
    seed = np.abs(mdl.sig[:, 0, 0])  # the passive decay rate, 1/s
    d[:, 0] += seed * np.exp(np.minimum(U_FLOOR - y[:, 0], 50.0))
    return d


def simulate_one(mdl: Model, row: int, y_start: np.ndarray, t_end_s: float, samples: int = 2000,
                 stop_below: float | None = None):
    """Integrate one design of the model (LSODA, dense Jacobian); for bursting designs.

    A bursting envelope switches between fast collapses and slow recoveries,
    which a shared-step batch cannot follow efficiently; one design at a time
    it costs a few thousand evaluations of the averaged model.
    """
    one = _take_model(mdl, np.array([row]))

    def rhs(_t, y):
        yy = y[None, :]
        return _with_floor(one, yy, _state_rates(one, yy))[0]

    events = None
    if stop_below is not None:  # stop at the BURSTS_SEEN-th collapse below this amplitude
        def collapse(_t, y):
            return y[0] - np.log(stop_below)
        collapse.direction = -1
        collapse.terminal = BURSTS_SEEN
        events = [collapse]
    sol = solve_ivp(rhs, (0.0, t_end_s), y_start, method="LSODA", rtol=1e-3, atol=1e-4,
                    max_step=t_end_s / 400, events=events)
    t = np.linspace(0.0, sol.t[-1], samples)
    return t, np.exp(np.interp(t, sol.t, sol.y[0])), sol


def simulate_many(mdl: Model, rows: np.ndarray, y_start: np.ndarray, t_end_s: np.ndarray,
                  stop_below: np.ndarray, samples: int = 2000):
    """Integrate several designs of the model together (BDF, block-diagonal Jacobian).

    One stacked system: the right-hand side is evaluated for every design in one
    call of the averaged model, and the finite-difference Jacobian takes one
    call per state (the designs do not couple).  The steps are shared, so the
    designs should have bias time constants of one order.  A design whose drive
    falls below its ``stop_below`` (volt) after having been above it has
    collapsed: it leaves the integration there, and the others go on.
    Returns per design (times, drive amplitudes) from 0 to its own ``t_end_s``
    or its collapse, which designs collapsed, and which were decided (all but
    those still running when MANY_CALLS evaluations were spent).
    """
    rows = np.asarray(rows)
    m, k = y_start.shape
    y = y_start.astype(float).copy()
    seg_t: list[list] = [[] for _ in range(m)]
    seg_u: list[list] = [[] for _ in range(m)]
    collapsed = np.zeros(m, dtype=bool)
    decided = np.ones(m, dtype=bool)
    calls = [0]
    live = np.arange(m)
    t0, t_stop = 0.0, float(np.max(t_end_s))
    max_step = t_stop / 400
    while live.size and t0 < t_stop:
        sub = _take_model(mdl, rows[live])
        mm = live.size

        def rhs(_t, yy, sub=sub, mm=mm):
            calls[0] += 1
            if calls[0] > MANY_CALLS:
                raise _OutOfCalls
            y2 = yy.reshape(mm, k)
            return _with_floor(sub, y2, _state_rates(sub, y2)).ravel()

        events = []
        for j in range(mm):
            def fell(_t, yy, j=j, level=float(np.log(stop_below[live[j]]))):
                return yy[j * k] - level
            fell.direction, fell.terminal = -1, True
            events.append(fell)
        pattern = sparse.block_diag([np.ones((k, k))] * mm, format="csr")
        try:
            sol = solve_ivp(rhs, (t0, t_stop), y[live].ravel(), method="BDF", rtol=1e-3, atol=1e-4,
                            max_step=max_step, jac_sparsity=pattern, events=events)
        except _OutOfCalls:  # the designs still running stay undecided
            decided[live] = False
            break
        for j, i in enumerate(live):
            seg_t[i].append(sol.t)
            seg_u[i].append(sol.y[j * k])
        y[live] = sol.y[:, -1].reshape(mm, k)
        t0 = float(sol.t[-1])
        if sol.status < 0:  # the integration failed: the designs still running stay undecided
            decided[live] = False
            break
        hit = np.array([j for j, te in enumerate(sol.t_events) if te.size], dtype=int)
        if sol.status != 1 or hit.size == 0:
            break
        # a collapse after the design's own end time is not counted (its record ends there), so
        # that a design's verdict does not depend on how far its group mates run
        collapsed[live[hit]] = t0 <= t_end_s[live[hit]]
        live = np.delete(live, hit)
    out = []
    for i in range(m):
        if not seg_t[i]:
            out.append((np.zeros(1), np.full(1, A0_V)))
            continue
        tt, uu = np.concatenate(seg_t[i]), np.concatenate(seg_u[i])
        t = np.linspace(0.0, min(float(t_end_s[i]), float(tt[-1])), samples)
        out.append((t, np.exp(np.interp(t, tt, uu))))
    return out, collapsed, decided


class _OutOfCalls(Exception):
    """simulate_many spent its MANY_CALLS evaluations."""


#: Evaluations of the stacked right-hand side one simulate_many call may spend (the demo's
#: settling group of 6 corners took about 1,000; a group with an envelope that keeps
#: swinging can take tens of thousands, and its undecided designs keep the cautious linear
#: verdict).
MANY_CALLS = 1500


#: Designs integrated together have end times within this factor of each other.
BATCH_SPAN = 3.0


def _take_model(mdl: Model, rows: np.ndarray) -> Model:
    net = mdl.net
    sub_net = SlowNetwork(g=net.g[rows], c=net.c[rows], b=net.b[rows], nodes=net.nodes,
                          ib=net.ib, ic=net.ic, ij=net.ij)
    j = Junctions(**{k: getattr(mdl.j, k)[rows] for k in Junctions.__dataclass_fields__})
    return Model(net=sub_net, j=j, sig=mdl.sig[rows], rho=mdl.rho[rows], vcc_v=mdl.vcc_v[rows],
                 tau_s=mdl.tau_s[rows])


#: Integration horizon after the start-up, in bias time constants: settling and bursting designs.
SETTLE_HORIZON = 10.0
BURST_HORIZON = 6.0
#: A bursting design's integration stops after this many collapses.
BURSTS_SEEN = 3
#: Envelope growth rate (relative to the passive decay rate) above which the running point is unstable.
UNSTABLE_REL = 1e-3


def predict(batch: DesignBatch, res, integrate_rows=(), confirm: bool = False) -> Dynamics:
    """Envelope dynamics of every design of a batch, given its engine result ``res``.

    The running point of the averaged model and the eigenvalues of its
    linearisation decide, for every design that starts, whether the amplitude
    settles (all real parts negative) or not (bursts, or a growing envelope
    modulation).  The rows in ``integrate_rows`` are also integrated from a
    1 mV start (``A0_V``), which gives the settling time and the burst period
    and overrides the linear verdict where they disagree (a start-up that
    overshoots into bursts).  With ``confirm``, every row the linear verdict
    calls unsettled is integrated as well and the integration decides: where
    the B-C junction conducts at the running point the running point itself
    can be missed (the bias balance has no solution near a fold of its
    branch), and the linear verdict is then not to be trusted.  Those rows are
    integrated together (shared steps and one call budget, see
    :func:`simulate_many`), so their verdicts depend on each other: confirm
    only a batch of one design's rows (its corners).  The envelopes of
    ``integrate_rows`` are returned, in that order.
    """
    n = batch.n
    out = {k: np.full(n, np.nan) for k in ("amplitude_settles", "growth_rate", "settle_time_s",
                                           "burst_period_s", "drive_v", "tau_bias_s")}
    env_t, env_a = [], []
    run = np.flatnonzero(np.asarray(res.starts))
    if run.size == 0:
        return Dynamics(**out)
    sub = batch.take(run)
    hy = mna.Hybrid(*(np.asarray(getattr(res.hybrid, k))[run] for k in mna.Hybrid.__dataclass_fields__))
    dc = DcPoint(**{k: np.asarray(getattr(res.dc, k))[run] for k in DcPoint.__dataclass_fields__})
    mdl = build_model(sub, model_of(sub), dc, hy, 2 * np.pi * np.asarray(res.freq_loop_hz)[run])
    y_eq, grows, found, lg_eq = equilibrium(mdl)
    lam = stability(mdl, y_eq, lg_eq)
    rate = lam.real.max(axis=1)
    stable = grows & found & (rate <= UNSTABLE_REL * np.abs(mdl.sig[:, 0, 0]))
    settles = stable.astype(float)
    settle_t = np.full(run.size, np.nan)
    period = np.full(run.size, np.nan)
    pos = {int(r): k for k, r in enumerate(run)}
    shown = [pos[int(r)] for r in integrate_rows if int(r) in pos]
    extra = sorted(set(np.flatnonzero(grows & ~stable).tolist()) - set(shown)) if confirm else []
    todo = np.array(shown + extra, dtype=int)
    if todo.size:
        y0 = np.concatenate([np.full((todo.size, 1), np.log(A0_V)), rest(_take_model(mdl, todo))], axis=1)
        sig0 = np.maximum(np.abs(mdl.sig[todo, R_GRID.searchsorted(1.0), 0]), 1e-9)
        t_up = np.log(np.exp(y_eq[todo, 0]) / A0_V) / sig0
        t_end = t_up + np.where(stable[todo], SETTLE_HORIZON, BURST_HORIZON) * mdl.tau_s[todo]
        low = envelope.BURST_LOW * 0.5 * np.exp(y_eq[todo, 0])
        f_hz = np.asarray(res.freq_hz)[run]

        def judge(k, t, a):
            cls = envelope.classify(t, a, 0.0, 1.0 / f_hz[k])
            settles[k] = float(cls.settle_time_s is not None and not cls.bursts)
            settle_t[k] = cls.settle_time_s if cls.settle_time_s is not None else np.nan
            period[k] = cls.burst_period_s if cls.burst_period_s is not None else np.nan

        for i, k in enumerate(shown):  # one by one: a burst period needs several collapses
            t, a, _ = simulate_one(mdl, k, y0[i], float(t_end[i]), stop_below=None if stable[k] else float(low[i]))
            judge(k, t, a)
            env_t.append(t)
            env_a.append(a / np.exp(y_eq[k, 0]))
        rest_ = np.arange(len(shown), todo.size)
        order = rest_[np.argsort(t_end[rest_])]
        while order.size:  # the others together, end times within BATCH_SPAN of each other
            group = order[t_end[order] <= BATCH_SPAN * t_end[order[0]]]
            order = order[group.size:]
            runs, fell, decided = simulate_many(mdl, todo[group], y0[group], t_end[group], low[group])
            for i, (t, a), f, ok in zip(group, runs, fell, decided):
                if f:  # collapsed after start-up: it bursts
                    settles[todo[i]] = 0.0
                elif ok:
                    judge(int(todo[i]), t, a)
    out["amplitude_settles"][run] = np.where(grows, settles, np.nan)
    out["growth_rate"][run] = rate
    out["settle_time_s"][run] = settle_t
    out["burst_period_s"][run] = period
    out["drive_v"][run] = np.exp(y_eq[:, 0])
    out["tau_bias_s"][run] = mdl.tau_s
    return Dynamics(**out, envelope_t_s=tuple(env_t), envelope_rel=tuple(env_a))
