"""The hand-gain screen is safe: the engine's margin never exceeds SCREEN_FACTOR x the hand figure.

``find`` drops a (tank, bias) pair when SCREEN_FACTOR x hand loop gain
< min_margin, where the hand figure is ``find.hand_return_ratio`` (the
return ratio at gm with the collector and base loading, minus gm RE1), with
gm = IE/VT and IE by the hand method at hFE_min (common practice, no source).
The engine's margin is that return ratio; the degenerated-gain form
RC/(r'e + RE1) x C1/C2 is a different figure, and the engine exceeds it by 10x
and more with RE1 of a few hundred ohm.  The RC lower bound of
``space.biases`` uses gm (RC fb - RE1), which is never below the hand figure.
That is only exact if the engine's margin (phase-zero search, no guess) is
never above SCREEN_FACTOR x hand for a design that can be a result (loop
frequency within FREQ_SLACK of the tank's resonance).  Measured here over
random common-emitter Colpitts, Clapp and Hartley designs meeting the bias
rules, each with the feedback ratio, tank frequency and coil that ``find``
hands to the screen (C1/C2; L2/L1 for the Hartley, whose hand figure uses L1's
loss only).
"""

import numpy as np
import pytest

from picker.circuit.bias import HAND_VT_V
from picker.circuit.design import DesignBatch, style_stray_f
from picker.circuit.device import NpnProfile
from picker.circuit.engine import small_signal
from picker.circuit.topology import get_topology
from picker.search import space
from picker.search.find import SCREEN_FACTOR, hand_return_ratio


def _random_designs(n, seed, topology="colpitts-ce"):
    rng = np.random.default_rng(seed)
    lu = lambda lo, hi: np.exp(rng.uniform(np.log(lo), np.log(hi), n))  # noqa: E731
    p = NpnProfile()
    v = {"L1": lu(10e-6, 10e-3), "C1": lu(100e-12, 100e-9), "RC": lu(470.0, 22e3), "RE": lu(220.0, 10e3),
         "R2": lu(2.2e3, 100e3), "CC1": np.full(n, 1e-6), "CC2": np.full(n, 1e-6), "CE": np.full(n, 10e-6)}
    fb = rng.uniform(*space.FEEDBACK_CE, n)
    if topology == "hartley":
        v["L2"], v["K"] = v["L1"] * fb, np.zeros(n)
    else:
        v["C2"] = v["C1"] / fb
    if topology == "clapp":
        v["C3"] = rng.uniform(0.05, space.CLAPP_C3_FRACTION, n) * np.minimum(v["C1"], v["C2"])
    v["RE1"] = np.where(rng.random(n) < 0.5, 0.0, np.minimum(lu(10.0, 1e3), v["RE"]))
    vb = rng.uniform(p.vbe_v + 0.3, 0.7 * 12.0, n)
    v["R1"] = v["R2"] * (12.0 / vb - 1)
    return v, p


def _tank(topology, v, caps, stray):
    """The screen's tank frequency and feedback ratio (as space.tanks computes them)."""
    x1, x2 = stray + caps.cmu_f, stray + caps.cpi_f + caps.cmu_f
    if topology == "hartley":
        across = x1 * x2 / (x1 + x2)
        return 1 / (2 * np.pi * np.sqrt((v["L1"] + v["L2"]) * (v["C1"] + across))), v["L2"] / v["L1"]
    inv = 1 / (v["C1"] + x1) + 1 / (v["C2"] + x2) + (1 / (v["C3"] + stray) if topology == "clapp" else 0.0)
    return 1 / (2 * np.pi * np.sqrt(v["L1"] / inv)), v["C1"] / v["C2"]


@pytest.mark.parametrize("topology", ["colpitts-ce", "clapp", "hartley"])
def test_engine_margin_within_screen_factor_of_hand(topology):
    n = 3000
    v, p = _random_designs(n, 11, topology)
    full = lambda x: np.full(n, float(x))  # noqa: E731
    dcr = {r: 2.0 + 4e3 * v[r] for r in ("L1", "L2") if r in v}
    b = DesignBatch(topology=get_topology(topology), values=v, dcr_ohm=dcr,
                    hfe=full(p.hfe_nominal), vbe_v=full(p.vbe_v), ft_hz=full(p.ft_hz), cob_f=full(p.cob_f),
                    vaf_v=full(p.vaf_v), vcc_v=full(12.0), temp_c=full(25.0), stray_f=full(style_stray_f("breadboard")))
    ss = small_signal(b)
    beta = p.hfe_min
    vb = 12.0 * v["R2"] / (v["R1"] + v["R2"])
    rth = v["R1"] * v["R2"] / (v["R1"] + v["R2"])
    ie = (vb - p.vbe_v) / (v["RE"] + v["RE1"] + rth / (beta + 1))
    vce = 12.0 - ie * beta / (beta + 1) * v["RC"] - ie * (v["RE"] + v["RE1"])
    gm = ie / HAND_VT_V
    r_in = 1 / (1 / rth + 1 / (p.hfe_nominal / gm + (p.hfe_nominal + 1) * v["RE1"]))
    caps = space.DeviceCaps.estimate(p, 1.2e-3)
    stray = style_stray_f("breadboard")
    f_tank, fb = _tank(topology, v, caps, stray)
    hand = hand_return_ratio(gm, v["RC"], r_in, v["RE1"], v["L1"], dcr["L1"], 2 * np.pi * f_tank, fb)
    assert np.all(hand <= gm * (v["RC"] * fb - v["RE1"]) + 1e-9)  # the RC bound is looser
    result_like = (np.isfinite(ss.freq_loop_hz) & (np.abs(ss.freq_loop_hz / f_tank - 1) <= space.FREQ_SLACK)
                   & (ie >= 0.5e-3) & (ie <= 3e-3) & (rth / (beta + 1) <= 0.1 * (v["RE"] + v["RE1"]))
                   & (vce >= space.VCE_MIN_V) & ~ss.dc.saturated & (ss.margin >= 1.0))
    assert result_like.sum() > 300  # enough designs to say something
    # a design whose hand figure is <= 0 never starts
    assert not np.any(result_like & (hand <= 0))
    ratio = ss.margin[result_like] / hand[result_like]
    print(f"{topology}: {result_like.sum()} result-like designs, engine/hand max {ratio.max():.3f}, "
          f"median {np.median(ratio):.3f}")
    assert ratio.max() <= SCREEN_FACTOR, f"engine/hand up to {ratio.max():.3f}"
    # and the screen is not vacuous: the engine often comes out well below the hand figure
    assert np.median(ratio) < 1.0
