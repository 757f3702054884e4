"""Pick list of a build job: one line per stock line, in the order a person walks the cabinet.

Pure rendering: a :class:`~picker.builds.model.BuildRecord` in, text out
(nothing here touches the store).  Formats: :func:`picklist_text` (plain,
at most 80 columns), :func:`picklist_csv`, :func:`picklist_md` and
:func:`picklist_html` (one self-contained printable page with the schematic,
the engine's figures and warnings, and the safety caution).

Order: bins in natural order (``R-A2`` before ``R-A10``: digit runs compare
as numbers, the rest case-blind), then kind, then the first designator.
Each line shows the designators it fills, the value in engineering notation
and its IEC 60062 RKM code (an npn shows its profile name), tolerance and
rating, the quantity for all boards and the quantity left in the bin after
(on hand minus taken; a negative number is a shortfall and is marked).

Every text that comes from the store or the saved design (build name, user,
bins, notes, part and profile names, warning texts) is escaped in HTML
(``html.escape``) and in Markdown (``&``, ``<``, ``>`` and ``|``), so markup
in a note renders as text.
"""

from __future__ import annotations

import csv
import html
import io
import math
import textwrap
from dataclasses import dataclass

import numpy as np

from picker.builds.model import BuildLine, BuildRecord, design_from_json
from picker.units import format_eng, format_value, natural_key, to_rkm

FORMATS = ("text", "csv", "md", "html")
KIND_ORDER = ("resistor", "capacitor", "inductor", "npn")
#: Width the plain text fits in, characters.
TEXT_WIDTH = 80
#: Monte Carlo samples for the yield shown on the HTML page when none was saved (common practice).
DEFAULT_MC = 2000
DEFAULT_SEED = 1
DASH = "-"

#: The caution printed on the page and in cautions.txt: picker's checks do not replace the builder's.
SAFETY_TEXT = (
    "Supply: build and test from a current-limited bench supply at the voltage shown; check every "
    "part's voltage rating against it before you switch on.",
    "Capacitors: observe each capacitor's voltage rating and fit polarised (electrolytic, tantalum) "
    "capacitors with their + lead to the more positive node; a reversed or overvolted one can vent or burst.",
    "Resistors and transistor: keep them within their power ratings; a part running hot is a fault.",
    "Radiated RF: an oscillator can radiate and interfere with radio services, above about 1 MHz "
    "especially. Keep leads short, screen it, connect no antenna, and follow your local regulations "
    "(a licence may be needed to transmit).",
    "These checks are no substitute for your own: where local electrical-safety or radio rules, or "
    "licensed practice, say otherwise, they apply.",
)


# ---- the rows ---------------------------------------------------------------


def _kind_rank(kind: str) -> int:
    return KIND_ORDER.index(kind) if kind in KIND_ORDER else len(KIND_ORDER)


def _ref_key(ref: str) -> tuple:
    return natural_key(ref)


def sorted_lines(record: BuildRecord) -> list[BuildLine]:
    """The record's lines in walking order (module docstring)."""
    return sorted(record.lines, key=lambda ln: (natural_key(ln.bin), _kind_rank(ln.kind),
                                                min((_ref_key(r) for r in ln.designators), default=()),
                                                ln.part_id))


def value_text(line: BuildLine) -> str:
    """``33 kΩ``, ``4.7 nF``, ``1 mH``; an npn: its profile name."""
    if line.kind == "npn" or line.value is None:
        return line.name or "npn"
    return format_value(float(line.value), line.kind)


def code_text(line: BuildLine) -> str:
    """IEC 60062 RKM code (``33k``, ``4n7``, ``1m0``); an npn has none (its value column
    carries its profile name)."""
    if line.kind == "npn" or line.value is None:
        return DASH
    return to_rkm(float(line.value), line.kind)


def tolerance_text(tol: float | None) -> str:
    if tol is None:
        return DASH
    return f"{tol * 100:.3g}%"


def rating_text(line: BuildLine) -> str:
    """Resistor power, capacitor voltage and dielectric, inductor DC resistance."""
    bits = []
    if line.kind == "resistor" and line.power_w:
        bits.append(format_eng(line.power_w, "W"))
    if line.kind == "capacitor":
        if line.voltage_v:
            bits.append(format_eng(line.voltage_v, "V"))
        if line.dielectric:
            bits.append(line.dielectric)
    if line.kind == "inductor" and line.dcr_ohm:
        bits.append("DCR " + format_eng(line.dcr_ohm, "Ω"))
    return " ".join(bits) or DASH


def left_after(line: BuildLine, status: str = "reserved") -> int:
    """Pieces left in the bin once this build has taken its quantity (negative: short).

    A build that is ``done`` has already been booked out, so what is on hand is what is left.
    """
    if status == "done":
        return int(line.qty_on_hand)
    return int(line.qty_on_hand) - int(line.qty)


def left_text(n: int) -> str:
    return f"{n}" if n >= 0 else f"SHORT {-n}"


@dataclass(frozen=True)
class PickRow:
    """One pick-list line as display strings (plus the numbers)."""

    bin: str
    refs: str
    kind: str
    value: str
    code: str
    tolerance: str
    rating: str
    qty: int
    left: int
    left_text: str
    part_id: int
    note: str


def pick_rows(record: BuildRecord) -> list[PickRow]:
    out = []
    for ln in sorted_lines(record):
        left = left_after(ln, record.status)
        out.append(PickRow(bin=ln.bin or "", refs=", ".join(sorted(ln.designators, key=_ref_key)), kind=ln.kind,
                           value=value_text(ln), code=code_text(ln), tolerance=tolerance_text(ln.tolerance),
                           rating=rating_text(ln), qty=int(ln.qty), left=left, left_text=left_text(left),
                           part_id=int(ln.part_id), note=ln.note or ""))
    return out


def _target_text(design: dict) -> str:
    t = design.get("target") or {}
    f, tol = t.get("freq_hz"), t.get("tol")
    if not f:
        return ""
    return f"target {format_eng(f, 'Hz', 4)}" + (f" ±{tol * 100:.3g}%" if tol else "")


def _title_of(design: dict) -> str:
    from picker.circuit.topology import get_topology

    try:
        return get_topology(str(design.get("topology", ""))).title
    except Exception:  # an unknown topology still gets its pick list
        return str(design.get("topology", "?"))


def header_lines(record: BuildRecord) -> list[str]:
    """Build, boards, status, date and who; topology, supply, style and target."""
    d = record.design
    who = f" by {record.user}" if record.user else ""
    when = record.created_at.strftime("%Y-%m-%d %H:%M") if record.created_at else ""
    first = (f"Pick list: build {record.id} \"{record.name}\" · {record.boards} board"
             f"{'s' if record.boards != 1 else ''} · {record.status} · {when}{who}")
    second = [_title_of(d)]
    if d.get("vcc_v") is not None:
        second.append(f"supply {format_eng(float(d['vcc_v']), 'V')}")
    if d.get("style"):
        second.append(f"{d['style']} build")
    if _target_text(d):
        second.append(_target_text(d))
    return [first, " · ".join(second)]


# ---- text -------------------------------------------------------------------

#: (heading, attribute, width, right-aligned) of the plain-text columns; with the 8 separating
#: spaces they add up to 78 characters.
_TEXT_COLS = (("[ ]", None, 3, False), ("bin", "bin", 9, False), ("parts", "refs", 11, False),
              ("value", "value", 10, False), ("code", "code", 7, False), ("tol", "tolerance", 5, False),
              ("rating", "rating", 12, False), ("qty", "qty", 5, True), ("left", "left_text", 8, True))


def _wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width, break_long_words=True, break_on_hyphens=False) or [""]


def picklist_text(record: BuildRecord) -> str:
    """Plain text, every line at most :data:`TEXT_WIDTH` characters."""
    out = []
    for h in header_lines(record):
        out += _wrap(h, TEXT_WIDTH)
    out.append("")
    out.append(" ".join(h.ljust(w) if not right else h.rjust(w) for h, _, w, right in _TEXT_COLS).rstrip())
    out.append("-" * TEXT_WIDTH)
    rows = pick_rows(record)
    for row in rows:
        cells = [["[ ]"] if attr is None else _wrap(str(getattr(row, attr)), w) for _, attr, w, _ in _TEXT_COLS]
        for k in range(max(len(c) for c in cells)):
            bits = []
            for (_, _, w, right), c in zip(_TEXT_COLS, cells):
                s = c[k] if k < len(c) else ""
                bits.append(s.rjust(w) if right else s.ljust(w))
            out.append(" ".join(bits).rstrip())
        if row.note:
            out += ["    " + s for s in _wrap("note: " + row.note, TEXT_WIDTH - 4)]
    out.append("-" * TEXT_WIDTH)
    pieces = sum(r.qty for r in rows)
    out.append(f"{len(rows)} line{'s' if len(rows) != 1 else ''}, {pieces} piece{'s' if pieces != 1 else ''}")
    short = [r for r in rows if r.left < 0]
    if short:
        out += _wrap("short: " + ", ".join(f"{r.bin} ({r.refs}) by {-r.left}" for r in short), TEXT_WIDTH)
    return "\n".join(out) + "\n"


# ---- csv and markdown ---------------------------------------------------------

CSV_COLUMNS = ("bin", "designators", "kind", "value", "rkm", "tolerance", "rating", "qty", "qty_left",
               "part_id", "note", "picked")


def picklist_csv(record: BuildRecord) -> str:
    """CSV with a header row (:data:`CSV_COLUMNS`); ``picked`` is left blank for the tick."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r in pick_rows(record):
        w.writerow([r.bin, r.refs, r.kind, r.value, r.code, r.tolerance, r.rating, r.qty, r.left, r.part_id,
                    r.note, ""])
    return buf.getvalue()


def md_escape(text: str) -> str:
    """A table cell's text for Markdown: HTML specials as entities, ``|`` escaped, one line."""
    s = html.escape(str(text), quote=False).replace("|", "\\|")
    return " ".join(s.splitlines())


MD_COLUMNS = ("", "bin", "parts", "value", "code", "tol", "rating", "qty", "left", "note")


def picklist_md(record: BuildRecord) -> str:
    """A Markdown page: the header as a heading and a paragraph, then one table row per line."""
    h1, h2 = header_lines(record)
    out = [f"# {md_escape(h1)}", "", md_escape(h2), ""]
    out.append("| " + " | ".join(MD_COLUMNS) + " |")
    out.append("|" + "|".join("---:" if c in ("qty", "left") else "---" for c in MD_COLUMNS) + "|")
    for r in pick_rows(record):
        cells = ["[ ]", r.bin, r.refs, r.value, r.code, r.tolerance, r.rating, str(r.qty), r.left_text, r.note]
        out.append("| " + " | ".join(md_escape(c) for c in cells) + " |")
    return "\n".join(out) + "\n"


# ---- the engine's figures for the page ------------------------------------------


@dataclass(frozen=True)
class Figures:
    """What the engine says about a record's design (SI units; None where unknown)."""

    design: object  # picker.circuit.design.Design
    evaluation: object  # picker.circuit.evaluate.Evaluation
    temps_c: tuple
    target_hz: float | None
    tol: float | None
    min_margin: float | None
    yield_: float | None
    mc_freq_hz: np.ndarray | None
    mc_margin: np.ndarray | None
    warnings: tuple  # (code, message) pairs
    saved: dict | None = None  # the figures saved with the design when it was found ("predicted")


def design_figures(record: BuildRecord, *, mc: int = DEFAULT_MC, seed: int = DEFAULT_SEED) -> Figures:
    """Evaluate the record's saved design as ``picker check`` does (corners over its temperatures),
    and run the Monte Carlo (``mc`` samples, seeded) for the yield when the design has a target."""
    from picker.circuit.checks import RF_CAUTION_HZ
    from picker.circuit.evaluate import check_design
    from picker.search import montecarlo

    d = record.design
    design = design_from_json(d)
    temps = tuple(float(t) for t in (d.get("temps_c") or (design.temp_c,)))
    ev = check_design(design, temps)
    target = d.get("target") or {}
    f_t = target.get("freq_hz")
    tol = target.get("tol")
    min_margin = target.get("min_margin", d.get("min_margin"))
    fs = ms = None
    y = None
    if mc > 0:
        fs, ms = montecarlo.run(design, int(mc), temps, int(seed))
        if f_t and tol is not None:
            ok = np.isfinite(fs) & (np.abs(fs / f_t - 1) <= tol) & (ms >= 1.0)
            y = float(np.mean(ok))
    warns = [(w.code, w.message) for w in ev.warnings]
    f = ev.freq_hz if math.isfinite(ev.freq_hz) else ev.freq_ideal_hz
    if math.isfinite(f) and f > RF_CAUTION_HZ and "radiated-rf" not in {c for c, _ in warns}:
        from picker.report.check_report import RF_CAUTION

        code, _, msg = RF_CAUTION.partition(": ")
        warns.append((code, msg))
    return Figures(design=design, evaluation=ev, temps_c=temps, target_hz=f_t, tol=tol,
                   min_margin=None if min_margin is None else float(min_margin), yield_=y,
                   mc_freq_hz=fs, mc_margin=ms, warnings=tuple(warns), saved=d.get("predicted") or None)


def figure_rows(fig: Figures) -> list[tuple[str, str]]:
    """(name, value) rows of the predicted figures."""
    ev = fig.evaluation

    def fin(x, fmt):
        return fmt(x) if x is not None and math.isfinite(x) else DASH

    rows = [("predicted frequency", fin(ev.freq_hz, lambda x: format_eng(x, "Hz", 4)))]
    if fig.target_hz:
        err = (ev.freq_hz / fig.target_hz - 1) if math.isfinite(ev.freq_hz) else float("nan")
        tol = f" ±{fig.tol * 100:.3g}%" if fig.tol is not None else ""
        rows.append(("target", f"{format_eng(fig.target_hz, 'Hz', 4)}{tol} (error {fin(err * 100, lambda x: f'{x:+.2f}%')})"))
    rows.append(("start-up margin", fin(ev.margin, lambda x: f"{x:.2f} nominal")))
    n = len(ev.corners)
    rows.append(("worst-case margin", fin(ev.margin_worst, lambda x: f"{x:.2f} over {n} hFE/temperature corners")))
    if fig.min_margin is not None:
        rows.append(("required margin", f"{fig.min_margin:g}"))
    if fig.yield_ is not None:
        n_mc = 0 if fig.mc_freq_hz is None else len(fig.mc_freq_hz)
        rows.append(("yield", f"{fig.yield_ * 100:.1f}% of {n_mc} Monte Carlo samples in tolerance with margin >= 1"))
    else:
        rows.append(("yield", "- (no target saved with the design)"))
    if fig.saved:
        bits = []
        sv = fig.saved
        if isinstance(sv.get("freq_hz"), (int, float)):
            bits.append(format_eng(sv["freq_hz"], "Hz", 4))
        for key, name in (("margin", "margin"), ("margin_worst", "worst")):
            if isinstance(sv.get(key), (int, float)):
                bits.append(f"{name} {sv[key]:.2f}")
        if isinstance(sv.get("yield"), (int, float)):
            bits.append(f"yield {sv['yield'] * 100:.1f}%")
        if bits:
            rows.append(("when found", ", ".join(bits)))
    amp = ev.amplitude_vpp
    rows.append(("amplitude at the tank", fin(amp, lambda x: format_eng(x, "V") + "pp") if ev.starts else DASH))
    if ev.amplitude_settles is not None:
        rows.append(("amplitude", "settles" if ev.amplitude_settles else "bursts"))
    return rows


# ---- html -------------------------------------------------------------------

_CSS = """
@page { size: A4; margin: 12mm; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", Arial, Helvetica, sans-serif; font-size: 10.5pt; color: #000;
       background: #fff; margin: 0 auto; max-width: 190mm; padding: 6mm; }
h1 { font-size: 15pt; margin: 0 0 2mm 0; }
h2 { font-size: 12pt; margin: 5mm 0 2mm 0; border-bottom: 1px solid #888; }
p.meta { margin: 0 0 2mm 0; }
table { border-collapse: collapse; width: 100%; }
th, td { border: 1px solid #999; padding: 1.2mm 1.6mm; text-align: left; vertical-align: top; }
th { background: #eee; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
td.code { font-family: "DejaVu Sans Mono", monospace; }
td.short { color: #b00; font-weight: bold; }
tr.note td { border-top: none; font-style: italic; padding-top: 0; }
span.tick { display: inline-block; width: 4mm; height: 4mm; border: 1.2px solid #000; }
table.figs td:first-child { width: 45mm; font-weight: bold; }
.schematic svg { max-width: 100%; max-height: 115mm; width: auto; height: auto; display: block; margin: 0 auto; }
ul.warnings li { margin-bottom: 1mm; }
code { font-family: "DejaVu Sans Mono", monospace; }
.caution { border: 1.5px solid #000; padding: 2mm 3mm; margin-top: 4mm; }
.caution p { margin: 1mm 0; }
footer { margin-top: 4mm; font-size: 8.5pt; color: #444; }
@media print {
  body { padding: 0; max-width: none; }
  h2 { break-after: avoid; page-break-after: avoid; }
  tr, .caution, .schematic { break-inside: avoid; page-break-inside: avoid; }
  th { background: #eee; -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  a { color: #000; text-decoration: none; }
}
"""

_E = html.escape


def _html_rows(record: BuildRecord) -> list[str]:
    out = []
    for r in pick_rows(record):
        left_cls = "num short" if r.left < 0 else "num"
        out.append(
            "<tr class=\"line\">"
            "<td><span class=\"tick\"></span></td>"
            f"<td class=\"bin\">{_E(r.bin)}</td><td>{_E(r.refs)}</td><td>{_E(r.value)}</td>"
            f"<td class=\"code\">{_E(r.code)}</td><td>{_E(r.tolerance)}</td><td>{_E(r.rating)}</td>"
            f"<td class=\"num\">{r.qty}</td><td class=\"{left_cls}\">{_E(r.left_text)}</td></tr>")
        if r.note:
            out.append(f"<tr class=\"note\"><td></td><td colspan=\"8\">note: {_E(r.note)}</td></tr>")
    return out


def picklist_html(record: BuildRecord, figures: Figures | None = None, *, schematic: str | None = None) -> str:
    """One self-contained printable page (inline CSS, inline SVG, no scripts, no external assets).

    ``figures`` (from :func:`design_figures`) is computed when not given; ``schematic`` is the
    design's SVG (:func:`picker.report.schematic.schematic_svg`), drawn when not given.
    """
    from picker import __version__
    from picker.report.schematic import schematic_svg

    fig = design_figures(record) if figures is None else figures
    svg = schematic_svg(fig.design) if schematic is None else schematic
    h1, h2 = header_lines(record)
    rows = _html_rows(record)
    pieces = sum(int(ln.qty) for ln in record.lines)
    figs = "".join(f"<tr><td>{_E(k)}</td><td>{_E(v)}</td></tr>" for k, v in figure_rows(fig))
    if fig.warnings:
        warn = "<ul class=\"warnings\">" + "".join(
            f"<li><code>{_E(c)}</code>: {_E(m)}</li>" for c, m in fig.warnings) + "</ul>"
    else:
        warn = "<p>The engine gives no warnings for this design.</p>"
    caution = "".join(f"<p>{_E(t)}</p>" for t in SAFETY_TEXT)
    heads = "".join(f"<th>{h}</th>" for h in ("", "bin", "parts", "value", "code", "tol", "rating", "qty", "left"))
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>{_E(f"Pick list: build {record.id} {record.name}")}</title>
<style>{_CSS}</style>
</head>
<body>
<header>
<h1>{_E(h1)}</h1>
<p class="meta">{_E(h2)}</p>
</header>
<section class="parts">
<h2>Parts ({len(record.lines)} lines, {pieces} pieces for {record.boards} board{'s' if record.boards != 1 else ''})</h2>
<table class="parts">
<thead><tr>{heads}</tr></thead>
<tbody>
{chr(10).join(rows)}
</tbody>
</table>
</section>
<section class="schematic">
<h2>Schematic</h2>
{svg}
</section>
<section class="figures">
<h2>Predicted by the engine</h2>
<table class="figs">{figs}</table>
</section>
<section class="engine-warnings">
<h2>Engine warnings</h2>
{warn}
</section>
<section class="caution">
<h2>Caution</h2>
{caution}
</section>
<footer>picker {_E(__version__)} · values in engineering notation, codes per IEC 60062 (RKM)</footer>
</body>
</html>
"""


def render(record: BuildRecord, fmt: str) -> str:
    """The pick list in one of :data:`FORMATS`."""
    if fmt == "text":
        return picklist_text(record)
    if fmt == "csv":
        return picklist_csv(record)
    if fmt == "md":
        return picklist_md(record)
    if fmt == "html":
        return picklist_html(record)
    raise ValueError(f"unknown format {fmt!r} (expected one of {', '.join(FORMATS)})")


__all__ = ["FORMATS", "Figures", "PickRow", "SAFETY_TEXT", "design_figures", "figure_rows",
           "natural_key", "pick_rows", "picklist_csv", "picklist_html", "picklist_md", "picklist_text",
           "render", "sorted_lines"]
