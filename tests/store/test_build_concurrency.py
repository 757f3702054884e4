"""Build jobs under concurrency and crashes.

- 4 processes (spawn) x 50 random reserve/cancel/done/undo operations on one store
  where demand exceeds stock: afterwards every quantity and ledger row is what the
  operations the workers saw succeed imply, nothing is consumed twice, no part is
  reserved beyond what is on hand, and every refused reservation is one the refusing
  worker was told about with the figures that justify it.
- ``picker build done`` killed with SIGKILL inside its transaction leaves the store
  exactly as before; a normal done then succeeds.

The workers take the store URL: set PICKER_TEST_SERVER_URL to an empty server
database (e.g. postgresql+psycopg://user@host/picker_test) to run the same test there.
"""

import multiprocessing
import os
import signal
import subprocess
import sys
import time
from collections import Counter

import pytest
from sqlalchemy import func, select

from picker.store import LedgerEntry, Part, add_stock, ledger_balance_ok, open_store, resolve_db_url
from picker.store.builds import PAUSE_ENV_VAR, PAUSE_MARKER_ENV_VAR, get_build, list_builds, new_build
from tests.store.build_workers import over_reserved, worker
from tests.store.test_builds import STOCK, _spec, design

N_WORKERS, N_OPS = 4, 50
SCARCE = {"C-1": 12, "L-1": 8}  # each build takes 2 x 100 nF and 1 x 1 mH per board (1..3 boards)


@pytest.fixture(params=["sqlite", "server"])
def url(request, tmp_path):
    if request.param == "sqlite":
        return resolve_db_url(str(tmp_path / "shared.sqlite"))
    server = os.environ.get("PICKER_TEST_SERVER_URL")
    if not server:
        pytest.skip("set PICKER_TEST_SERVER_URL to an empty server database to run this against it")
    return server


def _stock(url) -> dict:
    store = open_store(url)
    ids = {}
    try:
        with store.Session.begin() as s:
            if s.scalar(select(func.count()).select_from(Part)):
                pytest.fail(f"{url}: the concurrency test needs an empty store")
            for kind, value, _qty, bin in STOCK + [("npn", "npn-test", 0, "Q-1")]:
                part, _ = add_stock(s, _spec(kind, value, bin), SCARCE.get(bin, 100), "add")
                ids[bin] = part.id
    finally:
        store.close()
    return ids


def test_four_processes_reserving_cancelling_consuming_and_undoing(url):
    ids = _stock(url)
    d = design(ids)
    store = open_store(url)
    with store.Session.begin() as s:
        start = {p.id: p.qty for p in s.scalars(select(Part))}
    ctx = multiprocessing.get_context("spawn")
    with ctx.Pool(N_WORKERS) as pool:
        logs = pool.starmap(worker, [(url, 1000 + k, N_OPS, d, f"w{k}") for k in range(N_WORKERS)])

    created = [i for g in logs for i in g["created"]]
    done = [i for g in logs for i in g["done"]]
    undone = [i for g in logs for i in g["undone"]]
    cancelled = [i for g in logs for i in g["cancelled"]]
    # the scenario really had contention and shortfalls
    assert sum(len(g["shortages"]) for g in logs) > 0 and done and undone and cancelled
    for g in logs:
        assert g["other_errors"] == [] and g["over_reserved"] == []
        # every reservation attempt either made a build or was refused with a shortfall message
        assert g["reserve_tries"] == len(g["created"]) + len(g["shortages"])
        for shortfall in g["shortages"]:
            assert shortfall, "a refusal must name at least one short part"
            for need, avail, on_hand, held, short in shortfall:
                assert need > avail == max(on_hand - held, 0) and short == need - avail
    # each operation had exactly one winner
    for ids_ in (created, done, undone, cancelled):
        assert len(ids_) == len(set(ids_))
    assert not set(done) & set(cancelled) and set(undone) <= set(done)

    with store.Session.begin() as s:
        builds = {b.id: b for b in list_builds(s)}
        assert sorted(builds) == sorted(created)
        for b in builds.values():
            want = ("undone" if b.id in undone else "done" if b.id in done
                    else "cancelled" if b.id in cancelled else "reserved")
            assert b.status == want, b.id
        # consumed exactly once: one ledger row per line for a done build, plus its undo row
        rows = list(s.scalars(select(LedgerEntry).order_by(LedgerEntry.id)))
        for b in builds.values():
            took = [(r.part_id, r.delta) for r in rows if r.reason.startswith(f"build {b.id} done (")]
            back = [(r.part_id, r.delta) for r in rows if r.reason.startswith(f"undo build {b.id} (")]
            lines = [(ln.part_id, ln.qty) for ln in b.lines]
            assert took == ([(p, -q) for p, q in lines] if b.status in ("done", "undone") else [])
            assert back == ([(p, q) for p, q in lines] if b.status == "undone" else [])
        # quantities: the start minus what the builds still done took
        want_qty = Counter(start)
        for b in builds.values():
            if b.status == "done":
                for ln in b.lines:
                    want_qty[ln.part_id] -= ln.qty
        assert {p.id: p.qty for p in s.scalars(select(Part))} == dict(want_qty)
        assert ledger_balance_ok(s) == []
        assert over_reserved(s) == []
    store.close()


def _snapshot(store, build_id):
    with store.Session.begin() as s:
        return ({p.id: p.qty for p in s.scalars(select(Part))},
                s.scalar(select(func.count()).select_from(LedgerEntry)),
                get_build(s, build_id).status)


def test_sigkill_inside_build_done_leaves_the_store_as_before(tmp_path):
    path = tmp_path / "crash.sqlite"
    url = resolve_db_url(str(path))
    ids = _stock(url)
    store = open_store(url)
    with store.Session.begin() as s:
        rec = new_build(s, design(ids), 2, "crash test")
    before = _snapshot(store, rec.id)
    store.close()
    assert before[2] == "reserved" and len(rec.lines) > 1

    marker = tmp_path / "inside.txt"
    env = dict(os.environ, **{PAUSE_ENV_VAR: "60", PAUSE_MARKER_ENV_VAR: str(marker)})
    proc = subprocess.Popen([sys.executable, "-m", "picker.cli.app", "--db", str(path), "build", "done", str(rec.id)],
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while not marker.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        if not marker.exists():
            pytest.fail(f"the done never reached the pause (exit {proc.poll()}): "
                        f"{proc.stderr.read() if proc.poll() is not None else ''}")
        assert int(marker.read_text()) == proc.pid
        # inside: the first line is consumed in the open transaction (a hot journal beside the store)
        assert path.with_name(path.name + "-journal").exists()
        os.kill(proc.pid, signal.SIGKILL)
        assert proc.wait(timeout=30) == -signal.SIGKILL
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()

    store = open_store(url)  # the hot journal is rolled back on first read
    try:
        assert _snapshot(store, rec.id) == before
        with store.Session.begin() as s:
            assert ledger_balance_ok(s) == []
    finally:
        store.close()

    r = subprocess.run([sys.executable, "-m", "picker.cli.app", "--db", str(path), "build", "done", str(rec.id)],
                       capture_output=True, text=True, timeout=120,
                       env={k: v for k, v in os.environ.items() if k not in (PAUSE_ENV_VAR, PAUSE_MARKER_ENV_VAR)})
    assert r.returncode == 0, r.stderr
    store = open_store(url)
    try:
        qty, rows, status = _snapshot(store, rec.id)
        assert status == "done" and rows == before[1] + len(rec.lines)
        for ln in rec.lines:
            assert qty[ln.part_id] == before[0][ln.part_id] - ln.qty
        with store.Session.begin() as s:
            assert ledger_balance_ok(s) == []
    finally:
        store.close()


def test_server_databases_lock_the_rows_in_id_order():
    """The path a server database takes (compiled for PostgreSQL; no server needed)."""
    from sqlalchemy.dialects import postgresql, sqlite

    from picker.store.builds import lock_build_stmt, lock_parts_stmt

    pg = str(lock_parts_stmt([7, 3, 7, 5]).compile(dialect=postgresql.dialect(),
                                                   compile_kwargs={"literal_binds": True}))
    assert pg.rstrip().endswith("ORDER BY parts.id FOR UPDATE") and "IN (3, 5, 7)" in pg
    assert str(lock_build_stmt(4).compile(dialect=postgresql.dialect())).rstrip().endswith("FOR UPDATE")
    assert "FOR UPDATE" not in str(lock_parts_stmt([1]).compile(dialect=sqlite.dialect()))
