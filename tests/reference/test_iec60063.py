"""Checks against outside sources.

* IEC 60063:2015 preferred number series: Table 1 (E3..E24, two significant figures) and
  Table 2 (E48..E192, three significant figures).  The table numbers and the list of values
  that deviate from the rounded geometric series are from memory; the full tables are
  cross-checked against the ``eseries`` package from PyPI, an independent transcription.
* IEC 60062:2016 letter-and-digit code (RKM) examples, the ones printed with the code
  (from memory): 4K7, R47, 4n7, 1M0, 2R2.
"""

import eseries as pypi_eseries
import numpy as np
import pytest

from picker import eseries as pe
from picker.units import parse_value, to_rkm

SIZES = {"E3": 3, "E6": 6, "E12": 12, "E24": 24, "E48": 48, "E96": 96, "E192": 192}


def as_ints(name):
    """The table as printed: integers of 2 (E3..E24) or 3 (E48..E192) significant figures."""
    scale = 10 if SIZES[name] <= 24 else 100
    return [round(m * scale) for m in pe.mantissas(name)]


def test_series_names_and_counts():
    """IEC 60063:2015, Tables 1 and 2: En has n values per decade."""
    assert pe.SERIES_NAMES == tuple(SIZES)
    for name, n in SIZES.items():
        assert len(pe.mantissas(name)) == n


def formula_deviations(name):
    """(table value, round(10**(i/n))) pairs where the table is not the rounded formula."""
    n = SIZES[name]
    scale = 10 if n <= 24 else 100
    return [(v / scale, round(scale * 10 ** (i / n)) / scale)
            for i, v in enumerate(as_ints(name)) if v != round(scale * 10 ** (i / n))]


def test_e24_deviates_from_the_geometric_series_where_the_standard_does():
    """IEC 60063:2015, Table 1: eight E24 values are not round(10**(i/24), 1) (from memory)."""
    assert formula_deviations("E24") == [
        (2.7, 2.6), (3.0, 2.9), (3.3, 3.2), (3.6, 3.5), (3.9, 3.8), (4.3, 4.2), (4.7, 4.6),
        (8.2, 8.3)]
    # E3..E12 inherit exactly those of their values.
    assert formula_deviations("E12") == [(2.7, 2.6), (3.3, 3.2), (3.9, 3.8), (4.7, 4.6),
                                         (8.2, 8.3)]
    assert formula_deviations("E6") == [(3.3, 3.2), (4.7, 4.6)]
    assert formula_deviations("E3") == [(4.7, 4.6)]


def test_e192_deviates_only_at_920():
    """IEC 60063:2015, Table 2: 9.20 where the formula gives 9.19 (from memory); E48, E96 none."""
    assert formula_deviations("E192") == [(9.2, 9.19)]
    assert formula_deviations("E96") == []
    assert formula_deviations("E48") == []


def test_series_nest_as_in_the_standard():
    """IEC 60063:2015: each series is every other value of the next finer one, within a table."""
    for coarse, fine in (("E3", "E6"), ("E6", "E12"), ("E12", "E24"),
                         ("E48", "E96"), ("E96", "E192")):
        assert as_ints(coarse) == as_ints(fine)[::2]


@pytest.mark.parametrize("name", list(SIZES))
def test_tables_match_the_eseries_package(name):
    """Cross-check against the PyPI package `eseries` (eseries.series), value for value."""
    theirs = list(pypi_eseries.series(getattr(pypi_eseries, name)))
    assert as_ints(name) == theirs


@pytest.mark.parametrize("name", list(SIZES))
@pytest.mark.parametrize(("lo", "hi"), [(1.0, 1e3), (1e-12, 1e-9), (4.7e-9, 2.2e-6),
                                        (0.1, 0.1), (1e3, 1e7)])
def test_ranges_match_eseries_erange(name, lo, hi):
    """Cross-check decade scaling against `eseries.erange` (inclusive ends)."""
    theirs = list(pypi_eseries.erange(getattr(pypi_eseries, name), lo, hi))
    ours = pe.preferred_values(name, lo, hi)
    assert ours.tolist() == pytest.approx(theirs, rel=1e-12)


@pytest.mark.parametrize("name", list(SIZES))
def test_snap_agrees_with_eseries_find_nearest_away_from_midpoints(name):
    """`eseries.find_nearest` picks by linear distance, we by log distance.  The two agree
    except between the geometric and the arithmetic midpoint of two neighbours; elsewhere
    they must give the same value."""
    key = getattr(pypi_eseries, name)
    rng = np.random.default_rng(60063)
    values = 10.0 ** rng.uniform(-11.0, 6.0, size=400)
    ours = pe.snap(values, name)
    checked = 0
    for v, s in zip(values, ours):
        below = pypi_eseries.find_less_than_or_equal(key, v)
        above = pypi_eseries.find_greater_than_or_equal(key, v)
        geo, arith = np.sqrt(below * above), (below + above) / 2
        if geo <= v <= arith:
            continue
        assert s == pytest.approx(pypi_eseries.find_nearest(key, v), rel=1e-12)
        checked += 1
    assert checked > 300


# IEC 60062:2016 letter-and-digit code examples (from memory).
@pytest.mark.parametrize(("code", "kind", "value"), [
    ("4K7", "resistor", 4.7e3), ("R47", "resistor", 0.47), ("4n7", "capacitor", 4.7e-9),
    ("1M0", "resistor", 1e6), ("2R2", "resistor", 2.2)])
def test_iec60062_letter_and_digit_examples(code, kind, value):
    assert parse_value(code, kind) == value
    # We write the same code, except kilo as lower-case k (common practice).
    assert to_rkm(value, kind) == code.replace("K", "k")
