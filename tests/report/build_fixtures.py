"""Hand-made build records for the pick-list and design-sheet tests (invented bins, notes and names).

The design is the demo's 77 kHz common-emitter Colpitts with 100 ohm of unbypassed emitter
resistance (a steady amplitude; the same values as ``tests/reference/designs.py`` "ce-77k").
"""

from __future__ import annotations

import datetime as dt

from picker.builds.model import BuildLine, BuildRecord, design_to_json
from picker.circuit.design import Design, PartInfo, complete_values
from picker.circuit.device import NpnProfile
from picker.circuit.topology import get_topology

VALUES = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "CE": 1e-6,
          "CC1": 100e-9, "C1": 4.7e-9, "L1": 1e-3, "C2": 47e-9, "CC2": 100e-9}

#: part_id, designators, kind, value, tolerance, voltage, power, dielectric, dcr, bin, qty per board, on hand
LINES = [
    (11, ("R1",), "resistor", 33e3, 0.05, None, 0.25, None, None, "R-A10", 1, 40),
    (12, ("R2",), "resistor", 10e3, 0.05, None, 0.25, None, None, "R-A2", 1, 25),
    (13, ("RC", "RE"), "resistor", 2.2e3, 0.01, None, 0.25, None, None, "R-A9", 2, 9),
    (14, ("RE1",), "resistor", 100.0, 0.05, None, 0.125, None, None, "R-B1", 1, 3),
    (21, ("CE",), "capacitor", 1e-6, 0.2, 50.0, None, "X7R", None, "C-B12", 1, 10),
    (22, ("CC1", "CC2"), "capacitor", 100e-9, 0.1, 50.0, None, "X7R", None, "C-B3", 2, 30),
    (23, ("C1",), "capacitor", 4.7e-9, 0.02, 100.0, None, "C0G", None, "C-A1", 1, 6),
    (24, ("C2",), "capacitor", 47e-9, 0.05, 63.0, None, "film", None, "C-A20", 1, 4),
    (31, ("L1",), "inductor", 1e-3, 0.1, None, None, None, 12.0, "L-1", 1, 2),
    (41, ("Q1",), "npn", None, None, None, None, None, None, "Q-3", 1, 10),
]

NPN = NpnProfile(name="npn-bench", hfe_min=110, hfe_max=400, vceo_v=45.0, pd_w=0.5)


def make_design(npn_name: str = NPN.name) -> Design:
    topo = get_topology("colpitts-ce")
    values, _ = complete_values(topo, VALUES)
    parts = {ref: PartInfo(part_id=pid, tolerance=tol, voltage_v=v, power_w=p, dielectric=diel, dcr_ohm=dcr, bin=b)
             for pid, refs, kind, _, tol, v, p, diel, dcr, b, _, _ in LINES if kind != "npn" for ref in refs}
    npn = NpnProfile(**{**NPN.__dict__, "name": npn_name, "extra": {}})
    return Design(topology="colpitts-ce", values=values, npn=npn, vcc_v=12.0, temp_c=25.0, style="perfboard",
                  parts=parts)


def make_record(*, boards: int = 2, name: str = "Bench tone, 77 kHz", notes: dict | None = None,
                bins: dict | None = None, npn_name: str = NPN.name, user: str | None = "bench-a",
                target: dict | None = None) -> BuildRecord:
    """A record with ``boards`` boards; ``notes``/``bins`` override a line's note/bin by part id."""
    notes, bins = notes or {}, bins or {}
    design = make_design(npn_name)
    target = {"freq_hz": 77e3, "tol": 0.05, "min_margin": 2.0} if target is None else target
    lines = tuple(BuildLine(part_id=pid, designators=refs, kind=kind, value=value,
                            name=npn_name if kind == "npn" else None, tolerance=tol, voltage_v=v, power_w=p,
                            dielectric=diel, dcr_ohm=dcr, bin=bins.get(pid, b), qty=per * boards,
                            qty_on_hand=have, note=notes.get(pid))
                  for pid, refs, kind, value, tol, v, p, diel, dcr, b, per, have in LINES)
    return BuildRecord(id=7, name=name, boards=boards, status="reserved", created_at=dt.datetime(2026, 11, 30, 14, 5),
                       user=user, design=design_to_json(design, target=target, temps_c=(0.0, 50.0)), lines=lines)


def line(part_id: int, refs: tuple, kind: str, value, bin_: str, qty: int, have: int, **kw) -> BuildLine:
    """One BuildLine with blank ratings unless given."""
    base = dict(name=None, tolerance=None, voltage_v=None, power_w=None, dielectric=None, dcr_ohm=None, note=None)
    base.update(kw)
    return BuildLine(part_id=part_id, designators=tuple(refs), kind=kind, value=value, bin=bin_, qty=qty,
                     qty_on_hand=have, **base)
