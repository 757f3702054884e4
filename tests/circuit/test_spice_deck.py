"""The SPICE deck writer: elements, nodes and analysis lines read back from the deck text.

No simulator needed; the checks parse the deck as SPICE would (one element
per line, name first, nodes next).  SPICE element letters and card syntax:
the ngspice manual (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest

from picker.circuit import spice
from picker.circuit.design import Design, PartInfo, complete_values
from picker.circuit.topology import get_topology, topology_names

#: Nodes per element letter (a coupling names inductors; Q has three nodes).
NODE_COUNT = {"R": 2, "C": 2, "L": 2, "V": 2, "I": 2, "K": 2, "Q": 3}


def design(name, style="ideal", parts=None, **values):
    topo = get_topology(name)
    return Design(topology=name, values=complete_values(topo, values)[0], style=style,
                  parts=parts or {})


def elements(text):
    """Element name -> (nodes, rest of the line) of a deck, dot-cards and the control block left out."""
    out = {}
    lines = text.splitlines()[1:]  # the first line is the title
    in_control = False
    for ln in lines:
        if ln.startswith(".control"):
            in_control = True
        if in_control or not ln.strip() or ln.startswith((".", "*")):
            if ln.startswith(".endc"):
                in_control = False
            continue
        tok = ln.split()
        n = NODE_COUNT[tok[0][0].upper()]
        assert tok[0] not in out, f"element {tok[0]} twice"
        out[tok[0]] = (tuple(tok[1:1 + n]), tok[1 + n:])
    return out


def dc_reachable(els):
    """Nodes joined to ground through R, L, V and Q elements (a plain graph walk)."""
    edges = [nodes for e, (nodes, _) in els.items() if e[0] in "RLVQ"]
    reach, grown = {"0"}, True
    while grown:
        grown = False
        for nodes in edges:
            if reach & set(nodes) and not set(nodes) <= reach:
                reach |= set(nodes)
                grown = True
    return reach


def cards(text, prefix):
    return [ln.split() for ln in text.splitlines() if ln.lower().startswith(prefix)]


def deck_node(node):
    return {"GND": "0", "VCC": "vcc"}.get(node, node)


@pytest.mark.parametrize("name", topology_names())
def test_one_element_per_present_position_with_declared_nodes(name):
    d = design(name)
    els = elements(spice.deck(d))
    for p in d.topo.positions:
        if p.ref not in d.present() or p.kind == "coupling":
            assert p.ref not in els
            continue
        assert p.ref[0] == {"resistor": "R", "capacitor": "C", "inductor": "L"}[p.kind]
        nodes, rest = els[p.ref]
        expected = tuple(deck_node(n) for n in (p.a, p.b))
        if "RE1" not in d.present():
            expected = tuple("E" if n == "X" else n for n in expected)
        assert nodes == expected
        assert float(rest[0]) == pytest.approx(d.values[p.ref], rel=1e-12)
    assert els["VCC"] == (("vcc", "0"), ["DC", "12"])
    assert els["Q1"] == (("C", "B", "E"), ["QGEN"])
    extra = {e for e in els if e not in d.present()}
    assert extra <= {"VCC", "Q1", "IK"} | {e for e in els if e.startswith("RFLOAT_")}


def test_absent_re1_merges_x_into_e_and_present_re1_keeps_x():
    without = elements(spice.deck(design("colpitts-ce", RE1=0.0)))
    assert "RE1" not in without
    assert without["RE"][0] == ("E", "0") and without["CE"][0] == ("E", "0")
    assert all("X" not in nodes for nodes, _ in without.values())
    with_re1 = elements(spice.deck(design("colpitts-ce", RE1=100.0)))
    assert with_re1["RE1"][0] == ("E", "X")
    assert with_re1["RE"][0] == ("X", "0") and with_re1["CE"][0] == ("X", "0")


def test_inductor_dcr_becomes_an_inner_node_and_series_resistor():
    d = design("colpitts-ce", parts={"L1": PartInfo(dcr_ohm=12.5)})
    els = elements(spice.deck(d))
    assert els["L1"][0] == ("T", "L1_dcr")
    assert els["RL1_dcr"][0] == ("L1_dcr", "F")
    assert float(els["RL1_dcr"][1][0]) == 12.5
    plain = elements(spice.deck(design("colpitts-ce")))
    assert plain["L1"][0] == ("T", "F") and "RL1_dcr" not in plain


def test_hartley_coupling_line_only_for_positive_k():
    assert not any(e.startswith("K") for e in elements(spice.deck(design("hartley"))))
    els = elements(spice.deck(design("hartley", K=0.9)))
    assert els["KL1L2"] == (("L1", "L2"), ["0.9"])
    assert not any(e.startswith("K") for e in elements(spice.deck(design("colpitts-ce"))))


@pytest.mark.parametrize("name", topology_names())
def test_kick_targets_the_tank_node(name):
    d = design(name)
    els = elements(spice.deck(d))
    nodes, rest = els["IK"]
    assert nodes == ("0", d.topo.tank_node)
    assert rest[0].startswith("PULSE(0")
    assert "IK" not in elements(spice.deck(d, kick=False))


def colpitts_period_s(l_h, c1_f, c2_f):
    # textbook Colpitts resonance: L with C1 and C2 in series (handbook formula)
    return 2 * np.pi * np.sqrt(l_h * c1_f * c2_f / (c1_f + c2_f))


def test_tran_max_step_is_at_most_a_200th_of_the_period():
    d = design("colpitts-ce", L1=470e-6, C1=2.2e-9, C2=22e-9)
    period = colpitts_period_s(470e-6, 2.2e-9, 22e-9)
    (tran,) = cards(spice.deck(d), ".tran")
    tstep, tstop, tstart, tmax = map(float, tran[1:5])
    assert tmax <= period / 200 * (1 + 1e-9) and tstep <= period / 200 * (1 + 1e-9)
    assert tstart == 0.0
    assert tstop == pytest.approx(300 * period, rel=1e-9)  # default length
    # a longer requested step is clamped, a shorter one kept; tstop as given
    (tran,) = cards(spice.deck(d, tmax_s=period, tstop_s=1e-3), ".tran")
    assert float(tran[4]) <= period / 200 * (1 + 1e-9) and float(tran[2]) == 1e-3
    (tran,) = cards(spice.deck(d, tmax_s=period / 1000), ".tran")
    assert float(tran[4]) == pytest.approx(period / 1000, rel=1e-9)


@pytest.mark.parametrize("analysis", ["tran", "op"])
def test_control_block_ends_with_quit(analysis):
    lines = spice.deck(design("clapp"), analysis=analysis).splitlines()
    i = lines.index(".control")
    j = lines.index(".endc")
    assert i < j and lines[j - 1] == "quit" and lines[-1] == ".end"
    block = lines[i + 1:j]
    if analysis == "tran":
        assert block[:2] == ["set wr_singlescale", "set wr_vecnames"] and "run" in block
        (wr,) = [ln for ln in block if ln.startswith("wrdata")]
        assert wr.split()[1:] == ["picker_out.txt", "v(T)", "v(B)", "v(E)", "v(C)"]
    else:
        assert "op" in block and not cards("\n".join(lines), ".tran")
        (wr,) = [ln for ln in block if ln.startswith("write")]
        assert wr.split()[2:] == ["v(B)", "v(E)", "v(C)", "i(VCC)"]


def test_probes_include_x_when_re1_is_present_and_can_be_chosen():
    text = spice.deck(design("hartley", RE1=47.0))
    (wr,) = cards(text, "wrdata")
    assert wr[2:] == ["v(T)", "v(B)", "v(E)", "v(C)", "v(X)"]
    (wr,) = cards(spice.deck(design("hartley"), probes=["F"], out_file="o.txt"), "wrdata")
    assert wr[1:] == ["o.txt", "v(F)"]


@pytest.mark.parametrize("name", topology_names())
def test_stray_capacitance_at_every_node_of_the_topology(name):
    d = design(name, style="breadboard")
    els = elements(spice.deck(d))
    strays = {e: v for e, v in els.items() if e.startswith("CSTRAY_")}
    nodes = {n for p in d.topo.positions if p.ref in d.present() and p.kind != "coupling"
             for n in (p.a, p.b)} - {"GND", "VCC", "X"} | {"B", "C", "E"}
    assert set(strays) == {f"CSTRAY_{n}" for n in nodes}
    assert all(v == ((e[7:], "0"), ["5e-12"]) for e, v in strays.items())
    assert not any(e.startswith("CSTRAY_") for e in elements(spice.deck(design(name))))


@pytest.mark.parametrize("name", topology_names())
def test_every_node_has_a_dc_path_to_ground(name):
    # independent of the writer's own union-find: walk R, L, V and Q elements from ground
    els = elements(spice.deck(design(name)))
    reach = dc_reachable(els)
    all_nodes = {n for e, (nodes, _) in els.items() if e[0] != "K" for n in nodes}
    assert all_nodes <= reach
    ties = sorted(e for e in els if e.startswith("RFLOAT_"))
    expected = {"colpitts-ce": ["RFLOAT_T"], "clapp": ["RFLOAT_F", "RFLOAT_T"]}.get(name, [])
    assert ties == expected


def test_model_card_temperature_and_hfe_override():
    d = design("colpitts-cb")
    text = spice.deck(d, hfe=d.npn.hfe_min)
    (model,) = cards(text, ".model")
    assert model[1] == "QGEN" and f"BF={d.npn.hfe_min:.6g}" in " ".join(model)
    assert f"BF={d.npn.hfe_nominal:.6g}" in " ".join(cards(spice.deck(d), ".model")[0])
    assert cards(text, ".temp") == [[".temp", "25"]]


def test_unknown_analysis_is_refused():
    with pytest.raises(ValueError):
        spice.deck(design("clapp"), analysis="noise")


@pytest.mark.parametrize("name,pin", [("colpitts-ce", "B"), ("clapp", "B"), ("hartley", "B"),
                                      ("colpitts-cb", "E")])
def test_open_loop_deck_cuts_the_input_pin_and_loads_it_with_a_stage_copy(name, pin):
    d = design(name, style="pcb")
    assert spice.input_pin(d) == pin
    text = spice.deck_ac_open_loop(d, 1e4, 1e6, 50)
    els = elements(text)
    q1 = dict(zip("CBE", els["Q1"][0]))
    assert q1[pin] == f"Q1{pin}" and spice.open_loop_nodes(d) == (pin, f"Q1{pin}")
    assert els["LBRK"][0] == (pin, f"Q1{pin}")
    assert els["CBRK"][0] == ("drvin", f"Q1{pin}")
    assert els["VIN"] == (("drvin", "0"), ["DC", "0", "AC", "1"])
    # the copy: the stage's own positions, none of the tank or coupling ones
    copies = {e[:-3] for e in els if e.endswith("_CP") and not e.startswith(("LBIG", "CBIG", "CSTRAY"))}
    stage = {p.ref for p in d.topo.positions if p.role in spice.STAGE_ROLES} & d.present()
    assert copies == stage
    q2 = dict(zip("CBE", els["Q2"][0]))
    assert q2[pin] == f"Q2{pin}"
    assert els["CBIG_CP"][0] == (pin, f"Q2{pin}")
    assert q2["C"] == ("vcc" if name == "colpitts-cb" else "C_cp")
    assert {n for nodes, _ in els.values() for n in nodes} - {"L1", "L2"} <= dc_reachable(els)
    assert cards(text, ".ac") == [[".ac", "dec", "50", "10000", "1000000"]]
    (wr,) = cards(text, "wrdata")
    assert wr[2:] == [f"v({pin})", f"v(Q1{pin})"]


def test_injection_decks_put_the_sources_at_the_input_pin():
    d = design("colpitts-ce")
    v = elements(spice.deck_ac_injection(d, 1e4, 1e6, 50))
    assert v["VZ"] == (("Q1B", "B"), ["DC", "0", "AC", "1"]) and "LBRK" not in v and "Q2" not in v
    assert v["Q1"][0] == ("C", "Q1B", "E")
    i = elements(spice.deck_ac_injection(d, 1e4, 1e6, 50, inject="current"))
    assert i["VM"] == (("B", "Q1B"), ["DC", "0"])
    assert i["IZ"] == (("0", "B"), ["DC", "0", "AC", "1"])
    with pytest.raises(ValueError):
        spice.deck_ac_injection(d, 1e4, 1e6, 50, inject="both")
