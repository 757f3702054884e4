"""Accuracy table: engine and hand method against ngspice on the reference design set.

Run from the repository root: ``python bench/engine_vs_ngspice.py`` (needs ngspice).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.reference.designs import simulate_all  # noqa: E402


def main() -> None:
    t0 = time.perf_counter()
    rows = simulate_all()
    wall = time.perf_counter() - t0
    print(f"| design | sim f (Hz) | picker f err | hand f err | amp err | margin | starts (picker/sim) |")
    print("|---|---|---|---|---|---|---|")
    for o in rows:
        p = o.predicted
        if o.sim_started:
            fe = 100 * (p["freq_hz"] / o.sim_freq_hz - 1)
            he = 100 * (p["freq_ideal_hz"] / o.sim_freq_hz - 1)
            ae = 100 * (p["amplitude_vpp"] / o.sim_amplitude_vpp - 1)
            print(f"| {o.label} | {o.sim_freq_hz:.6g} | {fe:+.3f} % | {he:+.3f} % | {ae:+.1f} % "
                  f"| {p['margin']:.2f} | {p['starts']}/{o.sim_started} |")
        else:
            print(f"| {o.label} | - | - | - | - | {p['margin']:.2f} | {p['starts']}/{o.sim_started} |")
    print(f"\n{len(rows)} designs, wall time {wall:.1f} s (engine + ngspice .op and transient, 2 workers)")


if __name__ == "__main__":
    main()
