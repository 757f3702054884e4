"""Modified nodal analysis of the small-signal circuit, batched over designs.

Every position of a topology stamps itself into the conductance matrix ``G``
and the capacitance/inductance matrix ``C`` so that the circuit reads
``(G + s C) x = b`` with ``x`` the node voltages followed by one current per
inductor.  The transistor is the hybrid-pi model: r_pi and C_pi base-emitter,
C_mu base-collector, r_o collector-emitter and the transconductance gm, which
is kept apart (``gm_stamp``) so the return ratio can be taken with respect to it.

References
----------
C.-W. Ho, A. E. Ruehli and P. A. Brennan, "The modified nodal approach to
network analysis", IEEE Trans. Circuits Syst. 22 (1975) 504-509.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from picker.circuit.design import DesignBatch
from picker.circuit.topology import GROUND_NODES, merged_node

#: Capacitance added from every node to ground so that C is invertible, farad.
#: 0.1 fF is a thousand times below any real stray; it only creates far-away
#: fast poles that the analysis ignores.
C_FLOOR_F = 1e-16


@dataclass(frozen=True)
class Hybrid:
    """Hybrid-pi parameters per design (arrays): siemens and farad."""

    gm_s: np.ndarray
    gpi_s: np.ndarray
    go_s: np.ndarray
    cpi_f: np.ndarray
    cmu_f: np.ndarray


@dataclass(frozen=True)
class Matrices:
    """``G`` and ``C`` without gm, the node index, and gm's stamp pattern."""

    g: np.ndarray  # (n, N, N)
    c: np.ndarray  # (n, N, N)
    nodes: tuple[str, ...]
    index: dict[str, int]
    gm_pattern: np.ndarray  # (N, N): G += gm * gm_pattern

    def node(self, name: str) -> int:
        return self.index[name]


def _stamp(m: np.ndarray, i: int, j: int, val: np.ndarray) -> None:
    """Two-terminal admittance stamp between indices i and j (-1 = ground)."""
    if i >= 0:
        m[:, i, i] += val
    if j >= 0:
        m[:, j, j] += val
    if i >= 0 and j >= 0:
        m[:, i, j] -= val
        m[:, j, i] -= val


def assemble(batch: DesignBatch, hy: Hybrid) -> Matrices:
    """Assemble the small-signal matrices of a batch (all designs share one structure)."""
    topo = batch.topology
    present = batch.present
    nodes = tuple(n for n in topo.ac_nodes(present))
    index = {n: k for k, n in enumerate(nodes)}

    def idx(node: str) -> int:
        node = merged_node(topo, present, node)
        return -1 if node in GROUND_NODES else index[node]

    inductors = [p for p in topo.by_kind("inductor") if p.ref in present]
    size = len(nodes) + len(inductors)
    n = batch.n
    g = np.zeros((n, size, size))
    c = np.zeros((n, size, size))
    branch: dict[str, int] = {}

    for p in topo.positions:
        if p.ref not in present:
            continue
        val = batch.values[p.ref]
        if p.kind == "resistor":
            if p.optional:  # rows of a mixed batch that leave it out: a 1 mOhm short
                val = np.maximum(val, 1e-3)
            _stamp(g, idx(p.a), idx(p.b), 1.0 / val)
        elif p.kind == "capacitor":
            _stamp(c, idx(p.a), idx(p.b), val)
        elif p.kind == "inductor":
            k = len(nodes) + len(branch)
            branch[p.ref] = k
            a, b = idx(p.a), idx(p.b)
            if a >= 0:
                g[:, a, k] += 1.0
                g[:, k, a] += 1.0
            if b >= 0:
                g[:, b, k] -= 1.0
                g[:, k, b] -= 1.0
            g[:, k, k] -= batch.dcr_ohm.get(p.ref, np.zeros(n))
            c[:, k, k] -= val
    for p in topo.by_kind("coupling"):
        if p.ref in present and p.a in branch and p.b in branch:
            m = batch.values[p.ref] * np.sqrt(batch.values[p.a] * batch.values[p.b])
            i, j = branch[p.a], branch[p.b]
            c[:, i, j] -= m
            c[:, j, i] -= m

    b_, c_, e_ = index["B"], index["C"], index["E"]
    _stamp(g, b_, e_, hy.gpi_s)
    _stamp(c, b_, e_, hy.cpi_f)
    _stamp(c, b_, c_, hy.cmu_f)
    _stamp(g, c_, e_, hy.go_s)
    for k in range(len(nodes)):
        c[:, k, k] += batch.stray_f + C_FLOOR_F
    pattern = np.zeros((size, size))
    # gm * v_BE drawn from C, delivered to E.
    pattern[c_, b_] += 1.0
    pattern[c_, e_] -= 1.0
    pattern[e_, b_] -= 1.0
    pattern[e_, e_] += 1.0
    return Matrices(g=g, c=c, nodes=nodes, index=index, gm_pattern=pattern)


def natural_frequencies(mat: Matrices, gm_s: np.ndarray) -> np.ndarray:
    """Eigenvalues s of the pencil G + gm*P + s C, shape (n, N), in 1/s."""
    g = mat.g + gm_s[:, None, None] * mat.gm_pattern
    return -np.linalg.eigvals(np.linalg.solve(mat.c, g))


def responses(mat: Matrices, omega: np.ndarray, rows: np.ndarray | None = None,
              chunk: int = 512) -> np.ndarray:
    """Node voltages for a unit test current replacing gm (drawn from C, into E).

    Parameters
    ----------
    omega : ndarray, shape (n, K)
        Angular frequencies per design, rad/s.

    Returns
    -------
    ndarray, shape (n, K, N), complex
        Response vector per design and frequency.
    """
    n, k = omega.shape
    size = mat.g.shape[1]
    rhs = np.zeros(size, dtype=complex)
    rhs[mat.index["E"]] += 1.0
    rhs[mat.index["C"]] -= 1.0
    out = np.empty((n, k, size), dtype=complex)
    step = max(1, chunk // max(k, 1))
    for s in range(0, n, step):  # chunks bound memory; each chunk is one batched solve
        sl = slice(s, s + step)
        a = mat.g[sl, None] + 1j * omega[sl, :, None, None] * mat.c[sl, None]
        b = np.broadcast_to(rhs, a.shape[:-1])[..., None]
        try:
            out[sl] = np.linalg.solve(a, b)[..., 0]
        except np.linalg.LinAlgError:
            out[sl] = _solve_each(a, b)
    return out


def _solve_each(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The rare chunk holding a singular system (a grid frequency exactly at an ideal
    resonance, a zero-valued part): solve system by system, NaN where singular."""
    flat_a, flat_b = a.reshape(-1, *a.shape[-2:]), b.reshape(-1, *b.shape[-2:])
    res = np.full(flat_b.shape[:-1], np.nan, dtype=complex)
    for j in range(flat_a.shape[0]):
        try:
            res[j] = np.linalg.solve(flat_a[j], flat_b[j])[..., 0]
        except np.linalg.LinAlgError:
            pass
    return res.reshape(a.shape[:-1])
