"""Tolerance yield: a seeded Monte Carlo over part tolerances, hFE range and temperature.

Every sample is a row of one engine batch (:func:`picker.circuit.engine.small_signal`,
the phase-zero search started at the nominal frequency scaled by the
sample's own resonance shift).  A part's value is drawn uniformly inside its
tolerance band (a bound: real parts cluster nearer nominal, so the yield is
conservative); hFE log-uniformly between the profile's min and max; the
temperature uniformly over the range.  The running (large-signal) frequency
differs from the phase-zero frequency by the nominal design's ratio, applied
to every sample.  Yield = share of samples with the frequency inside the
tolerance and a margin of at least 1.
"""

from __future__ import annotations

import numpy as np

from picker.circuit.design import Design, DesignBatch
from picker.circuit.engine import NEAR, evaluate_batch, small_signal

#: Tolerance assumed for a position whose part carries none (a bound, common practice).
UNKNOWN_TOL = 0.10


def samples(design: Design, n: int, temps_c: tuple[float, ...], seed: int) -> DesignBatch:
    """``n`` random variants of ``design`` as one batch (row 0 is not special)."""
    rng = np.random.default_rng(seed)
    batch = DesignBatch.from_designs([design])
    idx = np.zeros(n, dtype=int)
    b = batch.take(idx)
    values = {}
    for ref, v in b.values.items():
        kind = design.topo.position(ref).kind
        info = design.parts.get(ref)
        tol = info.tolerance if info is not None and info.tolerance is not None else UNKNOWN_TOL
        if kind == "coupling" or not np.any(v > 0):
            values[ref] = v
            continue
        values[ref] = v * (1 + tol * rng.uniform(-1, 1, n))
    lo, hi = np.log(design.npn.hfe_min), np.log(design.npn.hfe_max)
    hfe = np.exp(rng.uniform(lo, hi, n))
    t = np.asarray(temps_c, dtype=float) if temps_c else np.array([design.temp_c])
    temp = rng.uniform(min(t.min(), design.temp_c), max(t.max(), design.temp_c), n)
    return b.with_(values=values, hfe=hfe, temp_c=temp)


def run(design: Design, n: int, temps_c, seed: int, nominal=None, band_hz: tuple[float, float] | None = None):
    """(freq_hz, margin) arrays of ``n`` samples.  ``nominal``: the design's own figures
    (anything with ``freq_loop_hz``, ``freq_hz`` and ``freq_ideal_hz``, such as the
    Evaluation the full check made) when already known; else they are computed.
    ``band_hz``: only frequencies in (low, high) matter to the caller; a sample found
    to be outside is reported as NaN (margin 0) without finishing its search."""
    if nominal is None:
        res = evaluate_batch(DesignBatch.from_designs([design]))
        f_loop, f_run, f_ideal0 = (float(res.freq_loop_hz[0]), float(res.freq_hz[0]), float(res.freq_ideal_hz[0]))
    else:
        f_loop, f_run, f_ideal0 = float(nominal.freq_loop_hz), float(nominal.freq_hz), float(nominal.freq_ideal_hz)
    ratio = f_run / f_loop if np.isfinite(f_run) and np.isfinite(f_loop) and f_loop > 0 else 1.0
    b = samples(design, n, temps_c, seed)
    hand = b.topology.hand(b.values, np.ones(b.n), np.ones(b.n))
    guess = 2 * np.pi * f_loop * hand.freq_ideal_hz / f_ideal0
    within = None
    if band_hz is not None:  # the engine's loop frequency is the running one / ratio
        within = tuple(np.full(b.n, 2 * np.pi * f / ratio) for f in band_hz)
    ss = small_signal(b, guess, near=NEAR, within=within)
    return ss.freq_loop_hz * ratio, ss.margin


def yield_of(design: Design, spec, nominal=None) -> float | None:
    """Share of samples in frequency tolerance and starting (margin >= 1); ``nominal`` as
    for :func:`run`."""
    if spec.mc <= 0:
        return None
    band = (spec.freq_hz * (1 - spec.tol), spec.freq_hz * (1 + spec.tol))
    f, m = run(design, spec.mc, tuple(spec.temps_c), spec.seed, nominal, band_hz=band)
    ok = np.isfinite(f) & (np.abs(f / spec.freq_hz - 1) <= spec.tol) & (m >= 1.0)
    return float(np.mean(ok))
