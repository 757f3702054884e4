"""Terminal rendering of a find result: one table of candidates, the reasons when nothing fits."""

from __future__ import annotations

from rich.console import Group
from rich.table import Table
from rich.text import Text

from picker.units import format_eng, format_value


def _part_cell(ref: str, p: dict, kind: str) -> str:
    if ref == "Q1":
        return f"Q1 {p['value']} [{p['bin']}] {p['qty_left']} left"
    value = format_value(p["value"], kind)
    if "part2_id" in p:
        a, b = format_value(p["value1"], kind), format_value(p["value2"], kind)
        sign = "+" if p["how"] == "series" else "||"
        value = f"{value} ({a}{sign}{b}; {p['bin2']})" if kind != "capacitor" or p["how"] == "parallel" else \
            f"{value} ({a} in series with {b}; {p['bin2']})"
    return f"{ref} {value} [{p['bin']}] {p['qty_left']} left"


def find_report(spec, result) -> Group:
    title = (f"picker find: {format_eng(spec.freq_hz, 'Hz')} ±{spec.tol:.2%}, worst-case margin >= "
             f"{spec.min_margin:g}, {format_eng(spec.vcc_v, 'V')}, {spec.boards} board(s), {spec.style}")
    items = [Text(title, style="bold")]
    if not result.candidates:
        items += [Text(r) for r in result.reasons]
        return Group(*items)
    # one compact row of figures per candidate, then its parts as wrapped text: a parts
    # column inside the table is unreadable in an 80-column terminal
    t = Table(show_lines=False)
    for col, j in (("#", "right"), ("topology", "left"), ("freq", "right"), ("error", "right"),
                   ("margin", "right"), ("worst", "right"), ("yield", "right"), ("cost", "right")):
        t.add_column(col, justify=j)
    for c in result.candidates:
        y = "-" if c.yield_ is None else f"{c.yield_:.1%}"
        t.add_row(str(c.rank), c.topology, format_eng(c.freq_hz, "Hz", digits=5), f"{c.freq_error:+.2%}",
                  f"{c.margin:.2f}", f"{c.margin_worst:.2f}", y, f"{c.cost:.2f}")
    items.append(t)
    items.append(Text("parts: designator value [bin] quantity left after", style="dim"))
    for c in result.candidates:
        topo = c.design.topo
        cells = [_part_cell(ref, p, topo.position(ref).kind if ref != "Q1" else "npn") for ref, p in c.parts.items()]
        line = Text(f"#{c.rank} ", style="bold")
        line.append(" · ".join(cells))
        items.append(line)
    s = result.stats
    items.append(Text(f"searched {s['tanks']} tanks x {s['biases']} bias networks ({s['pairs_screened']} pairs "
                      f"screened), {s['refined_rows']} engine rows; yield over {spec.mc} Monte Carlo samples "
                      f"(seed {spec.seed}), frequency in tolerance and margin >= 1", style="dim"))
    shown = set()
    for c in result.candidates:
        for w in c.warnings:
            if w.code not in shown:
                shown.add(w.code)
                items.append(Text(f"caution ({w.code}): {w.message}"))
    items.append(Text("check one in full: picker check --topology T --part REF=id:N ...", style="dim"))
    return Group(*items)
