"""Reservations per second with 1, 4 and 8 concurrent clients, on SQLite and (given a URL) PostgreSQL.

Usage::

    python bench/reservations.py [--server postgresql+psycopg://user@host/postgres] [--seconds 5]
                                 [--clients 1 4 8]

Each client is its own process with its own store connection, like one ``picker build new``
after another.  All clients reserve the same design (12 positions on 11 stock lines) from one
store with ample stock, so every reservation locks the same part rows: this measures the
serialised path (SQLite's write lock with its busy timeout; PostgreSQL's ``SELECT ... FOR
UPDATE`` on the parts rows), one transaction per reservation, committed.  A client counts the
reservations committed in ``--seconds`` after a common start; the table gives the total per
second and the median and 95th-percentile time of one reservation.

SQLite runs on a file in a temporary folder (the machine's disk); the server gets a new
database per configuration (``--server`` must name a database where the role may
``CREATE DATABASE``), dropped afterwards.  Prints a Markdown table.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import statistics
import sys
import tempfile
import time
import uuid
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from sqlalchemy import create_engine, text  # noqa: E402
from sqlalchemy.engine import make_url  # noqa: E402
from sqlalchemy.pool import NullPool  # noqa: E402

from picker.store import add_stock, open_store, resolve_db_url  # noqa: E402
from picker.store.builds import new_build  # noqa: E402
from tests.store.test_builds import STOCK, _spec, design  # noqa: E402  (the same small design the tests use)


def _prepare(url: str) -> dict:
    store = open_store(url)
    ids = {}
    try:
        with store.Session.begin() as s:
            for kind, value, _qty, bin in STOCK + [("npn", "npn-test", 0, "Q-1")]:
                ids[bin] = add_stock(s, _spec(kind, value, bin), 10_000_000, "bench stock")[0].id
    finally:
        store.close()
    return design(ids)


def _client(url: str, dsg: dict, start_at: float, seconds: float, queue) -> None:
    store = open_store(url, create=False)
    times = []
    try:
        with store.Session.begin() as s:  # connect and warm up outside the timed window
            s.execute(text("SELECT 1"))
        while time.time() < start_at:
            time.sleep(0.001)
        end = start_at + seconds
        while True:
            t0 = time.perf_counter()
            if time.time() >= end:
                break
            with store.Session.begin() as s:
                new_build(s, dsg, 1, "bench")
            times.append(time.perf_counter() - t0)
    finally:
        store.close()
    queue.put(times)


def measure(url: str, clients: int, seconds: float) -> dict:
    dsg = _prepare(url)
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    start_at = time.time() + 2.0 + 0.3 * clients  # time for the spawned clients to import and connect
    procs = [ctx.Process(target=_client, args=(url, dsg, start_at, seconds, queue)) for _ in range(clients)]
    for p in procs:
        p.start()
    times = [t for _ in procs for t in queue.get(timeout=120 + seconds)]
    for p in procs:
        p.join()
        if p.exitcode != 0:
            raise RuntimeError(f"a client failed (exit {p.exitcode})")
    times.sort()
    return {"n": len(times), "per_s": len(times) / seconds, "median_ms": 1e3 * statistics.median(times),
            "p95_ms": 1e3 * times[int(0.95 * (len(times) - 1))]}


def _server_db(admin: str):
    name = f"picker_bench_{uuid.uuid4().hex[:10]}"
    engine = create_engine(admin, isolation_level="AUTOCOMMIT", poolclass=NullPool)
    with engine.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))

    def drop():
        with engine.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        engine.dispose()

    return make_url(admin).set(database=name).render_as_string(hide_password=False), drop


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--server", default=os.environ.get("PICKER_TEST_SERVER_URL"),
                    help="PostgreSQL URL where the role may CREATE DATABASE (default: $PICKER_TEST_SERVER_URL)")
    ap.add_argument("--seconds", type=float, default=5.0, help="timed window per configuration")
    ap.add_argument("--clients", type=int, nargs="+", default=[1, 4, 8])
    args = ap.parse_args(argv)

    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.clients:
            url = resolve_db_url(str(Path(tmp) / f"bench-{n}.sqlite"))
            rows.append(("SQLite (file)", n, measure(url, n, args.seconds)))
    if args.server:
        for n in args.clients:
            url, drop = _server_db(resolve_db_url(args.server))
            try:
                rows.append(("PostgreSQL", n, measure(url, n, args.seconds)))
            finally:
                drop()
    print(f"Reservations (one `build new` transaction each, all on the same parts), {args.seconds:g} s per row, "
          f"{os.cpu_count()} CPU(s)\n")
    print("| back end | clients | reservations | per second | median ms | p95 ms |")
    print("|---|---:|---:|---:|---:|---:|")
    for backend, n, m in rows:
        print(f"| {backend} | {n} | {m['n']} | {m['per_s']:.0f} | {m['median_ms']:.1f} | {m['p95_ms']:.1f} |")


if __name__ == "__main__":
    main()
