"""The envelope model's settle/burst verdict against ngspice (Debian package).

Bursting (squegging) is judged on ngspice's transient with the same rules the
tool applies to its own envelope (:mod:`picker.circuit.envelope`), over the
transient length ``check --verify`` chooses.  The set holds designs that burst
and designs that settle, among them bursting designs cured by emitter
degeneration; every remedy the tool suggests for a bursting design is
simulated as well and must settle.  The steady amplitude of the settling
designs must be within 25 % of ngspice's.
"""

from __future__ import annotations

from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

from picker.circuit.evaluate import check_design
from picker.circuit.remedy import find_remedies
from picker.eseries import preferred_values
from picker.sim.verify import verify
from tests.reference.designs import make_design

pytestmark = pytest.mark.ngspice

AMP_TOL = 0.25
MIN_MARGIN = 2.0

#: (label, topology, values, style); the first group bursts in ngspice, the second settles.
BURSTING = [
    ("clapp-bypassed", "clapp", {}, "ideal"),
    ("hartley-bypassed", "hartley", {}, "ideal"),
    ("hartley-re1-22", "hartley", {"RE1": 22}, "ideal"),
]
SETTLING = [
    ("colpitts-bypassed", "colpitts-ce", {}, "ideal"),
    ("clapp-re1-100", "clapp", {"RE1": 100}, "ideal"),  # the bursting Clapp, cured
    ("hartley-re1-100", "hartley", {"RE1": 100}, "ideal"),  # the bursting Hartley, cured
    ("cb-550k", "colpitts-cb", {"L1": 100e-6, "C1": 1e-9, "C2": 4.7e-9, "RE": 4.7e3}, "ideal"),
]


def _run(entry):
    label, topology, values, style = entry
    design = make_design(topology, values, style)
    ev = check_design(design)
    return label, values, ev, verify(design, ev).as_json()


@pytest.fixture(scope="module")
def outcomes(ngspice_bin):
    with ProcessPoolExecutor(max_workers=2) as pool:
        return {label: (values, ev, sim) for label, values, ev, sim in pool.map(_run, BURSTING + SETTLING)}


@pytest.mark.parametrize("label", [b[0] for b in BURSTING])
def test_bursting_designs_burst_in_both(outcomes, label):
    _, ev, sim = outcomes[label]
    assert sim["bursts"], f"{label}: ngspice did not burst ({sim})"
    assert ev.amplitude_settles is False, f"{label}: the tool predicted it settles"
    assert ev.burst_period_s is not None


@pytest.mark.parametrize("label", [s[0] for s in SETTLING])
def test_settling_designs_settle_in_both(outcomes, label):
    _, ev, sim = outcomes[label]
    assert not sim["bursts"] and sim["settle_time_s"] is not None, f"{label}: ngspice did not settle ({sim})"
    assert ev.amplitude_settles is True, f"{label}: the tool predicted no settling"


@pytest.mark.parametrize("label", [s[0] for s in SETTLING])
def test_settling_amplitude_within_25_percent(outcomes, label):
    _, ev, sim = outcomes[label]
    assert abs(ev.amplitude_vpp / sim["amplitude_vpp"] - 1) <= AMP_TOL, (ev.amplitude_vpp, sim["amplitude_vpp"])


def _remedy_entries():
    r_ohm = preferred_values("E12", 10.0, 1e6)
    c_f = preferred_values("E6", 1e-12, 1e-3)
    out = []
    for label, topology, values, style in BURSTING:
        design = make_design(topology, values, style)
        rems = find_remedies(design, MIN_MARGIN, (design.temp_c,), r_ohm, c_f)
        assert rems, f"{label}: no remedy found"
        for r in rems:
            out.append((f"{label} + {r.kind}", topology, {**values, **r.values}, style))
    return out


def test_suggested_remedies_settle_in_ngspice(outcomes):
    entries = _remedy_entries()
    kinds = {e[0].split(" + ")[1] for e in entries}
    assert "degeneration" in kinds
    with ProcessPoolExecutor(max_workers=2) as pool:
        results = list(pool.map(_run, entries))
    failed = [(label, sim) for label, _, _, sim in results if sim["bursts"] or sim["settle_time_s"] is None]
    assert not failed, failed
    # and the tool agrees with itself: each remedy is predicted to settle
    assert all(ev.amplitude_settles for _, _, ev, _ in results)
    assert all(np.isfinite(ev.margin_worst) and ev.margin_worst >= MIN_MARGIN for _, _, ev, _ in results)


def _corner_variant(design, hfe: float, temp_c: float):
    """The design with its transistor pinned at ``hfe`` and run at ``temp_c`` (one corner as a design)."""
    from dataclasses import replace

    npn = replace(design.npn, hfe_min=hfe * 0.999, hfe_max=hfe * 1.001, hfe_typ=hfe)
    return replace(design, npn=npn, temp_c=temp_c)


def _saturating_colpitts():
    """The demo store's checked design (its collector swing reaches saturation at every corner):
    a common-emitter Colpitts at 455 kHz whose linearised envelope model calls six of its
    nine hFE/temperature corners unsettled, while the integrated envelope and ngspice settle."""
    from dataclasses import replace

    from picker.circuit.design import PartInfo
    from picker.circuit.device import NpnProfile

    npn = NpnProfile(name="npn-general", hfe_min=100, hfe_max=300, ft_hz=250e6, cob_f=4e-12, vceo_v=40, pd_w=0.5)
    values = {"R1": 3900, "R2": 560, "RC": 2700, "RE": 1200, "CE": 220e-9, "CC1": 2.7e-9, "C1": 1.5e-9,
              "L1": 100e-6, "C2": 6.8e-9, "CC2": 22e-9}
    return replace(make_design("colpitts-ce", values, "breadboard"), npn=npn, parts={"L1": PartInfo(dcr_ohm=0.83)})


def _verify_variant(entry):
    hfe, temp_c = entry
    d = _corner_variant(_saturating_colpitts(), hfe, temp_c)
    return entry, verify(d, check_design(d)).as_json()


def test_corners_the_linear_verdict_doubts_are_integrated_and_settle_as_in_ngspice(ngspice_bin):
    from picker.circuit import engine
    from picker.circuit.dynamics import predict
    from picker.circuit.evaluate import corner_batch

    d = _saturating_colpitts()
    batch, combos = corner_batch([d], (d.temp_c, 0.0, 50.0))
    linear = predict(batch, engine.evaluate_batch(batch))
    doubted = [combos[k] for k in np.flatnonzero(linear.amplitude_settles == 0.0)]
    assert len(doubted) >= 2  # the case this test is about: the linear verdict says "bursts"
    ev = check_design(d, (0.0, 50.0))
    assert [c.amplitude_settles for c in ev.corners] == [True] * len(combos)
    # the doubted corners are integrated together: a corner's verdict must not depend on
    # which other temperatures are checked with it
    fewer = {(c.hfe, c.temp_c): c.amplitude_settles for c in check_design(d, (0.0,)).corners}
    assert fewer == {(c.hfe, c.temp_c): c.amplitude_settles for c in ev.corners if (c.hfe, c.temp_c) in fewer}
    assert len(fewer) == 6
    # ngspice, two of the doubted corners, each simulated as a design pinned at that corner
    with ProcessPoolExecutor(max_workers=2) as pool:
        sims = list(pool.map(_verify_variant, doubted[:2]))
    for corner, sim in sims:
        assert not sim["bursts"] and sim["settle_time_s"] is not None, (corner, sim)
