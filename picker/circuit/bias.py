"""DC operating point of the bias network: hand method and refined, batched.

The refined point solves the divider's Thevenin equivalent with finite hFE,

    IE = (VTh - VBE) / (RE + RTh / (hFE + 1)),

with VBE self-consistent with the collector current through the junction law
IC = IS(T) exp(VBE/VT) (1 + VCB/VAF) (the Gummel-Poon forward-active
equations, Early effect included), so the temperature dependence of VBE
(about -2 mV/K, common practice) follows from IS(T).

References
----------
Thevenin bias with finite beta: A. S. Sedra and K. C. Smith, "Microelectronic
Circuits", section "Biasing in BJT amplifier circuits".  Junction law and
Early effect: the SPICE Gummel-Poon model (ngspice manual, "BJTs").
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.device import NpnModel, is_at, thermal_voltage

#: VCE below which the transistor is taken as saturated, volt (common practice).
VCE_SAT_V = 0.2
#: Temperature coefficient of VBE used by the hand method, volt per kelvin (common practice).
HAND_VBE_TC_V_PER_K = -2e-3
#: Thermal voltage the hand method uses (26 mV, common practice).
HAND_VT_V = 0.026


@dataclass(frozen=True)
class DcPoint:
    """Refined DC operating point; every field an array over the batch (SI units)."""

    vb_v: np.ndarray
    ve_v: np.ndarray
    vc_v: np.ndarray
    vbe_v: np.ndarray
    vce_v: np.ndarray
    ie_a: np.ndarray
    ic_a: np.ndarray
    ib_a: np.ndarray
    vth_v: np.ndarray
    rth_ohm: np.ndarray
    p_transistor_w: np.ndarray
    saturated: np.ndarray


@dataclass(frozen=True)
class HandDc:
    """Stiff-divider hand figures: VB from the unloaded divider, VE = VB - VBE, IE = VE/RE."""

    vb_v: np.ndarray
    ve_v: np.ndarray
    vc_v: np.ndarray
    ie_a: np.ndarray
    re_small_ohm: np.ndarray  # r'e = VT / IE


def hand_dc(r1_ohm, r2_ohm, re_ohm, rc_ohm, vcc_v, vbe25_v, temp_c=25.0) -> HandDc:
    """The hand method's bias point (stiff divider, VBE with -2 mV/K)."""
    vb = vcc_v * r2_ohm / (r1_ohm + r2_ohm)
    vbe = vbe25_v + HAND_VBE_TC_V_PER_K * (np.asarray(temp_c, dtype=float) - 25.0)
    ve = np.maximum(vb - vbe, 0.0)
    ie = ve / re_ohm
    with np.errstate(divide="ignore"):
        re_small = np.where(ie > 0, HAND_VT_V / np.maximum(ie, 1e-30), np.inf)
    return HandDc(vb, ve, vcc_v - ie * rc_ohm, ie, re_small)


def solve_dc(r1_ohm, r2_ohm, re_ohm, rc_ohm, vcc_v, model: NpnModel, temp_c=25.0,
             is_scale=1.0, iterations: int = 64) -> DcPoint:
    """Refined DC point by vectorised bisection on the junction current.

    Parameters
    ----------
    r1_ohm, r2_ohm : array_like
        Divider resistors, supply to base and base to ground, ohm.
    re_ohm : array_like
        Total DC resistance from emitter to ground, ohm.
    rc_ohm : array_like
        DC resistance from the supply to the collector, ohm (a collector
        resistor, or an inductor's DC resistance).
    vcc_v : array_like
        Supply voltage, volt.
    model : NpnModel
        Transistor parameters (BF is the hFE of this evaluation).
    temp_c : array_like
        Junction temperature, degrees Celsius.
    is_scale : array_like
        Factor on IS.  A sinusoidal base-emitter drive of x thermal voltages
        raises the average junction current by the modified Bessel function
        I0(x), which is how the large-signal analysis shifts the bias point.
    """
    r1, r2, re, rc, vcc = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in
                                                (r1_ohm, r2_ohm, re_ohm, rc_ohm, vcc_v)))
    vth = vcc * r2 / (r1 + r2)
    rth = r1 * r2 / (r1 + r2)
    vt = thermal_voltage(temp_c)
    is_t = is_at(model, temp_c) * is_scale
    bf, vaf = model.bf, model.vaf_v

    log_is = np.log(is_t) + np.zeros_like(vth)

    def currents(log_i0):
        i0 = np.exp(log_i0)
        ib = i0 / bf
        vb = vth - ib * rth
        ic = i0 * (1 + (vcc - vb) / vaf) / (1 + i0 * rc / vaf)
        return ib, ic, vb

    # Bisection on the log of the junction current (no overflow for any IS scale):
    # the residual VB - VE - VBE falls as the current rises.
    lo = np.full_like(vth, np.log(1e-18))
    hi = np.log(np.maximum(vcc, 1e-3) / np.maximum(re + rc + rth / bf, 1e-3) + 1e-12)
    for _ in range(iterations):  # a fixed number of vectorised steps
        mid = 0.5 * (lo + hi)
        ib, ic, vb = currents(mid)
        resid = vb - (ib + ic) * re - vt * (mid - log_is)
        pos = resid > 0
        lo = np.where(pos, mid, lo)
        hi = np.where(pos, hi, mid)
    log_i0 = 0.5 * (lo + hi)
    vbe = vt * (log_i0 - log_is)
    ib, ic, vb = currents(log_i0)
    ie = ib + ic
    ve = ie * re
    vc = vcc - ic * rc
    vce = vc - ve
    return DcPoint(
        vb_v=vb, ve_v=ve, vc_v=vc, vbe_v=vbe, vce_v=vce, ie_a=ie, ic_a=ic, ib_a=ib,
        vth_v=vth, rth_ohm=rth, p_transistor_w=vce * ic + vbe * ib,
        saturated=vce < VCE_SAT_V,
    )
