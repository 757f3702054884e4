"""The reference design set: designs across 10 kHz - 20 MHz and all four topologies.

Shared by tests/reference/test_engine_vs_ngspice.py and bench/engine_vs_ngspice.py.
Values are deliberately ordinary bench values (E6/E12), several with build
strays, some that must not start.  Each entry: (label, topology, values, style).
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass

import numpy as np

from picker.circuit.design import Design, complete_values
from picker.circuit.evaluate import check_design
from picker.circuit.spice import deck
from picker.circuit.topology import get_topology
from picker.sim.ngspice import measure_oscillation, run_deck, run_op

DESIGNS = [
    ("ce-11k", "colpitts-ce", dict(L1=10e-3, C1=22e-9, C2=220e-9, CC1=1e-6, CC2=1e-6, CE=10e-6, RE1=100), "ideal"),
    ("ce-77k", "colpitts-ce", dict(RE1=100), "ideal"),
    ("ce-430k", "colpitts-ce", dict(L1=100e-6, C1=1.5e-9, C2=15e-9, CC1=10e-9, CC2=10e-9, CE=100e-9, RE1=100), "pcb"),
    ("ce-2M", "colpitts-ce", dict(L1=10e-6, C1=680e-12, C2=3.3e-9, CC1=1e-9, CC2=1e-9, CE=10e-9, RE1=47, RC=1e3), "pcb"),
    ("ce-12M", "colpitts-ce", dict(L1=1e-6, C1=220e-12, C2=1e-9, CC1=1e-9, CC2=1e-9, CE=10e-9, RE1=22, RC=470,
                                   R1=22e3, R2=10e3, RE=1e3), "pcb"),
    ("clapp-1M", "clapp", dict(L1=100e-6, C1=1e-9, C2=4.7e-9, C3=330e-12, CC1=10e-9, CC2=10e-9, CE=100e-9, RE1=220), "ideal"),
    ("clapp-7M", "clapp", dict(L1=10e-6, C1=330e-12, C2=1.5e-9, C3=68e-12, CC1=1e-9, CC2=1e-9, CE=10e-9, RE1=47, RC=1e3), "pcb"),
    ("hartley-70k", "hartley", dict(RE1=100), "ideal"),
    ("hartley-k05", "hartley", dict(L1=470e-6, L2=47e-6, K=0.5, C1=4.7e-9, RE1=220), "perfboard"),
    ("cb-550k", "colpitts-cb", dict(L1=100e-6, C1=1e-9, C2=4.7e-9, RE=4.7e3), "ideal"),
    ("cb-550k-lowgain", "colpitts-cb", dict(L1=100e-6, C1=4.7e-9, C2=1e-9, RE=47e3), "ideal"),
    ("cb-5M", "colpitts-cb", dict(L1=4.7e-6, C1=220e-12, C2=1e-9, RE=2.2e3, CB=10e-9), "pcb"),
    ("cb-21M", "colpitts-cb", dict(L1=0.47e-6, C1=150e-12, C2=470e-12, RE=1e3, CB=1e-9), "pcb"),
    ("ce-nostart-rc330", "colpitts-ce", dict(RC=330, RE1=220), "ideal"),
    ("ce-nostart-rc1k", "colpitts-ce", dict(RC=1e3, RE1=100), "ideal"),
    ("hartley-nostart", "hartley", dict(RE1=470, RC=1e3), "ideal"),
]

#: Transient length in predicted periods; long enough for the envelope to settle.
PERIODS = 800


def make_design(topology: str, values: dict, style: str) -> Design:
    vals, defaulted = complete_values(get_topology(topology), values)
    return Design(topology=topology, values=vals, style=style, defaulted=defaulted)


@dataclass(frozen=True)
class Outcome:
    label: str
    topology: str
    predicted: dict
    sim_started: bool
    sim_freq_hz: float
    sim_amplitude_vpp: float
    sim_bursts: bool
    sim_op: dict


def simulate(entry) -> Outcome:
    """Run the engine and ngspice (.op and a kicked transient) on one design."""
    label, topology, values, style = entry
    d = make_design(topology, values, style)
    ev = check_design(d)
    f_pred = ev.freq_hz if np.isfinite(ev.freq_hz) else ev.freq_ideal_hz
    op = run_op(deck(d, analysis="op"))
    tran = run_deck(deck(d, tstop_s=PERIODS / f_pred))
    node = "v(" + d.topo.tank_node.lower() + ")"
    m = measure_oscillation(tran["time"], tran[node], f_guess_hz=f_pred)
    return Outcome(label, topology, ev.as_json(), bool(m.started), float(m.freq_hz),
                   float(m.amplitude_vpp), bool(m.bursts), op)


def simulate_all(workers: int = 2) -> list[Outcome]:
    with ProcessPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(simulate, DESIGNS))
