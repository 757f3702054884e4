"""The schematic: one layout per topology, every present position labelled, valid SVG."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pytest

from picker.circuit.design import Design, complete_values
from picker.circuit.device import NpnProfile
from picker.circuit.topology import get_topology, topology_names
from picker.report.schematic import LAYOUTS, schematic_svg, write_schematic
from picker.units import format_value

SVG_NS = "{http://www.w3.org/2000/svg}"

#: (topology, values given, present optional positions) - the rest take the topology defaults.
CASES = [
    ("colpitts-ce", dict(RE1=100.0), {"RE1"}),
    ("colpitts-ce", {}, set()),
    ("clapp", dict(RE1=220.0), {"RE1"}),
    ("hartley", dict(K=0.5, RE1=47.0), {"RE1"}),
    ("hartley", dict(K=0.0), set()),
    ("colpitts-cb", {}, set()),
]


def design_of(topology: str, given: dict, npn: str = "npn-generic") -> Design:
    values, _ = complete_values(get_topology(topology), given)
    return Design(topology=topology, values=values, npn=NpnProfile(name=npn))


def label_lines(svg: str) -> list[list[str]]:
    """Each text element's lines (one per tspan, or its text)."""
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG_NS}svg"
    out = []
    for t in root.iter(f"{SVG_NS}text"):
        spans = [s.text or "" for s in t.iter(f"{SVG_NS}tspan")]
        out.append(spans or [t.text or ""])
    return out


def test_every_topology_has_a_layout():
    assert set(LAYOUTS) == set(topology_names())


@pytest.mark.parametrize(("topology", "given", "optional"), CASES)
def test_every_present_position_is_drawn_with_designator_and_value(topology, given, optional):
    design = design_of(topology, given)
    labels = label_lines(schematic_svg(design))
    firsts = {ls[0]: ls for ls in labels}
    topo = get_topology(topology)
    for p in topo.positions:
        if p.ref not in design.present():
            assert p.ref not in firsts  # an absent optional position is a wire
            continue
        assert p.ref in firsts, p.ref
        v = design.values[p.ref]
        want = f"{v:g}" if p.kind == "coupling" else format_value(v, p.kind)
        assert firsts[p.ref][1].startswith(want), (p.ref, firsts[p.ref])
    assert {p.ref for p in topo.positions if p.optional} & design.present() == optional
    assert firsts["Q1"] == ["Q1", "npn-generic"]
    assert any("VCC" in ls[0] for ls in labels)


@pytest.mark.parametrize("name", ["<b>npn & co</b>", "npn $x^2$ &amp; $", "npn\x01\x1f"])
def test_label_text_from_the_store_is_escaped(tmp_path, name):
    design = design_of("colpitts-ce", {}, npn=name)
    svg = schematic_svg(design)
    assert "<b>" not in svg
    labels = label_lines(svg)  # parses as XML, so the name was escaped
    want = "".join(" " if ord(c) < 32 else c for c in name)  # XML holds no control characters
    assert ["Q1", want] in labels
    path = write_schematic(design, tmp_path / "s.svg")
    assert path.read_text(encoding="utf-8") == svg


def test_unknown_topology_is_refused():
    design = design_of("colpitts-ce", {})
    object.__setattr__(design, "topology", "pierce")
    with pytest.raises(ValueError, match="no schematic layout"):
        schematic_svg(design)
