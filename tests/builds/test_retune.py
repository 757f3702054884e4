"""The retune fit and its suggestions (picker.builds.retune).

- Recovery: synthetic boards made by perturbing every part of a design uniformly inside its
  tolerance band, hFE log-uniformly over its range (``picker.search.montecarlo.samples``), and
  adding a known stray drawn from the build style's prior; their running frequencies come from
  the full engine (one batch, steady state included) plus measurement noise.  The fitted stray
  must lie within its reported 95 % interval (1.96 sd) in at least 90 of 100 seeded trials, and
  the fit must be informative (narrower than the prior, closer than the prior's mean).
- Correction: a common-emitter Colpitts built with an 820 uH inductor in place of 1 mH runs about
  10 % high.  Its "measured" frequency is ngspice's transient of that board (reference: the ngspice
  simulator, Debian package); the best suggested change must be a parallel capacitor; the most
  likely board (the fit's part deviations and stray) with it, simulated in ngspice, must run within
  the build's target tolerance (1 %), and the real board with it within twice that (a single
  reading cannot tell the inductor from the capacitor it attributes part of the offset to).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from picker.builds import retune
from picker.circuit.design import Design, PartInfo, complete_values
from picker.circuit.device import NpnProfile
from picker.circuit.engine import evaluate_batch
from picker.circuit.evaluate import check_design
from picker.circuit.topology import get_topology
from picker.search import montecarlo

TRIALS = 100


def _rf_colpitts() -> Design:
    # ce-12M of tests/reference/designs.py with tight tank parts (C0G 1 %, inductor 2 %), perfboard
    vals, _ = complete_values(get_topology("colpitts-ce"), dict(
        L1=1e-6, C1=220e-12, C2=1e-9, CC1=1e-9, CC2=1e-9, CE=10e-9, RE1=22, RC=470, R1=22e3, R2=10e3, RE=1e3))
    tol = {"L1": 0.02, "C1": 0.01, "C2": 0.01}
    return Design(topology="colpitts-ce", values=vals, style="perfboard",
                  parts={r: PartInfo(tolerance=tol.get(r, 0.05)) for r in vals})


def _synthetic(design: Design, boards: int, trials: int, seed: int):
    """(true stray per trial, measured frequencies (trials, boards)) from one engine batch."""
    rng = np.random.default_rng(seed)
    s0, sd0 = retune.stray_prior(design)
    stray = np.maximum(s0 + sd0 * rng.standard_normal(trials), 0.1e-12)
    b = montecarlo.samples(design, trials * boards, (design.temp_c,), seed=seed)
    b = b.with_(stray_f=np.repeat(stray, boards), temp_c=np.full(b.n, design.temp_c))
    f = evaluate_batch(b).freq_hz.reshape(trials, boards)
    f = f * (1 + retune.MEAS_REL_SIGMA * rng.standard_normal(f.shape))
    assert np.all(np.isfinite(f))
    return stray, f


def test_fit_recovers_a_known_stray_in_90_of_100_trials():
    d = _rf_colpitts()
    model = retune.FreqModel(d)
    stray, f = _synthetic(d, 1, TRIALS, seed=11)
    fits = [retune.fit(d, f[k], model=model) for k in range(TRIALS)]
    est = np.array([ft.stray_f for ft in fits])
    ci = np.array([ft.stray_ci95_f for ft in fits])
    hits = int(np.sum(np.abs(est - stray) <= ci))
    print(f"stray inside its 95 % interval in {hits}/{TRIALS} trials; median sd "
          f"{np.median(ci / 1.96) * 1e12:.2f} pF (prior {fits[0].stray_prior_sd_f * 1e12:.2f} pF); "
          f"rms error {np.sqrt(np.mean((est - stray) ** 2)) * 1e12:.2f} pF")
    assert hits >= 90
    prior_sd = fits[0].stray_prior_sd_f
    assert np.median(ci / 1.96) < 0.85 * prior_sd  # the measurement narrowed it
    # and the estimate is closer to the truth than the style's figure is
    assert np.sqrt(np.mean((est - stray) ** 2)) < np.sqrt(np.mean((fits[0].stray_prior_f - stray) ** 2))
    # each fit reproduces its measurement (one datum, several unknowns: an exact fit is possible)
    assert all(abs(ft.fitted_hz[0] / ft.measured_hz[0] - 1) < 5 * retune.MEAS_REL_SIGMA for ft in fits)


def test_several_boards_share_the_stray_and_narrow_it():
    d = _rf_colpitts()
    model = retune.FreqModel(d)
    stray, f = _synthetic(d, 4, 20, seed=5)
    one = [retune.fit(d, f[k, :1], model=model) for k in range(20)]
    four = [retune.fit(d, f[k], model=model) for k in range(20)]
    assert np.median([ft.stray_sd_f for ft in four]) < 0.8 * np.median([ft.stray_sd_f for ft in one])
    hits = sum(abs(ft.stray_f - s) <= ft.stray_ci95_f for ft, s in zip(four, stray))
    assert hits >= 16  # 95 % intervals: about 19 of 20 expected
    # the measured board-to-board spread is of the size the tolerances predict (ratio of sds)
    ratio = np.median([ft.spread / ft.spread_expected for ft in four])
    assert 0.5 < ratio < 1.5, ratio
    assert all(ft.n_boards == 4 and ft.deviation.shape == (4, 3) for ft in four)


def test_an_offset_inside_the_tolerances_warrants_no_change():
    d = _rf_colpitts()
    model = retune.FreqModel(d)
    ft = retune.fit(d, [model.f_run0 * 1.002], model=model)
    assert ft.explained
    empty = retune.Stock(*(np.array([], dtype=object if k in ("kind", "bin") else float) for k in range(7)))
    sug = retune.suggest(d, ft, empty, model.f_run0, 0.01, min_margin=1.5, board=1, temps_c=(25.0,), model=model)
    assert not sug.warranted and sug.changes == () and "no change warranted" in sug.reason
    far = retune.fit(d, [model.f_run0 * 1.10], model=model)
    assert not far.explained


# ---- the 10 % high Colpitts, re-checked in ngspice ----------------------------------------

TARGET_TOL = 0.01
MIN_MARGIN = 1.5
#: Film capacitors on hand (5 %), the small drawer of tests/cli/test_build_cli.py
STOCK_C = (1e-9, 4.7e-9, 10e-9, 47e-9, 100e-9, 1e-6)


def _audio_colpitts(l1_h: float = 1e-3) -> Design:
    vals = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "C1": 4.7e-9, "L1": l1_h,
            "C2": 47e-9, "CC1": 100e-9, "CC2": 100e-9, "CE": 1e-6}
    info = {r: PartInfo(part_id=k + 1, tolerance=0.05, dcr_ohm=5.0 if r == "L1" else None)
            for k, r in enumerate(vals)}
    return Design("colpitts-ce", vals, npn=NpnProfile(name="npn-generic", hfe_min=100, hfe_max=300),
                  style="breadboard", parts=info)


def _ngspice_freq(design: Design, f_guess: float) -> float:
    from picker.circuit.spice import deck
    from picker.sim.ngspice import measure_oscillation, run_deck

    data = run_deck(deck(design, tstop_s=800 / f_guess))
    m = measure_oscillation(data["time"], data["v(" + design.topo.tank_node.lower() + ")"], f_guess_hz=f_guess)
    assert m.started and not m.bursts
    return float(m.freq_hz)


@pytest.mark.ngspice
def test_ten_percent_high_colpitts_gets_a_parallel_capacitor_that_ngspice_confirms(ngspice_bin, capsys):
    design = _audio_colpitts()
    target = check_design(design, (0.0, 50.0), integrate=False).freq_hz  # the build's prediction and target
    board = _audio_colpitts(l1_h=820e-6)  # built with the wrong inductor
    measured = _ngspice_freq(board, target * 1.1)
    assert measured / target - 1 == pytest.approx(0.10, abs=0.015)  # "10 % high"
    model = retune.FreqModel(design)
    ft = retune.fit(design, [measured], model=model)
    assert not ft.explained  # beyond what 5 % parts explain
    n = len(STOCK_C)
    stock = retune.Stock(kind=np.array(["capacitor"] * n, dtype=object), value=np.array(STOCK_C),
                         tol=np.full(n, 0.05), part_id=np.arange(100, 100 + n, dtype=float),
                         bin=np.array([f"C-{k}" for k in range(n)], dtype=object), qty=np.full(n, 20.0),
                         dcr_ohm=np.zeros(n))
    sug = retune.suggest(design, ft, stock, target, TARGET_TOL, min_margin=MIN_MARGIN, board=1,
                         temps_c=(0.0, 50.0), model=model)
    assert sug.warranted and sug.changes
    best = sug.changes[0]
    assert best.action == "parallel" and best.meets_margin and best.margin_worst >= MIN_MARGIN
    assert abs(best.freq_error) <= TARGET_TOL
    # (a) the most likely board (the fit's deviations and stray) with the change: ngspice must put it
    #     inside the target tolerance, and near the prediction
    likely = design.with_values(**{r: design.values[r] * (1 + ft.deviation[0, k]) for k, r in enumerate(ft.refs)})
    likely = replace(likely, stray_f=ft.stray_f)
    fixed = likely.with_values(**{best.ref: likely.values[best.ref] + best.new_value})
    sim = _ngspice_freq(fixed, best.freq_hz)
    # (b) the real board (the wrong inductor) with the same change: one reading cannot tell L1 from C1,
    #     so it lands off the prediction by the attribution error; bounded here at twice the tolerance
    real = _ngspice_freq(board.with_values(**{best.ref: board.values[best.ref] + best.new_value}), best.freq_hz)
    with capsys.disabled():
        print(f"\n10 % high Colpitts: target {target:.1f} Hz, measured (ngspice) {measured:.1f} Hz; "
              f"{best.describe()}: predicted {best.freq_hz:.1f} ± {best.freq_sd_hz:.1f} Hz; ngspice on the "
              f"fitted board {sim:.1f} Hz ({sim / target - 1:+.2%} from the target), on the wrong-inductor board "
              f"{real:.1f} Hz ({real / target - 1:+.2%})")
    assert abs(sim / target - 1) <= TARGET_TOL
    assert abs(sim / best.freq_hz - 1) <= 0.02  # the engine's accuracy against ngspice (tests/reference)
    assert abs(real / target - 1) <= 2 * TARGET_TOL
