"""Tests for picker.eseries behaviour: snapping, ranges, lookup (tables: tests/reference/)."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from picker.errors import PickerError
from picker.eseries import (SERIES_NAMES, mantissas, preferred_values, series_containing,
                            snap)

PROPERTY = settings(derandomize=True, max_examples=200, deadline=None)
names = st.sampled_from(SERIES_NAMES)
positive = st.floats(min_value=-18.0, max_value=18.0).map(lambda e: 10.0 ** e)


def test_mantissas_are_read_only_ascending_in_one_decade():
    for name in SERIES_NAMES:
        m = mantissas(name)
        assert m.dtype == float
        assert m[0] == 1.0 and m[-1] < 10.0
        assert np.all(np.diff(m) > 0)
        with pytest.raises(ValueError):
            m[0] = 2.0
    assert mantissas("e12") is mantissas("E12")


def test_unknown_series_lists_the_names():
    for call in (lambda: mantissas("E5"), lambda: snap(1.0, "E7"),
                 lambda: preferred_values("X", 1, 2)):
        with pytest.raises(PickerError) as info:
            call()
        assert str(info.value).endswith(
            "expected one of E3, E6, E12, E24, E48, E96, E192)")


@pytest.mark.parametrize(("value", "name", "nearest"), [
    (4.6e-9, "E12", 4.7e-9),     # exactly the float of "4.7e-9", not 4.7 * 1e-9
    (4.7e-9, "E12", 4.7e-9),
    (9.9, "E12", 10.0),          # decade edge: up into the next decade
    (9.0, "E12", 8.2),           # log midpoint of 8.2..10 is 9.055
    (9.1, "E12", 10.0),
    (0.95e-9, "E12", 1e-9),      # from below the decade
    (1.04e-9, "E12", 1e-9),
    (1.1, "E6", 1.0),
    (2.0, "E6", 2.2),
    (3.2e3, "E3", 2.2e3),
    (3.3e3, "E3", 4.7e3),
    (9.19, "E192", 9.2),
    (9.14, "E192", 9.09),
    (1.0, "E96", 1.0),
    (1e-30, "E24", 1e-30),
    (4.6e30, "E24", 4.7e30),
])
def test_snap_examples(value, name, nearest):
    assert snap(value, name) == nearest
    assert type(snap(value, name)) is float


def test_snap_near_the_geometric_midpoint_goes_to_the_nearer_side():
    for name in SERIES_NAMES:
        m = np.append(mantissas(name), 10.0)
        for a, b in zip(m[:-1], m[1:]):
            mid = math.sqrt(a * b)
            assert snap(mid * (1 - 1e-9), name) == pytest.approx(a, rel=1e-15)
            assert snap(mid * (1 + 1e-9), name) == pytest.approx(b, rel=1e-15)
            assert snap(mid, name) in (pytest.approx(a, rel=1e-15), pytest.approx(b, rel=1e-15))


def test_snap_exact_float_tie_goes_up():
    # White-box: with the module's own table of log10 mantissas (entries 22 and 47 of E3),
    # this float is an exact tie in double precision (checked here, not assumed).
    # The documented rule sends a tie to the larger neighbour.
    from picker.eseries import _EXT_LOG

    log22, log47 = _EXT_LOG["E3"][1], _EXT_LOG["E3"][2]
    tie = 3.215587038162705
    assert log47 - np.log10(tie) == np.log10(tie) - log22
    assert snap(tie, "E3") == 4.7
    assert snap(np.nextafter(tie, 0.0), "E3") == 2.2


@pytest.mark.parametrize("bad", [0.0, -1.0, math.nan, math.inf, -math.inf])
def test_snap_rejects_non_positive(bad):
    with pytest.raises(PickerError, match="value to snap must be positive and finite"):
        snap(bad, "E12")
    with pytest.raises(PickerError):
        snap(np.array([1.0, bad]), "E12")


@PROPERTY
@given(hnp.arrays(float, hnp.array_shapes(max_dims=2, max_side=6), elements=positive), names)
def test_vectorised_snap_equals_scalar_snap(arr, name):
    out = snap(arr, name)
    assert isinstance(out, np.ndarray) and out.shape == arr.shape
    assert all(out.flat[i] == snap(float(arr.flat[i]), name) for i in range(arr.size))


@PROPERTY
@given(positive, names)
def test_snap_is_nearest_in_log_distance_among_preferred_values(v, name):
    s = snap(v, name)
    candidates = preferred_values(name, v / 10, v * 10)
    best = np.min(np.abs(np.log10(candidates) - np.log10(v)))
    assert abs(math.log10(s) - math.log10(v)) <= best + 1e-12
    assert s in candidates  # and it is one of them, bit for bit


@PROPERTY
@given(positive, names)
def test_snap_is_idempotent(v, name):
    s = snap(v, name)
    assert snap(s, name) == s


def test_preferred_values_ends_are_inclusive_and_exact():
    assert preferred_values("E12", 4.7e-9, 1e-8).tolist() == [4.7e-9, 5.6e-9, 6.8e-9, 8.2e-9, 1e-8]
    assert preferred_values("E3", 1, 1000).tolist() == [1, 2.2, 4.7, 10, 22, 47, 100, 220, 470,
                                                        1000]
    assert preferred_values("E24", 4.7e3, 4.7e3).tolist() == [4.7e3]
    # An end off by float fuzz still counts (4.7 * 1e-9 != 4.7e-9).
    assert 4.7 * 1e-9 != 4.7e-9
    assert preferred_values("E12", 4.7 * 1e-9, 5.6 * 1e-9).tolist() == [4.7e-9, 5.6e-9]
    # Strictly between two preferred values: empty.
    assert preferred_values("E6", 1.6, 2.1).size == 0


@PROPERTY
@given(positive, st.floats(min_value=0.0, max_value=3.0), names)
def test_preferred_values_are_the_series_in_range(lo, span, name):
    hi = lo * 10.0 ** span
    vals = preferred_values(name, lo, hi)
    assert np.all(np.diff(vals) > 0)
    assert np.all((vals >= lo * (1 - 1e-9)) & (vals <= hi * (1 + 1e-9)))
    n = len(mantissas(name))
    assert abs(vals.size - span * n) <= 2   # n values per decade
    assert all(snap(v, name) == v for v in vals)


def test_preferred_values_rejects_bad_ranges():
    with pytest.raises(PickerError, match="empty range"):
        preferred_values("E12", 10.0, 1.0)
    with pytest.raises(PickerError, match="lower end must be positive and finite"):
        preferred_values("E12", 0.0, 1.0)
    with pytest.raises(PickerError, match="upper end must be positive and finite"):
        preferred_values("E12", 1.0, math.inf)


@pytest.mark.parametrize(("value", "name"), [
    (4.7e-9, "E3"), (1.0, "E3"), (1.5e3, "E6"), (1.8, "E12"), (2.0, "E24"), (9.1e6, "E24"),
    (1.05, "E48"), (1.02e-6, "E96"), (9.2, "E192"), (1.01, "E192"), (1.234, None),
    (4.87, "E48"), (4.75, "E96"), (4.7 * 1e-9, "E3")])
def test_series_containing(value, name):
    assert series_containing(value) == name


def test_series_containing_tolerance_and_errors():
    assert series_containing(4.7e3 * (1 + 1e-7)) == "E3"
    assert series_containing(4.7e3 * (1 + 1e-3)) is None
    assert series_containing(4.7e3 * (1 + 1e-3), rel_tol=2e-3) == "E3"
    with pytest.raises(PickerError):
        series_containing(0.0)
