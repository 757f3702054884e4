"""The simulator pipeline (deck -> ngspice -> wrdata/raw -> measurement) against handbook formulas.

These checks do not use picker's circuit engine: hand-written decks of
circuits with closed-form answers prove that running ngspice and measuring
its waveforms is right, before the engine is compared with ngspice.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from picker.circuit import spice
from picker.circuit.design import Design, complete_values
from picker.circuit.topology import get_topology, topology_names
from picker.sim.ngspice import (
    loop_gain,
    measure_oscillation,
    middlebrook_gain,
    phase_zero,
    run_deck,
    run_op,
)

#: Tolerances, relative (named in engineering terms, checked as residuals).
RING_FREQ_TOL = 0.002
DECAY_RATE_TOL = 0.02
SINE_TOL = 0.001
BURST_PERIOD_TOL = 0.05
OP_TOL = 1e-6
FLOAT_TIE_FREQ_TOL = 1e-4
INJECTION_TOL = 1e-6
BREAK_FREQ_TOL = 0.005

CONTROL = """.control
set wr_singlescale
set wr_vecnames
set numdgt=15
run
wrdata picker_out.txt {vecs}
quit
.endc
.end
"""


def rlc_deck(r_ohm, l_h, c_f, periods):
    period = 2 * np.pi * np.sqrt(l_h * c_f)
    step = period / 200
    return (
        "kicked parallel RLC\n"
        f"R1 t 0 {r_ohm}\nL1 t 0 {l_h}\nC1 t 0 {c_f}\n"
        f"IK 0 t PULSE(0 1m {period / 10} {period / 1000} {period / 1000} {period / 10} 1)\n"
        f".tran {step} {periods * period} 0 {step}\n" + CONTROL.format(vecs="v(t)")
    )


@pytest.mark.ngspice
def test_parallel_rlc_rings_at_lc_resonance_and_decays_at_1_over_2rc(ngspice_bin):
    # Handbook formulas for the source-free parallel RLC: resonance
    # f0 = 1/(2 pi sqrt(LC)); envelope exp(-t/(2RC)).  Q = R/(w0 L) = 100, so the
    # damped frequency sits 1/(8 Q^2) = 1.25e-5 below f0, far inside the tolerance.
    r, l, c = 10e3, 100e-6, 10e-9
    f0 = 1 / (2 * np.pi * np.sqrt(l * c))
    alpha = 1 / (2 * r * c)
    data = run_deck(rlc_deck(r, l, c, periods=100))
    m = measure_oscillation(data["time"], data["v(t)"])
    assert m.freq_hz == pytest.approx(f0, rel=RING_FREQ_TOL)
    decay_early = -np.log(m.growth_per_cycle) * m.freq_hz
    assert decay_early == pytest.approx(alpha, rel=DECAY_RATE_TOL)
    # the same rate over the whole ring (after the kick, before the last period)
    sel = (m.envelope_t_s > 3 / f0) & (m.envelope_t_s < data["time"][-1] - 2 / f0)
    slope = np.polyfit(m.envelope_t_s[sel], np.log(m.envelope_vpp[sel]), 1)[0]
    assert -slope == pytest.approx(alpha, rel=DECAY_RATE_TOL)
    assert not m.started and not m.bursts


@pytest.mark.ngspice
def test_sine_source_frequency_and_amplitude_are_recovered(ngspice_bin):
    # A SIN source is its own reference: offset 0.5 V, amplitude 1.5 V, 123.456 kHz.
    f, amp = 123.456e3, 1.5
    period = 1 / f
    deck = (
        "sine through wrdata\n"
        f"VS a 0 SIN(0.5 {amp} {f})\nRL a 0 1k\n"
        f".tran {period / 200} {50 * period} 0 {period / 200}\n" + CONTROL.format(vecs="v(a)")
    )
    data = run_deck(deck)
    m = measure_oscillation(data["time"], data["v(a)"])
    assert m.freq_hz == pytest.approx(f, rel=SINE_TOL)
    assert m.amplitude_vpp == pytest.approx(2 * amp, rel=SINE_TOL)
    assert m.settle_time_s is not None and not m.bursts


def synthetic(envelope, seed=7, f_hz=20e3, t_stop_s=50e-3, pump=0.0):
    """Carrier of ``f_hz`` under ``envelope(t)``, non-uniform steps (fixed seed).

    The mean is pumped by the envelope, as an emitter capacitor pumps in a bursting circuit.
    """
    rng = np.random.default_rng(seed)
    dt = rng.uniform(0.5, 1.5, size=int(t_stop_s * f_hz * 60)) / (60 * f_hz)
    t = np.concatenate(([0.0], np.cumsum(dt)))
    t = t[t <= t_stop_s]
    a = envelope(t)
    return t, 2.0 + pump * a + a * np.sin(2 * np.pi * f_hz * t)


def test_synthetic_bursting_envelope_is_detected_with_its_period():
    # invented test signal: every 10 ms the envelope builds up (0.3 ms), holds to 6 ms,
    # collapses (0.3 ms) and stays near zero until the next burst
    burst_s, tau_s, hold_s = 10e-3, 0.3e-3, 6e-3

    def env(t):
        ph = np.mod(t, burst_s)
        up = 1 - np.exp(-ph / tau_s)
        down = np.exp(-np.clip(ph - hold_s, 0, None) / tau_s)
        return 1e-4 + np.where(ph < hold_s, up, (1 - np.exp(-hold_s / tau_s)) * down)

    t, v = synthetic(env, pump=0.5)
    m = measure_oscillation(t, v)
    assert m.bursts and m.burst_count >= 3
    assert m.burst_period_s == pytest.approx(burst_s, rel=BURST_PERIOD_TOL)
    assert m.settle_time_s is None
    assert m.freq_hz == pytest.approx(20e3, rel=SINE_TOL)


def test_synthetic_steady_envelope_is_not_bursting():
    tau_s = 1e-3
    t, v = synthetic(lambda t: 1e-3 + (1 - np.exp(-t / tau_s)), pump=0.5)
    m = measure_oscillation(t, v)
    assert m.started and not m.bursts and m.burst_period_s is None
    # 1 - exp(-t/tau) is within 5 % of 1 from tau ln 20 on
    assert m.settle_time_s == pytest.approx(tau_s * np.log(20), rel=0.05)
    assert m.amplitude_vpp == pytest.approx(2.0, rel=SINE_TOL)
    assert m.freq_hz == pytest.approx(20e3, rel=SINE_TOL)


def test_flat_and_dying_records_are_not_started():
    t = np.linspace(0.0, 1e-3, 5000)
    flat = measure_oscillation(t, np.full_like(t, 2.0))
    assert not flat.started and not flat.bursts and np.isnan(flat.freq_hz)
    dying = measure_oscillation(t, np.exp(-t / 2e-5) * np.sin(2 * np.pi * 100e3 * t))
    assert not dying.started and not dying.bursts
    assert dying.growth_per_cycle == pytest.approx(np.exp(-1e-5 / 2e-5), rel=DECAY_RATE_TOL)


@pytest.mark.ngspice
def test_op_of_a_resistor_divider_matches_the_divider_formula(ngspice_bin):
    # Ohm's law / voltage divider (handbook formula), with a loaded tap
    vcc, r1, r2, r3, r4 = 12.0, 33e3, 10e3, 7.77777, 1234.56789
    deck = (
        "divider\n"
        f"VCC vcc 0 DC {vcc}\nR1 vcc b {r1}\nR2 b 0 {r2}\nR3 b c {r3}\nR4 c 0 {r4}\n"
        ".control\nset filetype=ascii\nop\nwrite picker_out.txt v(b) v(c) i(VCC)\nquit\n.endc\n.end\n"
    )
    op = run_op(deck)
    rp = 1 / (1 / r2 + 1 / (r3 + r4))
    vb = vcc * rp / (r1 + rp)
    assert op["v(b)"] == pytest.approx(vb, rel=OP_TOL)
    assert op["v(c)"] == pytest.approx(vb * r4 / (r3 + r4), rel=OP_TOL)
    assert -op["i(vcc)"] == pytest.approx((vcc - vb) / r1, rel=OP_TOL)


def default_design(name, **values):
    topo = get_topology(name)
    return Design(topology=name, values=complete_values(topo, values)[0])


@pytest.mark.ngspice
@pytest.mark.parametrize("name", topology_names())
def test_topology_deck_runs_and_gives_finite_data(ngspice_bin, name):
    d = default_design(name)
    periods = 50
    tstop = periods / spice.ideal_freq_hz(d)
    data = run_deck(spice.deck(d, tstop_s=tstop))
    tank = f"v({d.topo.tank_node.lower()})"
    assert {"time", tank, "v(b)", "v(e)", "v(c)"} <= set(data)
    assert all(np.all(np.isfinite(col)) for col in data.values())
    assert data["time"][-1] == pytest.approx(tstop, rel=1e-6)
    # the step limit holds: at least 200 points per ideal period
    assert np.max(np.diff(data["time"])) <= tstop / periods / 200 * (1 + 1e-9)
    # the kick reached the tank: it swings far more in the two periods after the kick than
    # before it (before, the tank creeps only by the DC point's convergence residual)
    t, period = data["time"], tstop / periods
    kick = spice.KICK_DELAY_PERIODS * period
    before = data[tank][t < kick]
    after = data[tank][(t > kick) & (t < kick + 2 * period)]
    assert np.ptp(after) > 10 * np.ptp(before)


@pytest.mark.ngspice
@pytest.mark.parametrize("name", topology_names())
def test_topology_op_deck_gives_a_forward_biased_transistor(ngspice_bin, name):
    d = default_design(name)
    op = run_op(spice.deck(d, analysis="op"))
    assert {"v(b)", "v(e)", "v(c)", "i(vcc)"} <= set(op)
    # a conducting silicon junction sits at 0.5-0.8 V (common practice, no source)
    assert 0.5 < op["v(b)"] - op["v(e)"] < 0.8
    assert op["i(vcc)"] < 0  # the supply delivers current


@pytest.mark.ngspice
def test_float_tie_leaves_the_frequency_alone(ngspice_bin):
    # the tie of the DC-floating tank nodes against ngspice's global shunt option
    d = default_design("colpitts-ce", RE1=100.0)
    tstop = 200 / spice.ideal_freq_hz(d)
    tied = spice.deck(d, tstop_s=tstop)
    assert "RFLOAT_T" in tied
    shunted = re.sub(r"^RFLOAT_.*\n", "", tied, flags=re.M).replace(".temp", ".options rshunt=1e12\n.temp")
    f = []
    for text in (tied, shunted):
        data = run_deck(text)
        m = measure_oscillation(data["time"], data["v(t)"])
        assert m.started and m.settle_time_s is not None
        f.append(m.freq_hz)
    assert abs(f[0] / f[1] - 1) < FLOAT_TIE_FREQ_TOL


@pytest.mark.ngspice
def test_middlebrook_injection_recovers_the_return_ratio_of_a_controlled_source(ngspice_bin):
    # Return ratio of a VCCS (Bode's definition, handbook): T = gm * Z, Z the impedance the
    # source drives with the loop closed: RS || RIN || 1/(jwC).  Two injections at the
    # junction of RS (return side) and RIN (driven side) must give exactly that.
    gm, rs, rin, c = 2e-3, 1e3, 3e3, 1e-9
    loop = f"G1 0 n {{pin}} 0 {gm}\nRS n 0 {rs}\nCN n 0 {c}\nRIN {{pin}} 0 {rin}\n"
    sweep = ".ac dec 20 1k 10meg\n"
    gv = run_deck("voltage injection\n" + loop.format(pin="p") + "VZ p n DC 0 AC 1\n" + sweep
                  + CONTROL.format(vecs="v(n) v(p)"))
    gi = run_deck("current injection\n" + loop.format(pin="p") + "VM n p DC 0\nIZ 0 n DC 0 AC 1\n"
                  + sweep + CONTROL.format(vecs="i(vm)"))
    f = gv["frequency"].real
    expected = gm / (1 / rs + 1 / rin + 2j * np.pi * f * c)
    got = middlebrook_gain(gv["v(n)"] / gv["v(p)"], gi["i(vm)"])
    np.testing.assert_allclose(got, expected, rtol=INJECTION_TOL)


BREAK_CASES = [
    ("colpitts-ce", {"RE1": 100.0}, "breadboard", 0.01),
    ("clapp", {}, "ideal", 0.01),
    ("hartley", {"RE1": 100.0, "K": 0.5}, "pcb", 0.01),
    # the copy's collector sits at AC ground, not on the tank: a few % off
    ("colpitts-cb", {}, "ideal", 0.05),
]


@pytest.mark.ngspice
@pytest.mark.parametrize("name,values,style,gain_tol", BREAK_CASES)
def test_open_loop_break_agrees_with_middlebrook_injection(ngspice_bin, name, values, style, gain_tol):
    d = Design(topology=name, values=complete_values(get_topology(name), values)[0], style=style)
    f0 = spice.ideal_freq_hz(d)
    sweep = (f0 / 1.3, f0 * 1.3, 1000)
    (fb, gb), = phase_zero(*loop_gain(d, *sweep, method="break"))
    (fi, gi), = phase_zero(*loop_gain(d, *sweep, method="injection"))
    assert fb == pytest.approx(fi, rel=BREAK_FREQ_TOL)
    assert gb == pytest.approx(gi, rel=gain_tol)


@pytest.mark.ngspice
@pytest.mark.parametrize("re1_ohm,starts", [(100.0, True), (1000.0, False)])
def test_loop_gain_above_one_exactly_when_the_transient_starts(ngspice_bin, re1_ohm, starts):
    d = default_design("colpitts-ce", RE1=re1_ohm)
    f0 = spice.ideal_freq_hz(d)
    (_, g), = phase_zero(*loop_gain(d, f0 / 1.3, f0 * 1.3, 500))
    data = run_deck(spice.deck(d, tstop_s=100 / f0))
    m = measure_oscillation(data["time"], data["v(t)"])
    assert (g > 1) is starts
    assert m.started is starts
    assert (m.growth_per_cycle > 1) is starts
