"""``picker demo``: a throwaway store filled from the invented demo stock, summarised.

Structure: :func:`demo_store` (context manager: store + import report; the
store is deleted afterwards unless ``--db`` named one), :func:`summarize`
(plain data from a session), :func:`run_demo` (both, returns a
:class:`DemoResult`) and :func:`render_demo` (terminal or JSON).  Later steps of
the demo run inside ``demo_store`` on the same store.
"""

from __future__ import annotations

import contextlib
import re
import tempfile
from dataclasses import asdict, dataclass
from importlib import resources
from pathlib import Path
from typing import Annotated, Iterator, Optional

import typer
from sqlalchemy import func, select
from sqlalchemy.orm import Session

import picker
from picker import units
from picker.cli.env import Env, get_env
from picker.cli.output import print_json, print_message, print_table
from picker.errors import PickerError
from picker.store import Store, apply_import, natural_key, open_store, plan_import, read_stock_csv, resolve_db_url
from picker.store.engine import display_url
from picker.store.models import Part
from picker.store.spec import KINDS

DEMO_CSV_NAME = "demo_stock.csv"


def demo_csv_path() -> Path:
    """The demo stock CSV: the installed package copy, else the source tree's ``data/``.

    ``picker/data`` is a symlink to the top-level ``data/`` folder, so there is
    one file; a wheel or sdist holds a real copy.
    """
    packaged = resources.files("picker") / "data" / DEMO_CSV_NAME
    if packaged.is_file():
        return Path(str(packaged))
    source = Path(picker.__file__).resolve().parents[1] / "data" / DEMO_CSV_NAME
    if source.is_file():
        return source
    raise PickerError(f"demo data {DEMO_CSV_NAME} not found (looked in {packaged} and {source})")


@dataclass(frozen=True)
class KindSummary:
    kind: str
    parts: int
    pieces: int
    bins: int
    value_min: float | None  # SI base units; None for npn
    value_max: float | None
    names: tuple[str, ...]  # npn profile names


@dataclass(frozen=True)
class BinSummary:
    bin: str
    kinds: tuple[str, ...]
    parts: int
    pieces: int
    value_min: float | None  # only when the bin holds one kind with values
    value_max: float | None


@dataclass(frozen=True)
class DemoResult:
    db_url: str
    throwaway: bool
    csv: str
    import_summary: dict
    kinds: tuple[KindSummary, ...]
    bins: tuple[BinSummary, ...]


@contextlib.contextmanager
def demo_store(db_url: str | None, csv_path: Path | None = None) -> Iterator[tuple[Store, dict]]:
    """Open a store (a fresh temporary one when ``db_url`` is None), import the demo stock.

    Yields
    ------
    store, import_summary
        The temporary store is deleted on exit.

    Raises
    ------
    PickerError
        If the named store already holds parts (the demo only fills an empty one).
    """
    csv_path = csv_path or demo_csv_path()
    stock = read_stock_csv(csv_path)
    with contextlib.ExitStack() as stack:
        if db_url is None:
            tmp = stack.enter_context(tempfile.TemporaryDirectory(prefix="picker-demo-"))
            db_url = resolve_db_url(str(Path(tmp) / "demo.sqlite"))
        store = open_store(db_url)
        stack.callback(store.close)
        with store.Session.begin() as session:
            n = session.scalar(select(func.count(Part.id)))
            if n:
                raise PickerError(
                    f"the demo fills an empty store, but {display_url(db_url)} holds {n} parts "
                    "(leave out --db for a throwaway store)"
                )
            plan = plan_import(session, stock)
            apply_import(session, plan)
        yield store, plan.summary()


def summarize(session: Session) -> tuple[tuple[KindSummary, ...], tuple[BinSummary, ...]]:
    """Per-kind and per-bin counts, pieces and value ranges of everything in the store."""
    parts = list(session.scalars(select(Part)))
    kinds = []
    for k in KINDS:
        ps = [p for p in parts if p.kind == k]
        if not ps:
            continue
        vals = [p.value for p in ps if p.value is not None]
        kinds.append(KindSummary(
            k, len(ps), sum(p.qty for p in ps), len({p.bin for p in ps}),
            min(vals) if vals else None, max(vals) if vals else None,
            tuple(sorted({p.name for p in ps if p.name})),
        ))  # fmt: skip
    bins = []
    for b in sorted({p.bin for p in parts}, key=natural_key):
        ps = [p for p in parts if p.bin == b]
        ks = tuple(k for k in KINDS if any(p.kind == k for p in ps))
        vals = [p.value for p in ps if p.value is not None]
        one = len(ks) == 1 and vals
        bins.append(BinSummary(b, ks, len(ps), sum(p.qty for p in ps), min(vals) if one else None,
                               max(vals) if one else None))  # fmt: skip
    return tuple(kinds), tuple(bins)


def run_demo(db_url: str | None, csv_path: Path | None = None) -> DemoResult:
    """Build the demo store and summarise it (no terminal output)."""
    csv_path = csv_path or demo_csv_path()
    with demo_store(db_url, csv_path) as (store, summary):
        with store.Session.begin() as session:
            kinds, bins = summarize(session)
        return DemoResult(store.url, db_url is None, str(csv_path), summary, kinds, bins)


def _range(kind_or_kinds, lo, hi) -> str:
    kind = kind_or_kinds if isinstance(kind_or_kinds, str) else kind_or_kinds[0]
    if lo is None:
        return ""
    a, b = units.format_value(lo, kind), units.format_value(hi, kind)
    return a if a == b else f"{a} .. {b}"


def render_demo(env: Env, result: DemoResult, *, as_json: bool = False) -> None:
    """Show the demo result: JSON, or a per-kind and a per-bin table."""
    if as_json:
        print_json(env, asdict(result))
        return
    s = result.import_summary
    where = "a throwaway store (deleted now)" if result.throwaway else display_url(result.db_url)
    print_message(
        env,
        f"demo: imported {s['rows']} rows of {Path(result.csv).name} into {where}: "
        f"{s['new_parts']} parts, {s['merged_rows']} restock rows merged, {s['pieces']} pieces",
    )
    print_table(
        env,
        ["kind", ("parts", "right"), ("pieces", "right"), ("bins", "right"), "values"],
        [(k.kind, k.parts, k.pieces, k.bins, _range(k.kind, k.value_min, k.value_max) or ", ".join(k.names))
         for k in result.kinds],  # fmt: skip
        title="Stock per kind",
    )
    print_table(
        env,
        ["bins", "kinds", ("parts", "right"), ("pieces", "right"), "values"],
        _bin_groups(result.bins),
        title="Stock per bin (bins grouped by name without the trailing number)",
    )


def _bin_groups(bins: tuple[BinSummary, ...]) -> list[tuple]:
    """Rows of the per-bin table: runs like R-A1..R-A12 folded into one row."""
    groups: dict[str, list[BinSummary]] = {}
    for b in bins:
        groups.setdefault(re.sub(r"\d+$", "", b.bin), []).append(b)
    rows = []
    for members in groups.values():
        label = members[0].bin if len(members) == 1 else f"{members[0].bin}..{members[-1].bin}"
        kinds = tuple(k for k in KINDS if any(k in b.kinds for b in members))
        lows = [b.value_min for b in members if b.value_min is not None]
        highs = [b.value_max for b in members if b.value_max is not None]
        values = _range(kinds, min(lows), max(highs)) if len(kinds) == 1 and lows else ""
        rows.append((label, ", ".join(kinds), sum(b.parts for b in members), sum(b.pieces for b in members), values))
    return rows


def demo(
    ctx: typer.Context,
    db: Annotated[Optional[str], typer.Option("--db", metavar="PATH_OR_URL",
        help="Build the demo in this (empty) store and keep it; default: a throwaway temp store.")] = None,  # fmt: skip
    as_json: Annotated[bool, typer.Option("--json", help="JSON on stdout.")] = False,
) -> None:
    """Fill a store from the invented demo stock and show what is there."""
    env = get_env(ctx)
    if db:
        env.use_db(db)
    result = run_demo(env.db_url if env.db_given else None)
    render_demo(env, result, as_json=as_json)
    if not as_json:
        show_demo_find(env, env.db_url if env.db_given else None)


#: The demo's find: a 455 kHz test tone from the demo cabinet (a target of picker's choosing).
DEMO_FIND = dict(freq="455k", tol="1%", topology="colpitts-ce", min_margin="2.5", supply="12", ie="0.5m..3m",
                 npn="npn-general", boards="1", style="breadboard", temp="0..50", combine=False, top="3",
                 weights="error=1,margin=1,cost=0.2", mc="1000", seed="1")


def _with_demo_session(db_url: str | None, fn):
    if db_url is None:
        with demo_store(None) as (store, _):
            with store.Session.begin() as session:
                return fn(session)
    store = open_store(db_url)
    try:
        with store.Session.begin() as session:
            return fn(session)
    finally:
        store.close()


def show_demo_find(env: Env, db_url: str | None) -> None:
    """Run the demo's find on the demo stock, print the result and the check report of the best."""
    from picker.circuit.evaluate import check_design
    from picker.cli.demo_design import demo_design
    from picker.cli.find import build_spec, load_drawer, run_find
    from picker.report import bode, check_report
    from picker.report.find_report import find_report

    spec = build_spec(**DEMO_FIND)
    drawer, fallback = _with_demo_session(db_url, lambda s: (load_drawer(s), demo_design(s)))
    print_message(env, "")
    print_message(env, "picker find --freq 455k --tol 1% --topology colpitts-ce --npn npn-general --top 3 --mc 1000 on the demo store:")
    result = run_find(env, drawer, spec)
    env.out.print(find_report(spec, result))
    if result.candidates:
        design, what = result.candidates[0].design, "The best candidate, checked in full"
    else:
        design, what = fallback, "The demo design, checked in full"
    ev = check_design(design, spec.temps_c)
    print_message(env, "")
    print_message(env, f"{what} (picker check --part REF=id:N ...):")
    env.out.print(check_report.check_report(design, ev, npn_source="from the demo store",
                                            split=bode.loop_split(design, ev.freq_loop_hz)))


def register(parent: typer.Typer) -> None:
    """Attach ``picker demo`` to the root app."""
    parent.command("demo")(demo)
