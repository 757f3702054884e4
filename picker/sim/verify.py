"""``check --verify``: run the design's SPICE deck in ngspice and measure what it does.

The transient is long enough to show what the tool predicted: a settling
design for twice its predicted settling time (at least a dozen bias time
constants), a bursting one for three predicted burst periods; never fewer
than ``MIN_PERIODS`` or more than ``MAX_PERIODS`` oscillation periods.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.design import Design
from picker.circuit.evaluate import Evaluation
from picker.circuit.spice import deck
from picker.sim import ngspice
from picker.sim.ngspice import NOT_INSTALLED, WaveformMeasure, measure_oscillation, run_deck
from picker.errors import PickerError

MIN_PERIODS = 400
MAX_PERIODS = 40000
#: Bias time constants simulated at least.
TAU_SPAN = 12.0


@dataclass(frozen=True)
class Verification:
    tstop_s: float
    measure: WaveformMeasure
    time_s: np.ndarray
    tank_v: np.ndarray

    def as_json(self) -> dict:
        m = self.measure
        fin = lambda x: float(x) if x is not None and np.isfinite(x) else None  # noqa: E731
        return {"freq_hz": fin(m.freq_hz), "amplitude_vpp": fin(m.amplitude_vpp), "bursts": bool(m.bursts),
                "started": bool(m.started), "settle_time_s": fin(m.settle_time_s),
                "burst_period_s": fin(m.burst_period_s), "tstop_s": float(self.tstop_s)}


def transient_length_s(ev: Evaluation) -> float:
    """How long to simulate, second (see the module docstring)."""
    f = ev.freq_hz if np.isfinite(ev.freq_hz) else ev.freq_ideal_hz
    tau = ev.dynamics.get("tau_bias_s") or 0.0
    want = TAU_SPAN * tau
    if ev.settle_time_s:
        want = max(want, 2 * ev.settle_time_s)
    if ev.burst_period_s:
        want = max(want, 3 * ev.burst_period_s + (ev.settle_time_s or 0.0))
    return float(np.clip(want, MIN_PERIODS / f, MAX_PERIODS / f))


def require_ngspice() -> None:
    """PickerError saying how to install ngspice when it is not on PATH."""
    if ngspice.find_ngspice() is None:
        raise PickerError(f"--verify needs the ngspice simulator: {NOT_INSTALLED}")


def verify(design: Design, ev: Evaluation, tstop_s: float | None = None) -> Verification:
    """Run the kicked transient of ``design`` in ngspice and measure it at the tank node."""
    require_ngspice()
    tstop = transient_length_s(ev) if tstop_s is None else tstop_s
    f = ev.freq_hz if np.isfinite(ev.freq_hz) else ev.freq_ideal_hz
    node = "v(" + design.topo.tank_node.lower() + ")"
    data = run_deck(deck(design, tstop_s=tstop, probes=[design.topo.tank_node]))
    m = measure_oscillation(data["time"], data[node], f_guess_hz=f)
    return Verification(tstop_s=tstop, measure=m, time_s=data["time"], tank_v=data[node])
