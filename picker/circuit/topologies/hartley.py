"""Hartley, common emitter: L1 (collector side) and L2 (base side) with coupling K, one C1 across both."""

from __future__ import annotations

import numpy as np

from picker.circuit.topology import HandFigures, Position, Topology
from picker.circuit.topologies._common import CE_ALIASES, CE_BIAS, resonance_hz

TANK = (
    Position("CC1", "capacitor", "C", "T", "coupling", 100e-9, feeds="collector"),
    Position("L1", "inductor", "T", "GND", "tank", 470e-6),
    Position("C1", "capacitor", "T", "F", "tank", 10e-9),
    # L2 is declared GND -> F so that both coils are traversed T -> GND -> F: a
    # positive K is then series-aiding, as in one tapped coil (SPICE dot convention).
    Position("L2", "inductor", "GND", "F", "tank", 47e-6),
    Position("CC2", "capacitor", "F", "B", "coupling", 100e-9, feeds="base"),
    Position("K", "coupling", "L1", "L2", "tank", 0.0,
             note="coupling coefficient of L1 and L2: 0 for two separate coils, near 1 for a tapped coil"),
)


def hand(v, re_ohm, rc_ohm):
    m = v["K"] * np.sqrt(v["L1"] * v["L2"])
    fb = (v["L2"] + m) / (v["L1"] + m)
    gain = rc_ohm / re_ohm
    return HandFigures(resonance_hz(v["L1"] + v["L2"] + 2 * m, v["C1"]), fb, gain, gain * fb)


TOPOLOGY = Topology(
    name="hartley",
    title="Hartley, common emitter",
    positions=CE_BIAS + TANK,
    hand=hand,
    aliases=CE_ALIASES,
    summary="L1/L2 split (coupling K) with C1; feedback (L2+M)/(L1+M)",
)
