"""What a part is made of: the CSV/CLI field contract and its validation.

One validation path serves CSV import and ``picker stock add``: raw text cells in,
a :class:`PartSpec` (SI base units) and a quantity out, or a list of
:class:`FieldError` naming each bad field.

Columns (the CSV header names are the contract)::

    kind, value, qty, bin, tolerance, unit_cost, voltage_v, power_w, dielectric,
    dcr_ohm, isat_a, name, hfe_min, hfe_max, vbe_v, ft_hz, cob_f, vaf_v, vceo_v,
    pd_w, note
"""

from __future__ import annotations

import math
import re
from dataclasses import astuple, dataclass, fields
from typing import Mapping

from picker import units
from picker.errors import PickerError

KINDS: tuple[str, ...] = tuple(units.KINDS)

#: Every column, in the order export writes them.
COLUMNS: tuple[str, ...] = (
    "kind", "value", "qty", "bin", "tolerance", "unit_cost", "voltage_v", "power_w",
    "dielectric", "dcr_ohm", "isat_a", "name", "hfe_min", "hfe_max", "vbe_v", "ft_hz",
    "cob_f", "vaf_v", "vceo_v", "pd_w", "note",
)  # fmt: skip
REQUIRED: tuple[str, ...] = ("kind", "qty", "bin")

#: Columns every kind may fill.
COMMON = ("kind", "qty", "bin", "unit_cost", "note")
#: Kind-specific columns (besides COMMON); a cell outside its kind's list is an error.
KIND_COLUMNS: dict[str, tuple[str, ...]] = {
    "resistor": ("value", "tolerance", "power_w", "voltage_v"),
    "capacitor": ("value", "tolerance", "voltage_v", "dielectric"),
    "inductor": ("value", "tolerance", "dcr_ohm", "isat_a"),
    "npn": ("name", "hfe_min", "hfe_max", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vceo_v", "pd_w"),
}
#: Columns that must be filled for a kind (besides REQUIRED).
KIND_REQUIRED: dict[str, tuple[str, ...]] = {
    "resistor": ("value",),
    "capacitor": ("value",),
    "inductor": ("value",),
    "npn": ("name", "hfe_min", "hfe_max"),
}
#: SI unit of each numeric column (None: plain number).
COLUMN_UNITS: dict[str, str | None] = {
    "unit_cost": None, "voltage_v": "V", "power_w": "W", "dcr_ohm": "Ω", "isat_a": "A",
    "hfe_min": None, "hfe_max": None, "vbe_v": "V", "ft_hz": "Hz", "cob_f": "F",
    "vaf_v": "V", "vceo_v": "V", "pd_w": "W",
}  # fmt: skip
#: The rating columns shown per kind (JSON output, tables).
RATINGS: dict[str, tuple[str, ...]] = {k: tuple(c for c in v if c not in ("value", "tolerance")) for k, v in KIND_COLUMNS.items()}

#: Accepted dielectrics, canonical spelling.  Input is case-insensitive; "COG"
#: (letter O) and "NPO" are accepted as the common misspellings of C0G / NP0.
DIELECTRICS: tuple[str, ...] = (
    "C0G", "NP0", "X7R", "X5R", "Y5V", "Z5U", "film", "polypropylene", "polyester",
    "polystyrene", "mica", "electrolytic", "tantalum",
)  # fmt: skip
_DIELECTRIC_LOOKUP = {d.lower(): d for d in DIELECTRICS} | {"cog": "C0G", "npo": "NP0"}

MAX_TEXT = 64  # bin and name length (characters)


@dataclass(frozen=True)
class PartSpec:
    """Every attribute of a part except its quantity; SI base units, None when blank.

    Two parts with equal specs are the same stock and merge (quantities add).
    """

    kind: str
    bin: str
    value: float | None = None
    tolerance: float | None = None
    unit_cost: float | None = None
    voltage_v: float | None = None
    power_w: float | None = None
    dielectric: str | None = None
    dcr_ohm: float | None = None
    isat_a: float | None = None
    name: str | None = None
    hfe_min: float | None = None
    hfe_max: float | None = None
    vbe_v: float | None = None
    ft_hz: float | None = None
    cob_f: float | None = None
    vaf_v: float | None = None
    vceo_v: float | None = None
    pd_w: float | None = None
    note: str | None = None

    def key(self) -> tuple:
        """Identity used for merging."""
        return astuple(self)

    def as_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


SPEC_FIELDS: tuple[str, ...] = tuple(f.name for f in fields(PartSpec))


@dataclass(frozen=True)
class FieldError:
    """One bad field: the column, the text found and what is wrong with it."""

    column: str
    message: str


def _got(text: str, expected: str) -> str:
    return f"(got {text!r}; expected {expected})"


def parse_kind(text: str) -> str:
    """Canonical kind from text (case-insensitive)."""
    k = text.strip().lower()
    if k not in KINDS:
        raise PickerError(f"unknown kind {_got(text, 'one of ' + ', '.join(KINDS))}")
    return k


def parse_dielectric(text: str) -> str:
    """Canonical dielectric name from text (case-insensitive)."""
    d = _DIELECTRIC_LOOKUP.get(text.strip().lower())
    if d is None:
        raise PickerError(f"unknown dielectric {_got(text, 'one of ' + ', '.join(DIELECTRICS))}")
    return d


def parse_qty(text: str) -> int:
    """A quantity: a whole number >= 0 (no prefixes, no sign)."""
    t = text.strip()
    if not re.fullmatch(r"\+?\d+", t):
        raise PickerError(f"bad quantity {_got(text, 'a whole number >= 0')}")
    return int(t)


def _parse_text(column: str, text: str) -> str:
    t = text.strip()
    if len(t) > MAX_TEXT:
        raise PickerError(f"{column} too long {_got(text[:20] + '...', f'at most {MAX_TEXT} characters')}")
    return t


def _parse_number(column: str, text: str) -> float:
    unit = COLUMN_UNITS[column]
    x = units.parse_quantity(
        text, unit, what=column, allow_zero=(column == "unit_cost"), allow_negative=False
    )
    if not math.isfinite(x):
        raise PickerError(f"{column} must be a finite number {_got(text, 'a number')}")
    return float(x)


def _parse_tolerance(text: str) -> float:
    tol = float(units.parse_tolerance(text))
    if not (0 < tol < 1):
        raise PickerError(f"tolerance out of range {_got(text, 'between 0 and 100 %, e.g. 5% or 0.05')}")
    return tol


def parse_part(cells: Mapping[str, str]) -> tuple[PartSpec | None, int | None, list[FieldError]]:
    """Validate one part's raw text cells.

    Parameters
    ----------
    cells : mapping of column name to text
        Missing columns count as blank.  Unknown names are the caller's business.

    Returns
    -------
    spec, qty, errors
        ``spec`` and ``qty`` are None when ``errors`` is not empty.  ``errors``
        holds every problem found, each with its column.
    """
    errors: list[FieldError] = []
    raw = {c: ("" if cells.get(c) is None else str(cells.get(c))) for c in COLUMNS}
    filled = {c for c, t in raw.items() if t.strip() != ""}

    def attempt(column, fn, *args):
        try:
            return fn(*args)
        except PickerError as e:
            errors.append(FieldError(column, str(e)))
            return None

    for c in REQUIRED:
        if c not in filled:
            errors.append(FieldError(c, f"{c} is required {_got(raw[c], _EXPECT[c])}"))
    kind = attempt("kind", parse_kind, raw["kind"]) if "kind" in filled else None
    qty = attempt("qty", parse_qty, raw["qty"]) if "qty" in filled else None
    if kind is None:
        return None, None, errors

    allowed = set(COMMON) | set(KIND_COLUMNS[kind])
    for c in KIND_REQUIRED[kind]:
        if c not in filled:
            errors.append(FieldError(c, f"{c} is required for {kind} {_got(raw[c], _EXPECT[c])}"))
    values: dict[str, object] = {"kind": kind}
    for c in COLUMNS:
        if c in ("kind", "qty") or c not in filled:
            continue
        text = raw[c]
        if c not in allowed:
            if c == "value" and kind == "npn":
                msg = f"value must be blank for npn (put the profile name in column name) {_got(text, 'blank')}"
            else:
                fits = [k for k, cols in KIND_COLUMNS.items() if c in cols]
                msg = f"{c} does not apply to a {kind} {_got(text, 'blank; ' + c + ' is for ' + ', '.join(fits))}"
            errors.append(FieldError(c, msg))
            continue
        if c == "value":
            values[c] = attempt(c, units.parse_value, text, kind)
        elif c == "tolerance":
            values[c] = attempt(c, _parse_tolerance, text)
        elif c == "dielectric":
            values[c] = attempt(c, parse_dielectric, text)
        elif c in ("bin", "name"):
            values[c] = attempt(c, _parse_text, c, text)
        elif c == "note":
            values[c] = text.strip()
        else:
            values[c] = attempt(c, _parse_number, c, text)
    lo, hi = values.get("hfe_min"), values.get("hfe_max")
    if lo is not None and hi is not None and lo > hi:
        expect = f"a number >= hfe_min {raw['hfe_min'].strip()}"
        errors.append(FieldError("hfe_max", f"hfe_max below hfe_min {_got(raw['hfe_max'], expect)}"))
    if errors:
        return None, None, errors
    return PartSpec(**values), qty, errors


_EXPECT = {
    "kind": "one of " + ", ".join(KINDS),
    "qty": "a whole number >= 0",
    "bin": "a bin name, e.g. R-A1",
    "value": "a value with optional prefix and unit, e.g. 4k7, 100n, 10uH",
    "name": "an npn profile name, e.g. npn-general",
    "hfe_min": "a number, e.g. 100",
    "hfe_max": "a number, e.g. 300",
}


def spec_of(part) -> PartSpec:
    """The PartSpec of a stored part (anything with the PartSpec attributes)."""
    return PartSpec(**{f: getattr(part, f) for f in SPEC_FIELDS})
