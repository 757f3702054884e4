"""Bode plot of a design's return ratio T(jw), and the small functions it needs.

``loop_gain_curve`` and ``loop_split`` are pure computations on the engine
(numpy in, numbers out); they live here for now because ``picker check`` is
their only user, and belong in :mod:`picker.circuit.evaluate` (the lead is
asked to move them).  The figure is drawn with matplotlib's object API on the
Agg canvas (no pyplot, no global backend state).

References
----------
Return ratio with respect to the transistor's transconductance: H. W. Bode,
"Network Analysis and Feedback Amplifier Design" (1945); the engine's method is
described in :mod:`picker.circuit.engine`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from picker.circuit import mna
from picker.circuit.bias import solve_dc
from picker.circuit.design import Design, DesignBatch
from picker.circuit.engine import dc_network, hybrid_at, loop_gain, model_of
from picker.circuit.evaluate import Evaluation
from picker.units import format_eng

#: Span of the plotted grid either side of the crossing (a factor on frequency).
PLOT_SPAN = 4.0
#: Points of the log grid, and of the fine grid around the tank mode.
PLOT_POINTS = 600
PLOT_FINE = 241
#: Half-width of the fine grid in tank bandwidths (f / loaded Q).
FINE_BANDWIDTHS = 6.0
#: Marker ids set on the figure's artists (``Artist.get_gid``), for tests and tools.
GID_MAG = "phase-zero-magnitude"
GID_PHASE = "phase-zero-phase"


def _small_signal(design: Design) -> tuple[mna.Matrices, np.ndarray]:
    """MNA matrices at the refined DC point, nominal hFE (row 0 of :func:`check_design`)."""
    batch = DesignBatch.from_designs([design])
    model = model_of(batch)
    r1, r2, re, rc = dc_network(batch)
    dc = solve_dc(r1, r2, re, rc, batch.vcc_v, model, batch.temp_c)
    hy = hybrid_at(dc, model, batch.temp_c)
    return mna.assemble(batch, hy), hy.gm_s


def loop_gain_curve(design: Design, freqs_hz) -> np.ndarray:
    """Small-signal return ratio T(j 2 pi f) of ``design`` at each frequency.

    Parameters
    ----------
    design : Design
        A fully specified design (nominal hFE, the design's temperature).
    freqs_hz : array_like
        Frequencies, hertz (any shape).

    Returns
    -------
    ndarray, complex, shape of ``freqs_hz``
        T = gm (v_B - v_E) / i_t, dimensionless; real and above 1 at the
        phase-zero frequency of a design that starts.
    """
    f = np.asarray(freqs_hz, dtype=float)
    mat, gm = _small_signal(design)
    t = loop_gain(mat, gm, 2 * np.pi * f.reshape(1, -1))
    return t[0].reshape(f.shape)


def loop_split(design: Design, freq_hz: float) -> tuple[float, float]:
    """The return ratio at ``freq_hz`` split into stage gain and feedback ratio.

    Gain is gm |v_C| / i_t (the collector's AC voltage per unit of base-emitter
    drive, loading included), feedback |v_B - v_E| / |v_C|; their product is
    |T|.  These are the network's own counterparts of the hand method's
    ``RC / r'e`` (or ``Rp / r'e``) and capacitor or inductor ratio.

    Returns
    -------
    gain, feedback : float
        Dimensionless; NaN for a non-finite ``freq_hz``.
    """
    if not np.isfinite(freq_hz):
        return float("nan"), float("nan")
    mat, gm = _small_signal(design)
    v = mna.responses(mat, np.array([[2 * np.pi * float(freq_hz)]]))[0, 0]
    vc = abs(v[mat.index["C"]])
    vbe = abs(v[mat.index["B"]] - v[mat.index["E"]])
    return float(gm[0] * vc), float(vbe / vc) if vc > 0 else float("nan")


def plot_freqs(ev: Evaluation) -> np.ndarray:
    """Frequencies to plot, hertz: a log grid around the crossing (or the ideal
    tank frequency) plus a fine grid a few tank bandwidths wide, sorted."""
    fc = ev.freq_loop_hz if np.isfinite(ev.freq_loop_hz) else ev.freq_ideal_hz
    coarse = fc * np.geomspace(1 / PLOT_SPAN, PLOT_SPAN, PLOT_POINTS)
    q = ev.loaded_q if np.isfinite(ev.loaded_q) and ev.loaded_q > 0 else 1e3
    half = float(np.clip(FINE_BANDWIDTHS / q, 1e-5, 0.3))
    fine = fc * (1 + half * np.linspace(-1, 1, PLOT_FINE))
    return np.unique(np.concatenate([coarse, fine]))


def _phase_deg(t: np.ndarray) -> np.ndarray:
    """Phase in degrees, with NaN where it wraps so no vertical line is drawn."""
    ph = np.degrees(np.angle(t))
    jump = np.abs(np.diff(ph)) > 180
    ph = ph.copy()
    ph[1:][jump] = np.nan
    return ph


def bode_figure(design: Design, ev: Evaluation, freqs_hz=None) -> Figure:
    """Magnitude (dB) and phase (degrees) of T(jw) with the phase-zero crossing marked.

    The crossing is taken from ``ev.freq_loop_hz`` and ``ev.margin``; its markers
    carry the gids :data:`GID_MAG` and :data:`GID_PHASE`.  Without a crossing the
    figure says so instead.
    """
    f = plot_freqs(ev) if freqs_hz is None else np.asarray(freqs_hz, dtype=float)
    t = loop_gain_curve(design, f)
    with np.errstate(divide="ignore"):
        mag_db = 20 * np.log10(np.abs(t))
    fig = Figure(figsize=(8, 6), layout="constrained")
    FigureCanvasAgg(fig)
    ax_m, ax_p = fig.subplots(2, 1, sharex=True)
    ax_m.semilogx(f, mag_db, color="tab:blue")
    ax_m.axhline(0.0, color="grey", lw=0.8, ls="--")
    ax_m.set_ylabel("|T| (dB)")
    ax_p.semilogx(f, _phase_deg(t), color="tab:orange")
    ax_p.axhline(0.0, color="grey", lw=0.8, ls="--")
    ax_p.set_ylabel("phase of T (deg)")
    ax_p.set_xlabel("frequency (Hz)")
    ax_p.set_ylim(-185, 185)
    for ax in (ax_m, ax_p):
        ax.grid(True, which="both", alpha=0.3)
        ax.axvline(ev.freq_ideal_hz, color="grey", lw=0.8, ls=":")
    ax_p.annotate("ideal LC", (ev.freq_ideal_hz, -175), fontsize=8, color="grey")
    if np.isfinite(ev.freq_loop_hz) and ev.margin > 0:
        fx = ev.freq_loop_hz
        db = 20 * np.log10(ev.margin)
        ax_m.plot([fx], [db], "o", color="tab:red", gid=GID_MAG)
        ax_p.plot([fx], [0.0], "o", color="tab:red", gid=GID_PHASE)
        ax_m.annotate(f"phase 0 at {format_eng(fx, 'Hz')}\nmargin {ev.margin:.2f} ({db:+.1f} dB)",
                      (fx, db), xytext=(12, -8), textcoords="offset points", fontsize=9, va="top")
    else:
        ax_m.text(0.02, 0.05, "the phase of T never crosses 0 with Re T > 0: it will not oscillate",
                  transform=ax_m.transAxes, fontsize=9, color="tab:red")
    title = design.topo.title
    fig.suptitle(f"Return ratio T(jw), {title}, {design.style} build, {format_eng(design.vcc_v, 'V')}, "
                 f"{design.temp_c:g} °C", fontsize=10)
    return fig


def write_bode_png(design: Design, ev: Evaluation, path: str | Path) -> Path:
    """Draw :func:`bode_figure` and write it as a PNG file; returns the path."""
    path = Path(path)
    bode_figure(design, ev).savefig(path, format="png", dpi=110)
    return path
