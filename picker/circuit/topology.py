"""Topologies as declarations: a table of positions, each with its nodes, kind and role.

A topology module in :mod:`picker.circuit.topologies` defines one module-level
``TOPOLOGY`` object.  Everything else (the DC point, the small-signal matrices,
the SPICE deck, the search, the pick list) reads the circuit from that one
declaration, so adding a fifth topology means adding one module.

Node names: ``VCC`` is the supply, ``GND`` ground, ``B``, ``C``, ``E`` the
transistor's terminals, ``T`` and ``F`` the tank's two ends, ``X`` the node
between an unbypassed (``RE1``) and a bypassed emitter resistor, ``M`` any
inner tank node.  ``VCC`` and ``GND`` are both AC ground.
"""

from __future__ import annotations

import importlib
import pkgutil
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np

from picker.errors import PickerError

#: Kinds a position can take; the same words as the store's part kinds.
POSITION_KINDS = ("resistor", "capacitor", "inductor", "coupling")

#: What a position contributes to the DC network (the bias solver sums these).
DC_ROLES = ("top", "bottom", "collector", "emitter", None)

GROUND_NODES = ("GND", "VCC")


@dataclass(frozen=True)
class Position:
    """One designator of a topology.

    Parameters
    ----------
    ref : str
        Designator, e.g. ``"R1"``.
    kind : str
        ``resistor``, ``capacitor``, ``inductor`` or ``coupling`` (a coupling
        coefficient between two inductors, dimensionless).
    a, b : str
        The two nodes (for ``coupling``: the two inductor designators).
    role : str
        What the part does, in the builder's words (``bias``, ``load``,
        ``emitter``, ``degeneration``, ``bypass``, ``coupling``, ``tank``).
    default : float
        Value used when the user leaves the position out, in SI base units.
        The report names every defaulted position.
    dc : str or None
        Its place in the DC network: ``top`` (VCC to base), ``bottom`` (base
        to ground), ``collector`` (supply to collector; an inductor counts
        with its DC resistance), ``emitter`` (emitter to ground, summed).
    optional : bool
        A position that may be absent (``RE1``); absent means a short.
    feeds : str or None
        For coupling and bypass capacitors: what their reactance must be small
        against (``base`` input, ``collector`` load, ``emitter`` resistance).
    """

    ref: str
    kind: str
    a: str
    b: str
    role: str
    default: float
    dc: str | None = None
    optional: bool = False
    note: str = ""
    feeds: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in POSITION_KINDS:
            raise ValueError(f"{self.ref}: unknown position kind {self.kind!r}")
        if self.dc not in DC_ROLES:
            raise ValueError(f"{self.ref}: unknown dc role {self.dc!r}")


@dataclass(frozen=True)
class HandFigures:
    """The textbook hand method's figures for one design (arrays over a batch)."""

    freq_ideal_hz: np.ndarray
    feedback: np.ndarray
    gain: np.ndarray
    loop_gain: np.ndarray


@dataclass(frozen=True)
class Topology:
    """A declared oscillator circuit.

    ``hand`` computes the hand method's resonance, feedback ratio and gain
    from the values (a mapping designator -> array) and the hand bias
    (``re_ohm`` = VT/IE, the hand r'e); it is the baseline the engine beats.
    """

    name: str
    title: str
    positions: tuple[Position, ...]
    hand: Callable[[Mapping[str, np.ndarray], np.ndarray, np.ndarray], HandFigures]
    tank_node: str = "T"
    aliases: Mapping[str, str] = field(default_factory=dict)
    summary: str = ""

    # -- lookups ---------------------------------------------------------
    @property
    def refs(self) -> tuple[str, ...]:
        return tuple(p.ref for p in self.positions)

    def position(self, ref: str) -> Position:
        ref = self.canonical(ref)
        for p in self.positions:
            if p.ref == ref:
                return p
        raise PickerError(
            f"{self.name} has no position {ref!r} (positions: {', '.join(self.refs)})"
        )

    def canonical(self, ref: str) -> str:
        ref = ref.strip().upper()
        return self.aliases.get(ref, ref)

    def by_dc(self, dc: str) -> tuple[Position, ...]:
        return tuple(p for p in self.positions if p.dc == dc)

    def by_kind(self, kind: str) -> tuple[Position, ...]:
        return tuple(p for p in self.positions if p.kind == kind)

    def defaults(self) -> dict[str, float]:
        return {p.ref: p.default for p in self.positions if not p.optional}

    def ac_nodes(self, present: set[str]) -> tuple[str, ...]:
        """Non-ground nodes of the small-signal circuit, transistor's first."""
        nodes: list[str] = ["B", "C", "E"]
        for p in self.positions:
            if p.kind == "coupling" or p.ref not in present:
                continue
            for n in (p.a, p.b):
                if n not in GROUND_NODES and n not in nodes:
                    nodes.append(n)
        return tuple(nodes)


def merged_node(topology: Topology, present: set[str], node: str) -> str:
    """The node an absent optional position's far end merges into (a short)."""
    for p in topology.positions:
        if p.optional and p.ref not in present and node == p.b:
            return p.a
    return node


_REGISTRY: dict[str, Topology] = {}


def _load() -> dict[str, Topology]:
    if not _REGISTRY:
        from picker.circuit import topologies as pkg

        for info in sorted(pkgutil.iter_modules(pkg.__path__), key=lambda m: m.name):
            mod = importlib.import_module(f"{pkg.__name__}.{info.name}")
            topo = getattr(mod, "TOPOLOGY", None)
            if isinstance(topo, Topology):
                _REGISTRY[topo.name] = topo
    return _REGISTRY


def topology_names() -> tuple[str, ...]:
    return tuple(_load())


def get_topology(name: str) -> Topology:
    reg = _load()
    key = name.strip().lower()
    if key not in reg:
        raise PickerError(
            f"unknown topology (got {name!r}; expected one of {', '.join(reg)})"
        )
    return reg[key]
