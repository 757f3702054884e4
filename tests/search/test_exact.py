"""Exactness: on small random drawers the search's ranking equals a brute force.

The reference (tests/search/brute.py) enumerates the full product of every
line at every position and runs the engine on every design that meets the
stated rules; the search decomposes, screens and binary-searches.  Below the
work limits (space.CORE_LIMIT, RC_PAIRS_LIMIT, find.TANK_MAX, BIAS_MAX, REFINE_BUDGET,
REFINE_MAX) the two must agree on the top k: the same scores and the same
value sets.  Checked for the common-emitter Colpitts, the Clapp, the Hartley
and the common-base Colpitts, each on drawers planted with a design of its own
that works; for one ranking over three topologies and two transistor profiles;
and with ``--combine`` (pairs at the trim position) for the common-emitter
Colpitts and the Hartley.
"""

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, event, given, settings, strategies as st

from picker.circuit.device import NpnProfile
from picker.eseries import preferred_values
from picker.search.find import Drawer, FindSpec, Npn, entry_values, ranked
from tests.search.brute import TRIM, brute_force, space_size

TOP_K = 5
SEED_R = [100.0, 2.2e3, 10e3, 33e3]
#: Per topology: a design that fits keeps every drawer from being empty of results (the
#: random lines around it compete with it); the seed lines, the target (the seed's
#: engine frequency, rounded), the known tank, and how many random lines of each kind
#: are added (the Clapp has one more capacitor position, so fewer capacitors).
#: Colpitts: the known design of test_find.py.  Clapp, Hartley and common-base seeds: found
#: by this module's brute force on the seed lines alone (loop frequency 176.4 kHz, 70.0 kHz
#: and 550.8 kHz).
CASES = {
    "colpitts-ce": dict(c=[4.7e-9, 47e-9, 1e-6], l=[1e-3], freq_hz=76.6e3,
                        tank={"L1": 1e-3, "C1": 4.7e-9, "C2": 47e-9}, extra={"r": 4, "c": 4, "l": 3}),
    "clapp": dict(c=[1e-9, 4.7e-9, 47e-9, 1e-6], l=[1e-3], freq_hz=176.5e3,
                  tank={"L1": 1e-3, "C1": 4.7e-9, "C2": 47e-9, "C3": 1e-9}, extra={"r": 4, "c": 3, "l": 3}),
    "hartley": dict(c=[4.7e-9, 47e-9, 1e-6], l=[1e-4, 1e-3], freq_hz=70e3,
                    tank={"L1": 1e-3, "L2": 1e-4, "C1": 4.7e-9}, extra={"r": 4, "c": 4, "l": 3}),
    "colpitts-cb": dict(c=[1e-9, 4.7e-9, 100e-9], l=[1e-4], freq_hz=550.8e3,
                        tank={"L1": 1e-4, "C1": 1e-9, "C2": 4.7e-9}, extra={"r": 4, "c": 4, "l": 3}),
}
EXAMPLES = 10


def _dcr(l_h):
    return [float(0.5 + 4e3 * x) for x in l_h]  # invented coils: 0.5 ohm + 4 ohm/mH


def _lines(kind, vals, costs, tols, dcr=None):
    from picker.search.stock import Lines

    n = len(vals)
    col = {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}[kind]
    df = pd.DataFrame({"id": np.arange(1, n + 1) + {"resistor": 0, "capacitor": 100, "inductor": 200}[kind],
                       col: vals, "tolerance": tols, "qty": [50] * n, "unit_cost": costs,
                       "bin": [f"{kind[0].upper()}{i + 1}" for i in range(n)], "dielectric": ["film"] * n,
                       "voltage_v": [63.0] * n, "power_w": [0.25] * n,
                       "dcr_ohm": dcr if dcr is not None else [0.0] * n})
    return Lines.from_frame(kind, df)


def _random_drawer(draw, c_seeds, l_seeds, extra, npns):
    """The seed lines plus up to ``extra`` random E12 lines per kind, random costs and tolerances."""
    def more(lo_exp, hi_exp, seeds, k):
        pool = sorted({float(x) for x in preferred_values("E12", 10.0**lo_exp, 10.0**hi_exp)} - set(seeds))
        return draw(st.lists(st.sampled_from(pool), min_size=1, max_size=k, unique=True))

    r = SEED_R + more(1, 5, SEED_R, extra["r"])
    c = list(c_seeds) + more(-10, -7, c_seeds, extra["c"])
    ind = list(l_seeds) + more(-4, -2, l_seeds, extra["l"])
    cost = lambda n: draw(st.lists(st.sampled_from([0.01, 0.02, 0.05, 0.1, 0.3]), min_size=n, max_size=n))  # noqa: E731
    tol = lambda n, opts: draw(st.lists(st.sampled_from(opts), min_size=n, max_size=n))  # noqa: E731
    return Drawer({"resistor": _lines("resistor", r, cost(len(r)), tol(len(r), [0.01, 0.05])),
                   "capacitor": _lines("capacitor", c, cost(len(c)), tol(len(c), [0.02, 0.05])),
                   "inductor": _lines("inductor", ind, cost(len(ind)), tol(len(ind), [0.05, 0.1]), _dcr(ind))},
                  npns)


@st.composite
def drawers(draw, topology):
    case = CASES[topology]
    return _random_drawer(draw, case["c"], case["l"], case["extra"], (Npn(NpnProfile(), 300, 50, 0.2, "Q1"),))


def _spec(topology, tol, min_margin):
    return FindSpec(freq_hz=CASES[topology]["freq_hz"], tol=tol, topologies=(topology,), min_margin=min_margin, mc=0)


def _compare(drawer, spec, full=None):
    full = brute_force(drawer, spec) if full is None else full
    # the seed design is always admissible, so every example compares a non-empty ranking
    assert full, space_size(drawer, spec)
    event(f"{spec.topologies[0]}: reference results {len(full) if len(full) <= 5 else 'more than 5'}")
    ref = full[:TOP_K]
    got = ranked(drawer, spec)[:TOP_K]
    assert len(got) == len(ref), (len(got), len(ref), space_size(drawer, spec))
    ref_scores = np.array([d["score"] for d in ref])
    got_scores = np.array([e[0] for e in got])
    # the two phase-zero solvers (global vs local) agree to about 1e-7 in frequency
    np.testing.assert_allclose(got_scores, ref_scores, rtol=0, atol=1e-4)
    # value sets agree wherever the score is not tied with a neighbour
    for k, d in enumerate(ref):
        assert got[k][2]["topology"] == d["topology"]
        tied = np.sum(np.abs(ref_scores - ref_scores[k]) <= 2e-4) > 1
        if not tied:
            vals = entry_values(got[k])
            for r, x in d["values"].items():
                assert np.isclose(vals[r], x, rtol=1e-12), (k, r, vals[r], x)


@pytest.mark.parametrize("topology", list(CASES))
@settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_top_k_equals_brute_force(topology, data):
    drawer = data.draw(drawers(topology), "drawer")
    spec = _spec(topology, data.draw(st.sampled_from([0.01, 0.03, 0.05]), "tol"),
                 data.draw(st.sampled_from([1.5, 2.5]), "min_margin"))
    _compare(drawer, spec)


@pytest.mark.parametrize("topology", list(CASES))
def test_the_seed_design_is_in_the_reference(topology):
    """The reference is not vacuous: on the seed drawer alone it finds the known tank."""
    case = CASES[topology]
    c, ind = case["c"], case["l"]
    d = Drawer({"resistor": _lines("resistor", SEED_R, [0.01] * 4, [0.01] * 4),
                "capacitor": _lines("capacitor", c, [0.05] * len(c), [0.02] * len(c)),
                "inductor": _lines("inductor", ind, [0.3] * len(ind), [0.05] * len(ind), _dcr(ind))},
               (Npn(NpnProfile(), 300, 50, 0.2, "Q1"),))
    spec = _spec(topology, 0.03, 1.5)
    ref = brute_force(d, spec)
    assert ref and {r: ref[0]["values"][r] for r in case["tank"]} == case["tank"]
    assert ref[0]["topology"] == topology
    assert abs(ref[0]["freq_hz"] / spec.freq_hz - 1) <= 0.03 and ref[0]["worst"] >= 1.5
    got = ranked(d, spec)
    assert np.isclose(got[0][0], ref[0]["score"], rtol=1e-6)


MIXED_NPNS = (Npn(NpnProfile(), 300, 50, 0.2, "Q1"),
              Npn(NpnProfile(name="npn-alt", hfe_min=60.0, hfe_max=180.0, ft_hz=600e6, cob_f=2e-12), 301, 50, 0.15, "Q2"))


@st.composite
def mixed_drawers(draw):
    """The Colpitts and Clapp seed lines together (the Hartley finds its own pairs of coils
    among them), a few random lines, and two transistor profiles."""
    seeds_c = sorted(set(CASES["colpitts-ce"]["c"]) | set(CASES["clapp"]["c"]))
    seeds_l = sorted(set(CASES["colpitts-ce"]["l"]) | set(CASES["hartley"]["l"]))
    return _random_drawer(draw, seeds_c, seeds_l, {"r": 3, "c": 2, "l": 2}, MIXED_NPNS)


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_top_k_over_topologies_and_transistors_equals_brute_force(data):
    """One ranking over three topologies and two transistor profiles (the search's single
    refine stream and its branch and bound across pools) against the brute force."""
    drawer = data.draw(mixed_drawers(), "drawer")
    spec = FindSpec(freq_hz=CASES["colpitts-ce"]["freq_hz"], tol=data.draw(st.sampled_from([0.03, 0.05]), "tol"),
                    topologies=("colpitts-ce", "clapp", "hartley"), min_margin=1.5, mc=0)
    full = brute_force(drawer, spec)
    event(f"reference topologies {sorted({d['topology'] for d in full[:TOP_K]})}, "
          f"transistors {sorted({d['npn'] for d in full[:TOP_K]})}")
    _compare(drawer, spec, full)


@pytest.mark.parametrize("topology", ["colpitts-ce", "hartley"])
@settings(max_examples=4, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_top_k_with_combine_equals_brute_force(topology, data):
    """``--combine``: the trim position (C2, or the Hartley's C1) may hold any pair of
    capacitors in series or parallel; the brute force enumerates every pair of lines."""
    drawer = data.draw(drawers(topology), "drawer")
    spec = replace(_spec(topology, data.draw(st.sampled_from([0.01, 0.03]), "tol"), 1.5), combine=True)
    full = brute_force(drawer, spec)
    singles = set(drawer.lines["capacitor"].value.tolist())
    trim = TRIM[topology]
    event(f"{topology}: pairs at {trim} in the reference top {TOP_K}: "
          f"{sum(d['values'][trim] not in singles for d in full[:TOP_K])}")
    _compare(drawer, spec, full)
