"""Running the ngspice simulator on picker's decks and measuring what comes back."""

from picker.sim.ngspice import (
    WaveformMeasure,
    envelope_vpp,
    find_ngspice,
    loop_gain,
    measure_oscillation,
    middlebrook_gain,
    phase_zero,
    read_raw_ascii,
    run_deck,
    run_op,
)

__all__ = [
    "WaveformMeasure",
    "envelope_vpp",
    "find_ngspice",
    "loop_gain",
    "measure_oscillation",
    "middlebrook_gain",
    "phase_zero",
    "read_raw_ascii",
    "run_deck",
    "run_op",
]
