"""The demo's design: a 77 kHz common-emitter Colpitts built from parts in the demo cabinet.

:func:`demo_design` looks every position up in the store by kind and exact
value (tank capacitors prefer C0G/NP0/film, as a builder would), so the check
that ``picker demo`` shows uses real part ids, bins, ratings and DC resistance.
"""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.orm import Session

from picker.circuit.design import Design, complete_values
from picker.circuit.topology import get_topology
from picker.errors import PickerError
from picker.store.models import Part

#: The demo's target: about 77 kHz with 100 ohm of emitter degeneration (a steady amplitude).
DEMO_TOPOLOGY = "colpitts-ce"
DEMO_VALUES = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "CE": 1e-6,
               "CC1": 100e-9, "C1": 4.7e-9, "L1": 1e-3, "C2": 47e-9, "CC2": 100e-9}
STABLE_DIELECTRICS = ("C0G", "NP0", "film", "mica")


def _pick(parts: list[Part], role: str) -> Part:
    if role == "tank":
        stable = [p for p in parts if (p.dielectric or "") in STABLE_DIELECTRICS]
        parts = stable or parts
    return max(parts, key=lambda p: p.qty)


def demo_design(session: Session, supply_v: float = 12.0, style: str = "perfboard") -> Design:
    """The demo design with every position taken from a part in the store."""
    from picker.cli.check import _info, _profile  # the same conversion ``check --part id:N`` uses

    topo = get_topology(DEMO_TOPOLOGY)
    parts, given = {}, {}
    for ref, value in DEMO_VALUES.items():
        pos = topo.position(ref)
        rows = [p for p in session.scalars(select(Part).where(Part.kind == pos.kind, Part.qty > 0))
                if p.value is not None and abs(p.value / value - 1) < 1e-9]
        if not rows:
            raise PickerError(f"the demo store has no {pos.kind} of the demo design's {ref} value")
        part = _pick(rows, pos.role)
        parts[ref], given[ref] = _info(part), float(part.value)
    npn = session.scalars(select(Part).where(Part.kind == "npn").order_by(Part.id)).first()
    if npn is None:
        raise PickerError("the demo store has no npn profile")
    values, defaulted = complete_values(topo, given)
    return Design(topology=DEMO_TOPOLOGY, values=values, npn=_profile(npn), vcc_v=supply_v,
                  style=style, parts=parts, defaulted=defaulted)
