"""Engine unit tests: hand-method check values, textbook formulas, batching exactness.

Check values marked "common practice, no source" are facts of the trade used
as worked examples; formulas computed independently in the test name the
textbook relation they use.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from picker.circuit import mna
from picker.circuit.bias import hand_dc, solve_dc
from picker.circuit.design import Design, DesignBatch, complete_values
from picker.circuit.device import NpnProfile, model_from_profile, thermal_voltage
from picker.circuit.engine import evaluate_batch, hybrid_at
from picker.circuit.evaluate import check_design
from picker.circuit.topology import get_topology, topology_names

REL = 0.02  # 2 % on hand-method check values given to two or three digits


def design(name: str, **values) -> Design:
    topo = get_topology(name)
    vals, defaulted = complete_values(topo, values)
    return Design(topology=name, values=vals, defaulted=defaulted)


# -- hand method check values (common practice, no source) ---------------------------------

def test_hand_divider_and_emitter_current():
    """12 V with 8.2k/1.5k gives about 1.86 V at the base and 0.96 mA in 1.2k (VBE 0.7 V)."""
    h = hand_dc(8.2e3, 1.5e3, 1.2e3, 1e3, 12.0, 0.7)
    assert h.vb_v == pytest.approx(1.86, rel=REL)
    assert h.ie_a == pytest.approx(0.96e-3, rel=REL)


def test_hand_re_at_one_milliamp():
    """r'e = VT/IE is about 26 ohm at 1 mA (common practice, no source)."""
    h = hand_dc(1.0, 1.0, 1.0, 1.0, 2 * (1e-3 + 0.7), 0.7)  # VB = 1.7 V -> VE = 1 V -> IE = 1 mA
    assert h.ie_a == pytest.approx(1e-3)
    assert h.re_small_ohm == pytest.approx(26.0, rel=REL)


def test_hand_resonance_and_loop_gain():
    """1 mH with 4.7 nF and 47 nF in series resonates near 77 kHz; RC 1k, r'e 27 ohm, feedback 0.1 -> 3.7."""
    topo = get_topology("colpitts-ce")
    v = {"L1": np.array([1e-3]), "C1": np.array([4.7e-9]), "C2": np.array([47e-9])}
    hf = topo.hand(v, np.array([27.0]), np.array([1e3]))
    assert hf.freq_ideal_hz[0] == pytest.approx(77e3, rel=REL)
    assert hf.feedback[0] == pytest.approx(0.1)
    assert hf.loop_gain[0] == pytest.approx(3.7, rel=REL)


def test_ideal_resonance_matches_textbook_formula_for_every_topology():
    """f = 1/(2 pi sqrt(L C)) with the tank's series C (or series L with mutual M), computed here."""
    cases = {
        "colpitts-ce": (1e-3, 1 / (1 / 4.7e-9 + 1 / 47e-9)),
        "clapp": (1e-3, 1 / (1 / 4.7e-9 + 1 / 47e-9 + 1 / 1e-9)),
        "hartley": (470e-6 + 47e-6 + 2 * 0.5 * math.sqrt(470e-6 * 47e-6), 10e-9),
        "colpitts-cb": (100e-6, 1 / (1 / 1e-9 + 1 / 4.7e-9)),
    }
    for name, (l_h, c_f) in cases.items():
        d = design(name, K=0.5) if name == "hartley" else design(name)
        r = evaluate_batch(DesignBatch.from_designs([d]), large_signal=False)
        assert r.freq_ideal_hz[0] == pytest.approx(1 / (2 * math.pi * math.sqrt(l_h * c_f)), rel=1e-12)


# -- refined DC point -----------------------------------------------------------------------

def test_refined_dc_satisfies_finite_hfe_thevenin_formula():
    """IE = (VTh - VBE)/(RE + RTh/(hFE+1)) (Sedra & Smith, Thevenin bias) with the solved VBE.

    With a huge Early voltage hFE is constant and the relation is exact.
    """
    m = model_from_profile(hfe=120.0, vbe_v=0.65, ft_hz=300e6, cob_f=4e-12, vaf_v=1e12)
    r1, r2, re = 47e3, 10e3, 1e3
    dc = solve_dc(r1, r2, re, 2.2e3, 12.0, m, 25.0)
    vth, rth = 12 * r2 / (r1 + r2), r1 * r2 / (r1 + r2)
    ie = (vth - dc.vbe_v) / (re + rth / (120 + 1))
    assert dc.ie_a == pytest.approx(ie, rel=1e-6)
    assert dc.vce_v == pytest.approx(12 - dc.ic_a * 2.2e3 - dc.ie_a * re, rel=1e-9)


def test_vbe_temperature_coefficient_is_about_minus_two_millivolt_per_kelvin():
    """VBE falls about 2 mV/K at constant current (common practice, no source)."""
    m = model_from_profile(hfe=150.0, vbe_v=0.65, ft_hz=300e6, cob_f=4e-12, vaf_v=100.0)
    dc = solve_dc(np.full(2, 100e3), 10e3, 1e3, 1e3, 12.0, m, np.array([0.0, 50.0]))
    tc = (dc.vbe_v[1] - dc.vbe_v[0]) / 50.0
    assert -2.6e-3 < tc < -1.6e-3


def test_profile_vbe_is_met_at_reference_current():
    m = model_from_profile(hfe=200.0, vbe_v=0.66, ft_hz=300e6, cob_f=4e-12, vaf_v=100.0)
    vt = thermal_voltage(25.0)
    assert vt * math.log(1e-3 / m.is_a) == pytest.approx(0.66, rel=1e-12)


# -- small-signal machinery ------------------------------------------------------------------

def test_mna_natural_frequency_of_an_lc_tank():
    """A passive LC tank (transistor with gm = 0, tiny capacitances) rings at 1/(2 pi sqrt(LC))."""
    d = design("colpitts-cb", R1=1e12, R2=1e12, RE=1e12, CB=1e-6, C1=1e-9, C2=1e-9, L1=100e-6)
    b = DesignBatch.from_designs([d])
    zero = np.zeros(1)
    hy = mna.Hybrid(gm_s=zero, gpi_s=np.full(1, 1e-15), go_s=np.full(1, 1e-15),
                    cpi_f=np.full(1, 1e-18), cmu_f=np.full(1, 1e-18))
    s = mna.natural_frequencies(mna.assemble(b, hy), zero)
    f = np.abs(s.imag).max() / (2 * math.pi)
    assert f == pytest.approx(1 / (2 * math.pi * math.sqrt(100e-6 * 0.5e-9)), rel=1e-6)


def test_batch_equals_one_by_one():
    """Evaluating designs stacked in one batch gives the same numbers as one at a time."""
    designs = [design("colpitts-ce", RC=rc, C2=c2, RE1=re1)
               for rc, c2, re1 in [(1.5e3, 33e-9, 47.0), (2.2e3, 47e-9, 100.0), (3.3e3, 22e-9, 68.0)]]
    together = evaluate_batch(DesignBatch.from_designs(designs))
    for k, d in enumerate(designs):
        alone = evaluate_batch(DesignBatch.from_designs([d]))
        for field in ("freq_hz", "margin", "amplitude_vpp", "freq_small_signal_hz"):
            assert getattr(together, field)[k] == pytest.approx(getattr(alone, field)[0], rel=1e-9)


def test_margin_rises_with_collector_load_and_falls_with_degeneration():
    rows = [design("colpitts-ce", RC=rc, RE1=100.0) for rc in (1.5e3, 2.2e3, 3.3e3)]
    m = evaluate_batch(DesignBatch.from_designs(rows), large_signal=False).margin
    assert m[0] < m[1] < m[2]
    rows = [design("colpitts-ce", RE1=r) for r in (22.0, 100.0, 220.0)]
    m = evaluate_batch(DesignBatch.from_designs(rows), large_signal=False).margin
    assert m[0] > m[1] > m[2]


def test_return_ratio_is_one_where_amplitude_settles():
    """At the steady state the effective transconductance makes the loop gain exactly 1."""
    d = design("colpitts-ce", RE1=100.0)
    r = evaluate_batch(DesignBatch.from_designs([d]))
    assert r.margin[0] > 1.5
    assert r.amplitude_vpp[0] > 0.1
    assert abs(r.freq_hz[0] / r.freq_loop_hz[0] - 1) < 0.02


def test_no_start_has_no_amplitude():
    d = design("colpitts-ce", RC=330.0, RE1=220.0)
    r = evaluate_batch(DesignBatch.from_designs([d]))
    assert r.margin[0] < 1 and not r.starts[0]
    assert r.amplitude_vpp[0] == 0.0


def test_every_topology_evaluates_and_checks():
    for name in topology_names():
        ev = check_design(design(name), temps=(0.0, 50.0))
        assert ev.starts
        assert len(ev.corners) == 9
        assert ev.margin_worst <= ev.margin
        assert all(np.isfinite([ev.freq_hz, ev.margin, ev.amplitude_vpp]))


def test_warnings_fire_on_bad_designs():
    from picker.circuit.design import PartInfo

    d = design("colpitts-ce", R1=470.0, R2=470.0, RE=1e3)  # heavy divider: 77 mW in R1
    d = Design(topology=d.topology, values=d.values, vcc_v=12.0,
               parts={"R1": PartInfo(power_w=0.125), "C1": PartInfo(dielectric="X7R", voltage_v=50.0)},
               npn=NpnProfile(pd_w=0.1))
    codes = {w.code for w in check_design(d).warnings}
    assert {"res-power", "tank-dielectric"} <= codes
    hi = design("colpitts-cb", L1=1e-6, C1=100e-12, C2=470e-12)
    assert "radiated-rf" in {w.code for w in check_design(hi).warnings}
