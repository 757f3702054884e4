"""A design: one topology with a value at every position, the transistor, supply, temperature, style.

``Design`` is the single, user-facing object; ``DesignBatch`` is the same as
arrays with a leading batch axis, which is what the engine computes on.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Mapping

import numpy as np

from picker.circuit.device import NpnProfile
from picker.circuit.topology import Topology, get_topology
from picker.errors import PickerError

#: Stray capacitance from every circuit node to ground by build style, farad.
#: Rough common practice (no source): a short track over a ground plane ~1 pF,
#: perfboard point-to-point wiring ~3 pF, a solderless breadboard's contact
#: strips ~5 pF.  Users may override with ``stray_f``.
STYLE_STRAY_F = {"ideal": 0.0, "pcb": 1e-12, "perfboard": 3e-12, "breadboard": 5e-12}


#: Prefix of a calibrated style: ``calibrated:<farad per node>``, the stray fitted from a
#: measured build (``picker.builds.retune``; ``picker find --style calibrated:BUILD_ID`` writes it).
CALIBRATED_PREFIX = "calibrated:"


def calibrated_style(stray_f: float) -> str:
    """The style text of a calibrated stray (farad per node)."""
    return f"{CALIBRATED_PREFIX}{float(stray_f):.6g}"


def style_stray_f(style: str) -> float:
    if style.startswith(CALIBRATED_PREFIX):
        try:
            v = float(style[len(CALIBRATED_PREFIX):])
        except ValueError:
            v = float("nan")
        if not (np.isfinite(v) and 0 <= v < 1e-9):
            raise PickerError(f"calibrated build style: expected {CALIBRATED_PREFIX}FARAD with 0 <= FARAD < 1 nF "
                              f"(got {style!r})")
        return v
    if style not in STYLE_STRAY_F:
        raise PickerError(
            f"unknown build style (got {style!r}; expected one of {', '.join(STYLE_STRAY_F)})"
        )
    return STYLE_STRAY_F[style]


@dataclass(frozen=True)
class PartInfo:
    """What the store knows of the part at a position (all optional)."""

    part_id: int | None = None
    tolerance: float | None = None
    voltage_v: float | None = None
    power_w: float | None = None
    dielectric: str | None = None
    dcr_ohm: float | None = None
    isat_a: float | None = None
    bin: str | None = None


@dataclass(frozen=True)
class Design:
    """One fully specified oscillator (SI units)."""

    topology: str
    values: Mapping[str, float]
    npn: NpnProfile = field(default_factory=NpnProfile)
    vcc_v: float = 12.0
    temp_c: float = 25.0
    style: str = "ideal"
    stray_f: float | None = None
    parts: Mapping[str, PartInfo] = field(default_factory=dict)
    defaulted: tuple[str, ...] = ()

    @property
    def topo(self) -> Topology:
        return get_topology(self.topology)

    @property
    def node_stray_f(self) -> float:
        return style_stray_f(self.style) if self.stray_f is None else float(self.stray_f)

    def dcr_ohm(self, ref: str) -> float:
        info = self.parts.get(ref)
        return float(info.dcr_ohm) if info is not None and info.dcr_ohm else 0.0

    def present(self) -> set[str]:
        return {r for r, v in self.values.items() if v is not None and (v > 0 or r == "K")}

    def with_values(self, **changes: float) -> "Design":
        vals = dict(self.values)
        vals.update(changes)
        return replace(self, values=vals)


def complete_values(topology: Topology, given: Mapping[str, float]) -> tuple[dict[str, float], tuple[str, ...]]:
    """Fill positions the user left out with the topology's defaults; name them.

    Optional positions (RE1) stay absent unless given; 0 also means absent (a short).
    """
    values: dict[str, float] = {}
    for ref, v in given.items():
        values[topology.position(ref).ref] = float(v)
    defaulted = []
    for p in topology.positions:
        if p.ref not in values and not p.optional:
            values[p.ref] = p.default
            defaulted.append(p.ref)
    return values, tuple(defaulted)


#: DesignBatch's per-row arrays besides the position maps.
_ROW_FIELDS = ("hfe", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vcc_v", "temp_c", "stray_f")


@dataclass(frozen=True)
class DesignBatch:
    """Designs of one topology as arrays with a leading batch axis (length ``n``).

    ``values`` and ``dcr_ohm`` map designators to arrays; the transistor and
    conditions are arrays too, so tolerance, hFE and temperature spreads are
    just more rows.
    """

    topology: Topology
    values: Mapping[str, np.ndarray]
    dcr_ohm: Mapping[str, np.ndarray]
    hfe: np.ndarray
    vbe_v: np.ndarray
    ft_hz: np.ndarray
    cob_f: np.ndarray
    vaf_v: np.ndarray
    vcc_v: np.ndarray
    temp_c: np.ndarray
    stray_f: np.ndarray

    @property
    def n(self) -> int:
        return int(self.hfe.shape[0])

    @property
    def present(self) -> set[str]:
        return set(self.values)

    @classmethod
    def from_designs(cls, designs: list[Design], hfe: str | float = "nominal") -> "DesignBatch":
        """Stack designs of one topology; ``hfe`` is 'nominal', 'min', 'max' or a number."""
        if not designs:
            raise PickerError("no designs to evaluate")
        topo = designs[0].topo
        refs = [p.ref for p in topo.positions
                if any(p.ref in d.present() for d in designs)]

        def col(f):
            return np.array([f(d) for d in designs], dtype=float)

        def pick_hfe(d: Design) -> float:
            if isinstance(hfe, (int, float)):
                return float(hfe)
            return {"nominal": d.npn.hfe_nominal, "min": d.npn.hfe_min, "max": d.npn.hfe_max}[hfe]

        values = {r: col(lambda d, r=r: d.values.get(r, 0.0) or 0.0) for r in refs}
        dcr = {p.ref: col(lambda d, r=p.ref: d.dcr_ohm(r)) for p in topo.by_kind("inductor")}
        return cls(
            topology=topo, values=values, dcr_ohm=dcr,
            hfe=col(pick_hfe), vbe_v=col(lambda d: d.npn.vbe_v), ft_hz=col(lambda d: d.npn.ft_hz),
            cob_f=col(lambda d: d.npn.cob_f), vaf_v=col(lambda d: d.npn.vaf_v),
            vcc_v=col(lambda d: d.vcc_v), temp_c=col(lambda d: d.temp_c),
            stray_f=col(lambda d: d.node_stray_f),
        )

    def take(self, idx) -> "DesignBatch":
        """Rows ``idx`` (an index array) as a new batch."""
        sub = lambda a: np.asarray(a)[idx]  # noqa: E731
        return replace(
            self,
            values={k: sub(v) for k, v in self.values.items()},
            dcr_ohm={k: sub(v) for k, v in self.dcr_ohm.items()},
            **{f: sub(getattr(self, f)) for f in _ROW_FIELDS},
        )

    @classmethod
    def concat(cls, batches: list["DesignBatch"]) -> "DesignBatch":
        """Batches of one topology and the same positions, one after another."""
        first = batches[0]
        if len(batches) == 1:
            return first
        if any(b.topology.name != first.topology.name or set(b.values) != set(first.values) for b in batches):
            raise ValueError("concat: batches differ in topology or positions")
        cat = lambda f: np.concatenate([np.asarray(getattr(b, f)) for b in batches])  # noqa: E731
        return replace(
            first,
            values={k: np.concatenate([b.values[k] for b in batches]) for k in first.values},
            dcr_ohm={k: np.concatenate([b.dcr_ohm[k] for b in batches]) for k in first.dcr_ohm},
            **{f: cat(f) for f in _ROW_FIELDS},
        )

    def with_(self, **fields) -> "DesignBatch":
        return replace(self, **fields)
