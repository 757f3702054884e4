"""``picker build measured`` and ``picker build retune``: record a built board's frequency, explain
the offset from the prediction and suggest changes with the parts on hand.

Thin layer: the fit and the suggestions are :mod:`picker.builds.retune` (pure); readings are
stored by :mod:`picker.store.measurements`.  Also :func:`fitted_stray` for ``picker find
--style calibrated:BUILD_ID``.
"""

from __future__ import annotations

from typing import Annotated, Optional

import numpy as np
import typer

from picker import units
from picker.cli import build
from picker.cli.env import Env, get_env
from picker.cli.output import print_json, print_message, print_table
from picker.errors import PickerError
from picker.store import measurements as store_meas
from picker.store.builds import get_build

#: Target tolerance assumed when the saved design has no target (the find default).
DEFAULT_TOL = 0.01


def register(parent: typer.Typer) -> None:
    """Attach ``build measured`` and ``build retune`` to the ``build`` sub-app (registered before)."""
    build.app.command("measured")(measured)
    build.app.command("retune")(retune)


def _freq(text: str) -> float:
    try:
        f = units.parse_quantity(text, "Hz", what="frequency")
    except PickerError as e:
        raise PickerError(f"--freq: {e}") from None
    if not f > 0:
        raise PickerError(f"--freq: expected a frequency above 0 Hz (got {text!r}; e.g. 86.2k)")
    return f


def _amplitude(text: str) -> float:
    t = text.strip()
    if t.lower().endswith("pp"):
        t = t[:-2]
    try:
        return units.parse_quantity(t, "V", what="amplitude", allow_zero=True)
    except PickerError as e:
        raise PickerError(f"--amplitude: {e} (peak to peak, e.g. 2.1Vpp)") from None


def _board(text: str | None) -> int | None:
    if text is None:
        return None
    t = text.strip()
    if not t.isdigit() or int(t) < 1:
        raise PickerError(f"--board: expected a board number of at least 1 (got {text!r})")
    return int(t)


def measured(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID")],
    freq: Annotated[str, typer.Option("--freq", metavar="HZ", help="Measured frequency, e.g. 86.2k.")],
    amplitude: Annotated[Optional[str], typer.Option("--amplitude", metavar="VPP",
                                                     help="Measured tank amplitude, e.g. 2.1Vpp.")] = None,
    board: Annotated[Optional[str], typer.Option("--board", metavar="K", help="Which board (default 1).")] = None,
    as_json: Annotated[bool, typer.Option("--json", help="The reading as JSON on stdout.")] = False,
) -> None:
    """Record a measured frequency (and amplitude) of one board of a build."""
    env = get_env(ctx)
    f = _freq(freq)
    amp = _amplitude(amplitude) if amplitude is not None else None
    k = _board(board) or 1
    store = build._store(env)
    with store.Session.begin() as session:
        m = store_meas.add_measurement(session, build_id, f, amp, k)
        n = len(store_meas.latest_per_board(session, build_id))
    if as_json:
        print_json(env, m.as_json())
        return
    amp_text = f", {units.format_eng(amp, 'V')} peak to peak" if amp is not None else ""
    print_message(env, f"build {build_id} board {k}: measured {units.format_eng(f, 'Hz')}{amp_text} "
                       f"(reading {m.id}; {n} board(s) measured); 'picker build retune {build_id}' explains it")


def _fit_build(session, build_id: int):
    """(record, design, measurements, model, fit) of a measured build; PickerError if none measured."""
    from picker.builds.model import design_from_json
    from picker.builds.retune import FreqModel, fit

    record = get_build(session, build_id)
    meas = store_meas.latest_per_board(session, build_id)
    if not meas:
        raise PickerError(f"build {build_id} has no measurement yet (record one with "
                          f"'picker build measured {build_id} --freq HZ')")
    try:
        design = design_from_json(record.design)
    except ValueError as e:
        raise PickerError(f"build {build_id}: its saved design is not readable ({e})") from None
    try:
        model = FreqModel(design)
    except ValueError as e:
        raise PickerError(f"build {build_id}: {e}; nothing to fit") from None
    ft = fit(design, [m.freq_hz for m in meas], boards=[m.board for m in meas], model=model)
    return record, design, meas, model, ft


def fitted_stray(session, build_id: int) -> float:
    """The stray per node (farad) fitted from the build's measurements (``find --style calibrated:ID``)."""
    return _fit_build(session, build_id)[4].stray_f


def _stock(session, need: int):
    from picker.builds.retune import Stock
    from picker.cli.find import load_drawer
    from picker.search.stock import best_lines, stable_mask

    drawer = load_drawer(session)
    cols = {k: [] for k in ("kind", "value", "tol", "part_id", "bin", "qty", "dcr_ohm")}
    for kind in ("capacitor", "inductor"):
        lines = drawer.lines[kind]
        offer = best_lines(lines, need, stable_mask(lines) if kind == "capacitor" else None)
        i = offer.line
        cols["kind"] += [kind] * i.size
        for key, arr in (("value", lines.value), ("tol", lines.tol), ("part_id", lines.id), ("bin", lines.bin),
                         ("qty", lines.qty), ("dcr_ohm", lines.dcr_ohm)):
            cols[key] += list(arr[i])
    return Stock(**{k: np.array(v, dtype=object if k in ("kind", "bin") else float) for k, v in cols.items()})


def _pct(x: float) -> str:
    return f"{x:+.2%}"


def retune(
    ctx: typer.Context,
    build_id: Annotated[int, typer.Argument(metavar="ID")],
    board: Annotated[Optional[str], typer.Option("--board", metavar="K",
                                                 help="Correct this measured board (default: the only one measured, "
                                                      "else a typical board of the build).")] = None,
    top: Annotated[str, typer.Option("--top", metavar="N", help="Suggestions to show.")] = "5",
    as_json: Annotated[bool, typer.Option("--json", help="Fit and suggestions as JSON on stdout.")] = False,
) -> None:
    """Explain a build's measured frequency (parts within tolerance, stray) and suggest changes from stock."""
    from picker.builds.retune import DEFAULT_MIN_MARGIN, suggest

    env = get_env(ctx)
    k = _board(board)
    n_top = build._whole("--top", top)
    store = build._store(env)
    with store.Session.begin() as session:
        record, design, meas, model, ft = _fit_build(session, build_id)
        if k is not None and k not in ft.boards:
            raise PickerError(f"--board {k}: build {build_id} has measurements of board(s) "
                              f"{', '.join(map(str, ft.boards))} only")
        if k is None and ft.n_boards == 1:
            k = ft.boards[0]
        stock = _stock(session, 1 if k is not None else record.boards)
    target = record.design.get("target") or {}
    note = None
    if target.get("freq_hz"):
        target_hz, tol = float(target["freq_hz"]), float(target.get("tol") or DEFAULT_TOL)
    else:
        target_hz, tol = ft.predicted_hz, DEFAULT_TOL
        note = f"the saved design has no target: aiming at the predicted frequency within ±{DEFAULT_TOL:.0%}"
    min_margin = float(target.get("min_margin") or DEFAULT_MIN_MARGIN)
    temps = tuple(record.design.get("temps_c") or (0.0, 50.0))
    sug = suggest(design, ft, stock, target_hz, tol, min_margin=min_margin, board=k, temps_c=temps, model=model,
                  top=n_top)
    if as_json:
        print_json(env, {"build_id": build_id, "fit": ft.as_json(), "suggestions": sug.as_json(),
                         "measurements": [m.as_json() for m in meas], "note": note})
        return
    _render(env, record, design, ft, sug, note)


def _render(env: Env, record, design, ft, sug, note) -> None:
    fe = units.format_eng
    boards = ", ".join(f"board {b} {fe(f, 'Hz')}" for b, f in zip(ft.boards, ft.measured_hz))
    print_message(env, f"build {record.id} '{record.name}': {design.topology}, measured {boards}")
    verdict = "within" if ft.explained else "beyond"
    print_message(env, f"predicted {fe(ft.predicted_hz, 'Hz')}; measured {_pct(np.expm1(ft.offset))} "
                       f"({verdict} the ±{2 * ft.offset_sd_prior:.2%} that part tolerances and the "
                       f"{design.style} style explain, 2 sd)")
    lo95, hi95 = max(ft.stray_f - 1.96 * ft.stray_sd_f, 0.0), ft.stray_f + 1.96 * ft.stray_sd_f
    print_message(env, f"stray per node: fitted {fe(ft.stray_f, 'F')} ± {fe(ft.stray_sd_f, 'F')} (1 sd; 95 % "
                       f"interval {fe(lo95, 'F')}..{fe(hi95, 'F')}; {design.style} assumed {fe(ft.stray_prior_f, 'F')} "
                       f"± {fe(ft.stray_prior_sd_f, 'F')})")
    rows = []
    for j, ref in enumerate(ft.refs):
        for i, b in enumerate(ft.boards):
            rows.append((ref, b, _pct(ft.deviation[i, j]), f"{ft.deviation_sd[i, j]:.2%}",
                         f"±{ft.prior_sd[j] * np.sqrt(3):.1%}"))
    print_table(env, ["part", ("board", "right"), ("off nominal", "right"), ("± 1 sd", "right"),
                      ("tolerance", "right")], rows, title="most likely explanation")
    if ft.n_boards > 1:
        print_message(env, f"boards: spread {ft.spread:.2%} (tolerances alone: {ft.spread_expected:.2%}); "
                           f"systematic offset from the stray {_pct(np.expm1(ft.systematic))} ± {ft.systematic_sd:.2%}")
    if note:
        print_message(env, note)
    who = f"board {sug.board}" if sug.board is not None else "a typical board of the build"
    if not sug.warranted:
        print_message(env, f"{who}: {sug.reason}")
        return
    print_message(env, f"{who}: {sug.reason}; target {fe(sug.target_hz, 'Hz')} ± {sug.tol:.2%}, "
                       f"worst-case margin at least {sug.min_margin:g}")
    if not sug.changes:
        extra = f" ({sug.rejected_margin} in tolerance lose the margin)" if sug.rejected_margin else ""
        print_message(env, f"no change with the parts on hand meets the target and the margin{extra}")
        return
    rows = [(n, c.describe(), fe(c.freq_hz, "Hz"), fe(c.freq_sd_hz, "Hz"), _pct(c.freq_error),
             f"{c.margin_worst:.2f}") for n, c in enumerate(sug.changes, 1)]
    print_table(env, [("#", "right"), "change", ("predicted", "right"), ("± 1 sd", "right"), ("error", "right"),
                      ("margin worst", "right")], rows, title="suggested changes, best first")
