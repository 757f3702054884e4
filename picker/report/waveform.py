"""``check --verify-plot``: the simulated tank waveform with its envelope (matplotlib PNG)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from picker.circuit.design import Design
from picker.circuit.evaluate import Evaluation
from picker.units import format_eng

#: Samples of the waveform drawn at most (the envelope is drawn in full).
MAX_POINTS = 200_000


def waveform_figure(verification, design: Design, ev: Evaluation) -> Figure:
    """Tank voltage against time above, its peak-to-peak envelope and the predicted amplitude below."""
    m = verification.measure
    t, v = verification.time_s, verification.tank_v
    step = max(1, t.size // MAX_POINTS)
    fig = Figure(figsize=(9, 6), dpi=110)
    FigureCanvasAgg(fig)
    ax, ax_env = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    scale, unit = _time_unit(float(t[-1]))
    ax.plot(t[::step] * scale, v[::step], lw=0.3, color="0.45")
    ax.set_ylabel(f"v({design.topo.tank_node}) in ngspice (V)")
    ax.grid(True, lw=0.3)
    ax_env.plot(m.envelope_t_s * scale, m.envelope_vpp, color="tab:blue", lw=1.0, label="envelope, ngspice")
    if ev.starts and np.isfinite(ev.amplitude_vpp):
        ax_env.axhline(ev.amplitude_vpp, color="tab:orange", ls="--", lw=0.9,
                       label=f"predicted amplitude {format_eng(ev.amplitude_vpp, 'V')}pp")
    ax_env.set_ylabel("envelope (Vpp)")
    ax_env.set_xlabel(f"time ({unit})")
    ax_env.legend(loc="lower right", fontsize=8)
    ax_env.grid(True, lw=0.3)
    state = "bursts" if m.bursts else ("settles" if m.settle_time_s is not None else "not steady")
    pred = {True: "settles", False: "bursts", None: "no oscillation"}[ev.amplitude_settles]
    ax.set_title(f"{design.topo.title}: simulated start-up {state}; predicted {pred}", fontsize=10)
    fig.tight_layout()
    return fig


def _time_unit(t_end_s: float) -> tuple[float, str]:
    for scale, unit in ((1.0, "s"), (1e3, "ms"), (1e6, "µs")):
        if t_end_s * scale >= 1.0:
            return scale, unit
    return 1e9, "ns"


def write_waveform_png(verification, design: Design, ev: Evaluation, path: str | Path) -> Path:
    path = Path(path)
    waveform_figure(verification, design, ev).savefig(path)
    return path
