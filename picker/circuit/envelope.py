"""What "bursts" and "settles" mean, for any envelope: the tool's prediction and ngspice's record alike.

Both the envelope model (:mod:`picker.circuit.dynamics`) and the measurement
of a simulated waveform (:mod:`picker.sim.ngspice`) classify their envelope
with :func:`classify`, so the prediction and the check use one definition.
The thresholds are this project's own choices (common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Envelope levels, as fractions of its maximum, of an established burst and of a collapse.
BURST_HIGH = 0.5
BURST_LOW = 0.2
#: Settling band around the final envelope, relative.
SETTLE_BAND = 0.05
#: Share of the record (after the reference time) whose median envelope is the final value.
FINAL_SHARE = 0.05
#: Least steady span that makes a record settled: this many periods and this share of the record.
MIN_STEADY_PERIODS = 10
MIN_STEADY_SHARE = 0.1


@dataclass(frozen=True)
class EnvelopeClass:
    """How an envelope behaved after its reference time (seconds)."""

    bursts: bool
    burst_count: int
    burst_period_s: float | None
    settle_time_s: float | None
    falls_s: np.ndarray
    rises_s: np.ndarray


def collapses(te: np.ndarray, env: np.ndarray, t_ref: float) -> tuple[np.ndarray, np.ndarray]:
    """Collapse and rise times of the envelope after ``t_ref`` (two-level hysteresis)."""
    peak = env.max()
    sel = te >= t_ref
    state = np.where(env >= BURST_HIGH * peak, 1, np.where(env < BURST_LOW * peak, -1, 0))[sel]
    ts = te[sel]
    keep = state != 0
    state, ts = state[keep], ts[keep]
    if state.size == 0:
        return np.empty(0), np.empty(0)
    change = np.flatnonzero(np.diff(state) != 0) + 1
    falls = ts[change[state[change] == -1]]
    rises = ts[change[state[change] == 1]]
    if state[0] == 1:
        rises = np.concatenate(([ts[0]], rises))
    return falls, rises


def classify(te: np.ndarray, env: np.ndarray, t_ref: float, period_s: float) -> EnvelopeClass:
    """Classify an envelope ``env`` sampled at times ``te``.

    * bursts: after having reached ``BURST_HIGH`` of its maximum, the envelope
      falls below ``BURST_LOW`` and climbs back at least once; the burst
      period is the median spacing of collapses (or of rises when only one
      collapse was seen).
    * settle time: the last time the envelope is outside ``SETTLE_BAND`` of
      its final value (the median of the last ``FINAL_SHARE``), provided it
      then stays in for at least ``MIN_STEADY_PERIODS`` periods and
      ``MIN_STEADY_SHARE`` of the record; None otherwise, and when it bursts.
    """
    falls, rises = collapses(te, env, t_ref)
    recovered = [f for f in falls if np.any(rises > f)]
    bursts = len(recovered) >= 1
    burst_period = None
    if bursts:
        if falls.size >= 2:
            burst_period = float(np.median(np.diff(falls)))
        elif rises.size >= 2:
            burst_period = float(np.median(np.diff(rises)))
    settle = None
    t_end = te[-1]
    span = t_end - t_ref
    if not bursts and span > 0:
        after = te >= t_ref
        tail = te >= t_end - FINAL_SHARE * span
        final = float(np.median(env[-max(3, np.count_nonzero(tail)):]))
        out = after & (np.abs(env - final) > SETTLE_BAND * final)
        if final <= 0:
            settle = None
        elif np.any(out):
            k = int(np.flatnonzero(out)[-1])
            settle = float(te[k + 1]) if k + 1 < te.size else None
        else:
            settle = float(t_ref)
        if settle is not None and t_end - settle < max(MIN_STEADY_PERIODS * period_s,
                                                       MIN_STEADY_SHARE * span):
            settle = None
    return EnvelopeClass(bursts=bursts, burst_count=len(recovered), burst_period_s=burst_period,
                         settle_time_s=settle, falls_s=falls, rises_s=rises)
