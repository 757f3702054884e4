"""The decomposed search's building blocks against straightforward references written here.

The references loop over every combination in Python (the way one would by
hand); the search must return exactly the same sets.
"""

import itertools

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from picker.search import space
from picker.search.stock import Lines, best_lines, with_pairs

CAPS = space.DeviceCaps(cpi_f=20e-12, cmu_f=4e-12)
STRAY_F = 5e-12


def lines(kind, values, qty=None, cost=None, dielectric="c0g"):
    n = len(values)
    df = pd.DataFrame({"id": np.arange(1, n + 1), {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}[kind]: values,
                       "tolerance": [0.05] * n, "qty": qty or [10] * n, "unit_cost": cost or [0.1] * n,
                       "bin": [f"B{i}" for i in range(n)], "dielectric": [dielectric] * n})
    return Lines.from_frame(kind, df)


values = st.lists(st.sampled_from([1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]), min_size=1, max_size=6)
decades = st.lists(st.integers(-3, 2), min_size=1, max_size=4)


def _vals(mant, dec, unit):
    return sorted({round(m * 10.0**d, 12) * unit for m in mant for d in dec})


@settings(max_examples=40, deadline=None)
@given(values, decades, values, decades, st.floats(50e3, 5e6))
def test_colpitts_tanks_equal_brute_force(lm, ld, cm, cd, freq):
    lo = best_lines(lines("inductor", _vals(lm, ld, 1e-6)), 1)
    co = best_lines(lines("capacitor", _vals(cm, cd, 1e-10)), 1)
    offers = {"L1": lo, "C1": co, "C2": co}
    f_lo, f_hi = freq * 0.95, freq * 1.05
    got = space.tanks("colpitts-ce", offers, f_lo, f_hi, STRAY_F, CAPS)
    got_set = {(lo.value[a], co.value[b], co.value[c]) for a, b, c in
               zip(got.index["L1"], got.index["C1"], got.index["C2"])}
    want = set()
    for l, c1, c2 in itertools.product(lo.value, co.value, co.value):
        a, b = c1 + STRAY_F + CAPS.cmu_f, c2 + STRAY_F + CAPS.cpi_f + CAPS.cmu_f
        f = 1 / (2 * np.pi * np.sqrt(l * a * b / (a + b)))
        fb = c1 / c2
        if f_lo <= f <= f_hi and space.FEEDBACK_CE[0] <= fb <= space.FEEDBACK_CE[1]:
            want.add((l, c1, c2))
    assert got_set == want
    assert np.all((got.freq_hz >= f_lo) & (got.freq_hz <= f_hi))


@settings(max_examples=30, deadline=None)
@given(values, decades, values, decades, st.floats(50e3, 5e6))
def test_clapp_tanks_equal_brute_force(lm, ld, cm, cd, freq):
    lo = best_lines(lines("inductor", _vals(lm, ld, 1e-6)), 1)
    co = best_lines(lines("capacitor", _vals(cm, cd, 1e-10)), 1)
    offers = {"L1": lo, "C1": co, "C2": co, "C3": co}
    f_lo, f_hi = freq * 0.97, freq * 1.03
    got = space.tanks("clapp", offers, f_lo, f_hi, STRAY_F, CAPS)
    got_set = {tuple(o.value[got.index[r][k]] for r, o in offers.items()) for k in range(got.n)}
    want = set()
    for l, c1, c2, c3 in itertools.product(lo.value, co.value, co.value, co.value):
        a, b, c = c1 + STRAY_F + CAPS.cmu_f, c2 + STRAY_F + CAPS.cpi_f + CAPS.cmu_f, c3 + STRAY_F
        f = 1 / (2 * np.pi * np.sqrt(l / (1 / a + 1 / b + 1 / c)))
        if (f_lo <= f <= f_hi and space.FEEDBACK_CE[0] <= c1 / c2 <= space.FEEDBACK_CE[1]
                and c3 <= space.CLAPP_C3_FRACTION * min(c1, c2)):
            want.add((l, c1, c2, c3))
    assert got_set == want


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 5), st.integers(0, 5)), max_size=20))
def test_expand_equals_nested_loop(pairs):
    start = np.array([min(a, b) for a, b in pairs], dtype=np.int64)
    stop = np.array([max(a, b) for a, b in pairs], dtype=np.int64)
    o, i = space.expand(start, stop)
    want = [(k, j) for k in range(len(pairs)) for j in range(start[k], stop[k])]
    assert list(zip(o.tolist(), i.tolist())) == want


@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 40), st.integers(0, 40)), max_size=20), st.integers(0, 60), st.integers(1, 9))
def test_expand_spread_equals_nested_loop(pairs, limit, per):
    """Within the limit every pair; past it every ceil(count/per)-th inner index of each
    outer one from its start (at most ``per`` each), written out as a nested loop."""
    start = np.array([min(a, b) for a, b in pairs], dtype=np.int64)
    stop = np.array([max(a, b) for a, b in pairs], dtype=np.int64)
    o, i = space.expand_spread(start, stop, limit, per)
    total = int((stop - start).sum())
    want = []
    for k in range(len(pairs)):
        step = 1 if total <= limit else max(1, -(-(stop[k] - start[k]) // per))
        want += [(k, j) for j in range(start[k], stop[k], step)]
    assert list(zip(o.tolist(), i.tolist())) == want
    if total > limit:
        assert all(c <= per for c in np.bincount(o, minlength=len(pairs)).tolist())


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([1e3, 2.2e3, 4.7e3]), st.integers(0, 5), st.sampled_from([0.01, 0.02, 0.05])),
                min_size=1, max_size=12), st.integers(1, 4))
def test_best_line_is_cheapest_then_fullest(rows, need):
    vals, qty, cost = zip(*rows)
    ln = lines("resistor", list(vals), list(qty), list(cost))
    off = best_lines(ln, need)
    for v in set(vals):
        ok = [k for k in range(len(rows)) if vals[k] == v and qty[k] >= need]
        if not ok:
            assert v not in off.value
            continue
        want = min(ok, key=lambda k: (cost[k], -qty[k], k))
        assert off.line[list(off.value).index(v)] == want


def test_pairs_series_and_parallel_values():
    ln = lines("capacitor", [100e-12, 220e-12], qty=[1, 4])
    off = with_pairs(best_lines(ln, 1), ln, 1)
    got = dict(zip(np.round(off.value * 1e15).astype(int), zip(off.how.tolist(), off.line2.tolist())))
    assert got[100_000] == (0, -1) and got[220_000] == (0, -1)
    assert got[round(100 * 220 / 320 * 1000)][0] == 1  # series 100p + 220p = 68.75p
    assert got[320_000][0] == 2  # parallel
    assert got[440_000][0] == 2  # 220p || 220p: the line holds 4, twice the need
    assert 200_000 not in got  # 100p || 100p: only 1 on hand


@settings(max_examples=40, deadline=None)
@given(st.floats(1e-6, 1e-2), st.floats(0.0, 30.0), st.floats(10e-12, 100e-9), st.floats(0.05, 1.0),
       st.floats(1e-6, 1e-2), st.floats(1e-6, 1e-2), st.booleans())
def test_loaded_frequency_solves_the_two_node_phase_condition(l_h, dcr, c1, fb, g1, g2, clapp):
    """loaded_freq_hz against a direct root of Im(Y1 + Y2 + Y1 Y2 Z) = 0 (brentq on the
    complex node admittances, written out here), and with no loading against the textbook
    Colpitts resonance 1/(2 pi sqrt(L C1 C2 / (C1 + C2)))."""
    from scipy.optimize import brentq

    c2 = c1 / fb
    c3 = 0.3 * c1 if clapp else None

    def im_d(w):
        z = dcr + 1j * w * l_h + (1 / (1j * w * c3) if clapp else 0)
        y1, y2 = g1 + 1j * w * c1, g2 + 1j * w * c2
        return (y1 + y2 + y1 * y2 * z).imag

    cs = 1 / (1 / c1 + 1 / c2 + (1 / c3 if clapp else 0))
    w0 = 1 / np.sqrt(l_h * cs)
    # the tank's root lies above the unloaded resonance (loading only raises it) and below 10x
    assume(im_d(w0 * 0.999) * im_d(w0 * 10) < 0)  # else no root in the bracket (heavily damped)
    w = brentq(im_d, w0 * 0.999, w0 * 10, xtol=1e-6, rtol=1e-13)
    got = space.loaded_freq_hz(np.array([l_h]), np.array([dcr]), np.array([c1]), np.array([c2]),
                               np.array([g1]), np.array([g2]), None if c3 is None else np.array([c3]))[0]
    assert got == pytest.approx(w / (2 * np.pi), rel=1e-7)
    if not clapp:
        bare = space.loaded_freq_hz(l_h, 0.0, c1, c2, 0.0, 0.0)
        assert bare == pytest.approx(1 / (2 * np.pi * np.sqrt(l_h * c1 * c2 / (c1 + c2))), rel=1e-12)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from([0.01, 0.02, 0.05]), st.floats(-3, 3), st.integers(0, 3)), min_size=1,
                max_size=40), st.sampled_from([0.5, 1.0, 2.0]))
def test_cheapest_per_step_is_the_first_cheapest_per_cell(rows, step):
    """Per cell (each quantity cut into steps, rounded to the nearest): the lowest cost,
    ties to the lowest index; written out as a dictionary loop."""
    cost = np.array([r[0] for r in rows])
    x = np.array([r[1] for r in rows])
    y = np.array([r[2] for r in rows], dtype=float)
    got = space.cheapest_per_step(cost, ((x, step), (y, 1.0)))
    best = {}
    for i, (c, a, b) in enumerate(rows):
        cell = (int(np.round(a / step)), int(np.round(b)))
        if cell not in best or c < cost[best[cell]]:
            best[cell] = i
    assert got.tolist() == sorted(best.values())
