"""The local phase-zero search against the full scan, and the batched pencil solve against LAPACK."""

import numpy as np
import pytest

from picker.circuit import mna
from picker.circuit.design import DesignBatch
from picker.circuit.engine import evaluate_batch, small_signal
from tests.reference.designs import make_design

FREQ_RTOL = 1e-7  # converged searches agree far better; 1e-7 is what the search promises
MARGIN_RTOL = 1e-6
BASE = {"colpitts-ce": {"L1": 1e-3, "C1": 4.7e-9, "C2": 47e-9},
        "clapp": {"L1": 1e-3, "C1": 10e-9, "C2": 47e-9, "C3": 1e-9},
        "hartley": {"L1": 100e-6, "L2": 10e-6, "C1": 4.7e-9}}


def _batch(topology, n=60, seed=3):
    rng = np.random.default_rng(seed)
    designs = []
    for _ in range(n):
        vals = {k: v * float(rng.uniform(0.5, 2.0)) for k, v in BASE[topology].items()}
        designs.append(make_design(topology, vals, str(rng.choice(["ideal", "pcb", "breadboard"]))))
    return DesignBatch.from_designs(designs)


@pytest.mark.parametrize("topology", sorted(BASE))
def test_local_search_lands_on_the_full_scans_phase_zero(topology):
    """small_signal with a guess near the answer gives evaluate_batch's frequency and margin
    (the engine's own promise in small_signal's docstring)."""
    batch = _batch(topology)
    full = evaluate_batch(batch, large_signal=False)
    guess = 2 * np.pi * full.freq_loop_hz * np.random.default_rng(1).uniform(0.97, 1.03, batch.n)
    local = small_signal(batch, omega_guess=guess)
    ok = np.isfinite(full.freq_loop_hz)
    assert ok.sum() >= batch.n // 2
    np.testing.assert_allclose(local.freq_loop_hz[ok], full.freq_loop_hz[ok], rtol=FREQ_RTOL)
    np.testing.assert_allclose(local.margin[ok], full.margin[ok], rtol=MARGIN_RTOL)


@pytest.mark.parametrize("topology", sorted(BASE))
def test_near_guess_lands_on_the_same_phase_zero_inside_and_outside_its_window(topology):
    """With ``near``, the 3-point bracket within the factor and the fallback to the full local
    grid (guesses 5-20 % off, outside ``near`` = 1.03) both give evaluate_batch's answer."""
    batch = _batch(topology, seed=5)
    full = evaluate_batch(batch, large_signal=False)
    rng = np.random.default_rng(2)
    off = np.where(np.arange(batch.n) % 2 == 0, rng.uniform(0.99, 1.01, batch.n),
                   rng.choice([1 / 1.2, 1 / 1.05, 1.05, 1.2], batch.n))
    local = small_signal(batch, omega_guess=2 * np.pi * full.freq_loop_hz * off, near=1.03)
    ok = np.isfinite(full.freq_loop_hz)
    assert ok[::2].sum() >= batch.n // 4 and ok[1::2].sum() >= batch.n // 4  # both paths are exercised
    np.testing.assert_allclose(local.freq_loop_hz[ok], full.freq_loop_hz[ok], rtol=FREQ_RTOL)
    np.testing.assert_allclose(local.margin[ok], full.margin[ok], rtol=MARGIN_RTOL)


@pytest.mark.parametrize("width", [1.01, 1.15])
def test_window_drops_only_rows_whose_crossing_it_excludes(width):
    """With ``within``, rows whose crossing lies in the window keep, to the bit, the answer
    they get without it; the others are reported as not found (NaN, margin 0).  Windows
    per row, narrow (as find's nominal refine: target +-1 %) and wide, some holding the
    crossing and some beside it, below or above."""
    batch = _batch("colpitts-ce", seed=7)
    full = evaluate_batch(batch, large_signal=False).freq_loop_hz
    guess = 2 * np.pi * np.where(np.isfinite(full), full, 50e3) * 1.02
    free = small_signal(batch, omega_guess=guess)
    w = 2 * np.pi * free.freq_loop_hz
    beside = width**2 * 1.04  # a window this far above or below the crossing does not hold it
    shift = np.resize([1.0, beside, 1.0, 1 / beside, 1.0, 1.005], batch.n)
    centre = np.where(np.isfinite(w), w, guess) * shift
    lo, hi = centre / width, centre * width
    boxed = small_signal(batch, omega_guess=guess, within=(lo, hi))
    inside = np.isfinite(w) & (w >= lo) & (w <= hi)
    assert 10 <= inside.sum() <= batch.n - 10  # both kinds of row are present
    np.testing.assert_array_equal(boxed.freq_loop_hz[inside], free.freq_loop_hz[inside])
    np.testing.assert_array_equal(boxed.margin[inside], free.margin[inside])
    assert np.isnan(boxed.freq_loop_hz[~inside]).all() and (boxed.margin[~inside] == 0).all()


def test_pencil_solve_matches_lapack_and_marks_singular_systems():
    rng = np.random.default_rng(5)
    n, size, k = 40, 7, 6
    g = rng.normal(size=(n, size, size))
    c = rng.normal(size=(n, size, size)) * 1e-9
    omega = rng.uniform(1e5, 1e7, size=(n, k))
    g[3] = 0.0
    c[3] = 0.0  # a singular system
    rhs = np.zeros(size)
    rhs[1], rhs[2] = 1.0, -1.0
    got = mna.solve_pencil(g, c, omega, rhs)
    a = g[:, None] + 1j * omega[:, :, None, None] * c[:, None]
    ok = np.arange(n) != 3
    want = np.linalg.solve(a[ok], np.broadcast_to(rhs, (ok.sum(), k, size))[..., None])[..., 0]
    np.testing.assert_allclose(got[ok], want, rtol=1e-9, atol=1e-12 * np.abs(want).max())
    assert np.isnan(got[3]).all()


def test_a_narrow_loop_circle_between_grid_points_is_still_found():
    """A high-Q Clapp (2.7 mH with 11.3 ohm, C1 = C2 = 47 nF, C3 = 1.8 nF; a design a random
    drawer of the exactness tests turned up) has a loop circle about 1 % of its frequency
    wide.  Its designs with one value 1 % high, searched from the nominal design's crossing
    (the corners' and sensitivity rows' guess), put the guess on the circle's far side
    between two points of the local grid (3 % and 7 % steps); the search must still land
    on the full scan's crossing, with and without ``near``."""
    from picker.circuit.design import Design, PartInfo

    base = {"L1": 2.7e-3, "C1": 47e-9, "C2": 47e-9, "C3": 1.8e-9, "R1": 33e3, "R2": 33e3, "RE": 2.2e3,
            "RE1": 100.0, "RC": 2.2e3, "CC1": 47e-9, "CC2": 4.7e-9, "CE": 1e-6}
    parts = {"L1": PartInfo(dcr_ohm=11.3)}
    variants = [base] + [{**base, k: v * 1.01} for k, v in base.items() if k in ("L1", "C1", "C2", "C3", "RC")]
    batch = DesignBatch.from_designs([Design("clapp", v, style="breadboard", parts=parts) for v in variants])
    full = evaluate_batch(batch, large_signal=False)
    assert np.isfinite(full.freq_loop_hz).all() and (full.margin > 1).all()
    guess = np.full(batch.n, 2 * np.pi * full.freq_loop_hz[0])
    for near in (None, 1.03):
        local = small_signal(batch, omega_guess=guess, near=near)
        np.testing.assert_allclose(local.freq_loop_hz, full.freq_loop_hz, rtol=FREQ_RTOL)
        np.testing.assert_allclose(local.margin, full.margin, rtol=MARGIN_RTOL)


def test_a_loop_circle_hidden_inside_the_window_is_not_settled_as_outside():
    """A common-emitter Colpitts at 455 kHz from the benchmark's synthetic drawer (12 uH with
    0.304 ohm, 13 nF / 47 nF): with ``within`` (the target +-1 %), the window's grid points
    (6.8 % apart) all have Im T > 0 and the row would be settled as outside, though its
    crossing, 0.1 % above the guess, is inside.  The tank pole's check finds it, with the
    full scan's frequency and margin."""
    from picker.circuit import engine
    from picker.circuit.design import Design, PartInfo
    from picker.circuit.device import NpnProfile

    values = {"L1": 12e-6, "C1": 13e-9, "C2": 47e-9, "R1": 590e3, "R2": 511e3, "RE": 8.06e3, "RE1": 200.0,
              "RC": 6.49e3, "CC1": 1.1e-9, "CC2": 82e-12, "CE": 30e-9}
    npn = NpnProfile(name="npn-high-gain", hfe_min=350.0, hfe_max=850.0, ft_hz=150e6, cob_f=5e-12)
    batch = DesignBatch.from_designs([Design("colpitts-ce", values, npn=npn, style="breadboard",
                                             parts={"L1": PartInfo(dcr_ohm=0.304)})])
    full = evaluate_batch(batch, large_signal=False)
    assert np.isfinite(full.freq_loop_hz[0]) and full.margin[0] > 1
    guess = 2 * np.pi * full.freq_loop_hz / 1.001
    lo, hi = guess * 0.99, guess * 1.01
    # the case this test is for: the grid alone settles the row as outside
    model = engine.model_of(batch)
    dc = engine.solve_dc(*engine.dc_network(batch), batch.vcc_v, model, batch.temp_c)
    hy = engine.hybrid_at(dc, model, batch.temp_c)
    settled = engine._bracket_within(mna.assemble(batch, hy), hy.gm_s, guess, 1.3, 9, lo, hi)[5]
    assert settled[0]
    boxed = small_signal(batch, omega_guess=guess, within=(lo, hi))
    np.testing.assert_allclose(boxed.freq_loop_hz, full.freq_loop_hz, rtol=FREQ_RTOL)
    np.testing.assert_allclose(boxed.margin, full.margin, rtol=MARGIN_RTOL)
