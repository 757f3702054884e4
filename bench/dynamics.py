"""Speed of the bursting prediction: per design and per batch of 1,000 designs.

Run from the repository root: ``python bench/dynamics.py [N]`` (no simulator needed).
Measures, with ``time.perf_counter``:

* the settle/burst verdict (running point + linearised envelope model) for one
  design, and for a batch of N (default 1000) common-emitter Colpitts designs
  drawn with a fixed seed from ordinary values (with and without RE1);
* the integration ``check`` adds for its nominal row, for one settling and one
  bursting design.

The engine's own time (``evaluate_batch``, needed before the prediction) is
shown apart.  Prints a Markdown table.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from picker.circuit import dynamics  # noqa: E402
from picker.circuit.design import DesignBatch  # noqa: E402
from picker.circuit.engine import evaluate_batch  # noqa: E402
from tests.reference.designs import make_design  # noqa: E402


def batch_of(n: int, seed: int = 7) -> DesignBatch:
    rng = np.random.default_rng(seed)
    designs = []
    for _ in range(n):
        values = {"CE": float(rng.choice([1e-7, 4.7e-7, 1e-6, 1e-5])), "CC2": float(rng.choice([1e-8, 1e-7, 1e-6])),
                  "RC": float(rng.choice([1.5e3, 2.2e3, 3.3e3])), "RE1": float(rng.choice([1e-3, 22, 47, 100]))}
        designs.append(make_design("colpitts-ce", values, "ideal"))
    return DesignBatch.from_designs(designs)


def timed(fn, repeat: int = 1):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    rows = []
    one = DesignBatch.from_designs([make_design("colpitts-ce", {"RE1": 47}, "ideal")])
    res1 = evaluate_batch(one)
    t, _ = timed(lambda: dynamics.predict(one, res1), repeat=3)
    rows.append(("verdict, 1 design", t, t))
    big = batch_of(n)
    t_eng, res = timed(lambda: evaluate_batch(big))
    t_dyn, dyn = timed(lambda: dynamics.predict(big, res))
    rows.append((f"engine (evaluate_batch), {n} designs", t_eng, t_eng / n))
    rows.append((f"verdict, {n} designs", t_dyn, t_dyn / n))
    for label, topo, values in (("integration, settling (colpitts-ce)", "colpitts-ce", {}),
                                ("integration, bursting (clapp)", "clapp", {})):
        b = DesignBatch.from_designs([make_design(topo, values, "ideal")])
        r = evaluate_batch(b)
        t, _ = timed(lambda: dynamics.predict(b, r, integrate_rows=(0,)))
        rows.append((label, t, t))
    print("| what | wall (s) | per design (ms) |")
    print("|---|---|---|")
    for what, wall, per in rows:
        print(f"| {what} | {wall:.3f} | {1e3 * per:.2f} |")
    share = float(np.nanmean(dyn.amplitude_settles))
    print(f"\n{n} designs: {share:.1%} of those that start are predicted to settle")


if __name__ == "__main__":
    main()
