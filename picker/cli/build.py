"""``picker build``: build jobs. Reserve a design's parts for N boards, then mark them done (consumed),
cancel the reservation, or undo a done build.

Thin layer: parse options, open the store through the Env, own the transaction,
call :mod:`picker.store.builds`, render through :mod:`picker.cli.output`.
:data:`app` is importable at module level: other modules attach their own build
commands to it (``build sheet``).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Optional

import typer

from picker import units
from picker.builds.model import BuildRecord
from picker.cli.env import Env, get_env
from picker.cli.output import print_json, print_message, print_table, to_json
from picker.errors import PickerError
from picker.store import builds as store_builds
from picker.store.engine import display_url

app = typer.Typer(name="build", no_args_is_help=True,
                  help="Build jobs: reserve parts for N boards, then consume them (done), cancel or undo.")


def register(parent: typer.Typer) -> None:
    """Attach ``picker build`` to the root app."""
    parent.add_typer(app, name="build")


# ---- helpers ---------------------------------------------------------------------------


def _store(env: Env):
    store = env.store(create=False)
    if store is None:
        raise PickerError(f"no store at {display_url(env.db_url)} (add parts with 'picker stock import' "
                          "or run 'picker demo --db PATH')")
    return store


def _whole(option: str, text: str, lo: int = 1) -> int:
    t = text.strip()
    if not t.lstrip("+").isdigit() or int(t) < lo:
        raise PickerError(f"{option}: expected a whole number of at least {lo} (got {text!r})")
    return int(t)


def _no_constant(name: str):
    raise ValueError(f"{name} is not a number a saved design may hold (expected finite numbers)")


def read_design_file(path: Path) -> dict:
    """The saved-design dict in ``path``; PickerError naming the file (and the field) if it is not one."""
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as e:
        raise PickerError(f"--design {path}: cannot read ({e.strerror or e})") from None
    except UnicodeDecodeError:
        raise PickerError(f"--design {path}: not a text file (expected saved-design JSON)") from None
    try:
        data = json.loads(text, parse_constant=_no_constant)
    except json.JSONDecodeError as e:
        raise PickerError(f"--design {path}: not JSON (line {e.lineno}, column {e.colno}: {e.msg})") from None
    except ValueError as e:
        raise PickerError(f"--design {path}: {e}") from None
    try:
        store_builds.design_parts(data)
    except store_builds.DesignFieldError as e:
        raise PickerError(f"--design {path}: {e}") from None
    return data


def _value_text(line) -> str:
    if line.kind == "npn":
        return line.name or ""
    return units.format_value(line.value, line.kind) if line.value is not None else ""


def parts_json(record: BuildRecord) -> dict:
    """``{designator: {"part_id", "qty"}}`` (qty for all boards; a pair adds ``part2_id``, ``qty2``, ``how``)."""
    out = {}
    for ref, entry in (record.design.get("parts") or {}).items():
        d = {"part_id": entry["part_id"], "qty": record.boards}
        if entry.get("part2_id") is not None:
            d.update(part2_id=entry["part2_id"], qty2=record.boards, how=entry.get("how"))
        out[ref] = d
    return out


def record_json(record: BuildRecord, done_at=None) -> dict:
    """The JSON of one build: id, name, boards, status, times, user, parts, lines, design."""
    return {
        "id": record.id, "name": record.name, "boards": record.boards, "status": record.status,
        "created_at": record.created_at.isoformat(), "done_at": done_at.isoformat() if done_at else None,
        "user": record.user, "topology": record.design.get("topology"), "target": record.design.get("target"),
        "parts": parts_json(record),
        "lines": [{"part_id": ln.part_id, "designators": list(ln.designators), "kind": ln.kind, "value": ln.value,
                   "name": ln.name, "bin": ln.bin, "qty": ln.qty, "qty_on_hand": ln.qty_on_hand}
                  for ln in record.lines],
        "design": record.design,
    }  # fmt: skip


def _pieces(record: BuildRecord) -> int:
    return sum(ln.qty for ln in record.lines)


def _lines_table(env: Env, record: BuildRecord, title: str) -> None:
    rows = [(",".join(ln.designators), ln.kind, _value_text(ln), ln.bin, ln.part_id, ln.qty, ln.qty_on_hand)
            for ln in record.lines]
    print_table(env, ["at", "kind", "value", "bin", ("part", "right"), ("qty", "right"), ("on hand", "right")],
                rows, title=title)


def _headline(record: BuildRecord) -> str:
    return f"build {record.id} '{record.name}': {_design_text(record)}, {record.boards} board(s), {record.status}"


# ---- commands --------------------------------------------------------------------------


@app.command("new")
def new(
    ctx: typer.Context,
    boards: Annotated[str, typer.Option("--boards", metavar="N", help="Boards to build (every part N times).")],
    name: Annotated[str, typer.Option("--name", metavar="TEXT", help="What the build is called.")],
    from_find: Annotated[Optional[str], typer.Option("--from-find", metavar="RANK",
                                                     help="Candidate RANK of the last 'picker find'.")] = None,
    design: Annotated[Optional[Path], typer.Option("--design", metavar="FILE",
                                                   help="A saved-design JSON file ('build show --design').")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="The new build as JSON on stdout.")] = False,
) -> None:
    """Reserve the parts of a design for N boards: they stay on hand but are no longer available."""
    env = get_env(ctx)
    if (from_find is None) == (design is None):
        raise PickerError("build new: give exactly one of --from-find RANK or --design FILE")
    n = _whole("--boards", boards)
    rank = _whole("--from-find", from_find) if from_find is not None else None
    data = read_design_file(design) if design is not None else None
    store = _store(env)
    with store.Session.begin() as session:
        if rank is not None:
            found = store_builds.last_find(session)
            if found is None:
                raise PickerError("--from-find: this store has no saved find; run 'picker find ...' first")
            if rank > len(found["designs"]):
                when = found["created_at"].strftime("%Y-%m-%d %H:%M UTC")
                raise PickerError(f"--from-find {rank}: the last find ({when}) has {len(found['designs'])} "
                                  f"candidate(s); expected a rank from 1 to {len(found['designs'])}")
            data = found["designs"][rank - 1]
        try:
            record = store_builds.new_build(session, data, n, name)
        except store_builds.DesignFieldError as e:
            where = f"--design {design}" if design is not None else f"--from-find {rank}"
            raise PickerError(f"{where}: {e}") from None
    if as_json:
        print_json(env, record_json(record))
        return
    _lines_table(env, record, _headline(record))
    print_message(env, f"reserved build {record.id}: {_pieces(record)} piece(s) on {len(record.lines)} line(s); "
                       f"'picker build done {record.id}' consumes them, "
                       f"'picker build cancel {record.id}' releases them")


@app.command("list")
def list_(
    ctx: typer.Context,
    status: Annotated[Optional[str], typer.Option("--status", help="Only builds with this status.")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="JSON array on stdout.")] = False,
) -> None:
    """List the builds, oldest first."""
    env = get_env(ctx)
    store = _store(env)
    with store.Session.begin() as session:
        records = store_builds.list_builds(session, status.strip().lower() if status else None)
        done = store_builds.done_times(session, [r.id for r in records])
    if as_json:
        data = []
        for r in records:
            d = record_json(r, done.get(r.id))
            del d["design"], d["lines"]
            data.append(d)
        print_json(env, data)
        return
    rows = [(r.id, r.name, _design_text(r), r.boards, r.status, _pieces(r), r.created_at.strftime("%Y-%m-%d %H:%M"))
            for r in records]  # fmt: skip
    print_table(env, [("id", "right"), "name", "design", ("boards", "right"), "status", ("pieces", "right"),
                      "created (UTC)"], rows,
                caption=f"{len(records)} build(s) in {display_url(env.db_url)}")


def _design_text(record: BuildRecord) -> str:
    target = record.design.get("target") or {}
    freq = f" {units.format_eng(target['freq_hz'], 'Hz')}" if target.get("freq_hz") else ""
    return f"{record.design.get('topology')}{freq}"


@app.command("show")
def show(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID")],
    as_json: Annotated[bool, typer.Option("--json", help="The build as JSON on stdout (with its status).")] = False,
    design: Annotated[Optional[Path], typer.Option("--design", metavar="FILE",
                                                   help="Also write the build's saved-design JSON to FILE.")] = None,
) -> None:
    """Show one build: its lines (designators, part, bin, quantity for all boards) and status."""
    env = get_env(ctx)
    store = _store(env)
    with store.Session.begin() as session:
        record = store_builds.get_build(session, build_id)
        done_at = store_builds.done_times(session, [build_id]).get(build_id)
    if design is not None:
        try:
            design.write_text(to_json(record.design) + "\n", encoding="utf-8")
        except OSError as e:
            raise PickerError(f"--design {design}: cannot write ({e.strerror or e})") from None
    if as_json:
        print_json(env, record_json(record, done_at))
        return
    _lines_table(env, record, _headline(record))
    pred = record.design.get("predicted") or {}
    if pred.get("freq_hz"):
        extra = "".join(f", {k.replace('_', ' ')} {pred[k]:.2f}" for k in ("margin", "margin_worst")
                        if pred.get(k) is not None)
        print_message(env, f"predicted {units.format_eng(pred['freq_hz'], 'Hz')}{extra}")
    when = record.created_at.strftime("%Y-%m-%d %H:%M UTC")
    print_message(env, f"created {when} by {record.user or 'unknown'}"
                       + (f"; done {done_at.strftime('%Y-%m-%d %H:%M UTC')}" if done_at else ""))
    if design is not None:
        print_message(env, f"saved design written to {design}")


def _change(ctx: typer.Context, build_id: int, as_json: bool, action, verb: str) -> None:
    env = get_env(ctx)
    store = _store(env)
    with store.Session.begin() as session:
        record = action(session, build_id)
        done_at = store_builds.done_times(session, [build_id]).get(build_id)
    if as_json:
        print_json(env, record_json(record, done_at))
        return
    print_message(env, f"build {record.id} '{record.name}' {verb}: {_pieces(record)} piece(s) on "
                       f"{len(record.lines)} line(s)")


@app.command("cancel")
def cancel(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID")],
    as_json: Annotated[bool, typer.Option("--json", help="The build as JSON on stdout.")] = False,
) -> None:
    """Cancel a reserved build: its parts become available again (nothing is consumed)."""
    _change(ctx, build_id, as_json, store_builds.cancel_build, "cancelled, parts released")


@app.command("done")
def done(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID")],
    as_json: Annotated[bool, typer.Option("--json", help="The build as JSON on stdout.")] = False,
) -> None:
    """Mark a reserved build done: its parts are taken from stock through the ledger, all or nothing."""
    _change(ctx, build_id, as_json, store_builds.done_build, "done, consumed")


@app.command("undo")
def undo(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID")],
    as_json: Annotated[bool, typer.Option("--json", help="The build as JSON on stdout.")] = False,
) -> None:
    """Undo a done build: its parts go back into stock (compensating ledger rows)."""
    _change(ctx, build_id, as_json, store_builds.undo_build, "undone, returned to stock")
