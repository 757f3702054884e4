"""``picker find``: search the drawer for part sets that hit a target frequency and margin."""

from __future__ import annotations

import signal
from typing import Annotated, Optional

import numpy as np
import typer
from sqlalchemy.orm import Session

from picker import units
from picker.circuit.design import STYLE_STRAY_F, style_stray_f
from picker.circuit.device import NpnProfile
from picker.circuit.topology import topology_names
from picker.cli.check import _min_margin, _option_quantity, _profile, parse_temps
from picker.cli.env import Env, get_env
from picker.cli.output import _clean, print_json, print_message, print_note
from picker.errors import PickerError
from picker.search.find import Drawer, FindSpec, Npn, find
from picker.search.stock import Lines
from picker.store.builds import reserved_qty
from picker.store.engine import display_url
from picker.store.models import Part
from picker.store.pool import load_pool

from sqlalchemy import select

WEIGHT_KEYS = ("error", "margin", "cost")


def load_drawer(session: Session) -> Drawer:
    """The store's available stock as the search's arrays: each part's qty minus what reserved
    builds hold (``picker.store.builds.reserved_qty``), parts with nothing available left out."""
    held = reserved_qty(session)
    lines = {}
    for k in ("resistor", "capacitor", "inductor"):
        df = load_pool(session, k)
        if held and len(df):
            df["qty"] = df["qty"].to_numpy() - df["id"].map(held).fillna(0).to_numpy(dtype=np.int64)
            df = df[df["qty"] > 0].reset_index(drop=True)
        lines[k] = Lines.from_frame(k, df)
    npns = tuple(Npn(_profile(p), p.id, p.qty - held.get(p.id, 0), float(p.unit_cost or 0.0), p.bin)
                 for p in session.scalars(select(Part).where(Part.kind == "npn", Part.qty > 0).order_by(Part.id))
                 if p.qty - held.get(p.id, 0) > 0)
    return Drawer(lines, npns)


def last_find_designs(spec: FindSpec, candidates) -> list[dict]:
    """Saved-design dicts (``picker.builds.model``) of the candidates, in rank order, for the last find."""
    from picker.builds.model import design_to_json

    out = []
    for c in candidates:
        parts = {}
        for ref, p in c.parts.items():
            if p.get("part_id") is None:
                continue
            entry = {"part_id": int(p["part_id"])}
            if p.get("part2_id") is not None:
                entry.update(part2_id=int(p["part2_id"]), how=p["how"])
            parts[ref] = entry
        out.append(design_to_json(c.design, parts=parts, target={"freq_hz": spec.freq_hz, "tol": spec.tol,
                                                                  "min_margin": spec.min_margin},
                                  predicted={"freq_hz": c.freq_hz, "margin": c.margin,
                                             "margin_worst": c.margin_worst, "yield": c.yield_},
                                  temps_c=tuple(spec.temps_c)))
    return out


def save_find(env: Env, store, spec: FindSpec, result) -> None:
    """Keep a successful search as the store's last find (for ``picker build new --from-find``).

    A store that cannot be written (read-only file, locked too long) only costs a note."""
    from dataclasses import asdict

    from sqlalchemy import exc as sa_exc

    from picker.store.builds import save_last_find

    if not result.candidates:
        return
    designs = _clean(last_find_designs(spec, result.candidates))
    try:
        with store.Session.begin() as session:
            save_last_find(session, _clean(asdict(spec)), designs)
    except sa_exc.OperationalError as e:
        print_note(env, f"could not save this search as the last find ({str(e.orig or e).strip()}); "
                        "'picker build new --from-find' will not see it")


def parse_tol(text: str) -> float:
    t = text.strip()
    try:
        v = float(t[:-1]) / 100 if t.endswith("%") else float(t)
    except ValueError:
        v = float("nan")
    if not np.isfinite(v) or not 0 < v < 0.5:
        raise PickerError(f"--tol: expected a fraction or percentage between 0 and 50% (got {text!r}; e.g. 1% or 0.01)")
    return v


def parse_ie(text: str) -> tuple[float, float]:
    parts = text.split("..")
    if len(parts) != 2:
        raise PickerError(f"--ie: expected a range LO..HI in ampere (got {text!r}; e.g. 0.5m..3m)")
    lo, hi = (_option_quantity("--ie", p.strip(), "A", "emitter current") for p in parts)
    if not lo < hi:
        raise PickerError(f"--ie: the low end must be below the high end (got {text!r})")
    return lo, hi


def parse_weights(text: str) -> dict:
    out = {"error": 1.0, "margin": 1.0, "cost": 0.2}
    for item in filter(None, (s.strip() for s in text.split(","))):
        key, _, val = item.partition("=")
        key = key.strip().lower()
        if key not in WEIGHT_KEYS:
            raise PickerError(f"--weights: unknown weight {key!r} in {text!r} (accepted: {', '.join(WEIGHT_KEYS)})")
        try:
            w = float(val)
        except ValueError:
            w = float("nan")
        if not np.isfinite(w) or w < 0:
            raise PickerError(f"--weights: {key} must be a number >= 0 (got {val!r})")
        out[key] = w
    return out


def _topologies(text: str) -> tuple[str, ...]:
    t = text.strip().lower()
    names = topology_names()
    if t == "any":
        return tuple(names)
    if t not in names:
        raise PickerError(f"--topology: unknown topology {text!r} (accepted: {', '.join(names)}, any)")
    return (t,)


def _int(option: str, text: str, lo: int) -> int:
    try:
        v = int(text)
    except ValueError:
        v = lo - 1
    if v < lo:
        raise PickerError(f"{option}: expected a whole number of at least {lo} (got {text!r})")
    return v


def find_command(
    ctx: typer.Context,
    freq: Annotated[str, typer.Option("--freq", metavar="HZ", help="Target frequency, e.g. 455k.")],
    tol: Annotated[str, typer.Option("--tol", metavar="PCT", help="Frequency tolerance, e.g. 1%.")] = "1%",
    topology: Annotated[str, typer.Option("--topology", help=f"One of {', '.join(topology_names())}, or any.")] = "any",
    min_margin: Annotated[str, typer.Option("--min-margin", metavar="M", help="Worst-case start-up margin (default 2.5).")] = "2.5",
    supply: Annotated[str, typer.Option("--supply", metavar="VOLTS", help="Supply voltage.")] = "12",
    ie: Annotated[str, typer.Option("--ie", metavar="LO..HI", help="Emitter current window.")] = "0.5m..3m",
    npn: Annotated[str, typer.Option("--npn", metavar="NAME|any", help="npn profile name from the store, or any.")] = "any",
    boards: Annotated[str, typer.Option("--boards", metavar="N", help="Boards to build (quantities must suffice).")] = "1",
    style: Annotated[str, typer.Option("--style", help=f"Build style: {', '.join(STYLE_STRAY_F)}, or calibrated:BUILD_ID (the stray fitted from a measured build).")] = "breadboard",
    temp: Annotated[str, typer.Option("--temp", metavar="LO..HI", help="Temperature range, °C.")] = "0..50",
    combine: Annotated[bool, typer.Option("--combine", help="Also make the tank's trim value from two parts in series or parallel.")] = False,
    top: Annotated[str, typer.Option("--top", metavar="N", help="Candidates to show.")] = "10",
    weights: Annotated[str, typer.Option("--weights", metavar="K=W,...", help="Score weights: error, margin, cost.")] = "error=1,margin=1,cost=0.2",
    mc: Annotated[str, typer.Option("--mc", metavar="N", help="Monte Carlo samples per candidate (0: none).")] = "2000",
    seed: Annotated[str, typer.Option("--seed", metavar="S", help="Monte Carlo seed.")] = "1",
    as_json: Annotated[bool, typer.Option("--json", help="JSON array of candidates on stdout, SI units.")] = False,
) -> None:
    """Find the oscillators the parts on hand can build for a target frequency, best first."""
    env = get_env(ctx)
    style = calibrated_from_build(env, style)
    spec = build_spec(freq, tol, topology, min_margin, supply, ie, npn, boards, style, temp, combine, top,
                      weights, mc, seed)
    store = env.store(create=False)
    if store is None:
        raise PickerError(f"no store at {display_url(env.db_url)} (add parts with 'picker stock import' "
                          "or run 'picker demo --db PATH')")
    with store.Session.begin() as session:
        drawer = load_drawer(session)
    if spec.npn is not None and not any(n.profile.name.casefold() == spec.npn.casefold() for n in drawer.npns):
        names = sorted({n.profile.name for n in drawer.npns})
        raise PickerError(f"--npn {spec.npn}: no npn of that name on hand (accepted: {', '.join(names + ['any'])})")
    result = run_find(env, drawer, spec, show_progress=not as_json)
    save_find(env, store, spec, result)
    if as_json:
        print_json(env, [c.as_json() for c in result.candidates])
        for r in result.reasons if not result.candidates else ():
            env.err.print(r, soft_wrap=True, markup=False)
        return
    from picker.report.find_report import find_report

    env.out.print(find_report(spec, result))
    if not result.candidates:
        raise typer.Exit(1)


def calibrated_from_build(env: Env, style: str) -> str:
    """``calibrated:BUILD_ID`` -> ``calibrated:FARAD``, the stray fitted from that build's measurements
    (``picker build retune``); any other style is returned as given."""
    from picker.circuit.design import CALIBRATED_PREFIX, calibrated_style

    t = style.strip().lower()
    if not t.startswith(CALIBRATED_PREFIX):
        return style
    ref = t[len(CALIBRATED_PREFIX):].strip()
    if not ref.isdigit():
        raise PickerError(f"--style: expected calibrated:BUILD_ID, the id of a measured build (got {style!r})")
    from picker.cli.retune import fitted_stray

    store = env.store(create=False)
    if store is None:
        raise PickerError(f"--style {style}: no store at {display_url(env.db_url)}")
    with store.Session.begin() as session:
        try:
            return calibrated_style(fitted_stray(session, int(ref)))
        except PickerError as e:
            raise PickerError(f"--style {style}: {e}") from None


def build_spec(freq, tol, topology, min_margin, supply, ie, npn, boards, style, temp, combine, top, weights,
               mc, seed) -> FindSpec:
    freq_hz = _option_quantity("--freq", freq, "Hz", "frequency")
    style = style.strip().lower()
    try:
        style_stray_f(style)
    except PickerError as e:
        raise PickerError(f"--style: {e}") from None
    nominal, temps = parse_temps(temp)
    return FindSpec(freq_hz=freq_hz, tol=parse_tol(tol), topologies=_topologies(topology),
                    min_margin=_min_margin(min_margin), vcc_v=_option_quantity("--supply", supply, "V", "supply voltage"),
                    ie_a=parse_ie(ie), npn=None if npn.strip().lower() == "any" else npn.strip(),
                    boards=_int("--boards", boards, 1), style=style, temps_c=tuple(temps), nominal_c=nominal,
                    combine=combine, top=_int("--top", top, 1), weights=parse_weights(weights),
                    mc=_int("--mc", mc, 0), seed=_int("--seed", seed, 0))


def run_find(env: Env, drawer: Drawer, spec: FindSpec, show_progress: bool = True):
    """Run the search with a progress bar on stderr; Ctrl-C stops with a one-line message."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    try:
        if not show_progress:
            return find(drawer, spec)
        with Progress(TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(),
                      console=env.err, transient=True) as bar:
            task = bar.add_task("searching", total=1.0)
            return find(drawer, spec, progress=lambda what, frac: bar.update(task, description=what, completed=frac))
    except KeyboardInterrupt:
        raise PickerError("find: stopped (Ctrl-C); nothing was changed") from None


def register(parent: typer.Typer) -> None:
    parent.command("find")(find_command)
