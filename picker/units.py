"""Read and write part values: SI prefixes, IEC 60062 RKM codes, tolerances.

Everything inside picker is a float in SI base units (ohm, farad, henry, volt, ...).
This module is the edge where text from parts lists becomes such a float and back.

Reading rules (the column tells the kind of part):
* SI form: a decimal number, optionally with an exponent *or* an SI prefix, then an optional
  unit: ``4.7nF``, ``4.7n``, ``100 uH``, ``100µH``, ``2.2kΩ``, ``2.2k ohm``, ``4.7e-9``.
  Prefixes are f, p, n, u/µ/μ (micro), m (milli), k, M (mega), G, T; case matters for m/M.
  ``K`` is also read as kilo (common practice on parts lists).  After a prefix a lower-case
  ``f``/``h`` is read as farad/henry (``4.7uf``, ``100uh``, common practice).
  An exponent and a prefix together (``1e3k``) are refused as ambiguous.
* RKM form (IEC 60062 letter-and-digit code): the letter is the multiplier and the decimal
  point.  Letters per kind:
  - resistor: R (x1), K/k (x1e3), M (x1e6), G (x1e9), T (x1e12): ``4k7``, ``2R2``, ``R47``, ``1M0``.
  - capacitor: p, n, u/µ/μ, m, F: ``4p7``, ``4n7``, ``2u2``, ``1m5`` (= 1.5 mF).
  - inductor: n, u/µ/μ, m, H, and R, where R marks the decimal point of a value in µH, as
    inductor markings do (common practice, no source): ``4R7`` = 4.7 µH, ``R47`` = 0.47 µH.
    On an inductor R must have digits after it (``100R`` looks like a resistor and is refused).
  An RKM code may be followed by the kind's unit (``4n7F``).
* Plain numbers, as text or as int/float, are taken in base units.

Zero, negative, NaN and infinite values are refused: no part has such a value.
"""

from __future__ import annotations

import math
import numbers
import re
import unicodedata

from quantiphy import Quantity

from picker.errors import PickerError

KINDS = ("resistor", "capacitor", "inductor", "npn")
UNIT_OF_KIND = {"resistor": "Ω", "capacitor": "F", "inductor": "H"}

_WHAT = {"resistor": "resistance", "capacitor": "capacitance", "inductor": "inductance"}
_EXAMPLES = {
    "resistor": "a resistance such as 4.7k, 4k7, 4.7kΩ, 2R2, R47 or 470",
    "capacitor": "a capacitance such as 4.7n, 4n7, 4.7nF or 4.7e-9",
    "inductor": "an inductance such as 100u, 100µH, 4u7, 4R7 (= 4.7 µH) or 1e-4",
}

# SI prefixes accepted on input, as powers of ten (after NFKC, µ U+00B5 becomes μ U+03BC).
_PREFIX = {"f": -15, "p": -12, "n": -9, "u": -6, "μ": -6, "m": -3,
           "k": 3, "K": 3, "M": 6, "G": 9, "T": 12}
# Letters of the RKM code per kind, as powers of ten (IEC 60062; inductor R: see module doc).
_RKM_IN = {
    "resistor": {"R": 0, "K": 3, "k": 3, "M": 6, "G": 9, "T": 12},
    "capacitor": {"p": -12, "n": -9, "u": -6, "μ": -6, "m": -3, "F": 0},
    "inductor": {"n": -9, "u": -6, "μ": -6, "R": -6, "m": -3, "H": 0},
}
_RKM_OUT = {
    "resistor": ((0, "R"), (3, "k"), (6, "M"), (9, "G"), (12, "T")),
    "capacitor": ((-12, "p"), (-9, "n"), (-6, "u"), (-3, "m"), (0, "F")),
    "inductor": ((-9, "n"), (-6, "u"), (-3, "m"), (0, "H")),
}
_RKM_LETTERS = {"resistor": "R, K/k, M, G, T", "capacitor": "p, n, u/µ, m, F",
                "inductor": "n, u/µ, m, H, or R for µH"}
# Units we recognise well enough to say "wrong unit" rather than "unknown suffix".
_KNOWN_UNITS = {"Ω", "R", "F", "H", "V", "A", "W", "Hz", "s", "S", "C", "K", "VA", "dB", "%"}

_LETTER = r"[^\W\d_]"
_NUM = r"(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)"
_SI_RE = re.compile(rf"^(?P<num>{_NUM})(?P<exp>[eE][+-]?[0-9]+)?\s*(?P<rest>{_LETTER}+(?:\s+{_LETTER}+)?)?$")
_RKM_RE = re.compile(rf"^(?P<a>[0-9]*)(?P<letter>{_LETTER})(?P<b>[0-9]*)(?P<tail>{_LETTER}*)$")
_TOL_RE = re.compile(rf"^(?P<num>{_NUM})\s*(?P<pct>%)?$")


class _Bad(Exception):
    """Internal: the reason a text could not be read (the caller adds got/expected)."""


class _EngQuantity(Quantity):
    """Quantity with our output preferences, kept apart from other users of quantiphy."""


_EngQuantity.set_prefs(map_sf=Quantity.map_sf_to_greek, output_sf="TGMkmunpf",
                       strip_zeros=True, spacer=" ")


def _a(noun: str) -> str:
    return f"{'an' if noun[:1] in 'aeiou' else 'a'} {noun}"


def _fail(reason: str, text, expected: str) -> PickerError:
    return PickerError(f"{reason} (got '{text}'; expected {expected})")


def _normalise(text: str) -> str:
    return unicodedata.normalize("NFKC", text).replace("\u2212", "-").strip()


def _unit_ok(found: str, unit: str | None, after_prefix: bool) -> bool:
    if unit is None:
        return False
    if unit == "Ω":
        return found == "Ω" or found.casefold() in ("ohm", "ohms")
    if found == unit:
        return True
    return after_prefix and unit in ("F", "H") and found == unit.lower()


def _is_known_unit(s: str) -> bool:
    return s in _KNOWN_UNITS or s.casefold() in ("ohm", "ohms")


def _read_si(t: str, unit: str | None, what: str, noun: str) -> float:
    """Read the SI form of an unsigned text; raise _Bad with the reason (noun: for unit errors)."""
    m = _SI_RE.match(t)
    if m is None:
        raise _Bad(f"cannot read {_a(what)}")
    num, exp = m["num"], m["exp"] or ""
    rest = re.sub(r"\s+", "", m["rest"] or "")
    if rest == "" or _unit_ok(rest, unit, False):
        return float(num + exp)
    prefix, tail = rest[0], rest[1:]
    if prefix in _PREFIX and (tail == "" or _unit_ok(tail, unit, True)):
        if exp:
            raise _Bad("an exponent and an SI prefix together are ambiguous")
        sf = "u" if prefix == "μ" else prefix.lower() if prefix == "K" else prefix
        return float(Quantity(num + sf))  # quantiphy turns the prefix into the power of ten
    other = tail if prefix in _PREFIX and tail else rest
    if _is_known_unit(other):
        if unit is None:
            raise _Bad(f"{_a(noun)} takes no unit, found {other}")
        raise _Bad(f"unit {other} does not fit {_a(noun)}")
    raise _Bad(f"unknown suffix '{rest}'")


def _read_rkm(t: str, kind: str) -> float | None:
    """Read an RKM code; None if the text is not RKM-shaped for this kind."""
    m = _RKM_RE.match(t)
    if m is None or (m["a"] == "" and m["b"] == ""):
        return None
    a, letter, b, tail = m["a"], m["letter"], m["b"], m["tail"]
    letters = _RKM_IN[kind]
    if letter not in letters:
        if b and letter not in "eE":  # letter in the decimal point's place; e/E: an exponent
            raise _Bad(f"letter '{letter}' is not an RKM code letter for {_a(kind)} "
                       f"(letters: {_RKM_LETTERS[kind]})")
        return None
    if tail and not _unit_ok(tail, UNIT_OF_KIND[kind], True):
        if _is_known_unit(tail):
            raise _Bad(f"unit {tail} does not fit {_a(kind)}")
        raise _Bad(f"cannot read a {_WHAT[kind]}")
    if kind == "inductor" and letter == "R" and not b:
        raise _Bad("on an inductor R is the decimal point of a µH value and needs digits "
                   "after it, as in 4R7 = 4.7 µH")
    return float(f"{a or '0'}.{b or '0'}e{letters[letter]}")


def _check_number(x: float, text, what: str, expected: str, *, allow_zero: bool = False,
                  allow_negative: bool = False) -> float:
    if math.isnan(x):
        raise _fail(f"{what} is NaN", text, expected)
    if math.isinf(x):
        raise _fail(f"{what} is infinite", text, expected)
    if x < 0 and not allow_negative:
        raise _fail(f"negative {what}", text, expected)
    if x == 0 and not allow_zero:
        raise _fail(f"zero {what} is not allowed", text, expected)
    return x + 0.0  # turns -0.0 into 0.0


def _split_sign(text, what: str, expected: str) -> tuple[float, str]:
    """Return (sign, unsigned normalised text) after the checks shared by all readers."""
    if isinstance(text, bool) or not isinstance(text, str):
        raise _fail(f"cannot read {_a(what)}", text, expected)
    t = _normalise(text)
    if not t:
        raise _fail(f"empty {what}", text, expected)
    sign = 1.0
    if t[0] in "+-":
        sign, t = (-1.0 if t[0] == "-" else 1.0), t[1:].lstrip()
    if not t:
        raise _fail(f"cannot read {_a(what)}", text, expected)
    return sign, t


def _nonfinite(t: str) -> float | None:
    """NaN or inf spelled out (float() would read them; our patterns do not)."""
    return float(t) if t.casefold() in ("nan", "inf", "infinity") else None


def _as_number(text) -> float | None:
    """A real number given directly (not bool, not text), else None."""
    ok = isinstance(text, numbers.Real) and not isinstance(text, bool)
    return float(text) if ok else None


def parse_value(text: str | float, kind: str) -> float:
    """Read a part value from a parts-list cell.

    Parameters
    ----------
    text : str or float
        The cell, e.g. ``'4k7'``, ``'4.7nF'``, ``'100 µH'``, ``'4.7e-9'``, or a number.
    kind : str
        ``'resistor'``, ``'capacitor'`` or ``'inductor'`` (see the module docstring for the
        forms accepted per kind).  ``'npn'`` has no value and raises.

    Returns
    -------
    float
        The value in ohm, farad or henry (positive, finite).  Bad input raises PickerError
        with the message ``<what is wrong> (got '<text>'; expected <examples>)``.
    """
    _check_kind(kind)
    what, expected = _WHAT[kind], _EXAMPLES[kind]
    direct = _as_number(text)
    if direct is not None:
        return _check_number(direct, text, what, expected)
    sign, t = _split_sign(text, what, expected)
    if (special := _nonfinite(t)) is not None:
        return _check_number(sign * special, text, what, expected)
    try:
        magnitude = _read_rkm(t, kind)
        if magnitude is None:
            magnitude = _read_si(t, UNIT_OF_KIND[kind], what, kind)
    except _Bad as bad:
        raise _fail(str(bad), text, expected) from None
    return _check_number(sign * magnitude, text, what, expected)


def parse_quantity(text: str | float, unit: str | None = None, *, what: str = "value",
                   allow_zero: bool = False, allow_negative: bool = False) -> float:
    """Read an SI-prefixed number such as a rating: ``300M``, ``4p``, ``50V``, ``1.5 A``.

    Parameters
    ----------
    text : str or float
        The cell.  Prefixes as in :func:`parse_value` (case-sensitive, u/µ/μ = micro).
    unit : str or None
        The unit the text may carry (``'V'``, ``'W'``, ``'Hz'``, ``'Ω'``; for ``'Ω'`` also
        ``ohm``/``ohms``).  None: the text must carry no unit.  A unit is never required.
    what : str
        Name of the quantity for messages, e.g. ``'voltage rating'``.
    allow_zero, allow_negative : bool
        Whether 0 and negative values are accepted (both refused by default).

    Returns
    -------
    float
        The value in SI base units.  Bad input raises PickerError (format as parse_value).
    """
    u = unit or ""
    expected = (f"{_a(what)} such as 4.7k{u}, 300m{u}, {'1.5 ' + u if u else '1.5'} or 2e-3")
    direct = _as_number(text)
    if direct is None:
        sign, t = _split_sign(text, what, expected)
        if (special := _nonfinite(t)) is not None:
            direct = sign * special
        else:
            try:
                direct = sign * _read_si(t, unit, what, what)
            except _Bad as bad:
                raise _fail(str(bad), text, expected) from None
    return _check_number(direct, text, what, expected, allow_zero=allow_zero,
                         allow_negative=allow_negative)


def parse_tolerance(text: str | float) -> float:
    """Read a tolerance as a fraction.

    ``'5%'``, ``'±10 %'``, ``'+/-1%'``, ``'+-1%'`` and ``'1 %'`` are percentages; a bare
    number below 1 (``'0.05'``, or a float) is a fraction.  A bare number of 1 or more is
    refused, since it is most likely a percentage missing its ``%``.  Zero is accepted and
    means an exact (ideal) part.  Negative values, 100 % or more, NaN and other text are refused.

    Returns
    -------
    float
        The tolerance as a fraction in [0, 1), e.g. 0.05 for 5 %.
    """
    what, expected = "tolerance", "a tolerance such as 5%, ±10 %, +/-1% or a fraction such as 0.05"
    frac, pct = _as_number(text), False
    if frac is None:
        sign, t = _split_sign(re.sub(r"^\s*(±|\+/-|\+-)", "", text)
                              if isinstance(text, str) else text, what, expected)
        m = _TOL_RE.match(t)
        if (frac := _nonfinite(t)) is None:
            if m is None:
                raise _fail(f"cannot read {_a(what)}", text, expected)
            pct = m["pct"] is not None
            frac = float(m["num"] + ("e-2" if pct else ""))
        frac *= sign
    frac = _check_number(frac, text, what, expected, allow_zero=True)
    if frac >= 1:
        if pct:
            raise _fail(f"{what} of 100 % or more", text, expected)
        raise _fail(f"a bare number of 1 or more reads as a fraction; write {frac:g}% for "
                    f"percent", text, expected)
    return frac


def _check_kind(kind: str) -> None:
    if kind == "npn":
        raise PickerError(f"an npn transistor has no value (got '{kind}'; expected a kind "
                          f"with a value: resistor, capacitor or inductor)")
    if kind not in KINDS:
        raise PickerError(f"unknown part kind (got '{kind}'; expected one of "
                          f"{', '.join(KINDS)})")


def format_eng(x: float, unit: str = "", digits: int = 3) -> str:
    """Engineering notation with an SI prefix: ``4.7 nF``, ``100 kHz``, ``-1.5 mA``, ``0 V``.

    Parameters
    ----------
    x : float
        Value in SI base units.  NaN and inf are written as quantiphy does (``NaN V``, ``inf V``).
    unit : str
        Unit symbol; with no unit there is no space (``4.7n``).
    digits : int
        Significant digits (>= 1); trailing zeros are trimmed.  Values beyond the prefixes
        T..f are written with an exponent (``100e-18 F``), which :func:`parse_value` reads back.
    """
    if digits < 1:
        raise ValueError(f"digits must be at least 1, not {digits}")
    return _EngQuantity(float(x), unit).render(prec=digits - 1)


def format_value(value: float, kind: str, rkm: bool = False) -> str:
    """A part value for display: ``4.7 kΩ``, ``4.7 nF``, ``100 µH``; ``rkm=True`` gives ``4k7``."""
    _check_kind(kind)
    return to_rkm(value, kind) if rkm else format_eng(value, UNIT_OF_KIND[kind])


def to_rkm(value: float, kind: str, digits: int = 3) -> str:
    """IEC 60062 RKM code for a value, rounded to ``digits`` significant digits.

    Resistors: ``4k7``, ``2R2``, ``R47``, ``1M0``, ``100R``, ``10k``, ``1k0``.
    Capacitors: ``4n7``, ``100p``, ``1u0``, ``10n``, ``p47``.  Inductors: ``4u7``, ``1m0``,
    ``100u`` (never R).  A single integer digit gets a trailing 0 (``1k0``); micro is ``u``.

    Raises PickerError if the value is not a positive finite number or the kind has no value.
    """
    _check_kind(kind)
    if digits < 1:
        raise ValueError(f"digits must be at least 1, not {digits}")
    v = _as_number(value)
    if v is None:
        raise _fail(f"cannot read {_a(_WHAT[kind])}", value, _EXAMPLES[kind])
    v = _check_number(v, value, _WHAT[kind], _EXAMPLES[kind])
    mant, ex = f"{v:.{digits - 1}e}".split("e")
    ex, ds = int(ex), mant.replace(".", "")
    letters = _RKM_OUT[kind]
    below = [pair for pair in letters if pair[0] <= ex]
    e_m, letter = below[-1] if below else letters[0]
    pos = ex - e_m + 1  # digits before the letter
    if pos <= 0:
        ip, fp = "", "0" * (-pos) + ds
    elif pos >= len(ds):
        ip, fp = ds + "0" * (pos - len(ds)), ""
    else:
        ip, fp = ds[:pos], ds[pos:]
    fp = fp.rstrip("0")
    if not fp and len(ip) == 1:
        fp = "0"
    return f"{ip}{letter}{fp}"


_DIGIT_RUNS = re.compile(r"(\d+)")


def natural_key(text: str | None) -> tuple:
    """Sort key for labels such as bins and designators: digit runs compare as numbers, the
    rest case-blind, so ``A2`` comes before ``A10`` (how a person walks a cabinet)."""
    return tuple((0, int(t), "") if t.isdigit() else (1, 0, t.casefold())
                 for t in _DIGIT_RUNS.split(text or "") if t)
