"""Ratings checks and cautions for one evaluated design.

Each warning is a code of picker's own naming with a plain sentence that says
what to do.  Derating figures are rough common practice (no source): film and
C0G capacitors at most 80 % of rated voltage, high-k ceramics 50 % (their
capacitance falls with DC bias), electrolytics 80 %; resistors and the
transistor at most 50 % of rated power; VCE at most 80 % of VCEO.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.units import format_eng

CAP_DERATE = {"c0g": 0.8, "np0": 0.8, "film": 0.8, "mica": 0.8, "x7r": 0.5, "x5r": 0.5,
              "y5v": 0.5, "z5u": 0.5, "electrolytic": 0.8, "tantalum": 0.5}
HIGH_K = ("x7r", "x5r", "y5v", "z5u", "electrolytic", "tantalum")
POWER_DERATE = 0.5
VCEO_DERATE = 0.8
#: Loaded tank Q below which the frequency depends on the transistor and bias (common practice).
MIN_LOADED_Q = 10.0
#: Coupling reactance allowed as a fraction of the impedance it feeds (common practice).
COUPLING_FRACTION = 0.1
#: Stiff divider: RTh/(hFE+1) at most this fraction of RE (common practice).
STIFF_FRACTION = 0.1
#: Frequency above which the radiated-RF caution is shown, hertz.
RF_CAUTION_HZ = 1e6
#: Worst-case margin practice aims at (common practice: 2-3).
PRACTICE_MARGIN = 2.0


@dataclass(frozen=True)
class Warning_:
    code: str
    message: str

    def as_dict(self) -> dict:
        return {"code": self.code, "message": self.message}


def _v(x: float, unit: str) -> str:
    return format_eng(float(x), unit)


def run_checks(design, ev) -> list[Warning_]:
    """All warnings for ``design`` (a :class:`~picker.circuit.design.Design`) given its evaluation."""
    out: list[Warning_] = []
    add = lambda code, msg: out.append(Warning_(code, msg))  # noqa: E731
    topo = design.topo
    node_v = {"VCC": design.vcc_v, "GND": 0.0, "B": ev.bias["vb_v"], "E": ev.bias["ve_v"],
              "C": ev.bias["vc_v"], "X": ev.bias.get("vx_v", ev.bias["ve_v"]),
              # Tank nodes sit at ground potential in DC: through the inductors (Hartley) or,
              # where coupling capacitors isolate the tank, through leakage; so CC1 and CC2
              # carry the full collector and base voltages.
              "T": 0.0, "F": 0.0, "M": 0.0}
    swing = ev.amplitude_vpp / 2
    f = ev.freq_hz if np.isfinite(ev.freq_hz) else ev.freq_ideal_hz

    if not ev.starts:
        add("no-start", f"the loop gain at phase zero is {ev.margin:.2f}, below 1: it will not oscillate; "
                        "raise the gain (collector load, emitter current) or the feedback ratio")
    elif ev.margin_worst < 1.0:
        add("corner-no-start", f"worst-case margin {ev.margin_worst:.2f} over hFE and temperature: some "
                               "transistors or temperatures will not start")
    elif ev.margin_worst < PRACTICE_MARGIN:
        add("thin-margin", f"worst-case margin {ev.margin_worst:.2f}; practice is 2-3 so that part "
                           "spread and ageing do not stop it")
    if ev.amplitude_settles is False:
        what = (f"bursts about every {_v(ev.burst_period_s, 's')}" if ev.burst_period_s
                else "does not settle (the envelope grows into bursts or a slow wobble)")
        add("bursts", f"the amplitude {what}: the emitter bypass and coupling capacitors are pumped "
                      "by the rectified junction current faster than they recover; add unbypassed "
                      "emitter resistance (RE1) or use a smaller bypass capacitor (see the remedy)")
    elif ev.amplitude_settles and not ev.dynamics.get("settles_all_corners", True):
        add("corner-bursts", "the amplitude settles at nominal hFE and temperature but bursts at some "
                             "corner; a little unbypassed emitter resistance (RE1) makes it robust")
    if ev.saturated:
        add("saturated", f"VCE is {_v(ev.bias['vce_v'], 'V')}: the transistor is saturated at DC; "
                         "raise R1 or RE, or lower RC")
    if ev.clipped:
        add("headroom", "the swing reaches saturation: the amplitude is set by the supply headroom and "
                        "the waveform is distorted; more VCE or less gain gives a cleaner sine")
    if not ev.divider_stiff:
        add("soft-divider", "the bias divider is not stiff (RTh/(hFE+1) > RE/10): the emitter current "
                            "follows the transistor's hFE; lower R1 and R2 in proportion")
    for p in topo.by_kind("capacitor"):
        if p.ref not in design.values:
            continue
        info = design.parts.get(p.ref)
        va, vb = node_v.get(p.a), node_v.get(p.b)
        v_dc = abs(va - vb) if va is not None and vb is not None else 0.0
        v_peak = v_dc + (swing if p.role == "tank" else 0.0)
        diel = (info.dielectric or "").lower() if info else ""
        if info and info.voltage_v:
            derate = CAP_DERATE.get(diel, 0.8)
            if v_peak > derate * info.voltage_v:
                add("cap-voltage", f"{p.ref} sees about {_v(v_peak, 'V')} against its "
                                   f"{_v(info.voltage_v, 'V')} rating (keep below {derate:.0%}); "
                                   "use a higher-rated part")
        if p.role == "tank" and diel in HIGH_K:
            add("tank-dielectric", f"{p.ref} is {info.dielectric}: its capacitance drifts with "
                                   "temperature and voltage, so the frequency will; use C0G/NP0 or film")
        if diel in ("electrolytic", "tantalum"):
            add("polarity", f"{p.ref} is polarised: fit its + lead to the more positive node "
                            f"({p.a if (va or 0) >= (vb or 0) else p.b})")
    for ref, p_w in ev.power_w.items():
        info = design.parts.get(ref)
        if info and info.power_w and p_w > POWER_DERATE * info.power_w:
            add("res-power", f"{ref} dissipates {_v(p_w, 'W')} against its {_v(info.power_w, 'W')} "
                             "rating (keep below half); use a larger resistor")
    vce_peak = ev.bias["vce_v"] + swing
    if vce_peak > VCEO_DERATE * design.npn.vceo_v:
        add("vceo", f"VCE reaches about {_v(vce_peak, 'V')} against the transistor's VCEO of "
                    f"{_v(design.npn.vceo_v, 'V')}; lower the supply or use a higher-voltage type")
    if ev.p_transistor_w > POWER_DERATE * design.npn.pd_w:
        add("q-power", f"the transistor dissipates {_v(ev.p_transistor_w, 'W')} against "
                       f"{_v(design.npn.pd_w, 'W')} rated; lower the current")
    if ev.loaded_q < MIN_LOADED_Q:
        add("tank-loading", f"the tank is loaded to Q of about {ev.loaded_q:.1f} by the bias resistors and "
                            "the transistor's input (R1||R2||r_pi): the frequency will depend on them; "
                            "use a smaller feedback capacitor ratio or a higher-impedance bias")
    for ref, (x_ohm, z_ohm) in ev.coupling_reactance.items():
        if x_ohm > COUPLING_FRACTION * z_ohm:
            add("coupling-reactance", f"{ref} has {_v(x_ohm, 'Ω')} reactance at {_v(f, 'Hz')} against "
                                      f"{_v(z_ohm, 'Ω')} it works into; use a larger capacitor")
    if f > RF_CAUTION_HZ:
        add("radiated-rf", f"at {_v(f, 'Hz')} the circuit can radiate and interfere with radio services: "
                           "keep leads short, screen it, add no antenna, and follow your local radio "
                           "regulations (a licence may be needed)")
    if design.vcc_v > 30:
        add("supply-voltage", f"a {_v(design.vcc_v, 'V')} supply: check every part's voltage rating and "
                              "follow your local electrical safety rules")
    return out
