"""One design, fully checked: nominal evaluation, hFE and temperature corners, checks.

This is what ``picker check`` shows; the search uses :func:`evaluate_batch`
directly on thousands of rows.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace

import numpy as np

from picker.circuit import mna
from picker.circuit.checks import STIFF_FRACTION, Warning_, run_checks
from picker.circuit.design import Design, DesignBatch
from picker.circuit.dynamics import Dynamics
from picker.circuit.dynamics import predict as predict_dynamics
from picker.circuit.engine import BatchResult, dc_network, dominant_pair, evaluate_batch, take_rows


@dataclass(frozen=True)
class Corner:
    hfe: float
    temp_c: float
    margin: float
    freq_hz: float
    ie_a: float
    starts: bool
    amplitude_settles: bool | None = None


@dataclass(frozen=True)
class Evaluation:
    """Everything ``check`` reports for one design (SI units, plain numbers)."""

    topology: str
    values: dict
    defaulted: tuple
    freq_ideal_hz: float
    freq_small_signal_hz: float
    freq_loop_hz: float
    freq_hz: float
    margin: float
    margin_worst: float
    starts: bool
    growth_per_cycle: float
    amplitude_vpp: float
    clipped: bool
    saturated: bool
    divider_stiff: bool
    loaded_q: float
    bias: dict
    hand: dict
    power_w: dict
    p_transistor_w: float
    coupling_reactance: dict
    corners: list
    amplitude_settles: bool | None = None
    settle_time_s: float | None = None
    burst_period_s: float | None = None
    dynamics: dict = field(default_factory=dict)
    remedies: list = field(default_factory=list)
    warnings: list = field(default_factory=list)

    def as_json(self) -> dict:
        d = asdict(self)
        d["defaulted"] = list(self.defaulted)
        d["warnings"] = [w.as_dict() if isinstance(w, Warning_) else w for w in self.warnings]
        d["coupling_reactance"] = {k: {"reactance_ohm": x, "against_ohm": z}
                                   for k, (x, z) in self.coupling_reactance.items()}
        return _clean(d)


def _clean(obj):
    """JSON-safe: NaN and inf become None, numpy scalars plain numbers."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.floating, float)):
        return float(obj) if np.isfinite(obj) else None
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


def corner_batch(designs: list[Design], temps: tuple[float, ...]) -> tuple[DesignBatch, list]:
    """Every design at hFE typ/min/max of its transistor at each of ``temps``.

    Rows run design by design, each design's corners in the order of the
    returned (hFE, temperature) list (that of the first design's transistor).
    """
    npn = designs[0].npn
    combos = [(h, t) for t in temps for h in (npn.hfe_nominal, npn.hfe_min, npn.hfe_max)]
    batch = DesignBatch.from_designs([d for d in designs for _ in combos])
    return batch.with_(hfe=np.array([h for _ in designs for h, _ in combos]),
                       temp_c=np.array([t for _ in designs for _, t in combos])), combos


def check_design(design: Design, temps: tuple[float, ...] | None = None,
                 integrate: bool = True) -> Evaluation:
    """Evaluate ``design`` at nominal hFE and its temperature, plus corners.

    Corners are hFE min/typ/max at each temperature of ``temps`` (default: the
    design's own temperature only).  Row 0 is the nominal evaluation.  The
    envelope dynamics are judged at every corner; with ``integrate`` the
    nominal row's envelope is also integrated (settling time, burst period),
    and so is every corner the linearised model calls unsettled (the
    integration decides, see :func:`picker.circuit.dynamics.predict`).
    """
    temps = (design.temp_c,) + tuple(t for t in (temps or ()) if t != design.temp_c)
    batch, combos = corner_batch([design], temps)
    res = evaluate_batch(batch)
    dyn = predict_dynamics(batch, res, integrate_rows=(0,) if integrate else (), confirm=integrate)
    return _summarise(design, batch, res, combos, dyn)


def check_designs(designs: list[Design], temps: tuple[float, ...]) -> list[Evaluation]:
    """Evaluate many designs (one topology, one transistor) with their corners, in one batch.

    Lighter than :func:`check_design` for the search's final stage: the steady
    state and the envelope dynamics are solved on each design's nominal row
    only, and by the linearised model alone (no integration: a design it calls
    unsettled is dropped, the cautious side; ``check`` integrates to confirm);
    corners carry the small-signal margin and frequency, and their
    ``amplitude_settles`` is None.
    """
    if not designs:
        return []
    temps = (designs[0].temp_c,) + tuple(t for t in temps if t != designs[0].temp_c)
    batch, combos = corner_batch(designs, temps)
    per = len(combos)
    nominal = np.zeros(batch.n, dtype=bool)
    nominal[::per] = True
    res = evaluate_batch(batch, large_signal_rows=nominal)
    rows = np.flatnonzero(nominal)
    dyn_nom = predict_dynamics(batch.take(rows), take_rows(res, rows))
    out = []
    for k, design in enumerate(designs):
        sl = np.arange(k * per, (k + 1) * per)
        blank = {f: np.full(per, np.nan) for f in ("amplitude_settles", "growth_rate", "settle_time_s",
                                                   "burst_period_s", "drive_v", "tau_bias_s")}
        for f in blank:
            blank[f][0] = getattr(dyn_nom, f)[k]
        dyn = Dynamics(**blank)
        out.append(_summarise(design, batch.take(sl), take_rows(res, sl), combos, dyn))
    return out


def loaded_q_of(batch: DesignBatch, hy: mna.Hybrid, freq_hz: np.ndarray) -> np.ndarray:
    """The tank's loaded Q per design: from the natural frequency nearest ``freq_hz`` of the
    network with the transistor's gm removed (its resistances and capacitances stay),
    |Im s| / (2 |Re s|); inf where the pole is undamped or not found."""
    mat = mna.assemble(batch, hy)
    pole = dominant_pair(mna.natural_frequencies(mat, np.zeros(batch.n)), 2 * np.pi * np.asarray(freq_hz, float))
    ok = np.isfinite(pole.real) & (pole.real != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(ok, np.abs(pole.imag) / (2 * np.abs(pole.real)), np.inf)


def _opt_bool(x: float) -> bool | None:
    return None if not np.isfinite(x) else bool(x > 0.5)


def _opt_float(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def _summarise(design: Design, batch: DesignBatch, res: BatchResult, combos, dyn: Dynamics) -> Evaluation:
    i = 0
    dc = res.dc
    r1, r2, re, rc = (float(a[i]) for a in dc_network(batch))
    vx = float(dc.ie_a[i] * batch.values["RE"][i]) if "RE1" in batch.values and "RE" in batch.values else float(dc.ve_v[i])
    node_v = {"VCC": design.vcc_v, "GND": 0.0, "B": float(dc.vb_v[i]), "E": float(dc.ve_v[i]),
              "C": float(dc.vc_v[i]), "X": vx}
    topo = design.topo
    power = {}
    for p in topo.by_kind("resistor"):
        if p.ref in design.values and p.a in node_v and p.b in node_v:
            v = node_v[p.a] - node_v[p.b]
            power[p.ref] = v * v / design.values[p.ref]

    hy = res.hybrid
    gm = float(hy.gm_s[i])
    rpi = 1.0 / float(hy.gpi_s[i])
    re1 = float(design.values.get("RE1", 0.0) or 0.0)
    f = float(res.freq_hz[i]) if np.isfinite(res.freq_hz[i]) else float(res.freq_ideal_hz[i])
    rbias = r1 * r2 / (r1 + r2)
    r_in = 1.0 / (1.0 / rbias + 1.0 / (rpi + (float(batch.hfe[i]) + 1) * re1))
    against = {"base": r_in, "collector": rc if rc > 0 else r_in,
               "emitter": min(float(design.values.get("RE", np.inf)), 1.0 / gm + re1)}
    coupling = {}
    for p in topo.positions:
        if p.feeds and p.ref in design.values:
            coupling[p.ref] = (1.0 / (2 * np.pi * f * design.values[p.ref]), against[p.feeds])

    one = batch.take(np.array([i]))
    loaded_q = float(loaded_q_of(one, mna.Hybrid(*(np.asarray(getattr(hy, k))[[i]] for k in
                                                   mna.Hybrid.__dataclass_fields__)), np.array([f]))[0])

    hfe_min = design.npn.hfe_min
    stiff = (rbias / (hfe_min + 1)) <= STIFF_FRACTION * re
    corners = [Corner(hfe=h, temp_c=t, margin=float(res.margin[k]), freq_hz=float(res.freq_hz[k]),
                      ie_a=float(res.dc.ie_a[k]), starts=bool(res.starts[k]),
                      amplitude_settles=_opt_bool(dyn.amplitude_settles[k]))
               for k, (h, t) in enumerate(combos)]
    hd, hf = res.hand_dc, res.hand
    ev = Evaluation(
        topology=design.topology, values=dict(design.values), defaulted=tuple(design.defaulted),
        freq_ideal_hz=float(res.freq_ideal_hz[i]), freq_small_signal_hz=float(res.freq_small_signal_hz[i]),
        freq_loop_hz=float(res.freq_loop_hz[i]), freq_hz=float(res.freq_hz[i]),
        margin=float(res.margin[i]), margin_worst=float(np.min(res.margin)),
        starts=bool(res.starts[i]), growth_per_cycle=float(res.growth_per_cycle[i]),
        amplitude_vpp=float(res.amplitude_vpp[i]), clipped=bool(res.clipped[i]),
        saturated=bool(dc.saturated[i]), divider_stiff=bool(stiff), loaded_q=loaded_q,
        bias={"vb_v": node_v["B"], "ve_v": node_v["E"], "vc_v": node_v["C"], "vx_v": vx,
              "ie_a": float(dc.ie_a[i]), "ic_a": float(dc.ic_a[i]), "vce_v": float(dc.vce_v[i]),
              "vbe_v": float(dc.vbe_v[i]), "gm_s": gm, "r_pi_ohm": rpi},
        hand={"vb_v": float(hd.vb_v[i]), "ve_v": float(hd.ve_v[i]), "vc_v": float(hd.vc_v[i]),
              "ie_a": float(hd.ie_a[i]), "re_ohm": float(hd.re_small_ohm[i]),
              "gain": float(hf.gain[i]), "feedback": float(hf.feedback[i]),
              "loop_gain": float(hf.loop_gain[i]), "freq_hz": float(hf.freq_ideal_hz[i])},
        power_w=power, p_transistor_w=float(dc.p_transistor_w[i]),
        coupling_reactance=coupling, corners=corners,
        amplitude_settles=_opt_bool(dyn.amplitude_settles[i]),
        settle_time_s=_opt_float(dyn.settle_time_s[i]), burst_period_s=_opt_float(dyn.burst_period_s[i]),
        dynamics={"growth_rate_per_s": _opt_float(dyn.growth_rate[i]), "drive_v": _opt_float(dyn.drive_v[i]),
                  "tau_bias_s": _opt_float(dyn.tau_bias_s[i]),
                  "settles_all_corners": bool(np.all(dyn.settles() | ~np.asarray(res.starts)
                                                     | np.isnan(dyn.amplitude_settles))),
                  "integrated": bool(len(dyn.envelope_t_s) > 0)},
    )
    return replace(ev, warnings=run_checks(design, ev))

