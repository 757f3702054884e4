"""Terminal report of ``picker check``: rich renderables built from an Evaluation.

Each function takes plain results (the :class:`~picker.circuit.design.Design`
and its :class:`~picker.circuit.evaluate.Evaluation`) and returns a rich
renderable; nothing here prints, parses or touches the store.  Numbers are SI
inside and engineering notation here, at the edge.
"""

from __future__ import annotations

import math

from rich.console import Group
from rich.table import Table
from rich.text import Text

from picker.circuit.checks import RF_CAUTION_HZ
from picker.circuit.design import Design
from picker.circuit.evaluate import Evaluation
from picker.units import format_eng, format_value, to_rkm

#: Shown when the frequency is above RF_CAUTION_HZ and the checks gave no radiated-rf warning.
RF_CAUTION = ("radiated-rf: above 1 MHz the circuit can radiate: keep leads short, screen it, add no "
              "antenna and follow your local radio regulations")
DASH = "—"


def _finite(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)


def _eng(x, unit: str, digits: int = 3) -> str:
    return format_eng(x, unit, digits) if _finite(x) else DASH


def _num(x, fmt: str = ".3g") -> str:
    return format(x, fmt) if _finite(x) else DASH


def diff_pct(hand, picker) -> str:
    """``(picker - hand) / hand`` in percent, signed, one decimal; a dash where undefined."""
    if not (_finite(hand) and _finite(picker)) or hand == 0:
        return DASH
    return f"{(picker - hand) / abs(hand) * 100:+.1f} %"


def temps_of(ev: Evaluation) -> list[float]:
    """Temperatures of the corners in evaluation order (nominal first), degrees Celsius."""
    out: list[float] = []
    for c in ev.corners:
        if c.temp_c not in out:
            out.append(c.temp_c)
    return out


def header(design: Design, ev: Evaluation, npn_source: str = "") -> Text:
    """One line: topology title, style (stray), supply, npn profile, temperature(s)."""
    temps = temps_of(ev) or [design.temp_c]
    temp = f"{temps[0]:g} °C"
    if len(temps) > 1:
        temp += f", corners {', '.join(f'{t:g}' for t in temps[1:])} °C"
    npn = design.npn.name + (f" ({npn_source})" if npn_source else "")
    return Text.assemble(
        (design.topo.title, "bold"),
        f" · {design.style} build ({format_eng(design.node_stray_f, 'F')} stray per node)",
        f" · supply {format_eng(design.vcc_v, 'V')} · npn {npn} · {temp}",
    )


def _source(design: Design, ref: str) -> str:
    info = design.parts.get(ref)
    if info is not None and info.part_id is not None:
        return f"store id {info.part_id}" + (f", bin {info.bin}" if info.bin else "")
    return "default" if ref in design.defaulted else "given"


def parts_table(design: Design) -> Table:
    """Designator, value (engineering notation and RKM code), role, where it came from."""
    table = Table(title="Parts", header_style="bold", title_justify="left")
    for name, justify in (("ref", "left"), ("value", "right"), ("RKM", "left"), ("role", "left"),
                          ("from", "left")):
        table.add_column(name, justify=justify)
    for p in design.topo.positions:
        if p.ref not in design.values or design.values[p.ref] is None:
            continue
        v = float(design.values[p.ref])
        if p.kind == "coupling":
            value, rkm = f"{v:g}", ""
        else:
            value, rkm = format_value(v, p.kind), to_rkm(v, p.kind)
        table.add_row(p.ref, value, rkm, p.role, _source(design, p.ref))
    return table


def defaulted_line(design: Design) -> Text:
    """``defaulted: R1, R2, ...`` (topology defaults the user did not set)."""
    if not design.defaulted:
        return Text("defaulted: none (every position given)")
    return Text.assemble(("defaulted: ", "bold"), ", ".join(design.defaulted),
                         " (topology defaults; set them with --part REF=VALUE)")


def hand_rows(ev: Evaluation, split: tuple[float, float] | None = None) -> list[tuple[str, str, str, str]]:
    """Rows (quantity, hand, picker, difference) of the hand-method comparison.

    ``split`` is the picker's (gain, feedback) at the phase-zero frequency
    (:func:`picker.report.bode.loop_split`); None shows dashes.
    """
    h, b = ev.hand, ev.bias
    gain, fb = split if split is not None else (float("nan"), float("nan"))
    gm = b.get("gm_s")
    inv_gm = 1.0 / gm if _finite(gm) and gm > 0 else float("nan")
    f_hand = h["freq_hz"]
    rows = [
        ("VB", h["vb_v"], b["vb_v"], "V"),
        ("VE", h["ve_v"], b["ve_v"], "V"),
        ("VC", h["vc_v"], b["vc_v"], "V"),
        ("IE", h["ie_a"], b["ie_a"], "A"),
        ("r'e (hand VT/IE) / 1/gm", h["re_ohm"], inv_gm, "Ω"),
        ("gain", h["gain"], gain, ""),
        ("feedback ratio", h["feedback"], fb, ""),
        ("loop gain / margin", h["loop_gain"], ev.margin, ""),
        ("f: ideal LC / small-signal pole", f_hand, ev.freq_small_signal_hz, "Hz"),
        ("f: ideal LC / loop phase zero", f_hand, ev.freq_loop_hz, "Hz"),
        ("f: ideal LC / running", f_hand, ev.freq_hz, "Hz"),
    ]
    out = []
    for name, hv, pv, unit in rows:
        digits = 4 if unit == "Hz" else 3
        fmt = (lambda x: _eng(x, unit, digits)) if unit else (lambda x: _num(x, ".3g"))
        out.append((name, fmt(hv), fmt(pv), diff_pct(hv, pv)))
    return out


def hand_table(ev: Evaluation, split: tuple[float, float] | None = None) -> Table:
    """Table "hand method vs picker" (see :func:`hand_rows`)."""
    table = Table(title="Hand method vs picker", header_style="bold", title_justify="left",
                  caption="hand: stiff divider, VBE -2 mV/K, VT 26 mV, ideal LC; picker: refined DC "
                          "point, hybrid-pi network, describing-function steady state",
                  caption_justify="left")
    for name, justify in (("quantity", "left"), ("hand", "right"), ("picker", "right"),
                          ("difference", "right")):
        table.add_column(name, justify=justify)
    for row in hand_rows(ev, split):
        table.add_row(*row)
    return table


def summary_line(ev: Evaluation) -> Text:
    """Margin nominal and worst, starts, growth per cycle, amplitude at the tank, loaded Q."""
    starts = ("yes", "bold green") if ev.starts else ("no", "bold red")
    amp = _eng(ev.amplitude_vpp, "V") + "pp" if ev.starts and _finite(ev.amplitude_vpp) else DASH
    growth = f"×{ev.growth_per_cycle:.3g}" if _finite(ev.growth_per_cycle) else DASH
    n = len(ev.corners)
    return Text.assemble(
        f"margin {_num(ev.margin, '.2f')} nominal, {_num(ev.margin_worst, '.2f')} worst "
        f"({n} corner{'s' if n != 1 else ''}) · starts: ", starts,
        f" · growth {growth}/cycle · {amp} at the tank · loaded Q {_num(ev.loaded_q, '.1f')}",
    )


def corners_table(ev: Evaluation) -> Table:
    """One row per corner: hFE, temperature, margin, frequency, IE, starts."""
    table = Table(title="Corners (hFE typ/min/max at each temperature)", header_style="bold",
                  title_justify="left")
    for name, justify in (("", "left"), ("hFE", "right"), ("temp", "right"), ("margin", "right"),
                          ("freq", "right"), ("IE", "right"), ("starts", "left"), ("amplitude", "left")):
        table.add_column(name, justify=justify)
    margins = [c.margin for c in ev.corners]
    worst = margins.index(min(margins)) if margins else -1
    for k, c in enumerate(ev.corners):
        tag = "nominal" if k == 0 else ("worst" if k == worst else "")
        if k == 0 and k == worst:
            tag = "nominal, worst"
        table.add_row(tag, f"{c.hfe:.0f}", f"{c.temp_c:g} °C", _num(c.margin, ".2f"),
                      _eng(c.freq_hz, "Hz", 4), _eng(c.ie_a, "A"), "yes" if c.starts else "no",
                      _settles_word(c.amplitude_settles), style="bold" if k == worst else None)
    return table


def _settles_word(settles: bool | None) -> str:
    return DASH if settles is None else ("settles" if settles else "bursts")


def dynamics_line(ev: Evaluation) -> Text:
    """What the amplitude does after start-up, from the envelope model."""
    if ev.amplitude_settles is None:
        return Text("amplitude: no oscillation to settle")
    if ev.amplitude_settles:
        when = f" within {_eng(ev.settle_time_s, 's')} of a 1 mV start" if _finite(ev.settle_time_s) else ""
        return Text.assemble("amplitude: ", ("settles", "bold green"), when)
    every = f", about every {_eng(ev.burst_period_s, 's')}" if _finite(ev.burst_period_s) else ""
    return Text.assemble("amplitude: ", ("bursts", "bold red"),
                         f" (comes and goes{every}; the scope trace will not hold still)")


def remedy_lines(design: Design, ev: Evaluation) -> Text | None:
    """The remedies found for a bursting design, each with its values and worst-case margin."""
    if ev.amplitude_settles is not False and not ev.remedies:
        return None
    if not ev.remedies:
        return Text("remedy: none found among the values offered; try a smaller emitter bypass "
                    "capacitor or more unbypassed emitter resistance by hand", style="yellow")
    def values(vals: dict) -> str:
        return ", ".join(f"{ref} = {format_value(v, design.topo.position(ref).kind)}" for ref, v in vals.items())

    lines = []
    for r in ev.remedies:
        r = r if isinstance(r, dict) else r.as_dict()
        change, edge = values(r["values"]), values(r["threshold"])
        what = "split the emitter resistor" if r["kind"] == "degeneration" else "smaller bypass capacitor"
        stock = r.get("on_hand") or {}
        where = "; ".join(f"{ref} in bin {b}" for ref, b in stock.items() if b)
        lines.append(Text(f"remedy ({what}): {change}; worst-case margin {r['margin_worst']:.2f}"
                          f" (edge of settling: {edge}){'; on hand: ' + where if where else ''}",
                          style="cyan"))
    return Text("\n").join(lines)


def verify_table(ev: Evaluation, verified: dict) -> Table:
    """Prediction beside ngspice's transient."""
    table = Table(title="Verified with ngspice (transient from a kick)", header_style="bold", title_justify="left")
    for name, justify in (("", "left"), ("predicted", "right"), ("ngspice", "right")):
        table.add_column(name, justify=justify)
    amp_pred = _eng(ev.amplitude_vpp, "V") + "pp" if ev.starts else DASH
    table.add_row("starts", "yes" if ev.starts else "no", "yes" if verified["started"] else "no")
    table.add_row("frequency", _eng(ev.freq_hz, "Hz", 5), _eng(verified["freq_hz"], "Hz", 5))
    table.add_row("amplitude at the tank", amp_pred,
                  _eng(verified["amplitude_vpp"], "V") + "pp" if _finite(verified["amplitude_vpp"]) else DASH)
    table.add_row("amplitude", _settles_word(ev.amplitude_settles),
                  "bursts" if verified["bursts"] else ("settles" if verified["settle_time_s"] is not None
                                                       else "not steady"))
    table.add_row("burst period", _eng(ev.burst_period_s, "s") if _finite(ev.burst_period_s) else DASH,
                  _eng(verified["burst_period_s"], "s") if _finite(verified["burst_period_s"]) else DASH)
    return table


def _code_message(w) -> tuple[str, str]:
    if isinstance(w, dict):
        return w["code"], w["message"]
    return w.code, w.message


def warning_lines(ev: Evaluation) -> Text:
    """``code: message`` per warning (yellow), with the radiated-RF caution above 1 MHz."""
    items = [_code_message(w) for w in ev.warnings]
    lines = [Text(f"{code}: {msg}", style="yellow") for code, msg in items]
    f = ev.freq_hz if _finite(ev.freq_hz) else ev.freq_ideal_hz
    if _finite(f) and f > RF_CAUTION_HZ and "radiated-rf" not in {c for c, _ in items}:
        lines.append(Text(RF_CAUTION, style="yellow"))
    if not lines:
        return Text("no warnings", style="green")
    return Text("\n").join(lines)


def check_report(design: Design, ev: Evaluation, *, npn_source: str = "",
                 split: tuple[float, float] | None = None, verified: dict | None = None) -> Group:
    """The whole report, in reading order."""
    items = [header(design, ev, npn_source), parts_table(design), defaulted_line(design),
             hand_table(ev, split), summary_line(ev), dynamics_line(ev), corners_table(ev)]
    if verified is not None:
        items.append(verify_table(ev, verified))
    rem = remedy_lines(design, ev)
    if rem is not None:
        items.append(rem)
    items.append(warning_lines(ev))
    return Group(*items)
