"""Clapp: the common-emitter Colpitts with C3 in series with L1 (inner node M)."""

from __future__ import annotations

from picker.circuit.topology import HandFigures, Position, Topology
from picker.circuit.topologies._common import CE_ALIASES, CE_BIAS, resonance_hz, series_c
from picker.circuit.topologies.colpitts_ce import TANK as COLPITTS_TANK

TANK = tuple(
    Position("L1", "inductor", "T", "M", "tank", 1e-3) if p.ref == "L1" else p
    for p in COLPITTS_TANK
) + (Position("C3", "capacitor", "M", "F", "tank", 1e-9),)


def hand(v, re_ohm, rc_ohm):
    fb = v["C1"] / v["C2"]
    gain = rc_ohm / re_ohm
    c = series_c(v["C1"], v["C2"], v["C3"])
    return HandFigures(resonance_hz(v["L1"], c), fb, gain, gain * fb)


TOPOLOGY = Topology(
    name="clapp",
    title="Clapp (series-tuned Colpitts), common emitter",
    positions=CE_BIAS + TANK,
    hand=hand,
    aliases=CE_ALIASES,
    summary="L1 in series with C3, C1/C2 split; feedback C1/C2",
)
