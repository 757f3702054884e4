"""What the drawer offers: part lines as arrays, and per position the distinct values with their best line.

The store converts its rows to :class:`Lines` (one per kind) at its boundary;
nothing here touches SQL.  An :class:`Offer` is what the search works on: the
distinct values usable at a position, sorted, each with the line a builder
would pull (cheapest; then the fuller bin; then the lower id).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

#: Tolerance assumed where the store does not say (rough common practice for loose parts).
DEFAULT_TOL = {"resistor": 0.05, "capacitor": 0.10, "inductor": 0.10}
#: Dielectrics stable enough for a tank (common practice: C0G/NP0, film, mica).
STABLE_DIELECTRICS = ("c0g", "np0", "film", "mica")


@dataclass(frozen=True)
class Lines:
    """Every stocked line of one kind (arrays of equal length; SI units)."""

    kind: str
    id: np.ndarray
    value: np.ndarray
    tol: np.ndarray
    qty: np.ndarray
    cost: np.ndarray
    bin: np.ndarray  # object
    voltage_v: np.ndarray
    power_w: np.ndarray
    dielectric: np.ndarray  # object, lower case or ""
    dcr_ohm: np.ndarray

    @property
    def n(self) -> int:
        return int(self.id.size)

    @classmethod
    def from_frame(cls, kind: str, df: pd.DataFrame) -> "Lines":
        """From :func:`picker.store.pool.load_pool` output (value column ``r_ohm``/``c_f``/``l_h``)."""
        value_col = {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}[kind]
        n = len(df)

        def num(col, fill=np.nan):
            if col not in df:
                return np.full(n, fill)
            a = df[col].to_numpy(dtype=float)
            return np.where(np.isfinite(a), a, fill)

        def text(col):
            if col not in df:
                return np.full(n, "", dtype=object)
            return np.array([(x or "").lower() if isinstance(x, str) or x is None else str(x)
                             for x in df[col]], dtype=object)

        return cls(kind=kind, id=df["id"].to_numpy(dtype=np.int64), value=num(value_col),
                   tol=num("tolerance", DEFAULT_TOL[kind]), qty=df["qty"].to_numpy(dtype=np.int64),
                   cost=num("unit_cost", 0.0),
                   bin=np.array(list(df["bin"]) if "bin" in df else [""] * n, dtype=object),
                   voltage_v=num("voltage_v"), power_w=num("power_w"), dielectric=text("dielectric"),
                   dcr_ohm=num("dcr_ohm", 0.0))


@dataclass(frozen=True)
class Offer:
    """Distinct values usable at a position, sorted ascending, each with its line(s).

    ``line2`` is -1 for a single part, else the second line of a series
    (``how`` = 1) or parallel (``how`` = 2) pair made with ``--combine``.
    """

    value: np.ndarray
    line: np.ndarray
    line2: np.ndarray
    how: np.ndarray
    cost: np.ndarray
    tol: np.ndarray

    @property
    def n(self) -> int:
        return int(self.value.size)

    @property
    def parts(self) -> np.ndarray:
        return np.where(self.line2 >= 0, 2, 1)


def best_lines(lines: Lines, need: int, mask: np.ndarray | None = None) -> Offer:
    """One line per distinct value among the lines with ``qty >= need`` (and ``mask``).

    The line kept is the cheapest, then the fullest bin, then the lowest id.
    """
    ok = lines.qty >= need
    if mask is not None:
        ok &= mask
    idx = np.flatnonzero(ok & np.isfinite(lines.value) & (lines.value > 0))
    order = idx[np.lexsort((lines.id[idx], -lines.qty[idx], lines.cost[idx], lines.value[idx]))]
    vals = lines.value[order]
    first = np.ones(order.size, dtype=bool)
    first[1:] = vals[1:] != vals[:-1]
    keep = order[first]
    return Offer(value=lines.value[keep], line=keep, line2=np.full(keep.size, -1),
                 how=np.zeros(keep.size, dtype=np.int8), cost=lines.cost[keep], tol=lines.tol[keep])


def with_pairs(single: Offer, lines: Lines, need: int) -> Offer:
    """``single`` plus every series and parallel pair of its values (``--combine``).

    A pair of the same line needs twice the quantity.  The pair's tolerance is
    the worse of the two (a bound: the pair's relative error is a weighted mean
    of its parts').  Where a pair's value equals a single part's, the single
    part is kept.
    """
    i, j = np.triu_indices(single.n)
    same = single.line[i] == single.line[j]
    ok = ~same | (lines.qty[single.line[i]] >= 2 * need)
    i, j = i[ok], j[ok]
    a, b = single.value[i], single.value[j]
    value = np.concatenate([single.value, a * b / (a + b), a + b])
    line = np.concatenate([single.line, single.line[i], single.line[i]])
    line2 = np.concatenate([single.line2, single.line[j], single.line[j]])
    how = np.concatenate([single.how, np.full(i.size, 1, np.int8), np.full(i.size, 2, np.int8)])
    cost = np.concatenate([single.cost, single.cost[i] + single.cost[j], single.cost[i] + single.cost[j]])
    tol = np.concatenate([single.tol, np.maximum(single.tol[i], single.tol[j]),
                          np.maximum(single.tol[i], single.tol[j])])
    parts = np.where(line2 >= 0, 2, 1)
    order = np.lexsort((cost, parts, value))
    v = value[order]
    first = np.ones(order.size, dtype=bool)
    first[1:] = ~np.isclose(v[1:], v[:-1], rtol=1e-12, atol=0.0)
    k = order[first]
    return Offer(value[k], line[k], line2[k], how[k], cost[k], tol[k])


def stable_mask(lines: Lines) -> np.ndarray:
    """Lines fit for a tank position (stable dielectric; an unknown dielectric is not assumed stable)."""
    return np.isin(lines.dielectric, STABLE_DIELECTRICS)
