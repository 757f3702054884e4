"""Time to plan a reorder: three builds against the demo stock and the demo catalogs.

Run from the repository root (no simulator needed)::

    python bench/reorder.py [--topology colpitts-ce] [--targets 455k:1%:25,100k:2%:40,7M:1%:10]

Loads ``data/demo_stock.csv`` into an in-memory drawer (through a temporary
SQLite store, as the CLI does) and the three invented demo suppliers, then
times, with ``time.perf_counter``, one :func:`picker.planning.reorder.plan`
call and, inside it, the searches (one per build) and the program (HiGHS).
Prints a Markdown table: per build the candidate designs found, then the
totals: candidate designs, program size, solver status and gap, total cost,
wall time.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from picker.cli.find import build_spec, load_drawer  # noqa: E402
from picker.cli.reorder import parse_target  # noqa: E402
from picker.planning import plan as plan_mod  # noqa: E402
from picker.planning.reorder import plan  # noqa: E402
from picker.store import open_store, resolve_db_url  # noqa: E402
from picker.store.catalog_csv import demo_suppliers  # noqa: E402
from picker.store.csvio import apply_import, plan_import, read_stock_csv  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def demo_drawer():
    with tempfile.TemporaryDirectory() as d:
        store = open_store(resolve_db_url(str(Path(d) / "s.sqlite")))
        with store.Session.begin() as s:
            apply_import(s, plan_import(s, read_stock_csv(ROOT / "data" / "demo_stock.csv")))
        with store.Session.begin() as s:
            drawer = load_drawer(s)
        store.close()
    return drawer


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--topology", default="any")
    ap.add_argument("--targets", default="455k:1%:25,100k:2%:40,7M:1%:10")
    args = ap.parse_args()
    targets = [parse_target(t) for t in args.targets.split(",")]
    drawer, suppliers = demo_drawer(), demo_suppliers()
    base = build_spec("1", "1%", args.topology, "2.5", "12", "0.5m..3m", "any", "1", "breadboard", "0..50",
                      False, "1", "error=1,margin=1,cost=0.2", "0", "1")
    marks = []
    solve_time = [0.0]
    real_solve = plan_mod.solve

    def timed_solve(p, *a, **k):
        t = time.perf_counter()
        out = real_solve(p, *a, **k)
        solve_time[0] += time.perf_counter() - t
        return out

    import picker.planning.reorder as reorder_mod

    reorder_mod.solve = timed_solve
    t0 = time.perf_counter()
    p = plan(drawer, suppliers, targets, base, progress=lambda what, frac: marks.append((time.perf_counter() - t0, what)))
    wall = time.perf_counter() - t0
    n_items = sum(len(s.items) for s in suppliers)
    print(f"drawer: {sum(L.n for L in drawer.lines.values()) + len(drawer.npns)} lines; catalogs: "
          f"{len(suppliers)} suppliers, {n_items} items; topology {args.topology}\n")
    print("| build | target | candidate designs |\n|---|---|---|")
    for k, (t, n) in enumerate(zip(args.targets.split(","), p.options_per_build)):
        print(f"| {k + 1} | {t} | {n} |")
    print("\n| candidate designs | status | gap | total cost | bought lines | search s | program s | wall s |")
    print("|---|---|---|---|---|---|---|---|")
    print(f"| {p.n_options} | {p.status} | {p.gap:.2g} | {p.total_cost:.2f} | {len(p.purchases)} | "
          f"{wall - solve_time[0]:.1f} | {solve_time[0]:.2f} | {wall:.1f} |")
    for r in p.reasons:
        print(f"\n{r}")


if __name__ == "__main__":
    main()
