"""Remedies for a design whose amplitude bursts: degeneration, or a smaller bypass capacitor.

Two standard cures (common practice, no source), each searched over the
values the caller offers (the store's parts on hand, or an E-series):

* **degeneration**: split the emitter resistor into an unbypassed RE1 and a
  bypassed RE2 with RE1 + RE2 close to the old RE (so the bias current
  stays); the smallest RE1 that makes every corner settle while the
  worst-case margin still meets the spec.  Only topologies that declare a
  ``degeneration`` position offer it.
* **bypass**: the largest bypass capacitance (role ``bypass``) below the
  present one that makes every corner settle with the margin met; a smaller
  capacitor recharges faster, so the bias keeps up with the amplitude.

Every candidate is evaluated by the engine and the envelope model over the
same hFE/temperature corners as ``check``; all candidates of one kind go
through in one batch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.design import Design
from picker.circuit.dynamics import predict
from picker.circuit.engine import evaluate_batch
from picker.circuit.evaluate import corner_batch


@dataclass(frozen=True)
class Remedy:
    """One suggested change; ``values`` are the new values of the positions it changes (SI)."""

    kind: str  # "degeneration" or "bypass"
    values: dict  # the suggested change: one offered value beyond the threshold
    threshold: dict  # the mildest offered change that settles (the edge)
    margin_worst: float  # of the suggested change

    def as_dict(self) -> dict:
        return {"kind": self.kind, "values": dict(self.values), "threshold": dict(self.threshold),
                "margin_worst": float(self.margin_worst)}


def evaluate_variants(design: Design, variants: list[dict], temps: tuple[float, ...]):
    """(margin_worst, settles_everywhere) per variant: each variant a dict of changed values."""
    batch, corners = corner_batch([design.with_values(**v) for v in variants], temps)
    res = evaluate_batch(batch)
    dyn = predict(batch, res)
    k = len(corners)
    margin = np.asarray(res.margin).reshape(len(variants), k).min(axis=1)
    settles = dyn.settles().reshape(len(variants), k).all(axis=1)
    return margin, settles


def _degeneration_variants(design: Design, resistors_ohm: np.ndarray) -> list[dict]:
    topo = design.topo
    deg = [p for p in topo.positions if p.role == "degeneration"]
    if not deg:
        return []
    re1_ref = deg[0].ref
    bypassed = [p for p in topo.positions if p.dc == "emitter" and p.role != "degeneration"]
    if not bypassed:
        return []
    re2_ref = bypassed[0].ref
    total = design.values.get(re1_ref, 0.0) + design.values[re2_ref]
    res = np.unique(np.asarray(resistors_ohm, dtype=float))
    out = []
    for re1 in res[(res > design.values.get(re1_ref, 0.0)) & (res <= total / 2)]:
        re2 = res[np.argmin(np.abs(np.log(res / (total - re1))))]
        out.append({re1_ref: float(re1), re2_ref: float(re2)})
    return out


def _bypass_variants(design: Design, capacitors_f: np.ndarray) -> list[dict]:
    out = []
    caps = np.unique(np.asarray(capacitors_f, dtype=float))
    for p in design.topo.positions:
        if p.role == "bypass" and p.ref in design.values:
            now = design.values[p.ref]
            out += [{p.ref: float(c)} for c in caps[(caps < now) & (caps >= now / 1000)][::-1]]
    return out


def find_remedies(design: Design, min_margin: float, temps: tuple[float, ...],
                  resistors_ohm: np.ndarray, capacitors_f: np.ndarray) -> list[Remedy]:
    """The remedy of each kind that settles at every corner with ``margin_worst >= min_margin``.

    Degeneration: the smallest RE1 among ``resistors_ohm`` (RE2 the nearest
    offered value to RE - RE1).  Bypass: the largest capacitance among
    ``capacitors_f`` below the present bypass capacitor (down to 1/1000 of it).
    That mildest change is the ``threshold``; the suggestion is one offered
    value further (when it also works), so that part tolerance and the
    model's own error do not leave the build on the edge.  An empty list
    means neither cure works within the offered values.
    """
    out = []
    for kind, variants in (("degeneration", _degeneration_variants(design, resistors_ohm)),
                           ("bypass", _bypass_variants(design, capacitors_f))):
        if not variants:
            continue
        margin, settles = evaluate_variants(design, variants, temps)
        ok = settles & (margin >= min_margin)
        first = np.flatnonzero(ok)
        if not first.size:
            continue
        k = int(first[0])  # variants are ordered mildest first: k is the threshold
        pick = k + 1 if k + 1 < len(variants) and ok[k + 1] else k
        out.append(Remedy(kind=kind, values=variants[pick], threshold=variants[k],
                          margin_worst=float(margin[pick])))
    return out
