"""Design sheet of a build job: the files a builder keeps beside the board.

:func:`write_sheet` writes into one folder:

=================  ==================================================================
``deck.cir``       the ngspice deck, the same one ``picker check --spice`` writes
                   (:func:`picker.circuit.spice.deck`: kicked transient)
``bode.png/.svg``  the loop gain's Bode plot (:mod:`picker.report.bode`)
``montecarlo.png`` histograms of the Monte Carlo frequency and margin
``montecarlo.svg`` (:func:`picker.search.montecarlo.run`, the batched engine) with the
                   spec limits marked: target and target ± tolerance, margin 1 and the
                   required minimum margin when the design carries one
``bom.csv``        one row per designator (:data:`BOM_COLUMNS`)
``schematic.svg``  :func:`picker.report.schematic.schematic_svg`
``picklist.html``  the printable pick list (:func:`picker.report.picklist.picklist_html`)
``cautions.txt``   the engine's warnings for the design and the safety caution
=================  ==================================================================

Existing files of these names are overwritten (they are this command's outputs).
Figures are drawn with matplotlib's object API on the Agg canvas (no pyplot).
"""

from __future__ import annotations

import csv
import io
import textwrap
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from picker.builds.model import BuildRecord
from picker.report.picklist import (DASH, DEFAULT_MC, DEFAULT_SEED, SAFETY_TEXT, Figures, code_text,
                                    design_figures, header_lines, natural_key, picklist_html, rating_text,
                                    tolerance_text, value_text)
from picker.units import format_eng, format_value, to_rkm

BOM_COLUMNS = ("designator", "kind", "value", "rkm", "tolerance", "rating", "part_id", "bin", "qty_per_board",
               "qty_total")
#: gids of the spec-limit lines of :func:`montecarlo_figure` (``Artist.get_gid``; ids in the SVG).
GID_TARGET = "mc-target"
GID_FREQ_LOW = "mc-freq-low"
GID_FREQ_HIGH = "mc-freq-high"
GID_MARGIN_START = "mc-margin-1"
GID_MARGIN_MIN = "mc-margin-min"
HIST_BINS = 40
TEXT_WIDTH = 78


def montecarlo_figure(freq_hz, margin, *, target_hz: float | None = None, tol: float | None = None,
                      min_margin: float | None = None, title: str = "") -> Figure:
    """Histograms of the Monte Carlo frequency (top) and margin (bottom) with the spec limits.

    Samples whose frequency is not finite (no phase-zero crossing) are counted in the
    frequency panel's title and left out of its histogram.
    """
    f = np.asarray(freq_hz, dtype=float)
    m = np.asarray(margin, dtype=float)
    fig = Figure(figsize=(8, 6.5), layout="constrained")
    FigureCanvasAgg(fig)
    ax_f, ax_m = fig.subplots(2, 1)
    ok = np.isfinite(f)
    lost = int(np.size(f) - np.count_nonzero(ok))
    ax_f.hist(f[ok], bins=HIST_BINS, color="tab:blue", alpha=0.8)
    ax_f.set_xlabel("running frequency (Hz)")
    ax_f.set_ylabel("samples")
    head = f"frequency, {np.size(f)} samples" + (f" ({lost} without a crossing, not shown)" if lost else "")
    if target_hz:
        ax_f.axvline(target_hz, color="black", lw=1.2, gid=GID_TARGET, label=f"target {format_eng(target_hz, 'Hz', 4)}")
        if tol is not None:
            lo, hi = target_hz * (1 - tol), target_hz * (1 + tol)
            ax_f.axvline(lo, color="tab:red", ls="--", lw=1.2, gid=GID_FREQ_LOW,
                         label=f"target ± {tol * 100:.3g}%")
            ax_f.axvline(hi, color="tab:red", ls="--", lw=1.2, gid=GID_FREQ_HIGH)
            inside = np.count_nonzero(ok & (np.abs(f / target_hz - 1) <= tol))
            head += f"; {inside / max(np.size(f), 1) * 100:.1f}% in tolerance"
        ax_f.legend(fontsize=8, loc="upper right")
    ax_f.set_title(head, fontsize=9)
    mm = m[np.isfinite(m)]
    ax_m.hist(mm, bins=HIST_BINS, color="tab:green", alpha=0.8)
    ax_m.axvline(1.0, color="tab:red", ls="--", lw=1.2, gid=GID_MARGIN_START, label="margin 1 (starts)")
    if min_margin is not None:
        ax_m.axvline(min_margin, color="tab:orange", ls="-.", lw=1.2, gid=GID_MARGIN_MIN,
                     label=f"required margin {min_margin:g}")
    starts = np.count_nonzero(mm >= 1.0)
    ax_m.set_title(f"start-up margin; {starts / max(np.size(m), 1) * 100:.1f}% of samples start", fontsize=9)
    ax_m.set_xlabel("margin (loop gain at phase zero)")
    ax_m.set_ylabel("samples")
    ax_m.legend(fontsize=8, loc="upper right")
    for ax in (ax_f, ax_m):
        ax.grid(True, alpha=0.3)
    if title:
        fig.suptitle(title, fontsize=10)
    return fig


def bom_rows(record: BuildRecord, fig: Figures) -> list[list]:
    """One row per designator: present positions in the topology's order (the coupling ``K``
    is not a part and is left out), then ``Q1``.  A position no build line fills keeps its
    design value with blank part id and bin."""
    design = fig.design
    boards = max(int(record.boards), 1)
    by_ref: dict[str, list] = {}
    for ln in sorted(record.lines, key=lambda ln: natural_key(ln.bin)):
        for ref in ln.designators:
            by_ref.setdefault(ref, []).append(ln)
    rows = []
    refs = [p.ref for p in design.topo.positions if p.ref in design.present() and p.kind != "coupling"] + ["Q1"]
    for ref in refs + sorted(set(by_ref) - set(refs), key=natural_key):
        lines = by_ref.get(ref)
        if not lines:
            if ref == "Q1":
                rows.append([ref, "npn", design.npn.name, DASH, DASH, DASH, "", "", 1, boards])
                continue
            kind = design.topo.position(ref).kind
            v = float(design.values[ref])
            rows.append([ref, kind, format_value(v, kind), to_rkm(v, kind), DASH, DASH, "", "", 1, boards])
            continue
        for ln in lines:
            total = int(ln.qty) / max(len(ln.designators), 1)
            per = total / boards
            per_s = int(per) if float(per).is_integer() else round(per, 3)
            total_s = int(total) if float(total).is_integer() else round(total, 3)
            rows.append([ref, ln.kind, value_text(ln), code_text(ln), tolerance_text(ln.tolerance), rating_text(ln),
                         ln.part_id, ln.bin, per_s, total_s])
    return rows


def bom_csv(record: BuildRecord, fig: Figures) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(BOM_COLUMNS)
    w.writerows(bom_rows(record, fig))
    return buf.getvalue()


def cautions_text(record: BuildRecord, fig: Figures) -> str:
    """The engine's warnings (``code: message``) and the safety caution, wrapped to 78 columns."""
    out = [f"Cautions for build {record.id} \"{record.name}\"", header_lines(record)[1], ""]
    out.append("Engine warnings for this design:")
    if fig.warnings:
        for code, msg in fig.warnings:
            out += textwrap.wrap(f"{code}: {msg}", TEXT_WIDTH, initial_indent="- ", subsequent_indent="  ")
    else:
        out.append("- none")
    out += ["", "Safety:"]
    for t in SAFETY_TEXT:
        out += textwrap.wrap(t, TEXT_WIDTH, initial_indent="- ", subsequent_indent="  ")
    return "\n".join(out) + "\n"


def write_sheet(record: BuildRecord, out_dir: str | Path, *, mc: int = DEFAULT_MC, seed: int = DEFAULT_SEED,
                figures: Figures | None = None) -> dict[str, Path]:
    """Write the design sheet of ``record`` into ``out_dir`` (created if missing).

    Returns
    -------
    dict
        What -> path: ``deck``, ``bode_png``, ``bode_svg``, ``montecarlo_png``,
        ``montecarlo_svg``, ``bom``, ``schematic``, ``picklist``, ``cautions``.
    """
    from picker.circuit.spice import deck
    from picker.report.bode import bode_figure
    from picker.report.schematic import schematic_svg

    if mc < 1:
        raise ValueError(f"the design sheet needs Monte Carlo samples (got mc={mc})")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    fig = design_figures(record, mc=mc, seed=seed) if figures is None else figures
    if fig.mc_freq_hz is None:
        raise ValueError("the figures carry no Monte Carlo samples (compute them with mc > 0)")
    design, ev = fig.design, fig.evaluation
    files: dict[str, Path] = {}

    def put(key: str, name: str, text: str) -> None:
        path = out / name
        path.write_text(text, encoding="utf-8")
        files[key] = path

    put("deck", "deck.cir", deck(design))
    bode = bode_figure(design, ev)
    for ext in ("png", "svg"):
        files[f"bode_{ext}"] = out / f"bode.{ext}"
        bode.savefig(files[f"bode_{ext}"], format=ext, dpi=110)
    title = f"Monte Carlo, build {record.id}: {design.topo.title}"
    mcf = montecarlo_figure(fig.mc_freq_hz, fig.mc_margin, target_hz=fig.target_hz, tol=fig.tol,
                            min_margin=fig.min_margin, title=title)
    for ext in ("png", "svg"):
        files[f"montecarlo_{ext}"] = out / f"montecarlo.{ext}"
        mcf.savefig(files[f"montecarlo_{ext}"], format=ext, dpi=110)
    svg = schematic_svg(design)
    put("bom", "bom.csv", bom_csv(record, fig))
    put("schematic", "schematic.svg", svg)
    put("picklist", "picklist.html", picklist_html(record, fig, schematic=svg))
    put("cautions", "cautions.txt", cautions_text(record, fig))
    return files
