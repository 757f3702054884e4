"""IEC 60063 preferred-number series (E-series) for resistors, capacitors and inductors.

The tables are hard-coded as integers the way the standard prints them (two significant
figures for E3..E24, three for E48..E192), so that every value built from them is the float
nearest to the decimal preferred value (``snap(4.6e-9, "E12") == 4.7e-9`` exactly).

Sources: IEC 60063:2015, Table 1 (E3, E6, E12, E24) and Table 2 (E48, E96, E192), transcribed
from memory (the table numbers too); every value is cross-checked against the ``eseries``
package from PyPI in ``tests/reference/test_iec60063.py``.  The values of the standard that
are *not* round(10**(i/n)) are: E24 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 (and the same
values where they occur in E3..E12), and E192 9.20 (the formula gives 9.19).  E48 and E96
follow the formula exactly.
"""

from __future__ import annotations

import math

import numpy as np

from picker.errors import PickerError

SERIES_NAMES = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")

# IEC 60063:2015, Table 1 (from memory; cross-checked against the `eseries` package).
_E3 = (10, 22, 47)
_E6 = (10, 15, 22, 33, 47, 68)
_E12 = (10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82)
_E24 = (10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30,
        33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82, 91)
# IEC 60063:2015, Table 2 (from memory; cross-checked against the `eseries` package).
_E48 = (100, 105, 110, 115, 121, 127, 133, 140, 147, 154, 162, 169,
        178, 187, 196, 205, 215, 226, 237, 249, 261, 274, 287, 301,
        316, 332, 348, 365, 383, 402, 422, 442, 464, 487, 511, 536,
        562, 590, 619, 649, 681, 715, 750, 787, 825, 866, 909, 953)
_E96 = (100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130,
        133, 137, 140, 143, 147, 150, 154, 158, 162, 165, 169, 174,
        178, 182, 187, 191, 196, 200, 205, 210, 215, 221, 226, 232,
        237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309,
        316, 324, 332, 340, 348, 357, 365, 374, 383, 392, 402, 412,
        422, 432, 442, 453, 464, 475, 487, 499, 511, 523, 536, 549,
        562, 576, 590, 604, 619, 634, 649, 665, 681, 698, 715, 732,
        750, 768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976)
_E192 = (100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114,
         115, 117, 118, 120, 121, 123, 124, 126, 127, 129, 130, 132,
         133, 135, 137, 138, 140, 142, 143, 145, 147, 149, 150, 152,
         154, 156, 158, 160, 162, 164, 165, 167, 169, 172, 174, 176,
         178, 180, 182, 184, 187, 189, 191, 193, 196, 198, 200, 203,
         205, 208, 210, 213, 215, 218, 221, 223, 226, 229, 232, 234,
         237, 240, 243, 246, 249, 252, 255, 258, 261, 264, 267, 271,
         274, 277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312,
         316, 320, 324, 328, 332, 336, 340, 344, 348, 352, 357, 361,
         365, 370, 374, 379, 383, 388, 392, 397, 402, 407, 412, 417,
         422, 427, 432, 437, 442, 448, 453, 459, 464, 470, 475, 481,
         487, 493, 499, 505, 511, 517, 523, 530, 536, 542, 549, 556,
         562, 569, 576, 583, 590, 597, 604, 612, 619, 626, 634, 642,
         649, 657, 665, 673, 681, 690, 698, 706, 715, 723, 732, 741,
         750, 759, 768, 777, 787, 796, 806, 816, 825, 835, 845, 856,
         866, 876, 887, 898, 909, 920, 931, 942, 953, 965, 976, 988)

# Table entries as integers, and the power of ten that turns them into mantissas in [1, 10).
_TABLES = {"E3": _E3, "E6": _E6, "E12": _E12, "E24": _E24,
           "E48": _E48, "E96": _E96, "E192": _E192}
_SHIFT = {name: len(str(table[0])) - 1 for name, table in _TABLES.items()}


def _frozen(a: np.ndarray) -> np.ndarray:
    a.setflags(write=False)
    return a


_MANTISSAS = {name: _frozen(np.array(t, dtype=float) / 10 ** _SHIFT[name])
              for name, t in _TABLES.items()}
# Per series: the integers with the next decade's first entry appended, and their log10
# mantissas in [0, 1], for nearest-neighbour search.
_EXT_INTS = {name: np.array(t + (10 ** (_SHIFT[name] + 1),), dtype=np.int64)
             for name, t in _TABLES.items()}
_EXT_LOG = {name: np.log10(ints.astype(float)) - _SHIFT[name] for name, ints in _EXT_INTS.items()}

_INCLUSIVE_SLACK = 1e-9  # relative; preferred_values keeps ends that float fuzz put just outside


def _series(name: str) -> str:
    key = name.upper() if isinstance(name, str) else name
    if key not in _TABLES:
        raise PickerError(f"unknown E-series (got '{name}'; expected one of "
                          f"{', '.join(SERIES_NAMES)})")
    return key


def _positive(value, what: str) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise PickerError(f"{what} is not a number (got '{value}'; expected a positive "
                          f"number such as 4.7e-9)") from None
    bad = ~(np.isfinite(arr) & (arr > 0))
    if bad.any():
        first = arr[bad].flat[0] if arr.ndim else arr
        raise PickerError(f"{what} must be positive and finite (got '{first}'; expected a "
                          f"positive number such as 4.7e-9)")
    return arr


def _scale(ints: np.ndarray, exp10: np.ndarray) -> np.ndarray:
    """ints * 10**exp10 as the floats nearest to those decimals.

    Powers of ten up to 1e22 are exact doubles, so a product (exp10 >= 0) or a quotient
    (exp10 < 0) is correctly rounded; rarer larger exponents go through the decimal string.
    """
    ints = np.asarray(ints, dtype=np.int64)
    exp10 = np.asarray(exp10, dtype=np.int64)
    p = 10.0 ** np.minimum(np.abs(exp10), 22)
    out = np.where(exp10 >= 0, ints * p, ints / p)
    far = np.abs(exp10) > 22
    if far.any():
        out = np.array(out, dtype=float)
        out[far] = [float(f"{d}e{e}") for d, e in zip(ints[far], exp10[far])]
    return out


def mantissas(name: str) -> np.ndarray:
    """The series' values in [1, 10), ascending, as a read-only float array.

    Parameters
    ----------
    name : str
        One of :data:`SERIES_NAMES` (case-insensitive).
    """
    return _MANTISSAS[_series(name)]


def preferred_values(name: str, lo: float, hi: float) -> np.ndarray:
    """All decade-scaled values of a series in ``[lo, hi]`` (both ends inclusive).

    Parameters
    ----------
    name : str
        Series name, e.g. ``'E12'``.
    lo, hi : float
        Range in SI base units, ``0 < lo <= hi``.  An end within a relative 1e-9 of a
        preferred value counts as that value (``4.7 * 1e-9`` keeps 4.7e-9).

    Returns
    -------
    numpy.ndarray
        Ascending floats, each the float nearest to its decimal value (e.g. ``4.7e-9``).
    """
    key = _series(name)
    lo_f, hi_f = float(_positive(lo, "lower end")), float(_positive(hi, "upper end"))
    if lo_f > hi_f:
        raise PickerError(f"empty range (got '{lo}' to '{hi}'; expected a lower end not "
                          f"above the upper end)")
    decades = np.arange(math.floor(math.log10(lo_f)) - 1, math.floor(math.log10(hi_f)) + 2)
    table = np.asarray(_TABLES[key], dtype=np.int64)
    ints = np.tile(table, decades.size)
    exps = np.repeat(decades - _SHIFT[key], table.size)
    values = _scale(ints, exps)
    keep = (values >= lo_f * (1 - _INCLUSIVE_SLACK)) & (values <= hi_f * (1 + _INCLUSIVE_SLACK))
    return values[keep]


def snap(value, name: str):
    """The nearest preferred value in log distance (ratio), vectorised.

    Parameters
    ----------
    value : float or array_like
        Positive finite values in SI base units.
    name : str
        Series name, e.g. ``'E24'``.

    Returns
    -------
    float or numpy.ndarray
        A float for a scalar, else an array of the input's shape.  A value exactly halfway
        in log distance (to float precision) goes to the larger neighbour.
    """
    key = _series(name)
    arr = _positive(value, "value to snap")
    x = np.log10(arr)
    decade = np.floor(x)
    frac = x - decade  # in [0, 1)
    logs = _EXT_LOG[key]
    upper = np.clip(np.searchsorted(logs, frac, side="right"), 1, logs.size - 1)
    go_up = (logs[upper] - frac) <= (frac - logs[upper - 1])
    idx = np.where(go_up, upper, upper - 1)
    out = _scale(_EXT_INTS[key][idx], decade.astype(np.int64) - _SHIFT[key])
    return float(out) if out.ndim == 0 else out


def series_containing(value: float, rel_tol: float = 1e-6) -> str | None:
    """The smallest series (in :data:`SERIES_NAMES` order, E3 first) that holds the value.

    Parameters
    ----------
    value : float
        Positive finite value in SI base units (any decade).
    rel_tol : float
        Relative tolerance for "holds".

    Returns
    -------
    str or None
        E.g. ``'E3'`` for 4.7e-9, ``'E24'`` for 2.0, ``'E192'`` for 9.2; None if in none.
        Note E24 values are not all in E48/E96/E192 (2.0 is not), and vice versa.
    """
    v = float(_positive(value, "value"))
    for name in SERIES_NAMES:
        if abs(snap(v, name) - v) <= rel_tol * v:
            return name
    return None
