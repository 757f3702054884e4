"""Common-emitter Colpitts: tank L1 with split capacitors C1 (collector side) and C2 (base side)."""

from __future__ import annotations

from picker.circuit.topology import HandFigures, Position, Topology
from picker.circuit.topologies._common import CE_ALIASES, CE_BIAS, resonance_hz, series_c

TANK = (
    Position("CC1", "capacitor", "C", "T", "coupling", 100e-9, feeds="collector"),
    Position("C1", "capacitor", "T", "GND", "tank", 4.7e-9),
    Position("L1", "inductor", "T", "F", "tank", 1e-3),
    Position("C2", "capacitor", "F", "GND", "tank", 47e-9),
    Position("CC2", "capacitor", "F", "B", "coupling", 100e-9, feeds="base"),
)


def hand(v, re_ohm, rc_ohm):
    fb = v["C1"] / v["C2"]
    gain = rc_ohm / re_ohm
    return HandFigures(resonance_hz(v["L1"], series_c(v["C1"], v["C2"])), fb, gain, gain * fb)


TOPOLOGY = Topology(
    name="colpitts-ce",
    title="Colpitts, common emitter",
    positions=CE_BIAS + TANK,
    hand=hand,
    aliases=CE_ALIASES,
    summary="L1 with C1/C2 split; feedback C1/C2",
)
