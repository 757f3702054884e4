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
              chunk: int = 512, pencil: bool = False) -> np.ndarray:
    """Node voltages for a unit test current replacing gm (drawn from C, into E).

    Parameters
    ----------
    omega : ndarray, shape (n, K)
        Angular frequencies per design, rad/s.
    rows : ndarray of int, optional
        Designs (indices into the batch) to solve, ``n = len(rows)``; default all.
    chunk : int
        Systems per batched LAPACK solve (one frequency per design).
    pencil : bool
        Use :func:`solve_pencil` whatever the number of frequencies (it is chosen
        from PENCIL_MIN_K on), so that a grid solved in parts gives the same bits.

    Returns
    -------
    ndarray, shape (n, K, N), complex
        Response vector per design and frequency; NaN for a singular system.
    """
    n, k = omega.shape
    size = mat.g.shape[1]
    rhs = np.zeros(size, dtype=complex)
    rhs[mat.index["E"]] += 1.0
    rhs[mat.index["C"]] -= 1.0
    out = np.empty((n, k, size), dtype=complex)
    if pencil or k >= PENCIL_MIN_K:  # several frequencies per design: the elimination vectorised over the batch
        step = max(1, PENCIL_CHUNK // k)
        for s in range(0, n, step):
            sl = slice(s, s + step)
            at = sl if rows is None else rows[sl]
            out[sl] = solve_pencil(mat.g[at], mat.c[at], omega[sl], rhs)
        return out
    step = max(1, chunk // max(k, 1))
    for s in range(0, n, step):  # chunks bound memory; each chunk is one batched solve
        sl = slice(s, s + step)
        at = sl if rows is None else rows[sl]
        a = mat.g[at, None] + 1j * omega[sl, :, None, None] * mat.c[at, None]
        b = np.broadcast_to(rhs, a.shape[:-1])[..., None]
        try:
            out[sl] = np.linalg.solve(a, b)[..., 0]
        except np.linalg.LinAlgError:
            out[sl] = _solve_each(a, b)
    return out


#: From this many frequencies per design on, :func:`responses` uses :func:`solve_pencil`
#: (measured on the 2-core machine, N = 7-8: 1.3-1.7x faster at 9 frequencies, mixed at
#: 3, no gain at 1 where numpy's batched LAPACK solve does as well).
PENCIL_MIN_K = 5
#: Systems per :func:`solve_pencil` call (measured best of 512-4096 on that machine).
PENCIL_CHUNK = 2048


def solve_pencil(g: np.ndarray, c: np.ndarray, omega: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve ``(g + j omega c) x = rhs`` for every design and frequency at once.

    ``g``, ``c`` real (n, N, N), ``omega`` (n, K), ``rhs`` (N,); returns (n, K, N)
    complex.  Gaussian elimination with partial pivoting (pivot by |Re| + |Im|,
    as LAPACK's izamax), written with the n*K systems on the last axis so that
    each elimination step is a handful of array operations; for the small MNA
    systems here that beats a LAPACK call per system.  NaN for a system with a
    zero pivot (singular).
    """
    m, k = omega.shape
    n = g.shape[1]
    a4 = np.empty((n, n, m, k), dtype=complex)
    a4.real[...] = g.transpose(1, 2, 0)[:, :, :, None]
    np.multiply(c.transpose(1, 2, 0)[:, :, :, None], omega, out=a4.imag)
    a = a4.reshape(n, n, m * k)
    x = np.empty((n, m * k), dtype=complex)
    x[...] = rhs[:, None]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for p in range(n - 1):
            col = a[p:, p]
            piv = np.argmax(np.abs(col.real) + np.abs(col.imag), axis=0)
            sw = np.flatnonzero(piv)
            if sw.size:  # swap rows p and p + piv in the systems that need it
                q = p + piv[sw]
                top = a[p, p:, sw]
                a[p, p:, sw] = a[q, p:, sw]
                a[q, p:, sw] = top
                xt = x[p, sw]
                x[p, sw] = x[q, sw]
                x[q, sw] = xt
            lower = a[p + 1:, p] / a[p, p]
            a[p + 1:, p + 1:] -= lower[:, None] * a[p, None, p + 1:]
            x[p + 1:] -= lower * x[p]
        for p in range(n - 1, -1, -1):
            if p + 1 < n:
                x[p] -= np.einsum("jm,jm->m", a[p, p + 1:], x[p + 1:])
            x[p] /= a[p, p]
    bad = ~np.isfinite(x).all(axis=0)
    x[:, bad] = np.nan
    return x.T.reshape(m, k, n)


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
