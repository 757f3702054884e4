"""The circuit engine: DC point, return ratio, natural frequencies and steady state, batched.

``evaluate_batch`` takes a :class:`DesignBatch` (arrays with a leading batch
axis) and returns a :class:`BatchResult` of arrays.  Nothing here touches the
store or the terminal.

Start-up margin is the return ratio with respect to the transistor's
transconductance, T(jw) = gm (v_B - v_E) / i_t for a test current i_t that
replaces the gm source, taken at the frequency where its phase crosses zero
(1.0 = marginal).  The running frequency and amplitude come from the
describing function of the exponential junction, in series with any
unbypassed emitter resistance, driven by a sinusoid: the current waveform is
solved in closed form (Wright omega function) over one cycle, with the DC part
of the drive set so that the average current satisfies the bias network (the
rectified current shifts the bias point).  With no series resistance this is
the classical Gm/gm = 2 I1(x) / (x I0(x)) for a drive of x thermal voltages.

References
----------
Return ratio: H. W. Bode, "Network Analysis and Feedback Amplifier Design"
(1945); R. D. Middlebrook's and P. J. Hurst's treatments of loop gain.
Describing function of the bipolar junction: K. K. Clarke and D. T. Hess,
"Communication Circuits: Analysis and Design" (1971), ch. 6.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy import special

from picker.circuit import mna
from picker.circuit.bias import DcPoint, HandDc, hand_dc, solve_dc
from picker.circuit.design import DesignBatch
from picker.circuit.device import (MJC, MJE, VJC_V, VJE_V, NpnModel, is_at, junction_c,
                                   model_from_profile, thermal_voltage)
from picker.circuit.topology import HandFigures

#: Collector-base forward voltage the swing may reach before saturation clips it (common practice).
VCB_FORWARD_V = 0.4


@dataclass(frozen=True)
class BatchResult:
    """Engine results; each field an array over the batch (SI units)."""

    freq_ideal_hz: np.ndarray
    freq_small_signal_hz: np.ndarray
    freq_loop_hz: np.ndarray
    freq_hz: np.ndarray
    margin: np.ndarray
    growth_per_cycle: np.ndarray
    starts: np.ndarray
    amplitude_vpp: np.ndarray
    vbe_drive_v: np.ndarray
    clipped: np.ndarray
    dc: DcPoint
    dc_running: DcPoint
    hybrid: mna.Hybrid
    hand: HandFigures
    hand_dc: HandDc


def dc_network(batch: DesignBatch):
    """(R1, R2, RE_total, R_collector) DC resistances from the topology's dc roles."""
    topo, v, n = batch.topology, batch.values, batch.n

    def total(role: str) -> np.ndarray:
        out = np.zeros(n)
        for p in topo.by_dc(role):
            if p.ref not in v:
                continue
            out = out + (v[p.ref] if p.kind == "resistor" else batch.dcr_ohm.get(p.ref, 0.0))
        return out

    return total("top"), total("bottom"), total("emitter"), total("collector")


def model_of(batch: DesignBatch) -> NpnModel:
    return model_from_profile(batch.hfe, batch.vbe_v, batch.ft_hz, batch.cob_f, batch.vaf_v)


def hybrid_at(dc: DcPoint, model: NpnModel, temp_c, scale=1.0) -> mna.Hybrid:
    """Hybrid-pi parameters at a DC point; ``scale`` scales the current-borne parts (gm, g_pi, C_diff)."""
    vt = thermal_voltage(temp_c)
    gm = dc.ic_a / vt
    vcb = dc.vc_v - dc.vb_v
    return mna.Hybrid(
        gm_s=gm * scale,
        gpi_s=dc.ib_a / vt * scale,
        go_s=dc.ic_a / (model.vaf_v + vcb),
        cpi_f=model.tf_s * gm * scale + junction_c(model.cje_f, dc.vbe_v, VJE_V, MJE),
        cmu_f=junction_c(model.cjc_f, -vcb, VJC_V, MJC),
    )


def loop_gain(mat: mna.Matrices, gm_s: np.ndarray, omega: np.ndarray,
              rows: np.ndarray | None = None, pencil: bool = False) -> np.ndarray:
    """Return ratio T(j omega) with respect to gm, shape of ``omega`` (n, K); with
    ``rows`` (indices into the batch) only those designs, ``omega`` then (len(rows), K).
    ``pencil``: as :func:`mna.responses`."""
    v = mna.responses(mat, omega, rows=rows, pencil=pencil)
    gm = gm_s if rows is None else gm_s[rows]
    return gm[:, None] * (v[..., mat.index["B"]] - v[..., mat.index["E"]])


def scan_grid(mat: mna.Matrices, omega0, span=3.0, points=48, fine=41):
    """Frequencies to scan per design: a log grid around ``omega0`` plus a fine grid
    around the passive tank mode (the natural frequency with gm = 0 nearest
    ``omega0``), spaced in units of that mode's bandwidth so that a high-Q
    tank's narrow loop-gain circle is not stepped over.  Shape (n, points+fine), sorted.
    """
    coarse = omega0[:, None] * np.geomspace(1 / span, span, points)[None, :]
    s0 = mna.natural_frequencies(mat, np.zeros_like(omega0))
    pole = dominant_pair(s0, omega0)
    wp = np.where(np.isfinite(pole.imag), np.abs(pole.imag), omega0)
    bw = np.clip(np.abs(np.nan_to_num(pole.real, nan=0.0)), 1e-7 * wp, 0.05 * wp)
    u = np.sinh(np.linspace(-6.0, 6.0, fine))  # +-200 bandwidths, densest at the centre
    fine_w = np.clip(wp[:, None] + bw[:, None] * u[None, :], wp[:, None] / span, wp[:, None] * span)
    return np.sort(np.concatenate([coarse, fine_w], axis=1), axis=1)


def phase_zero(mat: mna.Matrices, gm_s, omega0, span=3.0, steps=40):
    """Frequency where the return ratio's phase crosses zero, and its magnitude there.

    Scans :func:`scan_grid`, takes the zero crossing of Im T with the largest
    Re T, and refines it by bisection in log frequency.  Returns (omega,
    margin); where no crossing exists, or the best one has Re T <= 0 (phase
    180 degrees), margin is 0 and omega NaN.
    """
    rows = np.arange(gm_s.shape[0])
    grid = scan_grid(mat, omega0, span=span)
    t = loop_gain(mat, gm_s, grid)
    j, found = _best_crossing(t)
    lo, hi = grid[rows, j], grid[rows, j + 1]
    sign_lo = np.signbit(t.imag[rows, j])
    for _ in range(steps):  # bisection in log frequency, all designs at once
        mid = np.sqrt(lo * hi)
        tm = loop_gain(mat, gm_s, mid[:, None])[:, 0]
        same = np.signbit(tm.imag) == sign_lo
        lo = np.where(same, mid, lo)
        hi = np.where(same, hi, mid)
    w = np.sqrt(lo * hi)
    tw = loop_gain(mat, gm_s, w[:, None])[:, 0]
    found &= tw.real > 0
    return np.where(found, w, np.nan), np.where(found, tw.real, 0.0)


@dataclass(frozen=True)
class SmallSignal:
    """The small-signal part of the engine's answer (arrays over a batch, SI units)."""

    freq_loop_hz: np.ndarray
    margin: np.ndarray
    dc: DcPoint
    hybrid: mna.Hybrid
    hand: HandFigures
    hand_dc: HandDc

    @property
    def starts(self) -> np.ndarray:
        return self.margin > 1.0


#: Factor within which a corner's or a Monte Carlo sample's phase zero is first looked
#: for around its design's own (``local_phase_zero``'s ``near``; rows not bracketed there
#: get the full local grid, so the factor sets only the speed).
NEAR = 1.03


def local_phase_zero(mat: mna.Matrices, gm_s, omega_guess, span=1.3, points=9, xtol=1e-12, max_steps=60,
                     near: float | None = None, within: tuple[np.ndarray, np.ndarray] | None = None):
    """Phase-zero frequency near a good guess, without the eigenvalue scan.

    A log grid of ``points`` over ``omega_guess`` / ``span`` .. * ``span``
    brackets the zero of Im T with the largest Re T.  Anderson-Bjorck
    (modified regula falsi) steps in log frequency on Im T / |T|^2, with a
    bisection step whenever the bracket has not halved in six steps, refine it
    until the step or the bracket is below ``xtol`` (relative frequency) or
    regula falsi lands on an end; each row leaves the batch as it converges
    (typically 5-10 steps; at most ``max_steps``).  For searches and Monte
    Carlo, where the tank's frequency is already known to a few per cent.

    With ``near`` (a factor above 1), the guess is taken to be within that factor
    of the crossing (a corner or a sample of a design whose own crossing it is):
    a 3-point grid over guess / near .. * near brackets it first, and only the rows
    without a crossing of positive Re T there get the full grid.

    With ``within`` (lowest, highest acceptable omega per row), a row whose bracket
    lies wholly outside that window stops there and is reported as not found: its
    crossing (always inside its bracket) could not be accepted anyway.  Rows whose
    crossing is inside get the same answer as without ``within``.  A row that the window's
    own grid points settle as outside is first looked at again around its passive tank
    pole when that pole is narrow enough to hide between them (:func:`_hidden_brackets`).

    Rows that end without a crossing of positive Re T get the full :func:`phase_zero`
    (its fine grid follows the tank's bandwidth): a high-Q tank's loop circle can fall
    between two points of the local grid.
    Returns (omega, margin) like :func:`phase_zero`.
    """
    n = gm_s.shape[0]
    outside = np.zeros(n, dtype=bool)
    if within is not None:  # the window widened by rounding's worth, so that no edge case is lost
        lo_w, hi_w = within[0] * np.exp(-1e-9), within[1] * np.exp(1e-9)
    if near is None and within is not None:
        w_a, w_b, ta, tb, found, outside = _bracket_within(mat, gm_s, omega_guess, span, points, lo_w, hi_w)
        rows, got = _hidden_brackets(mat, gm_s, omega_guess, outside, lo_w, hi_w, span ** (2.0 / (points - 1)))
        for whole, part in zip((w_a, w_b, ta, tb), got):
            whole[rows] = part
        found[rows], outside[rows] = True, False
    elif near is None:
        w_a, w_b, ta, tb, found = _bracket(mat, gm_s, omega_guess, span, points)
    else:
        w_a, w_b, ta, tb, found = _bracket(mat, gm_s, omega_guess, near, 3)
        redo = np.flatnonzero(~found | (ta.real + tb.real <= 0))
        if redo.size:
            got = _bracket(mat, gm_s, omega_guess[redo], span, points, rows=redo)
            for whole, part in zip((w_a, w_b, ta, tb, found), got):
                whole[redo] = part
    # Bracket ends in log frequency, T there, and the function refined: -Im(1/T) =
    # Im T / |T|^2, which has the sign (so the bracket and the zero) of Im T but is
    # near linear in frequency across a tank's resonance, where Im T is not; its
    # values at the ends as the Illinois rule scales them.
    a, b = np.log(w_a), np.log(w_b)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        fa, fb = _phase_fn(ta), _phase_fn(tb)
    last = np.zeros(n, dtype=np.int8)  # end the previous step replaced: 1 = a, 2 = b, 0 = none
    ref_width = np.abs(b - a)
    since = np.zeros(n, dtype=np.int8)  # steps since the bracket last halved
    if within is not None:
        log_lo, log_hi = np.log(lo_w), np.log(hi_w)

    def leave_window(act):
        """``act`` without the rows whose bracket now lies wholly outside the window (marked)."""
        if within is None or act.size == 0:
            return act
        out = (np.maximum(a[act], b[act]) < log_lo[act]) | (np.minimum(a[act], b[act]) > log_hi[act])
        outside[act[out]] = True
        return act[~out]

    act = leave_window(np.flatnonzero(found & ~outside))
    act = act[(fa[act] != 0) & (fb[act] != 0)]
    for _ in range(max_steps):
        if act.size == 0:
            break
        a_, b_, fa_, fb_ = a[act], b[act], fa[act], fb[act]
        lo, hi = np.minimum(a_, b_), np.maximum(a_, b_)
        with np.errstate(invalid="ignore", divide="ignore"):
            c = (a_ * fb_ - b_ * fa_) / (fb_ - fa_)
        # regula falsi lands on an end: that end is the zero to rounding; the row is done
        done = (c == a_) | (c == b_)
        if done.any():
            keep = ~done
            act, a_, b_, fa_, fb_, lo, hi, c = (x[keep] for x in (act, a_, b_, fa_, fb_, lo, hi, c))
            if act.size == 0:
                break
        bisect = ~((c > lo) & (c < hi)) | (since[act] >= 6)
        c = np.where(bisect, 0.5 * (a_ + b_), c)
        tc = loop_gain(mat, gm_s, np.exp(c)[:, None], rows=act)[:, 0]
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            fc = _phase_fn(tc)
        ok = np.isfinite(fc)
        left = np.signbit(fc) == np.signbit(fa_)  # c replaces a
        # Anderson-Bjorck: when the same end is replaced twice running, scale the other
        # end's value by 1 - f(c)/f(replaced end) (1/2 if that is not positive)
        again = ~bisect & (last[act] == np.where(left, 1, 2))
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = 1.0 - fc / np.where(left, fa_, fb_)
        scale = np.where(again, np.where(scale > 0, scale, 0.5), 1.0)
        fb_ = np.where(left, fb_ * scale, fb_)
        fa_ = np.where(left, fa_, fa_ * scale)
        upd_a, upd_b = ok & left, ok & ~left
        moved = np.abs(c - np.where(left, a_, b_))  # how far the replaced end moved
        a[act] = np.where(upd_a, c, a_)
        fa[act] = np.where(upd_a, fc, fa_)
        ta[act] = np.where(upd_a, tc, ta[act])
        b[act] = np.where(upd_b, c, b_)
        fb[act] = np.where(upd_b, fc, fb_)
        tb[act] = np.where(upd_b, tc, tb[act])
        last[act] = np.where(bisect, 0, np.where(left, 1, 2))
        width = np.abs(b[act] - a[act])
        halved = width <= 0.5 * ref_width[act]
        ref_width[act] = np.where(halved, width, ref_width[act])
        since[act] = np.where(halved | bisect, 0, since[act] + 1)
        act = leave_window(act[ok & (fc != 0) & (width > xtol) & (moved > xtol)])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        pick_a = np.abs(_phase_fn(ta)) < np.abs(_phase_fn(tb))
    w = np.exp(np.where(pick_a, a, b))
    m = np.where(pick_a, ta.real, tb.real)
    found &= (m > 0) & ~outside
    w, m = np.where(found, w, np.nan), np.where(found, m, 0.0)
    # Rows left without a crossing of positive Re T: a loop circle narrower than the grid's
    # steps (a high-Q tank, the guess on the circle's far side) is stepped over; those rows
    # get the full scan, whose fine grid is spaced by the tank's own bandwidth.
    miss = np.flatnonzero(~found & ~outside)
    if miss.size:
        w_f, m_f = phase_zero(_rows_of(mat, miss), gm_s[miss], omega_guess[miss])
        if within is not None:  # as above: a crossing outside the window is not an answer
            out = ~((w_f >= lo_w[miss]) & (w_f <= hi_w[miss]))
            w_f, m_f = np.where(out, np.nan, w_f), np.where(out, 0.0, m_f)
        w[miss], m[miss] = w_f, m_f
    return w, m


#: How far from its tank pole (in units of the pole's damping, |Re s|) a loop circle's
#: phase zero is looked for: 10 dampings off, the resonance adds a tenth of the circle's
#: diameter to the background (1 / sqrt(1 + 10^2)); a crossing there is the background's.
HIDE_DAMPINGS = 10.0


def _hidden_brackets(mat: mna.Matrices, gm_s, omega_guess, settled, lo, hi, step: float):
    """Brackets for rows ``settled`` as outside the window [``lo``, ``hi``] whose loop circle
    could hide in it between grid points of ratio ``step``: the passive tank pole nearest
    the guess (eigenvalues, some 7 us a row) is narrower (2 |Re s|) than one step and within
    HIDE_DAMPINGS of the window.  Those are looked at again on a grid over the pole's
    +-HIDE_DAMPINGS dampings, densest at the pole (half a damping apart there); a wider
    circle shows its sign changes on the grid.  Returns the rows where a crossing was found
    and their brackets: ends (rad/s) and T at them, as :func:`_bracket`."""
    rows = np.flatnonzero(settled)
    if rows.size == 0:
        return rows, ()
    pole = dominant_pair(mna.natural_frequencies(_rows_of(mat, rows), np.zeros(rows.size)), omega_guess[rows])
    wp, sig = np.abs(pole.imag), np.abs(pole.real)
    with np.errstate(invalid="ignore"):
        sus = ((2 * sig < (step - 1) * wp) & (wp + HIDE_DAMPINGS * sig >= lo[rows])
               & (wp - HIDE_DAMPINGS * sig <= hi[rows]))
    rows, wp, sig = rows[sus], wp[sus], sig[sus]
    if rows.size == 0:
        return rows, ()
    grid = np.maximum(wp[:, None] + sig[:, None] * HIDE_GRID[None, :], 0.5 * wp[:, None])
    t = loop_gain(mat, gm_s, grid, rows=rows, pencil=True)
    j, found = _best_crossing(t)
    k, j = np.flatnonzero(found), j[found]
    return rows[k], (grid[k, j], grid[k, j + 1], t[k, j], t[k, j + 1])


#: The grid of :func:`_hidden_brackets` in dampings from the pole: 13 points, sinh-spaced.
HIDE_GRID = np.sinh(np.linspace(-np.arcsinh(HIDE_DAMPINGS), np.arcsinh(HIDE_DAMPINGS), 13))


def _rows_of(mat: mna.Matrices, rows: np.ndarray) -> mna.Matrices:
    """The matrices of the batch's ``rows`` only."""
    return replace(mat, g=mat.g[rows], c=mat.c[rows])


def _bracket(mat: mna.Matrices, gm_s, omega_guess, span: float, points: int, rows: np.ndarray | None = None):
    """A log grid of ``points`` over ``omega_guess`` / ``span`` .. * ``span`` (for the batch's
    ``rows``, default all) and, per row, the grid interval holding the zero of Im T with the
    largest interpolated Re T: its ends (rad/s), T at them, and whether there is one."""
    grid = omega_guess[:, None] * np.geomspace(1 / span, span, points)[None, :]
    t = loop_gain(mat, gm_s, grid, rows=rows)
    j, found = _best_crossing(t)
    k = np.arange(j.size)
    return grid[k, j], grid[k, j + 1], t[k, j], t[k, j + 1], found


def _bracket_within(mat: mna.Matrices, gm_s, omega_guess, span: float, points: int, lo, hi):
    """:func:`_bracket` for rows that accept only omega in [``lo``, ``hi``], in two steps:
    first the grid points of the intervals that meet some row's window; a row with no
    sign change of Im T in an interval meeting its own window is done (its best crossing,
    if any, lies in an interval outside the window, and its zero in that interval), the
    others get the rest of the grid and the same bracket as :func:`_bracket` (the pencil
    solve is used for both parts, so the bits are those of the whole grid).  Returns
    :func:`_bracket`'s tuple and which rows were settled as outside."""
    grid = omega_guess[:, None] * np.geomspace(1 / span, span, points)[None, :]
    n = grid.shape[0]
    meets = (grid[:, 1:] >= lo[:, None]) & (grid[:, :-1] <= hi[:, None])  # (n, points - 1)
    used = np.flatnonzero(meets.any(axis=0))
    if used.size == 0:
        out = np.full(n, np.nan)
        return out, out, out.astype(complex), out.astype(complex), np.zeros(n, dtype=bool), np.ones(n, dtype=bool)
    c0, c1 = int(used[0]), int(used[-1]) + 1  # first and last grid point of those intervals
    t = np.full((n, points), np.nan, dtype=complex)
    t[:, c0:c1 + 1] = loop_gain(mat, gm_s, grid[:, c0:c1 + 1], pencil=True)
    keep = np.flatnonzero((_sign_changes(t.imag[:, c0:c1 + 1]) & meets[:, c0:c1]).any(axis=1))
    other = np.r_[0:c0, c1 + 1:points]
    if keep.size and other.size:
        t[np.ix_(keep, other)] = loop_gain(mat, gm_s, grid[np.ix_(keep, other)], rows=keep, pencil=True)
    j, found = np.zeros(n, dtype=int), np.zeros(n, dtype=bool)
    if keep.size:
        j[keep], found[keep] = _best_crossing(t[keep])
    settled = np.ones(n, dtype=bool)
    settled[keep] = False
    k = np.arange(n)
    return grid[k, j], grid[k, j + 1], t[k, j], t[k, j + 1], found, settled


def _best_crossing(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row of T over a sorted frequency grid (n, K): the interval j (between points j
    and j + 1) where Im T changes sign with the largest interpolated Re T, and whether
    the row has any such interval."""
    im, re = t.imag, t.real
    cross = _sign_changes(im)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = im[:, :-1] / (im[:, :-1] - im[:, 1:])
        re_x = re[:, :-1] + (re[:, 1:] - re[:, :-1]) * frac  # Re T at the crossing, interpolated
    score = np.where(cross, re_x, -np.inf)
    j = np.argmax(score, axis=1)
    return j, np.isfinite(score[np.arange(j.size), j])


def _sign_changes(im: np.ndarray) -> np.ndarray:
    """Per row, whether Im T changes sign between neighbouring grid points, (n, K - 1)."""
    return np.signbit(im[:, :-1]) != np.signbit(im[:, 1:])


def _phase_fn(t: np.ndarray) -> np.ndarray:
    """Im T / |T|^2 (= -Im 1/T): zero, and changing sign, where Im T does."""
    return t.imag / (t.real * t.real + t.imag * t.imag)


def small_signal(batch: DesignBatch, omega_guess: np.ndarray | None = None, span: float = 1.3,
                 near: float | None = None, within=None) -> SmallSignal:
    """DC point, phase-zero frequency and start-up margin only (no steady state, no poles).

    With ``omega_guess`` (rad/s per row) the phase zero is searched locally by
    :func:`local_phase_zero` (``near``, ``within`` as there); without it, by the full :func:`phase_zero`.  The
    numbers are those of :func:`evaluate_batch` (``freq_loop_hz``, ``margin``)
    wherever the local window holds the crossing.
    """
    model = model_of(batch)
    r1, r2, re, rc = dc_network(batch)
    dc = solve_dc(r1, r2, re, rc, batch.vcc_v, model, batch.temp_c)
    hdc = hand_dc(r1, r2, re, rc, batch.vcc_v, batch.vbe_v, batch.temp_c)
    hand = batch.topology.hand(batch.values, hdc.re_small_ohm, rc)
    hy = hybrid_at(dc, model, batch.temp_c)
    mat = mna.assemble(batch, hy)
    if omega_guess is None:
        w, m = phase_zero(mat, hy.gm_s, 2 * np.pi * hand.freq_ideal_hz)
    else:
        w, m = local_phase_zero(mat, hy.gm_s, np.asarray(omega_guess, dtype=float), span=span, near=near,
                                within=within)
    return SmallSignal(w / (2 * np.pi), m, dc, hy, hand, hdc)


def dominant_index(s: np.ndarray, omega_ref: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the natural frequency (Im > 0) nearest in log frequency to ``omega_ref``,
    and the distances (inf where Im <= 0, so a row without any has an arbitrary index)."""
    ok = s.imag > 1e-9 * np.abs(s).max(axis=1, keepdims=True)
    dist = np.where(ok, np.abs(np.log(np.abs(s.imag) + 1e-300) - np.log(omega_ref)[:, None]), np.inf)
    return np.argmin(dist, axis=1), dist


def dominant_pair(s: np.ndarray, omega_ref: np.ndarray) -> np.ndarray:
    """The natural frequency (Im > 0) nearest in log frequency to ``omega_ref``."""
    j, dist = dominant_index(s, omega_ref)
    rows = np.arange(s.shape[0])
    return np.where(np.isfinite(dist[rows, j]), s[rows, j], np.nan + 0j)


def evaluate_batch(batch: DesignBatch, large_signal: bool = True,
                   large_signal_rows: np.ndarray | None = None) -> BatchResult:
    """Evaluate every design of a batch; see the module docstring for the method.

    ``large_signal_rows`` (a boolean mask) limits the steady-state solution to
    those rows; the others keep the small-signal figures (amplitude 0).
    """
    model = model_of(batch)
    r1, r2, re, rc = dc_network(batch)
    dc = solve_dc(r1, r2, re, rc, batch.vcc_v, model, batch.temp_c)
    hdc = hand_dc(r1, r2, re, rc, batch.vcc_v, batch.vbe_v, batch.temp_c)
    hand = batch.topology.hand(batch.values, hdc.re_small_ohm, rc)
    omega_ideal = 2 * np.pi * hand.freq_ideal_hz

    hy = hybrid_at(dc, model, batch.temp_c)
    mat = mna.assemble(batch, hy)
    w_loop, margin = phase_zero(mat, hy.gm_s, omega_ideal)
    s = mna.natural_frequencies(mat, hy.gm_s)
    ref = np.where(np.isfinite(w_loop), w_loop, omega_ideal)
    pole = dominant_pair(s, ref)
    freq_ss = np.abs(pole.imag) / (2 * np.pi)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        growth = np.exp(2 * np.pi * pole.real / np.abs(pole.imag))

    n = batch.n
    amp = np.zeros(n)
    x = np.zeros(n)
    clipped = np.zeros(n, dtype=bool)
    w_run = np.where(np.isfinite(w_loop), w_loop, 2 * np.pi * freq_ss)
    dc_run = dc
    if large_signal:
        gate = margin if large_signal_rows is None else np.where(large_signal_rows, margin, 0.0)
        amp, x, w_run, clipped, dc_run = _steady_state(batch, model, dc, gate, w_loop, (r1, r2, re, rc))
    freq_run = np.where(margin > 1, w_run / (2 * np.pi), np.where(np.isfinite(w_loop), w_loop / (2 * np.pi), freq_ss))
    return BatchResult(
        freq_ideal_hz=hand.freq_ideal_hz, freq_small_signal_hz=freq_ss,
        freq_loop_hz=w_loop / (2 * np.pi), freq_hz=freq_run, margin=margin,
        growth_per_cycle=growth, starts=margin > 1.0, amplitude_vpp=amp, vbe_drive_v=x,
        clipped=clipped, dc=dc, dc_running=dc_run, hybrid=hy, hand=hand, hand_dc=hdc,
    )


def _steady_state(batch, model, dc, margin, w_loop, network, iterations=8):
    """Describing-function steady state for the designs with margin > 1."""
    r1, r2, re, rc = network
    run = np.flatnonzero(margin > 1.0)
    n = batch.n
    amp, xdrive = np.zeros(n), np.zeros(n)
    clipped = np.zeros(n, dtype=bool)
    w_out = w_loop.copy()
    dc_out = dc
    if run.size == 0:
        return amp, xdrive, w_out, clipped, dc_out
    sub = batch.take(run)
    sm = NpnModel(**{k: np.broadcast_to(getattr(model, k), (n,))[run]
                     for k in NpnModel.__dataclass_fields__})
    sdc = _take_dc(dc, run)
    # 1. effective transconductance ratio r = Gm/gm at which the loop gain is exactly 1
    r = 1.0 / margin[run]
    w = w_loop[run]
    for _ in range(iterations):
        hy = hybrid_at(sdc, sm, sub.temp_c, scale=r)
        mat = mna.assemble(sub, hy)
        w, m = phase_zero(mat, hy.gm_s, w, span=1.3, steps=30)
        ok = m > 0
        r = np.where(ok, r / np.where(ok, m, 1.0), r)
    # 2. drive amplitude at which the junction (with any unbypassed RE1 in series)
    #    delivers the effective transconductance found in step 1
    re1 = degeneration_ohm(sub)
    gm_eff = r * sdc.ic_a / vt_of(sub)
    gc_target = gm_eff / (1 + gm_eff * re1)
    drive, dcx = _drive_for(sub, sm, sdc, (r1[run], r2[run], re[run] - re1, rc[run]), re1, gc_target)
    # 3. amplitudes from the network at the running point
    v = mna.responses(mat, w[:, None])[:, 0]
    ib, ie, ic = (mat.index[k] for k in ("B", "E", "C"))
    vbe = v[:, ib] - v[:, ie]
    tank = v[:, mat.index[sub.topology.tank_node]]
    vcb = v[:, ic] - v[:, ib]
    vx = v[:, mat.index["X"]] if "X" in mat.index else v[:, ie]
    vbx = v[:, ib] - vx
    tank_amp = drive * np.abs(tank / vbx)
    cb_amp = drive * np.abs(vcb / vbx)
    # the collector-base swing may reach forward bias at the running point; where the
    # drive's bias shift leaves no headroom at all (a strongly overdriven loop: the hand
    # DC model then has the collector below the base) the clipped swing is set by the
    # quiescent headroom instead of being reported as zero
    limit = dcx.vc_v - dcx.vb_v + VCB_FORWARD_V
    limit = np.where(limit > 0, limit, np.maximum(sdc.vc_v - sdc.vb_v + VCB_FORWARD_V, 0.0))
    clip = cb_amp > limit
    scale = np.where(clip, limit / np.maximum(cb_amp, 1e-30), 1.0)
    amp[run] = 2 * tank_amp * scale
    xdrive[run] = drive * scale
    clipped[run] = clip
    w_out[run] = w
    dc_out = _merge_dc(dc, run, dcx)
    return amp, xdrive, w_out, clipped, dc_out


def vt_of(batch: DesignBatch) -> np.ndarray:
    return thermal_voltage(batch.temp_c)


def degeneration_ohm(batch: DesignBatch) -> np.ndarray:
    """Unbypassed emitter resistance in series with the junction (role 'degeneration'), ohm."""
    out = np.zeros(batch.n)
    for p in batch.topology.positions:
        if p.role == "degeneration" and p.ref in batch.values:
            out = out + batch.values[p.ref]
    return out


#: Phase samples per cycle for the large-signal junction waveform.
PHASES = 32


def junction_current(v_drive, v_dc, re1, log_is, vt):
    """Current of a junction in series with ``re1`` driven by ``v_dc + v_drive cos(theta)``.

    Solves v = VT ln(i/IS) + i RE1 in closed form with the Wright omega function
    (i = VT/RE1 * omega(ln(RE1 IS / VT) + v/VT)); shape (n, PHASES).
    """
    theta = np.linspace(0, 2 * np.pi, PHASES, endpoint=False)
    v = v_dc[:, None] + v_drive[:, None] * np.cos(theta)[None, :]
    r = np.maximum(re1, 1e-6)[:, None]
    z = np.log(r / vt[:, None]) + log_is[:, None] + v / vt[:, None]
    return (vt[:, None] / r) * np.real(special.wrightomega(z)), theta


def _drive_for(sub, model, dc_q, network, re1, gc_target, steps=36, inner=32):
    """Drive amplitude (volt, base to the bypassed emitter node) giving fundamental
    conductance ``gc_target``, with the bias point shifted self-consistently.

    For each trial amplitude the DC part of the drive is solved so that the
    average junction current satisfies the bias network; the fundamental of the
    current over the drive amplitude is the describing-function conductance.
    """
    r1, r2, re_bypassed, rc = network
    vt = vt_of(sub)
    vth = sub.vcc_v * r2 / (r1 + r2)
    rth = r1 * r2 / (r1 + r2)
    log_is = np.log(is_at(model, sub.temp_c)) + np.zeros(sub.n)
    bf = model.bf

    def solve_vdc(amp):
        lo = -amp - 2.0
        hi = vth.copy()
        for _ in range(inner):
            mid = 0.5 * (lo + hi)
            i, _ = junction_current(amp, mid, re1, log_is, vt)
            idc = i.mean(axis=1)
            resid = vth - idc / (bf + 1) * rth - idc * re_bypassed - mid
            up = resid > 0
            lo, hi = np.where(up, mid, lo), np.where(up, hi, mid)
        return 0.5 * (lo + hi)

    lo = np.log(np.full(sub.n, 1e-4) * vt)
    hi = np.log(np.maximum(sub.vcc_v, 1.0) * 4.0)
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        amp = np.exp(mid)
        vdc = solve_vdc(amp)
        i, theta = junction_current(amp, vdc, re1, log_is, vt)
        gc = 2 * (i * np.cos(theta)[None, :]).mean(axis=1) / amp
        big = gc > gc_target
        lo, hi = np.where(big, mid, lo), np.where(big, hi, mid)
    amp = np.exp(0.5 * (lo + hi))
    vdc = solve_vdc(amp)
    i, _ = junction_current(amp, vdc, re1, log_is, vt)
    idc = i.mean(axis=1)
    ie_scale = idc / dc_q.ie_a
    # the shifted DC point: currents scaled by the rectified average
    dcx = DcPoint(
        vb_v=vth - idc / (bf + 1) * rth, ve_v=idc * (re_bypassed + re1), vc_v=sub.vcc_v - idc * bf / (bf + 1) * rc,
        vbe_v=dc_q.vbe_v, vce_v=sub.vcc_v - idc * bf / (bf + 1) * rc - idc * (re_bypassed + re1),
        ie_a=idc, ic_a=idc * bf / (bf + 1), ib_a=idc / (bf + 1), vth_v=vth, rth_ohm=rth,
        p_transistor_w=dc_q.p_transistor_w * ie_scale, saturated=dc_q.saturated,
    )
    return amp, dcx


def take_rows(obj, rows: np.ndarray):
    """Rows ``rows`` of a result dataclass whose fields are batch arrays (recursively)."""
    fields = {}
    for name in obj.__dataclass_fields__:
        v = getattr(obj, name)
        if hasattr(v, "__dataclass_fields__"):
            fields[name] = take_rows(v, rows)
        elif isinstance(v, np.ndarray) and v.ndim >= 1:
            fields[name] = v[rows]
        else:
            fields[name] = v
    return type(obj)(**fields)


def _take_dc(dc: DcPoint, rows: np.ndarray) -> DcPoint:
    """Rows ``rows`` of a DC point."""
    return DcPoint(**{k: np.asarray(getattr(dc, k))[rows] for k in DcPoint.__dataclass_fields__})


def _merge_dc(base: DcPoint, rows: np.ndarray, sub: DcPoint) -> DcPoint:
    fields = {}
    for name in DcPoint.__dataclass_fields__:
        arr = np.array(getattr(base, name), copy=True)
        arr[rows] = getattr(sub, name)
        fields[name] = arr
    return DcPoint(**fields)
