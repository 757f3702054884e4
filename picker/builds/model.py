"""A build job as plain objects, shared by the store (``picker.store.builds``) and the renderers
(``picker.report.picklist``, ``picker.report.sheet``).  Nothing here touches SQL.

The saved-design format (``--design FILE``, ``build show ID --design FILE``) is
JSON written and read by :func:`design_to_json` / :func:`design_from_json`::

    {"format": "picker-design/1",
     "topology": "colpitts-ce",
     "values": {"L1": 0.001, "C1": 4.7e-09, ...},          # SI units, every position
     "npn": {"name": "npn-general", "hfe_min": 110, ...},    # the profile's fields
     "vcc_v": 12.0, "style": "breadboard", "temps_c": [0, 50], "nominal_c": 25,
     "target": {"freq_hz": 455000.0, "tol": 0.01},           # optional
     "parts": {"L1": {"part_id": 12}, "C2": {"part_id": 40, "part2_id": 41, "how": "parallel"}, ...},
     "predicted": {"freq_hz": ..., "margin": ..., "margin_worst": ..., "yield": ...}}   # optional
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

DESIGN_FORMAT = "picker-design/1"
STATUSES = ("reserved", "done", "cancelled", "undone")


@dataclass(frozen=True)
class BuildLine:
    """One stock line a build takes: its quantity for all boards and where it goes."""

    part_id: int
    designators: tuple  # e.g. ("R1", "RE")
    kind: str
    value: float | None  # SI; None for npn
    name: str | None  # npn profile name
    tolerance: float | None
    voltage_v: float | None
    power_w: float | None
    dielectric: str | None
    dcr_ohm: float | None
    bin: str
    qty: int  # for all boards
    qty_on_hand: int  # now, in the store
    note: str | None = None


@dataclass(frozen=True)
class BuildRecord:
    """A build job with its design (saved-design dict, see the module docstring) and its lines."""

    id: int
    name: str
    boards: int
    status: str
    created_at: dt.datetime
    user: str | None
    design: dict
    lines: tuple = field(default_factory=tuple)


_PROFILE_FIELDS = ("name", "hfe_min", "hfe_max", "hfe_typ", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vceo_v", "pd_w")
_INFO_FIELDS = ("part_id", "tolerance", "voltage_v", "power_w", "dielectric", "dcr_ohm", "isat_a", "bin")


def design_to_json(design, *, parts: dict | None = None, target: dict | None = None, predicted: dict | None = None,
                   temps_c=(0.0, 50.0)) -> dict:
    """The saved-design dict of a :class:`picker.circuit.design.Design` (module docstring)."""
    out = {"format": DESIGN_FORMAT, "topology": design.topology,
           "values": {r: float(v) for r, v in design.values.items() if v is not None},
           "npn": {f: getattr(design.npn, f) for f in _PROFILE_FIELDS},
           "vcc_v": float(design.vcc_v), "style": design.style, "temps_c": [float(t) for t in temps_c],
           "nominal_c": float(design.temp_c),
           "part_info": {r: {f: getattr(i, f) for f in _INFO_FIELDS if getattr(i, f) is not None}
                         for r, i in design.parts.items()},
           "parts": parts or {r: {"part_id": i.part_id} for r, i in design.parts.items() if i.part_id is not None}}
    if design.stray_f is not None:
        out["stray_f"] = float(design.stray_f)
    if target:
        out["target"] = dict(target)
    if predicted:
        out["predicted"] = dict(predicted)
    return out


def design_from_json(data: dict):
    """A :class:`~picker.circuit.design.Design` from a saved-design dict; ``ValueError`` naming
    the first missing or bad field (the caller turns it into a user message with the file name)."""
    from picker.circuit.design import Design, PartInfo
    from picker.circuit.device import NpnProfile
    from picker.circuit.topology import get_topology, topology_names

    if not isinstance(data, dict) or data.get("format") != DESIGN_FORMAT:
        raise ValueError(f"not a saved design: expected \"format\": \"{DESIGN_FORMAT}\"")
    topo = data.get("topology")
    if topo not in topology_names():
        raise ValueError(f"topology: got {topo!r}; expected one of {', '.join(topology_names())}")
    values = data.get("values")
    if not isinstance(values, dict):
        raise ValueError("values: expected an object of designator -> value in SI units")
    known = {p.ref for p in get_topology(topo).positions}
    for r, v in values.items():
        if r not in known:
            raise ValueError(f"values.{r}: not a position of {topo} (accepted: {', '.join(sorted(known))})")
        if not isinstance(v, (int, float)) or isinstance(v, bool) or not v >= 0:
            raise ValueError(f"values.{r}: got {v!r}; expected a number >= 0 in SI units")
    npn = data.get("npn") or {}
    try:
        prof = NpnProfile(**{f: npn[f] for f in _PROFILE_FIELDS if f in npn and npn[f] is not None})
    except TypeError as e:
        raise ValueError(f"npn: {e}") from None
    info = {r: PartInfo(**{f: d.get(f) for f in _INFO_FIELDS}) for r, d in (data.get("part_info") or {}).items()}
    for key in ("vcc_v", "nominal_c"):
        if key in data and not isinstance(data[key], (int, float)):
            raise ValueError(f"{key}: got {data[key]!r}; expected a number")
    return Design(topology=topo, values={r: float(v) for r, v in values.items()}, npn=prof,
                  vcc_v=float(data.get("vcc_v", 12.0)), temp_c=float(data.get("nominal_c", 25.0)),
                  style=str(data.get("style", "breadboard")), stray_f=data.get("stray_f"), parts=info)
