"""Common-base Colpitts: tank L1 from the supply to the collector, C1 collector-emitter, C2 emitter-ground."""

from __future__ import annotations

import numpy as np

from picker.circuit.topology import HandFigures, Position, Topology
from picker.circuit.topologies._common import resonance_hz, series_c

#: Inductor Q assumed by the hand method when the inductor's DC resistance is unknown.
HAND_Q = 100.0

POSITIONS = (
    Position("R1", "resistor", "VCC", "B", "bias", 33e3, dc="top"),
    Position("R2", "resistor", "B", "GND", "bias", 10e3, dc="bottom"),
    Position("CB", "capacitor", "B", "GND", "bypass", 100e-9, feeds="base"),
    Position("RE", "resistor", "E", "GND", "emitter", 2.2e3, dc="emitter"),
    Position("L1", "inductor", "VCC", "C", "tank", 100e-6, dc="collector"),
    Position("C1", "capacitor", "C", "E", "tank", 1e-9),
    Position("C2", "capacitor", "E", "GND", "tank", 4.7e-9),
)


def hand(v, re_ohm, rc_ohm):
    """Load = the tank's parallel loss resistance (omega L)^2 / DCR (Q = 100 if DCR is 0)."""
    f0 = resonance_hz(v["L1"], series_c(v["C1"], v["C2"]))
    xl = 2 * np.pi * f0 * v["L1"]
    dcr = np.asarray(rc_ohm, dtype=float)
    with np.errstate(divide="ignore"):
        rp = np.where(dcr > 0, xl**2 / np.where(dcr > 0, dcr, 1.0), xl * HAND_Q)
    fb = v["C1"] / (v["C1"] + v["C2"])
    gain = rp / re_ohm
    return HandFigures(f0, fb, gain, gain * fb)


TOPOLOGY = Topology(
    name="colpitts-cb",
    title="Colpitts, common base",
    positions=POSITIONS,
    hand=hand,
    tank_node="C",
    summary="L1 collector tank, C1/C2 split to the emitter; feedback C1/(C1+C2)",
)
