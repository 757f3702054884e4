"""Tests for picker.units: reading and writing part values, ratings and tolerances.

The IEC 60062 letter-and-digit examples are checked in tests/reference/test_iec60063.py.
"""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from picker.errors import PickerError
from picker.units import (KINDS, UNIT_OF_KIND, format_eng, format_value, parse_quantity,
                          parse_tolerance, parse_value, to_rkm)

PROPERTY = settings(derandomize=True, max_examples=200, deadline=None)
KINDS_WITH_VALUE = ("resistor", "capacitor", "inductor")
EXPECTED = {
    "resistor": "expected a resistance such as 4.7k, 4k7, 4.7kΩ, 2R2, R47 or 470",
    "capacitor": "expected a capacitance such as 4.7n, 4n7, 4.7nF or 4.7e-9",
    "inductor": "expected an inductance such as 100u, 100µH, 4u7, 4R7 (= 4.7 µH) or 1e-4",
}


def test_public_constants():
    assert KINDS == ("resistor", "capacitor", "inductor", "npn")
    assert UNIT_OF_KIND == {"resistor": "Ω", "capacitor": "F", "inductor": "H"}


# --- reading values -------------------------------------------------------------------------

# (text, kind, value written as the decimal it must equal exactly)
GOOD = [
    # SI prefix, with and without unit
    ("4.7nF", "capacitor", "4.7e-9"),
    ("4.7n", "capacitor", "4.7e-9"),
    ("4.7 nF", "capacitor", "4.7e-9"),
    ("0.1u", "capacitor", "1e-7"),
    ("100p", "capacitor", "1e-10"),
    ("4.7uf", "capacitor", "4.7e-6"),    # lower-case f after a prefix = farad
    ("1f", "capacitor", "1e-15"),        # alone, f is femto
    ("1F", "capacitor", "1"),
    ("1m", "capacitor", "1e-3"),
    ("10kF", "capacitor", "1e4"),
    ("100 uH", "inductor", "1e-4"),
    ("100µH", "inductor", "1e-4"),       # U+00B5 MICRO SIGN
    ("100μH", "inductor", "1e-4"),       # U+03BC GREEK SMALL LETTER MU
    ("100uh", "inductor", "1e-4"),
    ("1m", "inductor", "1e-3"),
    ("1M", "resistor", "1e6"),
    ("1m", "resistor", "1e-3"),          # milliohm: case matters
    ("10k", "resistor", "1e4"),
    ("10K", "resistor", "1e4"),
    ("2.2K", "resistor", "2.2e3"),
    ("2.2kΩ", "resistor", "2.2e3"),
    ("2.2kΩ", "resistor", "2.2e3"),      # U+2126 OHM SIGN
    ("2.2k ohm", "resistor", "2.2e3"),
    ("2.2kohm", "resistor", "2.2e3"),
    ("2.2 kOhms", "resistor", "2.2e3"),
    ("1 MΩ", "resistor", "1e6"),
    ("470", "resistor", "470"),
    ("470 Ω", "resistor", "470"),
    ("  4.7k  ", "resistor", "4.7e3"),
    ("+4.7k", "resistor", "4.7e3"),
    (".5k", "resistor", "500"),
    # RKM codes
    ("47R", "resistor", "47"),
    ("100R", "resistor", "100"),
    ("4k7", "resistor", "4.7e3"),
    ("4K7", "resistor", "4.7e3"),
    ("2R2", "resistor", "2.2"),
    ("R47", "resistor", "0.47"),
    ("R047", "resistor", "0.047"),
    ("1M0", "resistor", "1e6"),
    ("1M5", "resistor", "1.5e6"),
    ("2G2", "resistor", "2.2e9"),
    ("1T", "resistor", "1e12"),
    ("4k7Ω", "resistor", "4.7e3"),
    ("4n7", "capacitor", "4.7e-9"),
    ("4p7", "capacitor", "4.7e-12"),
    ("p47", "capacitor", "0.47e-12"),
    ("2u2", "capacitor", "2.2e-6"),
    ("2µ2", "capacitor", "2.2e-6"),
    ("1u0", "capacitor", "1e-6"),
    ("1m5", "capacitor", "1.5e-3"),
    ("4n7F", "capacitor", "4.7e-9"),
    ("1m5", "inductor", "1.5e-3"),
    ("4u7", "inductor", "4.7e-6"),
    ("2n2", "inductor", "2.2e-9"),
    ("4R7", "inductor", "4.7e-6"),       # inductor marking: R = decimal point in µH
    ("R10", "inductor", "0.1e-6"),
    ("100u", "inductor", "1e-4"),
    # plain numbers and exponents
    ("4.7e-9", "capacitor", "4.7e-9"),
    ("1E3", "resistor", "1e3"),
    ("1e-9F", "capacitor", "1e-9"),
    ("100e-18 F", "capacitor", "1e-16"),
]


@pytest.mark.parametrize(("text", "kind", "value"), GOOD)
def test_parse_value_accepts(text, kind, value):
    assert parse_value(text, kind) == float(value)


@pytest.mark.parametrize("number", [1000, 4.7e-9, 2.2])
def test_parse_value_accepts_numbers(number):
    assert parse_value(number, "resistor") == float(number)


# (text, kind, start of the message up to " (got ")
BAD = [
    ("-1k", "resistor", "negative resistance"),
    ("-4k7", "resistor", "negative resistance"),
    ("−4.7n", "capacitor", "negative capacitance"),   # U+2212 MINUS SIGN
    ("0", "resistor", "zero resistance is not allowed"),
    ("0.0nF", "capacitor", "zero capacitance is not allowed"),
    ("0R0", "resistor", "zero resistance is not allowed"),
    ("nan", "capacitor", "capacitance is NaN"),
    ("NaN", "inductor", "inductance is NaN"),
    ("inf", "resistor", "resistance is infinite"),
    ("-inf", "resistor", "resistance is infinite"),
    ("1e400", "resistor", "resistance is infinite"),
    ("", "resistor", "empty resistance"),
    ("   ", "capacitor", "empty capacitance"),
    ("abc", "resistor", "cannot read a resistance"),
    ("4.7.1n", "capacitor", "cannot read a capacitance"),
    ("4k7k", "resistor", "cannot read a resistance"),
    ("-", "resistor", "cannot read a resistance"),
    ("1x", "resistor", "unknown suffix 'x'"),
    ("1eF", "capacitor", "unknown suffix 'eF'"),
    ("4.7uH", "capacitor", "unit H does not fit a capacitor"),
    ("1kHz", "capacitor", "unit Hz does not fit a capacitor"),
    ("10nF", "inductor", "unit F does not fit an inductor"),
    ("47R", "capacitor", "unit R does not fit a capacitor"),
    ("4n7H", "capacitor", "unit H does not fit a capacitor"),
    ("4k7", "capacitor", "letter 'k' is not an RKM code letter for a capacitor"),
    ("4n7", "resistor", "letter 'n' is not an RKM code letter for a resistor"),
    ("1m5", "resistor", "letter 'm' is not an RKM code letter for a resistor"),
    ("4p7", "inductor", "letter 'p' is not an RKM code letter for an inductor"),
    ("100R", "inductor", "on an inductor R is the decimal point of a µH value"),
    ("1e3k", "resistor", "an exponent and an SI prefix together are ambiguous"),
]


@pytest.mark.parametrize(("text", "kind", "reason"), BAD)
def test_parse_value_rejects_with_reason_and_expectation(text, kind, reason):
    with pytest.raises(PickerError) as info:
        parse_value(text, kind)
    msg = str(info.value)
    assert msg.startswith(reason)
    assert msg.endswith(f" (got '{text}'; {EXPECTED[kind]})")
    assert "\n" not in msg


def test_error_message_matches_the_documented_example():
    with pytest.raises(PickerError) as info:
        parse_value("4.7uH", "capacitor")
    assert str(info.value) == ("unit H does not fit a capacitor (got '4.7uH'; expected a "
                               "capacitance such as 4.7n, 4n7, 4.7nF or 4.7e-9)")


@pytest.mark.parametrize(("number", "reason"), [
    (-1.0, "negative resistance"), (0, "zero resistance"), (float("nan"), "resistance is NaN"),
    (math.inf, "resistance is infinite"), (True, "cannot read a resistance"),
    (None, "cannot read a resistance")])
def test_parse_value_rejects_bad_numbers(number, reason):
    with pytest.raises(PickerError, match=f"^{reason}"):
        parse_value(number, "resistor")


def test_npn_has_no_value_and_unknown_kind_is_named():
    with pytest.raises(PickerError, match="^an npn transistor has no value"):
        parse_value("1", "npn")
    with pytest.raises(PickerError, match=r"unknown part kind \(got 'diode'; expected one of "
                                          r"resistor, capacitor, inductor, npn\)"):
        parse_value("1", "diode")


# --- ratings --------------------------------------------------------------------------------

@pytest.mark.parametrize(("text", "unit", "value"), [
    ("300M", None, "3e8"), ("4p", None, "4e-12"), ("50V", "V", "50"), ("50 V", "V", "50"),
    ("50", "V", "50"), ("0.25W", "W", "0.25"), ("250mW", "W", "0.25"), ("1.5 A", "A", "1.5"),
    ("100 ohm", "Ω", "100"), ("1kΩ", "Ω", "1e3"), ("10 MHz", "Hz", "1e7"), ("5µA", "A", "5e-6"),
    ("2e-3", None, "2e-3"), (12, "V", "12")])
def test_parse_quantity_accepts(text, unit, value):
    assert parse_quantity(text, unit) == float(value)


@pytest.mark.parametrize(("text", "unit", "reason"), [
    ("50F", "V", "unit F does not fit a voltage rating"),
    ("50V", None, "a voltage rating takes no unit, found V"),
    ("50x", "V", "unknown suffix 'x'"),
    ("0", "V", "zero voltage rating is not allowed"),
    ("-5V", "V", "negative voltage rating"),
    ("inf", "V", "voltage rating is infinite"),
    ("", "V", "empty voltage rating"),
    ("5 0V", "V", "cannot read a voltage rating"),
])
def test_parse_quantity_rejects(text, unit, reason):
    with pytest.raises(PickerError) as info:
        parse_quantity(text, unit, what="voltage rating")
    assert str(info.value).startswith(f"{reason} (got '{text}'; expected a voltage rating "
                                      f"such as 4.7k")


def test_parse_quantity_zero_and_negative_on_request():
    assert parse_quantity("0", "V", allow_zero=True) == 0.0
    assert parse_quantity("-5V", "V", allow_negative=True) == -5.0
    assert parse_quantity("-1.5 mA", "A", allow_negative=True) == -1.5e-3


# --- tolerances -----------------------------------------------------------------------------

@pytest.mark.parametrize(("text", "value"), [
    ("5%", 0.05), ("0.05", 0.05), ("±10 %", 0.10), ("+/-1%", 0.01), ("+-1%", 0.01),
    ("1 %", 0.01), (" ± 0.1% ", 0.001), ("+5%", 0.05), ("0.5", 0.5), ("0", 0.0), ("0%", 0.0),
    (0.2, 0.2), ("99.9%", 0.999)])
def test_parse_tolerance_accepts(text, value):
    assert parse_tolerance(text) == value


@pytest.mark.parametrize(("text", "reason"), [
    ("5", "a bare number of 1 or more reads as a fraction; write 5% for percent"),
    ("1", "a bare number of 1 or more reads as a fraction; write 1% for percent"),
    (10.0, "a bare number of 1 or more reads as a fraction; write 10% for percent"),
    ("-5%", "negative tolerance"), ("±-5%", "negative tolerance"),
    ("100%", "tolerance of 100 % or more"), ("150 %", "tolerance of 100 % or more"),
    ("nan", "tolerance is NaN"), ("abc", "cannot read a tolerance"),
    ("5%%", "cannot read a tolerance"), ("+80/-20%", "cannot read a tolerance"),
    ("", "empty tolerance")])
def test_parse_tolerance_rejects(text, reason):
    with pytest.raises(PickerError) as info:
        parse_tolerance(text)
    assert str(info.value) == (f"{reason} (got '{text}'; expected a tolerance such as 5%, "
                               f"±10 %, +/-1% or a fraction such as 0.05)")


# --- writing --------------------------------------------------------------------------------

@pytest.mark.parametrize(("x", "unit", "digits", "text"), [
    (4.7e-9, "F", 3, "4.7 nF"), (1e5, "Hz", 3, "100 kHz"), (1.5e-3, "A", 3, "1.5 mA"),
    (0, "V", 3, "0 V"), (12, "V", 3, "12 V"), (-1.5e-3, "A", 3, "-1.5 mA"),
    (123456, "Hz", 3, "123 kHz"), (123456, "Hz", 5, "123.46 kHz"), (999.6, "Ω", 3, "1 kΩ"),
    (1e-4, "H", 3, "100 µH"), (4.7e-9, "", 3, "4.7n"), (2.0, "V", 1, "2 V")])
def test_format_eng(x, unit, digits, text):
    assert format_eng(x, unit, digits) == text


@pytest.mark.parametrize(("value", "kind", "eng", "rkm"), [
    (4.7e3, "resistor", "4.7 kΩ", "4k7"), (2.2, "resistor", "2.2 Ω", "2R2"),
    (0.47, "resistor", "470 mΩ", "R47"), (1e6, "resistor", "1 MΩ", "1M0"),
    (100, "resistor", "100 Ω", "100R"), (1e4, "resistor", "10 kΩ", "10k"),
    (1e3, "resistor", "1 kΩ", "1k0"), (4.7e-9, "capacitor", "4.7 nF", "4n7"),
    (1e-10, "capacitor", "100 pF", "100p"), (1e-6, "capacitor", "1 µF", "1u0"),
    (1e-8, "capacitor", "10 nF", "10n"), (0.47e-12, "capacitor", "470 fF", "p47"),
    (4.7e-6, "inductor", "4.7 µH", "4u7"), (1e-3, "inductor", "1 mH", "1m0"),
    (1e-4, "inductor", "100 µH", "100u"), (4.7149e3, "resistor", "4.71 kΩ", "4k71"),
    (1e15, "resistor", "1e15 Ω", "1000T")])
def test_format_value_and_rkm(value, kind, eng, rkm):
    assert format_value(value, kind) == eng
    assert format_value(value, kind, rkm=True) == rkm
    assert to_rkm(value, kind) == rkm


def test_to_rkm_digits_and_errors():
    assert to_rkm(4748, "resistor", digits=2) == "4k7"
    assert to_rkm(4751, "resistor", digits=2) == "4k8"
    assert to_rkm(0.0471e-12, "capacitor", digits=2) == "p047"
    for bad in (0, -1.0, math.nan, math.inf, "4k7"):
        with pytest.raises(PickerError):
            to_rkm(bad, "resistor")
    with pytest.raises(PickerError, match="^an npn transistor has no value"):
        format_value(1.0, "npn")


# --- round trips (hypothesis) ---------------------------------------------------------------

values = st.floats(min_value=-16.0, max_value=16.0).map(lambda e: 10.0 ** e)
kinds = st.sampled_from(KINDS_WITH_VALUE)


def rounded(v: float, digits: int = 3) -> float:
    """v rounded to `digits` significant digits, as the float nearest that decimal."""
    return float(f"{v:.{digits - 1}e}")


@PROPERTY
@given(values, kinds, st.integers(min_value=1, max_value=6))
def test_rkm_round_trip_is_exact_to_the_rounding(v, kind, digits):
    assert parse_value(to_rkm(v, kind, digits), kind) == rounded(v, digits)


@PROPERTY
@given(values, kinds)
def test_format_value_round_trip(v, kind):
    assert parse_value(format_value(v, kind), kind) == pytest.approx(rounded(v), rel=1e-12)


@PROPERTY
@given(st.integers(min_value=1, max_value=99999), st.integers(min_value=0, max_value=4),
       st.sampled_from([("p", -12), ("n", -9), ("u", -6), ("µ", -6), ("m", -3), ("", 0),
                        ("k", 3), ("M", 6), ("G", 9)]), st.sampled_from(["", " "]))
def test_si_text_reads_as_the_decimal_it_spells(digits, point, prefix, space):
    s = str(digits).rjust(point + 1, "0")
    mantissa = f"{s[:len(s) - point]}.{s[len(s) - point:]}" if point else s
    letter, exp = prefix
    text = f"{mantissa}{space}{letter}F"
    assert parse_value(text, "capacitor") == float(f"{mantissa}e{exp}")
