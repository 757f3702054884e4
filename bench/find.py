"""Speed and memory of ``find`` on synthetic drawers, and against the brute-force reference.

Run from the repository root (no simulator needed)::

    python bench/find.py [--sizes 100,1000,5000,20000] [--quick] [--topology colpitts-ce]
                         [--freq 455e3] [--brute-sizes 8,12,16,24,28,32,48] [--brute-budget 60]
                         [--timeout 600] [--mem-gib 8]

``--quick`` = sizes 100,1000 and no brute force.  Progress goes to stderr, the
Markdown tables to stdout.  Measures:

* per drawer size (synthetic, invented: ~55 % E96 resistor lines over 10 ohm..1 Mohm,
  ~35 % E24 capacitor lines over 10 pF..10 uF, ~8 % E12 inductor lines over
  1 uH..10 mH, the rest npn lines of 4 invented profiles; seeded), with
  ``time.perf_counter``: the wall time of one full ``find`` (top 20 refined,
  Monte Carlo 2,000 samples per reported candidate), its per-stage split (from
  the times at which ``find`` calls its ``progress`` callback), and the
  ``stats`` counters; then the peak memory of a second, identical ``find`` run
  under ``tracemalloc`` (allocations made by the call, drawer excluded; this run
  is slower and its time is not reported).  Each size runs in a forked child
  process under an address-space limit (``--mem-gib``, default 8) and a time
  limit (``--timeout``), so a size that runs out of memory or time is reported
  as such instead of taking the machine down.  One warm-up ``find`` (top 1) on a
  small drawer runs first so that lazy imports are not charged to the first size;
* the growth between sizes: the measured exponent ``d ln t / d ln n`` beside
  the exponent ``n log n`` growth would give over the same step;
* ``montecarlo.run`` with 10,000 samples of the best candidate at the size
  nearest 1,000 lines;
* if ``tests/search/brute.py`` is present: ``brute_force`` on tiny drawers
  (the lines of the best candidate found above, plus synthetic lines up to the
  size) of growing size, each run in a child process with a time limit
  (5 x ``--brute-budget``), growth stopping once a run exceeds the budget or is
  predicted to exceed the limit.  Beside it, on the same drawer: ``ranked``
  (find's steps 1-6, what the brute force reproduces) and the full ``find``,
  each the best of SHORT_REPEATS (3) runs with the garbage collector paused;
  the ratios are reported at the largest size brute force finished.  For the
  big drawers the brute-force time is *extrapolated* and labelled so, two ways:
  seconds per design of the full product (``space_size``) measured on the
  largest finished tiny drawer times ``space_size``, and the same per row the
  brute force actually enumerates (its coupling positions are picked by rule,
  so ``space_size`` overstates its work).
"""

from __future__ import annotations

import argparse
import gc
import math
import multiprocessing as mp
import sys
import time
import tracemalloc
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from picker import eseries  # noqa: E402
from picker.circuit.device import NpnProfile  # noqa: E402
from picker.search import montecarlo  # noqa: E402
from picker.search.find import Drawer, FindSpec, Npn, find  # noqa: E402
from picker.search.stock import Lines  # noqa: E402

try:  # steps 1-6 of find (up to the ranking): what the brute force reproduces
    from picker.search.find import ranked  # noqa: E402
except ImportError:  # pragma: no cover - depends on the tree
    ranked = None
try:  # the brute-force reference (may not exist yet)
    from tests.search.brute import brute_force, space_size  # noqa: E402
except ImportError:  # pragma: no cover - depends on the tree
    brute_force = space_size = None

#: Invented transistor profiles (no real part behind any of them).
PROFILES = (
    NpnProfile(name="npn-general", hfe_min=110.0, hfe_max=320.0, ft_hz=250e6, cob_f=4e-12, vceo_v=40.0, pd_w=0.5),
    NpnProfile(name="npn-rf", hfe_min=60.0, hfe_max=180.0, ft_hz=900e6, cob_f=0.9e-12, vceo_v=25.0, pd_w=0.3),
    NpnProfile(name="npn-hi-beta", hfe_min=350.0, hfe_max=850.0, ft_hz=150e6, cob_f=5e-12, vceo_v=45.0, pd_w=0.5),
    NpnProfile(name="npn-low-noise", hfe_min=200.0, hfe_max=500.0, ft_hz=100e6, cob_f=3e-12, vceo_v=30.0, pd_w=0.4),
)
SHARES = {"resistor": 0.55, "capacitor": 0.35, "inductor": 0.08}
RANGES = {"resistor": ("E96", 10.0, 1e6), "capacitor": ("E24", 10e-12, 10e-6), "inductor": ("E12", 1e-6, 10e-3)}
VALUE_COL = {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}
ID_BASE = {"resistor": 1_000_000, "capacitor": 2_000_000, "inductor": 3_000_000, "npn": 4_000_000}


def log(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


# ---- synthetic drawers ------------------------------------------------------------


def _counts(n_lines: int) -> dict[str, int]:
    n_r = max(1, round(SHARES["resistor"] * n_lines))
    n_c = max(1, round(SHARES["capacitor"] * n_lines))
    n_l = max(1, round(SHARES["inductor"] * n_lines))
    return {"resistor": n_r, "capacitor": n_c, "inductor": n_l, "npn": max(len(PROFILES), n_lines - n_r - n_c - n_l)}


def _values(kind: str, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` line values: distinct series values first (a random subset if fewer lines
    than values), then further bags of values already present (duplicates)."""
    series, lo, hi = RANGES[kind]
    allv = eseries.preferred_values(series, lo, hi)
    if n <= allv.size:
        return np.sort(rng.choice(allv, n, replace=False))
    return np.concatenate([allv, rng.choice(allv, n - allv.size, replace=True)])


def synthetic_frames(n_lines: int, seed: int) -> tuple[dict[str, pd.DataFrame], list[Npn]]:
    """Invented store rows (the columns ``Lines.from_frame`` reads) and npn lines."""
    rng = np.random.default_rng(seed)
    cnt = _counts(n_lines)
    frames = {}
    for kind in ("resistor", "capacitor", "inductor"):
        n = cnt[kind]
        v = _values(kind, n, rng)
        qty = rng.integers(0, 51, n)
        qty[rng.random(n) < 0.05] = 0  # a few empty bags
        df = pd.DataFrame({"id": ID_BASE[kind] + np.arange(n), VALUE_COL[kind]: v, "qty": qty,
                           "bin": [f"{kind[0].upper()}{rng.integers(1, 40):02d}-{k}" for k in range(n)]})
        if kind == "resistor":
            df["tolerance"] = rng.choice([0.01, 0.01, 0.01, 0.005, 0.02], n)
            df["power_w"] = rng.choice([0.125, 0.25, 0.25, 0.5], n)
            df["unit_cost"] = np.round(rng.uniform(0.01, 0.06, n), 3)
        elif kind == "capacitor":
            diel = np.where(v < 1e-9, rng.choice(["c0g", "c0g", "x7r"], n),
                            np.where(v < 1e-7, rng.choice(["c0g", "film", "x7r"], n), rng.choice(["film", "x7r", "x7r"], n)))
            tol = np.where(diel == "c0g", rng.choice([0.02, 0.05], n),
                           np.where(diel == "film", rng.choice([0.05, 0.10], n), rng.choice([0.10, 0.20], n)))
            df["dielectric"] = diel
            df["tolerance"] = tol
            df["voltage_v"] = rng.choice([16.0, 50.0, 100.0], n)
            df["unit_cost"] = np.round(rng.uniform(0.03, 0.15, n) * (1 + 0.1 * np.log10(v / 10e-12))
                                       * np.where(diel == "film", 2.0, 1.0), 3)
        else:
            # invented DCR law: 0.05 ohm at 1 uH to ~30 ohm at 10 mH, +-20 % per line
            dcr = 0.05 * (v / 1e-6) ** (math.log(600) / math.log(1e4)) * rng.uniform(0.8, 1.2, n)
            df["dcr_ohm"] = np.round(dcr, 3)
            df["tolerance"] = rng.choice([0.05, 0.10, 0.10, 0.20], n)
            df["unit_cost"] = np.round(rng.uniform(0.15, 0.60, n), 3)
        frames[kind] = df
    n_q = cnt["npn"]
    prof = np.concatenate([np.arange(len(PROFILES)), rng.integers(0, len(PROFILES), n_q - len(PROFILES))])
    npns = [Npn(PROFILES[p], int(ID_BASE["npn"] + k), int(rng.integers(0, 51)), float(np.round(rng.uniform(0.05, 0.4), 3)),
                f"Q{rng.integers(1, 20):02d}-{k}") for k, p in enumerate(prof)]
    return frames, npns


def drawer_of(frames: dict[str, pd.DataFrame], npns: list[Npn]) -> Drawer:
    return Drawer({k: Lines.from_frame(k, df) for k, df in frames.items()}, tuple(npns))


def synthetic_drawer(n_lines: int, seed: int) -> Drawer:
    """A drawer of about ``n_lines`` invented lines (see the module docstring)."""
    return drawer_of(*synthetic_frames(n_lines, seed))


def n_of(drawer: Drawer) -> int:
    return sum(L.n for L in drawer.lines.values()) + len(drawer.npns)


# ---- measuring find -----------------------------------------------------------------

STAGES = ("searching", "ranking", "checking the best", "Monte Carlo yield")


def timed_find(drawer: Drawer, spec: FindSpec):
    """(wall seconds, result, seconds per stage) of one find."""
    marks = []
    t0 = time.perf_counter()
    res = find(drawer, spec, progress=lambda what, frac: marks.append((what, time.perf_counter())))
    wall = time.perf_counter() - t0
    per = dict.fromkeys(STAGES, 0.0)
    per["before"] = (marks[0][1] - t0) if marks else wall
    for (what, t), (_, t_next) in zip(marks, marks[1:]):
        stage = next((s for s in STAGES if what.startswith(s)), what)
        per[stage] = per.get(stage, 0.0) + (t_next - t)
    return wall, res, per


def peak_of_find(drawer: Drawer, spec: FindSpec) -> int:
    tracemalloc.start()
    try:
        find(drawer, spec)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


# ---- child processes (a time and memory limit per measurement) -------------------------


def _child(conn, mem_bytes, fn, args):
    if mem_bytes:
        import resource

        resource.setrlimit(resource.RLIMIT_AS, (mem_bytes, mem_bytes))
    try:
        conn.send(("ok", fn(*args)))
    except BaseException as exc:  # noqa: BLE001 - reported, not hidden
        conn.send(("error", f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"))
    conn.close()


def in_child(fn, args, limit_s: float, mem_gib: float):
    """``("ok", fn(*args))``, ``("error", message)``, ``("timeout", None)`` or
    ``("killed", exit code)``; ``fn`` runs in a forked child under an address-space
    limit of ``mem_gib`` GiB (0 = none) and is stopped after ``limit_s`` seconds."""
    try:
        ctx = mp.get_context("fork")
    except ValueError:  # no fork on this platform: run here, no limits
        return "ok", fn(*args)
    recv, send = ctx.Pipe(duplex=False)
    p = ctx.Process(target=_child, args=(send, int(mem_gib * 2**30), fn, args))
    p.start()
    send.close()
    out = None
    try:
        if recv.poll(limit_s):
            out = recv.recv()
    except EOFError:
        out = None
    if out is None and p.is_alive():
        p.terminate()
        p.join()
        return "timeout", None
    p.join()
    return out if out is not None else ("killed", p.exitcode)


def measure_size(n: int, seed: int, spec: FindSpec, peak: bool) -> dict:
    """One size, in the child: the timed find, the find under tracemalloc, the counters."""
    frames, npns = synthetic_frames(n, seed)
    d = drawer_of(frames, npns)
    log(f"{n} lines: timed find ...")
    wall, res, per = timed_find(d, spec)
    log(f"{n} lines: {wall:.2f} s, {len(res.candidates)} candidates" + ("; find under tracemalloc ..." if peak else ""))
    out = {"made": n_of(d), "wall": wall, "per": per, "stats": dict(res.stats), "n_cand": len(res.candidates), "reasons": list(res.reasons),
           "distinct": {k: int(np.unique(L.value).size) for k, L in d.lines.items()},
           "best": (res.candidates[0].design, res.candidates[0].parts) if res.candidates else None,
           "peak": peak_of_find(d, spec) if peak else None,
           "space": space_size(d, spec) if space_size is not None else None}
    if peak:
        log(f"{n} lines: peak {fmt_bytes(out['peak'])} MiB")
    return out


def measure_brute(d: Drawer, spec: FindSpec):
    t0 = time.perf_counter()
    out = brute_force(d, spec)
    return time.perf_counter() - t0, len(out)


def brute_rows(d: Drawer, spec: FindSpec) -> int:
    """Rows the brute force enumerates (counted here from its docstring's product: L1, C1, C2
    over stable capacitors, R1, R2, RE, RC over resistors, RE1 none or 10 ohm..1 kohm), per
    transistor line; the coupling positions are picked by rule, not enumerated."""
    R, C, L = (d.lines[k] for k in ("resistor", "capacitor", "inductor"))
    r_ok, l_ok = R.qty >= spec.boards, L.qty >= spec.boards
    n_r, n_l = int(r_ok.sum()), int(l_ok.sum())
    n_ct = int(((C.qty >= spec.boards) & np.isin(C.dielectric.astype(str), ("c0g", "np0", "film", "mica"))).sum())
    n_re1 = 1 + int((r_ok & (R.value >= 10.0) & (R.value <= 1e3)).sum())
    n_q = sum(1 for q in d.npns if q.qty >= spec.boards)
    return n_l * n_ct**2 * n_r**4 * n_re1 * n_q


#: ``ranked`` and ``find`` on a tiny drawer take well under a second, where a single
#: timing varies by tens of per cent on this machine: the best of this many runs is
#: taken, with the garbage collector paused (as ``timeit`` does; the parent process
#: holds the earlier sizes' results by then).  The brute force, minutes long, runs once.
SHORT_REPEATS = 3


def _best_of(fn):
    """The run of ``fn()`` -> (seconds, ...) with the fewest seconds, SHORT_REPEATS runs."""
    was = gc.isenabled()
    gc.collect()
    gc.disable()
    try:
        return min((fn() for _ in range(SHORT_REPEATS)), key=lambda r: r[0])
    finally:
        if was:
            gc.enable()


def timed_ranked(d: Drawer, spec: FindSpec):
    def once():
        t0 = time.perf_counter()
        n = len(ranked(d, spec))
        return time.perf_counter() - t0, n
    return _best_of(once)


def best_find(d: Drawer, spec: FindSpec):
    """``timed_find`` on a tiny drawer, the best of SHORT_REPEATS runs."""
    return _best_of(lambda: timed_find(d, spec))


def tiny_drawer(n_lines: int, seed: int, known: dict[str, pd.DataFrame] | None, known_npn: Npn | None) -> Drawer:
    """``known`` lines (a design found earlier) plus synthetic lines up to ``n_lines``."""
    frames, npns = synthetic_frames(max(n_lines, 4), seed)
    if known is None:
        return drawer_of(frames, npns[:2])
    n_known = sum(len(df) for df in known.values())
    rest = max(n_lines - n_known, 0)
    cnt = {k: int(round(SHARES[k] / sum(SHARES.values()) * rest)) for k in SHARES}
    rng = np.random.default_rng(seed + 1)
    out = {}
    for k, df in frames.items():
        kn = known.get(k, df.iloc[:0])
        pool = df[~df["id"].isin(kn["id"])]
        extra = pool.iloc[np.sort(rng.choice(len(pool), min(cnt[k], len(pool)), replace=False))]
        out[k] = pd.concat([kn, extra], ignore_index=True)
    other = next(q for q in npns if q.profile.name != known_npn.profile.name)
    return drawer_of(out, [known_npn, other])


def known_from_ranked(frames: dict[str, pd.DataFrame], npns: list[Npn], spec: FindSpec):
    """Lines holding the values of the best ``ranked`` entry (when the full check rejected every
    candidate), or None: per position the cheapest stocked line of exactly that value."""
    from picker.search.find import entry_values

    d = drawer_of(frames, npns)
    entries = ranked(d, spec)
    if not entries:
        return None, None
    vals = entry_values(entries[0])
    pool = entries[0][2]
    npn = pool.get("npn") if isinstance(pool, dict) else None
    kind = {"L": "inductor", "C": "capacitor", "R": "resistor"}
    ids: dict[str, set] = {k: set() for k in kind.values()}
    for ref, v in vals.items():
        k = kind.get(ref[0])
        if k is None or not v > 0:
            continue
        df = frames[k]
        hit = df[(df[VALUE_COL[k]] == v) & (df["qty"] >= spec.boards)]
        if k == "capacitor" and ref in ("C1", "C2", "C3"):
            hit = hit[hit["dielectric"].isin(["c0g", "film"])]
        if len(hit):
            ids[k].add(int(hit.sort_values(["unit_cost", "id"])["id"].iloc[0]))
    known = {k: df[df["id"].isin(ids[k])] for k, df in frames.items()}
    return known, npn if isinstance(npn, Npn) else next(q for q in npns if q.qty >= spec.boards)


def known_lines(frames: dict[str, pd.DataFrame], npns: list[Npn], parts: dict) -> tuple[dict, Npn]:
    ids = {int(p["part_id"]) for r, p in parts.items() if r != "Q1"}
    ids |= {int(p["part2_id"]) for p in parts.values() if "part2_id" in p}
    q_id = parts["Q1"]["part_id"]
    return {k: df[df["id"].isin(ids)] for k, df in frames.items()}, next(q for q in npns if q.part_id == q_id)


# ---- main ------------------------------------------------------------------------------


def fmt_bytes(b: float) -> str:
    return f"{b / 2**20:.1f}"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="100,1000,5000,20000")
    ap.add_argument("--quick", action="store_true", help="sizes 100,1000 and no brute force")
    ap.add_argument("--topology", default="colpitts-ce")
    ap.add_argument("--freq", type=float, default=455e3)
    ap.add_argument("--seed", type=int, default=11, help="drawer seed")
    ap.add_argument("--brute-sizes", default="8,12,16,24,28,32,48")
    ap.add_argument("--brute-budget", type=float, default=60.0, help="seconds; stop growing past this")
    ap.add_argument("--timeout", type=float, default=600.0, help="seconds allowed per size (both finds)")
    ap.add_argument("--mem-gib", type=float, default=8.0, help="address-space limit per size, GiB (0 = none)")
    args = ap.parse_args()
    sizes = [100, 1000] if args.quick else [int(s) for s in args.sizes.split(",")]
    spec = FindSpec(freq_hz=args.freq, tol=0.01, topologies=(args.topology,), top=20, mc=2000, seed=1)

    log("warm-up find (100 lines, top 1) ...")
    find(synthetic_drawer(100, args.seed + 99), replace(spec, top=1, mc=50))  # the children inherit the imports

    got = {}
    for n in sizes:
        t0 = time.perf_counter()
        status, out = in_child(measure_size, (n, args.seed, spec, True), args.timeout, args.mem_gib)
        if status != "ok":
            log(f"{n} lines: {status} {out or ''} after {time.perf_counter() - t0:.0f} s")
        got[n] = (status, out)

    print(f"## find: {args.topology} at {args.freq:g} Hz, tol 1 %, top 20, Monte Carlo 2,000 samples each\n")
    print(f"Each size in a child process limited to {args.mem_gib:g} GiB of address space and "
          f"{args.timeout:g} s.\n")
    print("| lines asked | lines made (R/C/L distinct values) | wall (s) | peak memory (MiB) | candidates "
          "| tanks | biases | pairs screened | refined rows | kept |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    ok_rows = []
    for n in sizes:
        status, r = got[n]
        if status != "ok":
            what = {"timeout": f"did not finish in {args.timeout:g} s", "killed": f"child killed (exit {r})"}.get(
                status, f"failed: {r}")
            print(f"| {n:,} | - | {what} | - | - | - | - | - | - | - |")
            continue
        s, dv = r["stats"], "/".join(str(r["distinct"][k]) for k in ("resistor", "capacitor", "inductor"))
        print(f"| {n:,} | {r['made']:,} ({dv}) | {r['wall']:.3f} | {fmt_bytes(r['peak'])} | {r['n_cand']} "
              f"| {s['tanks']:,} | {s['biases']:,} | {s['pairs_screened']:,} | {s['refined_rows']:,} | {s['kept']:,} |")
        ok_rows.append((n, r))

    for n, r in ok_rows:
        rej = r["stats"].get("rejected_final") or {}
        if rej or not r["n_cand"]:
            print(f"\n{n:,} lines: rejected by the full check: "
                  + (", ".join(f"{k} {v}" for k, v in sorted(rej.items())) or "none")
                  + ("" if r["n_cand"] else "; no candidate: " + " / ".join(r["reasons"])))

    print("\n### where the time goes (s)\n")
    print("| lines | searching | ranking (refine) | checking the best | Monte Carlo yield | total |")
    print("|---|---|---|---|---|---|")
    for n, r in ok_rows:
        per = r["per"]
        print(f"| {n:,} | {per['searching']:.3f} | {per['ranking']:.3f} | {per['checking the best']:.3f} "
              f"| {per['Monte Carlo yield']:.3f} | {r['wall']:.3f} |")

    if len(ok_rows) > 1:
        print("\n### growth between sizes\n")
        print("| from -> to lines | measured exponent d ln t / d ln n | n log n would give |")
        print("|---|---|---|")
        for (_, a), (_, b) in zip(ok_rows, ok_rows[1:]):
            m1, m2 = a["made"], b["made"]
            meas = math.log(b["wall"] / a["wall"]) / math.log(m2 / m1)
            nlogn = math.log(m2 * math.log(m2) / (m1 * math.log(m1))) / math.log(m2 / m1)
            print(f"| {m1:,} -> {m2:,} | {meas:.2f} | {nlogn:.2f} |")

    # Monte Carlo of one candidate: the best at the size nearest 1,000 lines that found one
    print("\n### Monte Carlo, one candidate\n")
    with_best = [n for n, r in ok_rows if r["best"] is not None]
    if with_best:
        n_mc = min(with_best, key=lambda n: abs(math.log(n / 1000)))
        design = got[n_mc][1]["best"][0]
        log(f"Monte Carlo 10,000 samples (best candidate at {n_mc} lines) ...")
        montecarlo.run(design, 200, tuple(spec.temps_c), 2)  # warm-up
        t0 = time.perf_counter()
        f, m = montecarlo.run(design, 10_000, tuple(spec.temps_c), 1)
        t_mc = time.perf_counter() - t0
        ok = np.isfinite(f) & (np.abs(f / spec.freq_hz - 1) <= spec.tol) & (m >= 1.0)
        print("| what | wall (s) | yield |")
        print("|---|---|---|")
        print(f"| montecarlo.run, 10,000 samples, best candidate at {n_mc:,} lines | {t_mc:.3f} | {np.mean(ok):.1%} |")
    else:
        print("no size produced a candidate: nothing to sample")

    print("\n### brute-force reference\n")
    if brute_force is None or space_size is None:
        print("brute-force reference not available (tests/search/brute.py not found)")
        return
    if args.quick:
        print("skipped (--quick)")
        return
    # the lines of a design found above seed the tiny drawers, so that both searches have work to do
    known, known_npn, seeded = None, None, "synthetic lines only (no design found above)"
    if with_best:
        n0 = min(with_best)
        known, known_npn = known_lines(*synthetic_frames(n0, args.seed), got[n0][1]["best"][1])
        seeded = f"the lines of the best candidate at {n0:,} lines plus synthetic lines"
    elif ranked is not None and ok_rows:
        n0 = ok_rows[0][0]
        known, known_npn = known_from_ranked(*synthetic_frames(n0, args.seed), spec)
        if known is not None:
            seeded = (f"lines with the values of the best ranked entry at {n0:,} lines (no candidate passed "
                      "the full check) plus synthetic lines")
    brows, last_ok, limit = [], None, args.brute_budget * 5
    for n in [int(x) for x in args.brute_sizes.split(",")]:
        d = tiny_drawer(n, args.seed + n, known, known_npn)
        size, rows_b = space_size(d, spec), brute_rows(d, spec)
        row = {"lines": n_of(d), "space": size, "rows": rows_b}
        if last_ok is not None:
            pred = last_ok["brute"] / max(last_ok["rows"], 1) * rows_b
            if pred > limit:
                brows.append(row | {"note": f"not run: predicted {pred:,.0f} s (EXTRAPOLATED from the last "
                                            "size by enumerated rows)"})
                break
        log(f"brute force, {n_of(d)} lines, {size:,} designs in the full product, {rows_b:,} enumerated ...")
        status, out = in_child(measure_brute, (d, spec), limit, args.mem_gib)
        if ranked is not None:
            row["ranked"], row["n_ranked"] = timed_ranked(d, spec)
        row["find"], res_f, _ = best_find(d, spec)
        row["n_find"] = len(res_f.candidates)
        if status != "ok":
            row["note"] = f"brute force did not finish in {limit:g} s" if status == "timeout" else f"brute force {status}: {out}"
            brows.append(row)
            break
        row["brute"], row["n_brute"] = out
        row["note"] = "" if (row["n_brute"] or row.get("n_ranked")) else "no result on either side"
        brows.append(row)
        last_ok = row
        log(f"  brute {row['brute']:.2f} s, ranked {row.get('ranked', float('nan')):.3f} s, find {row['find']:.3f} s")
        if row["brute"] > args.brute_budget:
            break
    f3 = lambda r, k: f"{r[k]:.3f}" if k in r else "-"  # noqa: E731
    x = lambda r, k: f"{r['brute'] / r[k]:,.1f}x" if "brute" in r and k in r else "-"  # noqa: E731
    print(f"Tiny drawers: {seeded}.  `ranked` = find's steps 1-6 "
          "(what brute_force reproduces); `find` = the full find (adds the full check of the best and the "
          f"Monte Carlo); each the best of {SHORT_REPEATS} runs with the garbage collector paused, "
          "the brute force one run.\n")
    print("| lines | designs in the full product (space_size) | rows brute force enumerates | brute force (s) "
          "| ranked (s) | brute / ranked | find (s) | brute / find | results brute / ranked / find | note |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for r in brows:
        res_n = f"{r.get('n_brute', '-')} / {r.get('n_ranked', '-')} / {r.get('n_find', '-')}"
        print(f"| {r['lines']:,} | {r['space']:,} | {r['rows']:,} | {f3(r, 'brute')} | {f3(r, 'ranked')} "
              f"| {x(r, 'ranked')} | {f3(r, 'find')} | {x(r, 'find')} | {res_n} | {r['note']} |")
    if last_ok is None:
        print("\nbrute force finished no size: no ratio")
        return
    b = last_ok
    print(f"\nAt the largest size brute force finished ({b['lines']} lines), measured: brute force "
          f"{b['brute']:.2f} s; brute / ranked = {x(b, 'ranked')}, brute / find = {x(b, 'find')}.")
    per_space, per_row = b["brute"] / max(b["space"], 1), b["brute"] / max(b["rows"], 1)
    print(f"Brute force per design of the full product: {per_space:.3g} s; per enumerated row: {per_row:.3g} s.\n")
    print("| lines | designs in the full product | brute force by space_size, EXTRAPOLATED (s) "
          "| rows brute force would enumerate | brute force by rows, EXTRAPOLATED (s) | find, measured (s) |")
    print("|---|---|---|---|---|---|")
    for n in sizes:
        d = synthetic_drawer(n, args.seed)
        size, rows_b = space_size(d, spec), brute_rows(d, spec)
        status, r = got[n]
        meas = f"{r['wall']:.3f}" if status == "ok" else f"({status})"
        print(f"| {n_of(d):,} | {size:.3g} | {per_space * size:.3g} (extrapolated) | {rows_b:.3g} "
              f"| {per_row * rows_b:.3g} (extrapolated) | {meas} |")


if __name__ == "__main__":
    main()
