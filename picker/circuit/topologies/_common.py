"""Declarations shared by the common-emitter topologies (not a topology itself)."""

from __future__ import annotations

import numpy as np

from picker.circuit.topology import Position

#: Bias, load and emitter network of every common-emitter topology.  RE1 is the
#: optional unbypassed (degeneration) part of the emitter resistance; RE is the
#: bypassed part (alias RE2).  Defaults suit a 12 V supply at about 1 mA.
CE_BIAS = (
    Position("R1", "resistor", "VCC", "B", "bias", 33e3, dc="top"),
    Position("R2", "resistor", "B", "GND", "bias", 10e3, dc="bottom"),
    Position("RC", "resistor", "VCC", "C", "load", 2.2e3, dc="collector"),
    Position("RE1", "resistor", "E", "X", "degeneration", 100.0, dc="emitter", optional=True,
             note="unbypassed emitter resistance; absent means RE alone"),
    Position("RE", "resistor", "X", "GND", "emitter", 2.2e3, dc="emitter"),
    Position("CE", "capacitor", "X", "GND", "bypass", 1e-6, feeds="emitter"),
)

CE_ALIASES = {"RE2": "RE"}


def series_c(*caps: np.ndarray) -> np.ndarray:
    """Series combination of capacitances, farad."""
    return 1.0 / sum(1.0 / np.asarray(c, dtype=float) for c in caps)


def resonance_hz(l_h: np.ndarray, c_f: np.ndarray) -> np.ndarray:
    """Ideal LC resonance 1/(2*pi*sqrt(L*C)), hertz."""
    return 1.0 / (2.0 * np.pi * np.sqrt(np.asarray(l_h) * np.asarray(c_f)))
