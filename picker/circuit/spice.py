"""SPICE deck writer: a design's netlist for ngspice, built from the topology's declaration only.

Every present position becomes one element named by its designator (``R1``,
``RE1``, ``CC2``, ``L1`` ...; each designator's first letter is already the
right SPICE letter), between the declared nodes; ``VCC`` becomes the node
``vcc`` driven by ``VCC vcc 0 DC <vcc_v>``, ``GND`` becomes ``0``.  There is
no per-topology code here: a fifth topology gets its deck for free.

Conventions of the deck
-----------------------
* An absent optional position (``RE1``) is a short: its far node merges into
  its near node (:func:`picker.circuit.topology.merged_node`).
* An inductor with a DC resistance becomes ``L<ref>`` from its first node to
  an inner node ``<ref>_dcr`` plus ``R<ref>_dcr`` from there to its second node.
* The coupling position ``K`` becomes ``KL1L2 L1 L2 <k>`` when k > 0.
* The build style's stray capacitance goes from every non-ground node of the
  topology to ground as ``CSTRAY_<node>``.
* The transistor is ``Q1 C B E QGEN`` with the model card of
  :func:`picker.circuit.device.model_from_profile`.

DC-floating nodes
-----------------
The tank nodes of the common-emitter Colpitts (``T``, ``F``) and the Clapp
(``T``, ``M`` and ``F``) reach the rest of the circuit only through
capacitors, so the DC operating point has no equation that fixes them.  The
deck finds such groups itself (:func:`floating_nodes`: nodes not joined to
ground through resistors, inductors, the supply or the transistor) and ties
one node of each group to ground with ``RFLOAT_<node> <node> 0 1e9``.  This
was chosen over the global ``.options rshunt=...`` because it touches only the
floating nodes (the bias network keeps its DC point) and shows in the deck.
Measured with ngspice 39, 600-period transients of the default designs with
100 ohm unbypassed emitter resistance (steady amplitude), steady-state
frequency relative to the 1e9 ohm tie:

=====================  ============  ============
variant                colpitts-ce   clapp
=====================  ============  ============
tie 1e12 ohm           -9e-9         -4e-10
rshunt=1e12, no tie    -9e-9         -4e-10
tie 1e6 ohm            +9e-6         +5e-7
no tie at all          +1.4e-5       -6e-7
=====================  ============  ============

so the tie's effect is far below 1e-4 (checked by
``tests/reference/test_ngspice_pipeline.py``).  Without a tie ngspice runs,
but the floating nodes start from an arbitrary DC value and the colpitts-ce
took 5 ms instead of 1 ms to settle.

Transient analysis
------------------
The ideal tank frequency comes from the topology's hand method (independent
of the bias figures passed to it).  A brief current pulse into the topology's
``tank_node`` (``IK``, 100 uA for a tenth of a period, starting a tenth of a
period in) kicks the tank so that start-up is repeatable; before the kick
the tank creeps slightly because ngspice's DC point is converged only to its
RELTOL (1e-3): ``.options reltol=1e-6`` removes the creep but was not needed.
The maximum time step is at most a 200th of the ideal period (a step of 1/6
period made the frequency 4.6 % low in the measurements of
``shared/ngspice-notes.md``; at 1/200 the trapezoidal rule still reads an
LC ring about 8e-5 low, its (w h)^2 / 12 error).  ``wrdata`` writes one time
column and one column per probe with a header row; ``set numdgt=15`` makes
it write 16 significant digits instead of 9 (with 9, time steps of 28 ns
near 0.3 ms keep only 4-5 digits).

Operating point
---------------
``op`` then ``write`` with ``set filetype=ascii``: the ASCII raw file carries
16 significant digits (``print`` gives 6, ``wrdata`` 9 unless ``numdgt`` is
set), read by :func:`picker.sim.ngspice.read_raw_ascii`.  Written: v(B),
v(E), v(C), v(X) when present, and i(VCC) (SPICE sign: negative when the
supply delivers current).

Loop gain
---------
:func:`deck_ac_open_loop` cuts the loop at the transistor's input pin and
loads the cut with a copy of the stage; :func:`deck_ac_injection` writes the
two closed-loop decks of Middlebrook's injection method at the same pin,
which is exact for the linearised circuit (the break agreed with it within
0.2 % for the common-emitter topologies and 3.5 % for the common-base one).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.design import Design
from picker.circuit.device import model_from_profile
from picker.circuit.topology import GROUND_NODES, Topology, merged_node

#: Resistance that ties a DC-floating node group to ground, ohm (see module docstring).
FLOAT_TIE_OHM = 1e9
#: Height of the start-up current pulse into the tank, ampere.
KICK_A = 100e-6
#: Start and width of the kick as fractions of the ideal period.
KICK_DELAY_PERIODS = 0.1
KICK_WIDTH_PERIODS = 0.1
#: Smallest number of time steps per ideal period.
STEPS_PER_PERIOD = 200
#: Default transient length, ideal periods.
DEFAULT_PERIODS = 300
#: Digits after the point that ``wrdata`` writes (ngspice's default gives 9 significant digits).
WRDATA_DIGITS = 15
#: Model name of the transistor.
MODEL = "QGEN"


@dataclass(frozen=True)
class Element:
    """One two-terminal (or coupling/transistor) deck line before formatting."""

    name: str
    nodes: tuple[str, ...]
    value: str
    conducts_dc: bool
    ref: str | None = None  # the position it stands for


def _num(x: float) -> str:
    return f"{float(x):.12g}"


def spice_node(topo: Topology, present: set[str], node: str) -> str:
    """The deck's name for a declared node (``GND`` -> ``0``, ``VCC`` -> ``vcc``, merges applied)."""
    if node == "GND":
        return "0"
    if node == "VCC":
        return "vcc"
    return merged_node(topo, present, node)


def ideal_freq_hz(design: Design) -> float:
    """Ideal tank resonance of ``design`` from the topology's hand method, hertz."""
    vals = {r: np.asarray(v, dtype=float) for r, v in design.values.items() if v is not None}
    one = np.asarray(1.0)
    return float(np.ravel(design.topo.hand(vals, one, one).freq_ideal_hz)[0])


def circuit_nodes(design: Design) -> tuple[str, ...]:
    """Non-ground deck nodes of the topology (merges applied), transistor's first."""
    topo, present = design.topo, design.present()
    out: list[str] = []
    for n in topo.ac_nodes(present):
        m = spice_node(topo, present, n)
        if m not in out:
            out.append(m)
    return tuple(out)


def _circuit(design: Design) -> list[Element]:
    """Supply, positions, transistor and strays (no DC ties), in declaration order."""
    topo, present = design.topo, design.present()
    node = lambda n: spice_node(topo, present, n)  # noqa: E731
    out = [Element("VCC", ("vcc", "0"), f"DC {_num(design.vcc_v)}", True)]
    for p in topo.positions:
        if p.ref not in present:
            continue
        value = float(design.values[p.ref])
        if p.kind == "coupling":
            if value > 0:
                out.append(Element(f"K{p.a}{p.b}", (p.a, p.b), _num(value), False, p.ref))
            continue
        a, b = node(p.a), node(p.b)
        dcr = design.dcr_ohm(p.ref) if p.kind == "inductor" else 0.0
        if dcr > 0:
            inner = f"{p.ref}_dcr"
            out.append(Element(p.ref, (a, inner), _num(value), True, p.ref))
            out.append(Element(f"R{p.ref}_dcr", (inner, b), _num(dcr), True, p.ref))
        else:
            out.append(Element(p.ref, (a, b), _num(value), p.kind != "capacitor", p.ref))
    out.append(Element("Q1", (node("C"), node("B"), node("E")), MODEL, True))
    stray = design.node_stray_f
    if stray > 0:
        for n in circuit_nodes(design):
            out.append(Element(f"CSTRAY_{n}", (n, "0"), _num(stray), False))
    return out


def _tie_floating(elems: list[Element]) -> list[Element]:
    return elems + [Element(f"RFLOAT_{n}", (n, "0"), _num(FLOAT_TIE_OHM), True)
                    for n in floating_nodes(elems)]


def elements(design: Design) -> list[Element]:
    """The circuit's elements (no analysis, no kick) with the DC ties of floating nodes."""
    return _tie_floating(_circuit(design))


def floating_nodes(elems: list[Element]) -> tuple[str, ...]:
    """One node per group of nodes with no DC path to ground (union-find over DC elements)."""
    parent: dict[str, str] = {}

    def find(n: str) -> str:
        parent.setdefault(n, n)
        while parent[n] != n:
            parent[n] = parent[parent[n]]
            n = parent[n]
        return n

    order: list[str] = []
    for e in elems:
        if e.name.startswith("K"):
            continue  # a coupling names inductors, not nodes
        for n in e.nodes:
            find(n)
            if n not in order:
                order.append(n)
        if e.conducts_dc:
            first = find(e.nodes[0])
            for n in e.nodes[1:]:
                parent[find(n)] = first
    ground = find("0")
    seen: set[str] = set()
    out = []
    for n in order:
        root = find(n)
        if root != ground and root not in seen:
            seen.add(root)
            out.append(n)
    return tuple(out)


def _line(e: Element) -> str:
    return " ".join((e.name, *e.nodes, e.value))


def model_card(design: Design, hfe: float | None = None) -> str:
    """The transistor's ``.model`` line (hFE nominal unless ``hfe`` is given)."""
    n = design.npn
    h = n.hfe_nominal if hfe is None else float(hfe)
    return model_from_profile(h, n.vbe_v, n.ft_hz, n.cob_f, n.vaf_v).spice_card(MODEL)


def deck(design: Design, *, analysis: str = "tran", tstop_s: float | None = None,
         tmax_s: float | None = None, kick: bool = True, probes=None,
         out_file: str = "picker_out.txt", title: str | None = None,
         hfe: float | None = None) -> str:
    """An ngspice deck for ``design``.

    Parameters
    ----------
    design : Design
        A fully specified design.
    analysis : {"tran", "op"}
        Transient with a start-up kick, or the DC operating point.
    tstop_s : float, optional
        Transient length, second (default 300 ideal periods).
    tmax_s : float, optional
        Maximum time step, second (default and upper limit: ideal period / 200).
    kick : bool
        Add the current pulse into the tank node.
    probes : sequence of str, optional
        Deck nodes written by ``wrdata`` (default: tank node, B, E, C, X if present).
    out_file : str
        File the control block writes (relative to ngspice's working directory).
    title : str, optional
        First line of the deck.
    hfe : float, optional
        hFE of the model card (default: the profile's nominal), for corner runs.

    Returns
    -------
    str
        The deck text, ending in ``.end``.
    """
    if analysis not in ("tran", "op"):
        raise ValueError(f"analysis must be 'tran' or 'op' (got {analysis!r})")
    topo, present = design.topo, design.present()
    node = lambda n: spice_node(topo, present, n)  # noqa: E731
    nodes = circuit_nodes(design)
    lines = [title or f"picker {topo.name} {analysis}"]
    lines += [_line(e) for e in elements(design)]
    lines.append(model_card(design, hfe))
    lines.append(f".temp {_num(design.temp_c)}")
    if analysis == "tran":
        period = 1.0 / ideal_freq_hz(design)
        step = period / STEPS_PER_PERIOD
        tmax = step if tmax_s is None else min(float(tmax_s), step)
        tstop = DEFAULT_PERIODS * period if tstop_s is None else float(tstop_s)
        if kick:
            d, w = KICK_DELAY_PERIODS * period, KICK_WIDTH_PERIODS * period
            edge = period / 1000
            lines.append(f"IK 0 {node(topo.tank_node)} PULSE(0 {_num(KICK_A)} {_num(d)} "
                         f"{_num(edge)} {_num(edge)} {_num(w)} {_num(10 * tstop)})")
        lines.append(f".tran {_num(tmax)} {_num(tstop)} 0 {_num(tmax)}")
        if probes is None:
            probes = [node(topo.tank_node)] + [n for n in ("B", "E", "C", "X") if n in nodes]
            probes = list(dict.fromkeys(probes))
        vecs = " ".join(f"v({p})" for p in probes)
        control = ["set wr_singlescale", "set wr_vecnames", f"set numdgt={WRDATA_DIGITS}", "run",
                   f"wrdata {out_file} {vecs}"]
    else:
        vecs = " ".join(f"v({n})" for n in ("B", "E", "C", "X") if n in nodes)
        control = ["set filetype=ascii", "op", f"write {out_file} {vecs} i(VCC)"]
    lines += [".control", *control, "quit", ".endc", ".end"]
    return "\n".join(lines) + "\n"


# -- open-loop small-signal deck -------------------------------------------------

#: Inductance that carries DC but is an open circuit at the tank frequencies, henry.
BIG_L_H = 1e6
#: Capacitance that is a short at the tank frequencies but blocks DC, farad.
BIG_C_F = 1.0
#: Roles of positions that belong to the transistor's stage rather than to the feedback network.
STAGE_ROLES = ("bias", "load", "degeneration", "emitter", "bypass")


def input_pin(design: Design) -> str:
    """The transistor terminal the feedback drives: ``E`` if a capacitor grounds the base, else ``B``."""
    for p in design.topo.positions:
        if (p.kind == "capacitor" and p.ref in design.present()
                and {p.a, p.b} & {"B"} and {p.a, p.b} - {"B"} <= set(GROUND_NODES)):
            return "E"
    return "B"


def open_loop_nodes(design: Design) -> tuple[str, str]:
    """(returned node, driven node) of :func:`deck_ac_open_loop`; loop gain = v(ret) / v(drv)."""
    pin = input_pin(design)
    return spice_node(design.topo, design.present(), pin), f"Q1{pin}"


def deck_ac_open_loop(design: Design, fstart_hz: float, fstop_hz: float, points: int, *,
                      hfe: float | None = None, out_file: str = "picker_out.txt",
                      title: str | None = None) -> str:
    """Small-signal deck of the loop broken at the transistor's input pin.

    The break sits at the terminal the feedback drives (:func:`input_pin`):
    the base for the common-emitter topologies, just behind the base
    coupling capacitor and the bias divider, which stay in the circuit; the
    emitter for the common-base Colpitts, behind the C1/C2 divider and RE.
    The pin is cut from its node; ``LBRK`` (``BIG_L_H``) carries the DC bias
    across the cut and ``VIN`` (AC 1) drives the pin through ``CBRK``
    (``BIG_C_F``).  The node left behind is loaded with a copy of what the pin
    presented: a second transistor ``Q2`` on copies of the stage's own
    positions (roles in ``STAGE_ROLES``, nodes suffixed ``_cp``), biased like
    ``Q1`` through ``LBIG_CP`` and coupled to the node through ``CBIG_CP``.
    The copy's collector sees only the stage's load positions (the tank's
    loading of the collector is left out, so its Miller capacitance is a
    little off); a collector with no copied load goes to the supply.

    The loop gain is ``v(ret) / v(drv)`` of :func:`open_loop_nodes`; at its
    phase-zero frequency its magnitude must exceed 1 for start-up.

    Parameters
    ----------
    fstart_hz, fstop_hz : float
        Sweep limits, hertz.
    points : int
        Points per decade.
    """
    topo, present = design.topo, design.present()
    pin = input_pin(design)
    ret, drv = open_loop_nodes(design)
    circuit = _circuit(design)
    out: list[Element] = []
    for e in circuit:
        if e.name == "Q1":
            pins = dict(zip("CBE", e.nodes))
            pins[pin] = drv
            e = Element("Q1", (pins["C"], pins["B"], pins["E"]), MODEL, True)
        out.append(e)
    out += [
        Element("LBRK", (ret, drv), _num(BIG_L_H), True),
        Element("CBRK", ("drvin", drv), _num(BIG_C_F), False),
        Element("VIN", ("drvin", "0"), "DC 0 AC 1", True),
    ]
    # the copy of the stage
    cp = lambda n: n if n in ("0", "vcc") else f"{n}_cp"  # noqa: E731
    stage = {p.ref for p in topo.positions if p.role in STAGE_ROLES}
    copied = [Element(f"{e.name}_CP", tuple(cp(n) for n in e.nodes), e.value, e.conducts_dc)
              for e in circuit if e.ref in stage]
    used = {n for e in copied for n in e.nodes}
    q1 = next(e for e in circuit if e.name == "Q1")
    q2 = {k: cp(n) for k, n in zip("CBE", q1.nodes)}
    if q2["C"] not in used:
        q2["C"] = "vcc"
    copied += [Element(f"{e.name}_CP", (cp(e.nodes[0]), "0"), e.value, False)
               for e in circuit if e.name.startswith("CSTRAY_") and e.nodes[0] != ret
               and cp(e.nodes[0]) in used]
    q2[pin] = f"Q2{pin}"
    copied += [
        Element("Q2", (q2["C"], q2["B"], q2["E"]), MODEL, True),
        Element("LBIG_CP", (cp(ret), q2[pin]), _num(BIG_L_H), True),
        Element("CBIG_CP", (ret, q2[pin]), _num(BIG_C_F), False),
    ]
    return _ac_deck(title or f"picker {topo.name} open loop ac", out + copied, design, hfe,
                    fstart_hz, fstop_hz, points, out_file, f"v({ret}) v({drv})")


def deck_ac_injection(design: Design, fstart_hz: float, fstop_hz: float, points: int, *,
                      inject: str = "voltage", hfe: float | None = None,
                      out_file: str = "picker_out.txt", title: str | None = None) -> str:
    """Small-signal deck for Middlebrook's injection at the transistor's input pin (loop closed).

    ``inject="voltage"``: ``VZ`` (DC 0, AC 1) in series between the pin's
    node and the pin; writes ``v(<node>)`` and ``v(Q1<pin>)``, whose ratio is
    the voltage loop gain Gv.  ``inject="current"``: ``IZ`` (AC 1) into the
    node and a 0 V ammeter ``VM`` in series with the pin; writes ``i(VM)``,
    the pin current i, so that the current loop gain is Gi = (i - 1) / i.
    The loop gain is then (Gv Gi - 1) / (Gv + Gi - 2) (the positive-feedback
    sign of Middlebrook's formula), free of the loading error of a plain break.

    References
    ----------
    R. D. Middlebrook, "Measurement of loop gain in feedback systems",
    Int. J. Electronics 38(4), 1975.
    """
    if inject not in ("voltage", "current"):
        raise ValueError(f"inject must be 'voltage' or 'current' (got {inject!r})")
    topo = design.topo
    pin = input_pin(design)
    ret, drv = open_loop_nodes(design)
    out: list[Element] = []
    for e in _circuit(design):
        if e.name == "Q1":
            pins = dict(zip("CBE", e.nodes))
            pins[pin] = drv
            e = Element("Q1", (pins["C"], pins["B"], pins["E"]), MODEL, True)
        out.append(e)
    if inject == "voltage":
        out.append(Element("VZ", (drv, ret), "DC 0 AC 1", True))
        probes = f"v({ret}) v({drv})"
    else:
        out.append(Element("VM", (ret, drv), "DC 0", True))
        out.append(Element("IZ", ("0", ret), "DC 0 AC 1", False))
        probes = "i(VM)"
    return _ac_deck(title or f"picker {topo.name} {inject} injection ac", out, design, hfe,
                    fstart_hz, fstop_hz, points, out_file, probes)


def _ac_deck(title, elems, design, hfe, fstart_hz, fstop_hz, points, out_file, probes) -> str:
    """Deck text for an AC sweep of ``elems`` writing ``probes`` with wrdata."""
    lines = [title] + [_line(e) for e in _tie_floating(elems)]
    lines.append(model_card(design, hfe))
    lines.append(f".temp {_num(design.temp_c)}")
    lines.append(f".ac dec {int(points)} {_num(fstart_hz)} {_num(fstop_hz)}")
    lines += [".control", "set wr_singlescale", "set wr_vecnames", f"set numdgt={WRDATA_DIGITS}",
              "run", f"wrdata {out_file} {probes}", "quit", ".endc", ".end"]
    return "\n".join(lines) + "\n"
