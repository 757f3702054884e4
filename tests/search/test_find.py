"""find on small drawers: the known design is found, every candidate re-checks, and the reasons."""

import functools

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from picker.circuit.design import Design, complete_values
from picker.circuit.device import NpnProfile
from picker.circuit.evaluate import check_design
from picker.circuit.topology import get_topology
from picker.search.find import Drawer, FindSpec, Npn, find
from picker.search.stock import Lines

KNOWN = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "C1": 4.7e-9, "L1": 1e-3, "C2": 47e-9}
TEMPS = (0.0, 50.0)


def _lines(kind, vals, qty=20, dielectric="c0g", dcr=0.0, voltage=50.0):
    n = len(vals)
    col = {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}[kind]
    df = pd.DataFrame({"id": np.arange(1, n + 1) + {"resistor": 0, "capacitor": 100, "inductor": 200}[kind],
                       col: vals, "tolerance": [0.05] * n, "qty": [qty] * n, "unit_cost": [0.1] * n,
                       "bin": [f"{kind[0].upper()}-{i + 1}" for i in range(n)], "dielectric": [dielectric] * n,
                       "voltage_v": [voltage] * n, "power_w": [0.25] * n, "dcr_ohm": [dcr] * n})
    return Lines.from_frame(kind, df)


def drawer(qty=20):
    return Drawer(
        {"resistor": _lines("resistor", [100.0, 1e3, 2.2e3, 4.7e3, 10e3, 33e3, 100e3], qty),
         "capacitor": _lines("capacitor", [1e-9, 4.7e-9, 10e-9, 47e-9, 100e-9, 1e-6], qty, dielectric="film", voltage=63.0),
         "inductor": _lines("inductor", [470e-6, 1e-3], qty, dcr=5.0)},
        (Npn(NpnProfile(), 300, qty, 0.2, "Q-1"),),
    )


def _target(**change):
    topo = get_topology("colpitts-ce")
    values, _ = complete_values(topo, KNOWN | {"CC1": 100e-9, "CC2": 100e-9, "CE": 1e-6} | change)
    from picker.circuit.design import PartInfo
    d = Design("colpitts-ce", values, style="breadboard", parts={"L1": PartInfo(dcr_ohm=5.0)})
    return check_design(d, TEMPS, integrate=False).freq_hz


@pytest.fixture(scope="module")
def found():
    spec = FindSpec(freq_hz=_target(), tol=0.01, topologies=("colpitts-ce",), min_margin=1.5, top=3, mc=300)
    return spec, find(drawer(), spec)


def test_known_design_is_found(found):
    spec, res = found
    assert res.candidates, res.reasons
    tanks = [{r: c.parts[r]["value"] for r in ("L1", "C1", "C2")} for c in res.candidates]
    assert {"L1": 1e-3, "C1": 4.7e-9, "C2": 47e-9} in tanks


def test_every_candidate_rechecks_with_the_engine(found):
    """An independent check_design (all corners, envelope dynamics) of each reported design."""
    spec, res = found
    for c in res.candidates:
        ev = check_design(c.design, TEMPS, integrate=False)
        assert abs(ev.freq_hz / spec.freq_hz - 1) <= spec.tol
        assert ev.margin_worst >= spec.min_margin
        assert c.margin_worst <= ev.margin_worst + 1e-9  # tolerance derating only lowers it
        assert ev.amplitude_settles is True
        assert 0.0 <= c.yield_ <= 1.0
        codes = {w.code for w in ev.warnings}
        assert not codes & {"saturated", "soft-divider", "cap-voltage", "coupling-reactance", "bursts"}
        assert [c.rank for c in res.candidates] == list(range(1, len(res.candidates) + 1))
    scores = [c.score for c in res.candidates]
    assert scores == sorted(scores)


def test_far_target_names_the_nearest_tank():
    spec = FindSpec(freq_hz=5e6, tol=0.01, topologies=("colpitts-ce",), top=3, mc=0)
    res = find(drawer(), spec)
    assert res.candidates == ()
    assert res.reasons[0].startswith("no tank in tolerance")
    assert "nearest tank on hand" in res.reasons[0]
    assert "picker reorder" in res.reasons[-1]


def test_too_few_parts_for_the_boards():
    spec = FindSpec(freq_hz=_target(), tol=0.01, topologies=("colpitts-ce",), boards=30, top=3, mc=0)
    res = find(drawer(qty=20), spec)
    assert res.candidates == ()
    assert any("30 on hand" in r or "no tank" in r for r in res.reasons)


def test_combine_makes_an_odd_value_from_two_on_hand():
    """C2 = 57 nF is not in the drawer; 47 nF || 10 nF is (the practice --combine serves)."""
    f = _target(C2=57e-9)
    ranked_pairs = []
    for combine in (False, True):
        spec = FindSpec(freq_hz=f, tol=0.003, topologies=("colpitts-ce",), min_margin=1.5, top=3, mc=0,
                        combine=combine)
        ranked_pairs.append(find(drawer(), spec))
    plain, combined = ranked_pairs
    assert all("how" not in p for c in plain.candidates for p in c.parts.values())
    pairs = [c for c in combined.candidates if "how" in c.parts["C2"]]
    assert pairs, combined.reasons
    for c in pairs:
        p = c.parts["C2"]
        both = (p["value1"] + p["value2"]) if p["how"] == "parallel" else 1 / (1 / p["value1"] + 1 / p["value2"])
        assert np.isclose(p["value"], both, rtol=1e-12) and abs(c.freq_error) <= 0.003
        ev = check_design(c.design, TEMPS, integrate=False)  # the pair's value is what the engine used
        assert abs(ev.freq_hz / f - 1) <= 0.003
    best_plain = min((abs(c.freq_error) for c in plain.candidates), default=np.inf)
    assert min(abs(c.freq_error) for c in pairs) < best_plain


def test_stacked_engine_calls_equal_separate_ones():
    """The refine stream stacks batches into one engine call per topology; per batch the
    figures equal those of its own call (two topologies, two transistors, interleaved)."""
    from tests.circuit.test_phase_zero import _batch as mixed
    from picker.circuit.engine import evaluate_batch, small_signal
    from picker.search.find import _engine_many

    b1, b2, b3 = mixed("colpitts-ce", n=12, seed=1), mixed("hartley", n=9, seed=2), mixed("colpitts-ce", n=7, seed=4)
    b3 = b3.with_(hfe=b3.hfe * 2.5, ft_hz=b3.ft_hz * 0.4)  # another transistor in the same topology
    batches = [b1, b2, b3]
    guesses = [2 * np.pi * evaluate_batch(b, large_signal=False).freq_loop_hz * 1.01 for b in batches]
    guesses = [np.where(np.isfinite(g), g, 2 * np.pi * 400e3) for g in guesses]
    got = _engine_many(batches, guesses, near=1.03)
    for b, g, (f, m, sat, hy) in zip(batches, guesses, got):
        alone = small_signal(b, g, near=1.03)
        assert f.shape == (b.n,) and hy.shape[0] == b.n
        np.testing.assert_allclose(f, alone.freq_loop_hz, rtol=1e-9, equal_nan=True)
        np.testing.assert_allclose(m, alone.margin, rtol=1e-9)
        np.testing.assert_array_equal(sat, alone.dc.saturated)
        np.testing.assert_allclose(hy[:, 0], alone.hybrid.gm_s, rtol=1e-12)
    assert np.isfinite(got[0][0]).sum() >= 6 and np.isfinite(got[1][0]).sum() >= 4  # real crossings compared


@settings(max_examples=80, deadline=None)
@given(st.lists(st.sampled_from([0.0, 0.5, 1.0, 1.5, 2.0, np.nan, np.inf]) | st.floats(-5, 5), max_size=60),
       st.integers(1, 70))
def test_smallest_is_a_stable_argsort_cut(xs, k):
    """find keeps the pairs of the best screen scores with ties by index: the partial
    selection equals numpy's stable argsort cut at k (many ties, NaN, inf)."""
    from picker.search.find import _smallest

    x = np.array(xs, dtype=float)
    assert _smallest(x, k).tolist() == np.argsort(x, kind="stable")[:k].tolist()


def test_yield_band_stops_only_samples_outside_it(found):
    """montecarlo.run with ``band_hz`` (what yield_of passes) gives the unbanded figures for
    every sample inside the band, NaN outside; so the yield is the one counted from the
    full run.  The band is set so that both kinds of sample occur."""
    from picker.search import montecarlo

    spec, res = found
    design = res.candidates[0].design
    f_all, m_all = montecarlo.run(design, 400, TEMPS, 5)
    lo, hi = np.nanpercentile(f_all, [20, 70])
    f_b, m_b = montecarlo.run(design, 400, TEMPS, 5, band_hz=(lo, hi))
    inside = np.isfinite(f_all) & (f_all > lo * (1 + 1e-6)) & (f_all < hi * (1 - 1e-6))
    assert 100 <= inside.sum() <= 300
    np.testing.assert_array_equal(f_b[inside], f_all[inside])
    np.testing.assert_array_equal(m_b[inside], m_all[inside])
    out = np.isfinite(f_all) & ((f_all < lo * (1 - 1e-6)) | (f_all > hi * (1 + 1e-6)))
    assert (np.isnan(f_b[out]) | (f_b[out] < lo) | (f_b[out] > hi)).all()


def _series_drawer():
    """Every E96 resistor 10 ohm-1 Mohm, E24 capacitor 10 pF-10 uF and E12 inductor
    1 uH-10 mH (values from the eseries package, IEC 60063), coils with an invented DCR
    law (0.05 ohm at 1 uH to 30 ohm at 10 mH), one high-gain transistor."""
    import eseries

    def lines(kind, series, lo, hi):
        v = np.array(list(eseries.erange(getattr(eseries, series), lo, hi)), dtype=float)
        df = pd.DataFrame({"id": np.arange(v.size) + {"resistor": 0, "capacitor": 10_000, "inductor": 20_000}[kind],
                           {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}[kind]: v,
                           "tolerance": 0.05, "qty": 20, "unit_cost": 0.1, "bin": "B", "dielectric": "c0g",
                           "voltage_v": 50.0, "power_w": 0.25,
                           "dcr_ohm": 0.05 * (v / 1e-6) ** (np.log(600) / np.log(1e4)) if kind == "inductor" else 0.0})
        return Lines.from_frame(kind, df)

    npn = NpnProfile(name="npn-high-gain", hfe_min=350.0, hfe_max=850.0, ft_hz=150e6, cob_f=5e-12)
    return Drawer({"resistor": lines("resistor", "E96", 10.0, 1.0001e6),
                   "capacitor": lines("capacitor", "E24", 10e-12, 10.0001e-6),
                   "inductor": lines("inductor", "E12", 1e-6, 10.0001e-3)}, (Npn(npn, 1, 20, 0.2, "Q"),))


@functools.lru_cache(maxsize=None)
def _series_pool(topology):
    """The drawer of every E-series value, a 455 kHz +-1 % spec, and the topology's screened pool."""
    from picker.search import find as F

    d = _series_drawer()
    spec = FindSpec(freq_hz=455e3, tol=0.01, topologies=(topology,), min_margin=1.5, mc=0)
    return d, spec, F._search_one(topology, d.npns[0], d, spec, F._new_stats(), [])


@pytest.mark.parametrize("topology", ["colpitts-ce", "clapp"])
def test_nominal_refine_keeps_exactly_the_rows_the_full_scan_accepts(topology):
    """The nominal refine searches locally around the screen's frequency and drops rows as
    soon as their bracket leaves the accepted window; on the best 3,000 screened rows of a
    drawer of every E-series value, the rows it keeps, and their figures, are those the
    engine's full scan (the phase-zero search of the full check) accepts by the same rule."""
    from picker.circuit.engine import small_signal
    from picker.search import find as F
    from picker.search.space import FREQ_SLACK

    d, spec, pool = _series_pool(topology)
    rows = np.arange(min(pool["it"].size, 3000))
    got = F._nominal(pool, spec, d, F._new_stats(), rows)
    full = small_signal(F._batch(pool, rows, spec, d.npns[0].profile.hfe_nominal, spec.nominal_c))
    f = full.freq_loop_hz
    ok = (np.isfinite(f) & (np.abs(f / spec.freq_hz - 1) <= spec.tol)
          & (np.abs(2 * np.pi * f / pool["omega_s"][rows] - 1) <= FREQ_SLACK)
          & (full.margin >= spec.min_margin) & ~np.asarray(full.dc.saturated))
    assert 50 <= ok.sum() <= rows.size - 100  # both kinds of row are present
    np.testing.assert_array_equal(got["rows"], rows[ok])
    np.testing.assert_allclose(got["freq_hz"], f[ok], rtol=1e-7)
    np.testing.assert_allclose(got["margin"], full.margin[ok], rtol=1e-6)


@pytest.mark.parametrize("topology", ["colpitts-ce", "clapp"])
def test_corner_and_sensitivity_rows_land_on_the_full_scans_phase_zero(topology):
    """The worst case's hFE x temperature corners and +1 % sensitivity rows are searched from
    their row's nominal crossing (``near``); on the drawer of every E-series value their
    frequencies and margins are the engine's full scan's, row for row."""
    from picker.circuit.engine import NEAR, small_signal
    from picker.search import find as F

    d, spec, pool = _series_pool(topology)
    nom = F._nominal(pool, spec, d, F._new_stats(), np.arange(min(pool["it"].size, 3000)))
    batch, guess, _ = F._worst_batch(pool, nom["rows"][:100], nom["omega"][:100], spec)
    f, margin, _, _ = F._engine_many([batch], [guess], NEAR)[0]
    full = small_signal(batch)
    assert batch.n >= 1000 and np.isfinite(full.freq_loop_hz).mean() > 0.9
    np.testing.assert_allclose(f, full.freq_loop_hz, rtol=1e-7, equal_nan=True)
    np.testing.assert_allclose(margin, full.margin, rtol=1e-6)
