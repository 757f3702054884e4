"""The envelope model: its pieces against independent computations, and its verdicts' physics.

Sources: the modified Bessel function as the cycle average of exp(x cos t)
(Abramowitz & Stegun, Handbook of Mathematical Functions, 9.6.19), checked
by numerical quadrature; the series junction-resistor law solved point by
point with a root finder; the DC point from the engine's own (independent)
bias solver.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, optimize

from picker.circuit import dynamics as dy
from picker.circuit import engine
from picker.circuit.design import DesignBatch
from picker.circuit.envelope import classify
from tests.reference.designs import make_design


def _model(topology: str, values: dict):
    batch = DesignBatch.from_designs([make_design(topology, values, "ideal")])
    res = engine.evaluate_batch(batch)
    mdl = dy.build_model(batch, engine.model_of(batch), res.dc, res.hybrid, 2 * np.pi * res.freq_loop_hz)
    return batch, res, mdl


def _junctions(re1: float) -> dy.Junctions:
    one = np.ones(1)
    return dy.Junctions(log_is=np.log(1e-14) * one, vt=0.025852 * one, bf=150 * one, re1=re1 * one,
                        ie_q=1e-3 * one, gm_q=0.0385 * one)


@pytest.mark.parametrize("a_v", [0.005, 0.05, 0.3])
def test_junction_average_is_the_bessel_average(a_v):
    j = _junctions(0.0)
    vbe = 0.55
    ln_f, r = dy.junction_be(j, np.array([a_v]), np.array([vbe]))
    def cur(t):
        return 1e-14 * np.exp((vbe + a_v * np.cos(t)) / 0.025852)
    avg = integrate.quad(cur, 0, 2 * np.pi, limit=200)[0] / (2 * np.pi)
    fund = integrate.quad(lambda t: cur(t) * np.cos(t), 0, 2 * np.pi, limit=200)[0] / np.pi
    assert np.exp(ln_f[0]) == pytest.approx(avg, rel=1e-9)
    # r = fundamental transconductance / gm at 1 mA
    assert r[0] == pytest.approx(fund / a_v / (1e-3 / 0.025852), rel=1e-9)


def test_junction_with_series_resistance_matches_a_pointwise_solution():
    re1, vbe, a_v = 47.0, 0.75, 0.4
    j = _junctions(re1)
    ln_f, _ = dy.junction_be(j, np.array([a_v]), np.array([vbe]))
    theta = np.linspace(0, 2 * np.pi, engine.PHASES, endpoint=False)
    vt = 0.025852
    currents = [optimize.brentq(lambda i: vt * np.log(i / 1e-14) + i * re1 - (vbe + a_v * np.cos(t)), 1e-30, 1.0,
                                xtol=1e-18, rtol=1e-13) for t in theta]
    assert np.exp(ln_f[0]) == pytest.approx(np.mean(currents), rel=1e-6)


def test_rest_point_is_the_engines_dc_point():
    _, res, mdl = _model("colpitts-ce", {"RE1": 47})
    v = dy.rest(mdl)[0]
    net = mdl.net
    assert v[net.ib] == pytest.approx(res.dc.vb_v[0], rel=0.01)
    assert v[net.ij] == pytest.approx(res.dc.ve_v[0] - res.dc.ie_a[0] * 47, rel=0.01)
    assert v[net.ic] == pytest.approx(res.dc.vc_v[0], rel=0.01)


@pytest.mark.parametrize("topology,values", [("colpitts-ce", {}), ("hartley", {"RE1": 100})])
def test_running_drive_agrees_with_the_steady_state_solver(topology, values):
    _, res, mdl = _model(topology, values)
    y, starts, found, _ = dy.equilibrium(mdl)
    assert starts[0] and found[0]
    assert np.exp(y[0, 0]) == pytest.approx(res.vbe_drive_v[0], rel=0.05)


def test_degeneration_turns_bursting_into_settling():
    rows = [{}, {"RE1": 10}, {"RE1": 47}, {"RE1": 100}, {"RE1": 150}]  # 220 ohm no longer starts
    designs = [make_design("clapp", {"RE1": 1e-3, **v}, "ideal") for v in rows]
    batch = DesignBatch.from_designs(designs)
    dyn = dy.predict(batch, engine.evaluate_batch(batch))
    settles = dyn.settles()
    assert np.all(engine.evaluate_batch(batch).starts)
    assert not settles[0] and settles[3] and settles[4]
    # once settled, more degeneration keeps it settled
    assert np.all(np.diff(settles[1:].astype(int)) >= 0)


def test_no_start_has_no_verdict():
    batch = DesignBatch.from_designs([make_design("colpitts-ce", {"RC": 330, "RE1": 220}, "ideal")])
    res = engine.evaluate_batch(batch)
    assert not res.starts[0]
    dyn = dy.predict(batch, res, integrate_rows=(0,))
    assert np.isnan(dyn.amplitude_settles[0]) and np.isnan(dyn.settle_time_s[0])


def test_integration_of_a_bursting_design_collapses_and_recovers():
    batch = DesignBatch.from_designs([make_design("clapp", {}, "ideal")])
    dyn = dy.predict(batch, engine.evaluate_batch(batch), integrate_rows=(0,))
    assert dyn.amplitude_settles[0] == 0.0
    rel = dyn.envelope_rel[0]
    assert rel.max() > 1.0 and rel[len(rel) // 3:].min() < 0.2  # falls far below the running level
    assert 0.3e-3 < dyn.burst_period_s[0] < 5e-3


# -- the shared classification -----------------------------------------------------
def test_classify_settling_envelope_has_the_analytic_settle_time():
    t = np.linspace(0, 10e-3, 20001)
    env = 1 - np.exp(-t / 1e-3)  # reaches within 5 % of 1 at t = 1 ms * ln(20)
    c = classify(t, env, 0.0, 1e-5)
    assert not c.bursts
    assert c.settle_time_s == pytest.approx(1e-3 * np.log(20), rel=1e-3)


def test_classify_periodic_collapse_is_bursting_with_its_period():
    t = np.linspace(0, 20e-3, 40001)
    env = np.where((t % 2e-3) < 1.2e-3, 1.0, 0.01)
    c = classify(t, env, 0.0, 1e-5)
    assert c.bursts and c.settle_time_s is None
    assert c.burst_period_s == pytest.approx(2e-3, rel=1e-3)


def test_a_rows_verdict_does_not_depend_on_its_batch_mates():
    """predict on a batch gives each row what it gives that row alone.  The design (found
    by find on a small drawer, where this once failed) at its hFE and temperature corners:
    the nominal row converges its bias balance in fewer Newton steps than its batch mates,
    and further steps once moved it to another branch (bursting in the batch, settling alone)."""
    from picker.circuit.evaluate import corner_batch

    d = make_design("colpitts-ce", {"L1": 470e-6, "C1": 10e-9, "C2": 100e-9, "R1": 4.7e3, "R2": 4.7e3,
                                    "RE": 10e3, "RC": 4.7e3, "CC1": 10e-9, "CC2": 47e-9, "CE": 1e-6}, "breadboard")
    batch, _ = corner_batch([d], (d.temp_c, 0.0, 50.0))
    res = engine.evaluate_batch(batch)
    together = dy.predict(batch, res)
    for k in range(batch.n):
        one = dy.predict(batch.take(np.array([k])), engine.evaluate_batch(batch.take(np.array([k]))))
        assert np.array_equal(one.amplitude_settles[:1], together.amplitude_settles[k:k + 1], equal_nan=True), k
        assert one.drive_v[0] == pytest.approx(together.drive_v[k], rel=1e-9), k


def test_running_drive_of_a_saturating_design_agrees_with_the_steady_state_solver():
    """A design whose collector swing forward-biases the B-C junction at the running point
    (found by find on the bench's synthetic drawer; margin about 13).  The bias balance once
    stalled there (a B-C fixed point with several roots made its residual jump), and the
    envelope model's running drive came out 35 times the steady-state solver's."""
    from dataclasses import replace

    from picker.circuit.design import PartInfo
    from picker.circuit.device import NpnProfile

    npn = NpnProfile(name="npn-quiet", hfe_min=200.0, hfe_max=500.0, ft_hz=100e6, cob_f=3e-12,
                     vceo_v=30.0, pd_w=0.4)
    values = {"L1": 56e-6, "C1": 2.4e-9, "C2": 24e-9, "R1": 3830.0, "R2": 511.0, "RE": 665.0,
              "RC": 3740.0, "CC1": 2e-9, "CC2": 18e-9, "CE": 360e-9}
    d = replace(make_design("colpitts-ce", values, "breadboard"), npn=npn, parts={"L1": PartInfo(dcr_ohm=0.873)})
    batch = DesignBatch.from_designs([d])
    res = engine.evaluate_batch(batch)
    mdl = dy.build_model(batch, engine.model_of(batch), res.dc, res.hybrid, 2 * np.pi * res.freq_loop_hz)
    y, starts, found, lg = dy.equilibrium(mdl)
    assert starts[0] and found[0]
    assert lg[0] > np.log(dy.G_MIN)  # the B-C junction conducts at the running point
    assert np.exp(y[0, 0]) == pytest.approx(res.vbe_drive_v[0], rel=0.05)
