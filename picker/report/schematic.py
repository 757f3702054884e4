"""Schematic of a design, drawn with schemdraw and returned as SVG text.

One layout function per topology (:data:`LAYOUTS`) places the positions the
topology declares (:mod:`picker.circuit.topologies`): the supply rail on top,
the bias divider on the left, the transistor ``Q1`` in the middle, the
emitter network below it and the tank on the right.  Every present position
is drawn with the label ``designator`` over ``value`` (engineering notation,
:func:`picker.units.format_value`); an absent optional position (``RE1``) is
a plain wire, as the engine and the SPICE deck take it (a short).  The
Hartley's coupling ``K`` is a text label between its coils.

schemdraw's own SVG backend renders the drawing (no matplotlib); it escapes
every label, so text from the store cannot inject markup.

Coordinates are schemdraw grid units (one resistor body is about 1 unit
long, an element's default length 3).  Vertical parts are drawn upwards so
that their label sits on the left (``loc="top"``) or right (``"bottom"``).
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import schemdraw
import schemdraw.elements as elm

from picker.circuit.design import Design
from picker.units import format_eng, format_value

#: Height of the supply rail and of the ground symbols below the emitter network, grid units.
RAIL_Y = 9.0
GROUND_Y = -1.5
#: Base position of the transistor symbol (the collector and emitter leads follow from it).
BASE_AT = (4.5, 4.0)
#: Level of the wire that carries the feedback back to the base (below every ground symbol).
RETURN_Y = -3.5
#: x of the bias column and of the feedback wire's junction on the base lead.
BIAS_X = 2.0
JOIN_X = 3.0


#: Stands in for ``$`` while schemdraw lays the text out (it reads ``$...$`` as math); put back after.
_DOLLAR = "\ue000"


def safe_text(text: str) -> str:
    """Text from the store made safe for a schemdraw label.

    schemdraw escapes ``<`` and ``>`` but parses the rest as XML and reads ``$...$`` as math:
    ``&`` is given as its entity, ``$`` as a placeholder that :meth:`_Sheet.svg` puts back,
    control characters (which XML cannot hold) become spaces.
    """
    s = "".join(" " if ord(c) < 32 or 0xFFFE <= ord(c) <= 0xFFFF or 0xD800 <= ord(c) <= 0xDFFF else c
                for c in str(text))
    return s.replace("&", "&amp;").replace("$", _DOLLAR)


def label_of(design: Design, ref: str) -> str:
    """``"R1\\n33 kΩ"``: designator over the value in engineering notation."""
    v = float(design.values[ref])
    kind = design.topo.position(ref).kind
    if kind == "coupling":
        return f"{ref}\n{v:g}"
    return f"{ref}\n{format_value(v, kind)}"


class _Sheet:
    """Helpers over one schemdraw Drawing for a design."""

    ELEMENT = {"resistor": elm.Resistor, "capacitor": elm.Capacitor, "inductor": elm.Inductor2}

    def __init__(self, design: Design):
        self.design = design
        self.present = design.present()
        self.d = schemdraw.Drawing(canvas="svg", show=False)
        self.d.config(fontsize=12, unit=3)

    def has(self, ref: str) -> bool:
        return ref in self.present

    def part(self, ref: str, a, b, side: str = "left"):
        """Position ``ref`` from ``a`` to ``b``; absent: a wire.  ``side``: where the label goes
        (left/right for a vertical part, drawn upwards; above/below for a horizontal one)."""
        a, b = tuple(a), tuple(b)
        if not self.has(ref):
            return self.wire(a, b)
        kind = self.design.topo.position(ref).kind
        if abs(a[0] - b[0]) < 1e-9 and a[1] > b[1]:
            a, b = b, a  # vertical: draw upwards
        if abs(a[1] - b[1]) < 1e-9 and a[0] > b[0]:
            a, b = b, a  # horizontal: draw rightwards
        loc = "top" if side in ("left", "above") else "bottom"
        return self.d.add(self.ELEMENT[kind]().endpoints(a, b).label(label_of(self.design, ref), loc=loc))

    def wire(self, *points):
        pts = [tuple(p) for p in points]
        for a, b in zip(pts, pts[1:]):
            if a != b:
                self.d.add(elm.Line().endpoints(a, b))

    def dot(self, p):
        self.d.add(elm.Dot().at(tuple(p)))

    def ground(self, p):
        self.d.add(elm.Ground().at(tuple(p)))

    def rail(self, x0: float, x1: float):
        self.d.add(elm.Vdd().at((x0, RAIL_Y)).label(f"VCC {format_eng(self.design.vcc_v, 'V')}"))
        self.wire((x0, RAIL_Y), (x1, RAIL_Y))

    def transistor(self):
        name = safe_text(self.design.npn.name)
        q = self.d.add(elm.BjtNpn(circle=True).at(BASE_AT).anchor("base").label(f"Q1\n{name}", loc="right",
                                                                                   ofst=(0.3, 0.0)))
        return q

    def svg(self) -> str:
        data = self.d.get_imagedata("svg")
        text = data.decode("utf-8") if isinstance(data, bytes) else str(data)
        return text.replace(_DOLLAR, "$")


def _ce_stage(s: _Sheet):
    """Bias divider, collector load, RE1/RE/CE and the transistor of the common-emitter topologies.

    Returns (collector node, base join point) for the tank to attach to.
    """
    q = s.transistor()
    cx = float(q.collector[0])
    bx, by = BASE_AT
    s.rail(BIAS_X, cx)
    b_node = (BIAS_X, by)
    s.part("R1", b_node, (BIAS_X, RAIL_Y), "left")
    s.part("R2", (BIAS_X, GROUND_Y + 1.5), b_node, "left")
    s.ground((BIAS_X, GROUND_Y + 1.5))
    s.dot(b_node)
    s.wire(b_node, (bx, by))
    c_node = (cx, by + 1.5)
    s.wire(tuple(q.collector), c_node)
    s.part("RC", c_node, (cx, RAIL_Y), "left")
    s.dot((cx, RAIL_Y))
    x_node = (cx, by - 3.0)
    s.part("RE1", tuple(q.emitter), x_node, "left")
    s.part("RE", (cx, GROUND_Y), x_node, "left")
    s.ground((cx, GROUND_Y))
    ce_x = cx + 1.75
    s.dot(x_node)
    s.wire(x_node, (ce_x, x_node[1]))
    s.part("CE", (ce_x, GROUND_Y), (ce_x, x_node[1]), "right")
    s.ground((ce_x, GROUND_Y))
    s.dot(c_node)
    return c_node, (JOIN_X, by)


def _ce_tank(s: _Sheet, c_node, join, shunt_t: str, series: tuple[str, ...], shunt_f: str, x0: float = 8.75,
             step: float = 3.0):
    """CC1 from the collector to T, ``shunt_t`` T-GND, ``series`` T..F, ``shunt_f`` F-GND, CC2 F back to B."""
    y = c_node[1]
    t = (x0, y)
    s.part("CC1", c_node, t, "above")
    s.dot(t)
    tank_gnd = y - 3.0
    s.part(shunt_t, (x0, tank_gnd), t, "right")
    s.ground((x0, tank_gnd))
    x = x0
    for ref in series:
        s.part(ref, (x, y), (x + step, y), "above")
        x += step
        if ref != series[-1]:
            s.dot((x, y))
    f = (x, y)
    s.dot(f)
    s.part(shunt_f, (x, tank_gnd), f, "right")
    s.ground((x, tank_gnd))
    back_x = x + 2.5
    s.part("CC2", f, (back_x, y), "above")
    s.wire((back_x, y), (back_x, RETURN_Y), (join[0], RETURN_Y), join)
    s.dot(join)
    return f


def layout_colpitts_ce(design: Design) -> _Sheet:
    s = _Sheet(design)
    c_node, join = _ce_stage(s)
    _ce_tank(s, c_node, join, "C1", ("L1",), "C2")
    return s


def layout_clapp(design: Design) -> _Sheet:
    s = _Sheet(design)
    c_node, join = _ce_stage(s)
    _ce_tank(s, c_node, join, "C1", ("L1", "C3"), "C2")
    return s


def layout_hartley(design: Design) -> _Sheet:
    s = _Sheet(design)
    c_node, join = _ce_stage(s)
    x0, step = 8.75, 3.5
    _ce_tank(s, c_node, join, "L1", ("C1",), "L2", x0=x0, step=step)
    if s.has("K"):
        k = float(design.values["K"])
        what = "L1-L2" if k > 0 else "L1-L2 apart"
        s.d.add(elm.Label().at((x0 + step / 2, c_node[1] - 4.6)).label(f"K\n{k:g} {what}"))
    return s


def layout_colpitts_cb(design: Design) -> _Sheet:
    s = _Sheet(design)
    q = s.transistor()
    cx = float(q.collector[0])
    bx, by = BASE_AT
    tank_x = cx + 3.0
    s.rail(BIAS_X, cx)
    b_node = (BIAS_X, by)
    s.part("R1", b_node, (BIAS_X, RAIL_Y), "left")
    s.part("R2", (BIAS_X, GROUND_Y + 1.5), b_node, "left")
    s.ground((BIAS_X, GROUND_Y + 1.5))
    s.dot(b_node)
    s.wire(b_node, (bx, by))
    cb = (JOIN_X + 0.3, by)
    s.dot(cb)
    s.part("CB", (cb[0], GROUND_Y + 1.5), cb, "right")
    s.ground((cb[0], GROUND_Y + 1.5))
    c_node = (cx, by + 1.5)
    s.wire(tuple(q.collector), c_node)
    s.part("L1", c_node, (cx, RAIL_Y), "left")
    e_node = (cx, by - 2.0)
    s.wire(tuple(q.emitter), e_node)
    s.dot(c_node)
    s.dot(e_node)
    s.wire(c_node, (tank_x, c_node[1]))
    s.part("C1", (tank_x, e_node[1]), (tank_x, c_node[1]), "right")
    s.wire(e_node, (tank_x, e_node[1]))
    s.dot((tank_x, e_node[1]))
    s.part("C2", (tank_x, GROUND_Y), (tank_x, e_node[1]), "right")
    s.ground((tank_x, GROUND_Y))
    s.part("RE", (cx, GROUND_Y), e_node, "left")
    s.ground((cx, GROUND_Y))
    return s


#: Layout function per topology name.
LAYOUTS: dict[str, Callable[[Design], _Sheet]] = {
    "colpitts-ce": layout_colpitts_ce,
    "colpitts-cb": layout_colpitts_cb,
    "clapp": layout_clapp,
    "hartley": layout_hartley,
}


def schematic_svg(design: Design) -> str:
    """The schematic of ``design`` as SVG text (one ``<svg>`` element, no XML declaration)."""
    layout = LAYOUTS.get(design.topology)
    if layout is None:
        raise ValueError(f"no schematic layout for topology {design.topology!r} "
                         f"(layouts: {', '.join(LAYOUTS)})")
    return layout(design).svg()


def write_schematic(design: Design, path: str | Path) -> Path:
    """Write :func:`schematic_svg` to ``path`` (UTF-8); returns the path."""
    path = Path(path)
    path.write_text(schematic_svg(design), encoding="utf-8")
    return path
