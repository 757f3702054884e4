"""The store's boundary towards the search: stock of one kind as a pandas DataFrame."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from picker.store.models import Part
from picker.store.spec import KINDS, RATINGS

#: Name of the value column per kind (SI base unit in the name).
VALUE_COLUMN = {"resistor": "r_ohm", "capacitor": "c_f", "inductor": "l_h"}


def pool_columns(kind: str) -> list[str]:
    """Column names :func:`load_pool` returns for ``kind``, in order."""
    cols = ["id"]
    if kind in VALUE_COLUMN:
        cols += [VALUE_COLUMN[kind], "tolerance"]
    return cols + ["qty", "unit_cost", "bin", *RATINGS[kind]]


def load_pool(session: Session, kind: str, *, in_stock_only: bool = True) -> pd.DataFrame:
    """Stock of one kind, one row per part, ordered by value then id.

    Parameters
    ----------
    session : Session
    kind : {'resistor', 'capacitor', 'inductor', 'npn'}
    in_stock_only : bool
        Leave out parts with ``qty == 0``.

    Returns
    -------
    pandas.DataFrame
        Columns from :func:`pool_columns`: ``id`` and ``qty`` (int64); the value as
        ``r_ohm`` / ``c_f`` / ``l_h`` (float64, SI base units); ``tolerance``
        (fraction); ``unit_cost``; the kind's ratings named with their units
        (``voltage_v``, ``power_w``, ``dcr_ohm``, ``isat_a``; npn: ``hfe_min``,
        ``hfe_max``, ``vbe_v``, ``ft_hz``, ``cob_f``, ``vaf_v``, ``vceo_v``, ``pd_w``)
        as float64 with NaN when unknown; ``dielectric`` and ``name`` as text
        (None when unknown); ``bin`` as text.  ``.to_numpy()`` on a column gives the arrays.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown kind {kind!r}")
    stmt = select(Part).where(Part.kind == kind)
    if in_stock_only:
        stmt = stmt.where(Part.qty > 0)
    stmt = stmt.order_by(Part.value, Part.id)
    cols = pool_columns(kind)
    attr = {VALUE_COLUMN.get(kind, "value"): "value"}
    parts = list(session.scalars(stmt))
    data = {}
    for c in cols:
        raw = [getattr(p, attr.get(c, c)) for p in parts]
        if c in ("id", "qty"):
            data[c] = np.array(raw, dtype=np.int64)
        elif c in ("dielectric", "name", "bin"):
            data[c] = pd.Series(raw, dtype=object)
        else:
            data[c] = np.array([np.nan if v is None else v for v in raw], dtype=np.float64)
    df = pd.DataFrame(data, columns=cols)
    return df
