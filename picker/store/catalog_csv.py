"""Supplier catalog CSV: our own format, one row per purchasable item (no SQL here).

A catalog file lists what one supplier sells; the supplier's name and its
order charge are given on import (``picker catalog import FILE --supplier
NAME --order-charge X``), not in the file.  The header row names the columns;
columns may come in any order, an unknown column is an error, and cells not
required for a row may be left blank:

``sku``
    The supplier's item code: free text (at most 64 characters), required,
    unique within the file.
``kind``, ``value``, ``tolerance`` and the kind's ratings
    Exactly as in the stock CSV (:mod:`picker.store.spec`: ``voltage_v``,
    ``power_w``, ``dielectric``, ``dcr_ohm``, ``isat_a``; for ``npn`` the
    profile columns ``name``, ``hfe_min``, ``hfe_max``, ``vbe_v``, ``ft_hz``,
    ``cob_f``, ``vaf_v``, ``vceo_v``, ``pd_w``), read by the same validation, so
    ``4k7``, ``4.7k``, ``4n7``, ``100uH``, ``50V`` mean what they mean there.
``pack``
    Units per pack: a whole number >= 1, default 1.  Items are bought in whole packs.
``min_order``
    Fewest units sold: a whole number >= 1, default ``pack``.
``prices``
    Price breaks ``QTY:PRICE`` separated by spaces, e.g. ``1:0.10 100:0.04
    1000:0.02``: the unit price once at least QTY units are bought (it applies
    to all units).  QTY whole numbers >= 1, strictly ascending; PRICE a plain
    number > 0 (no currency sign), in the currency of the stock's unit_cost.
    The first break's QTY must be at most ``min_order`` (else the price of the
    smallest order is unknown).  Required.

Every problem is reported as ``row N, column C: what is wrong (got 'X';
expected ...)``, N being the line number in the file (header = line 1, as a
spreadsheet shows it); every row is checked before anything is written.

``data/demo_suppliers.csv`` (columns ``supplier, order_charge, file``) lists
the invented demo suppliers; :func:`demo_suppliers` reads them without a store.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Mapping

import picker
from picker.errors import PickerError
from picker.planning.catalog import ITEM_FIELDS, CatalogItem, Supplier
from picker.store.csvio import _read_table, header_errors, raise_if_errors
from picker.store.spec import MAX_TEXT, FieldError, parse_part

#: Columns of a catalog CSV, in the order the demo files use.
CATALOG_COLUMNS: tuple[str, ...] = ("sku", "kind", *ITEM_FIELDS, "pack", "min_order", "prices")
CATALOG_REQUIRED: tuple[str, ...] = ("sku", "kind", "prices")
#: Stock CSV columns a catalog does not have (named in the unknown-column message).
_STOCK_ONLY = ("qty", "bin", "unit_cost", "note")

PRICES_EXPECTED = (
    "price breaks QTY:PRICE separated by spaces, QTY a whole number >= 1 rising strictly, "
    "PRICE a number > 0, e.g. 1:0.10 100:0.04 1000:0.02"
)
_QTY_RE = re.compile(r"\+?\d+")
_PRICE_RE = re.compile(r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")


def _got(text: str, expected: str) -> str:
    return f"(got {text!r}; expected {expected})"


# ---- price breaks -----------------------------------------------------------------


def parse_prices(text: str) -> tuple[tuple[int, float], ...]:
    """Read a ``prices`` cell: ``'1:0.10 100:0.04'`` -> ``((1, 0.1), (100, 0.04))``.

    Raises
    ------
    PickerError
        Empty text, a break not of the form QTY:PRICE, a quantity below 1, a
        price not above zero, or quantities that do not rise strictly.
    """
    tokens = text.split()
    if not tokens:
        raise PickerError(f"no price breaks {_got(text, PRICES_EXPECTED)}")
    breaks: list[tuple[int, float]] = []
    for tok in tokens:
        qty_text, sep, price_text = tok.partition(":")
        if not sep:
            raise PickerError(f"price break {tok!r} is not QTY:PRICE {_got(text, PRICES_EXPECTED)}")
        if not _QTY_RE.fullmatch(qty_text):
            raise PickerError(f"price break quantity {qty_text!r} is not a whole number {_got(text, PRICES_EXPECTED)}")
        qty = int(qty_text)
        if qty < 1:
            raise PickerError(f"price break quantity {qty_text!r} is below 1 {_got(text, PRICES_EXPECTED)}")
        if not _PRICE_RE.fullmatch(price_text):
            raise PickerError(f"price {price_text!r} is not a plain number {_got(text, PRICES_EXPECTED)}")
        price = float(price_text)
        if not math.isfinite(price) or price <= 0:
            raise PickerError(f"price {price_text!r} is not above zero {_got(text, PRICES_EXPECTED)}")
        if breaks and qty <= breaks[-1][0]:
            raise PickerError(
                f"price break quantities must rise strictly, found {breaks[-1][0]} then {qty} "
                f"{_got(text, PRICES_EXPECTED)}"
            )
        breaks.append((qty, price))
    return tuple(breaks)


def _plain(x: float) -> str:
    s = repr(float(x))
    return s[:-2] if s.endswith(".0") else s


def format_prices(breaks) -> str:
    """The ``prices`` cell of price breaks; :func:`parse_prices` reads it back exactly."""
    return " ".join(f"{int(q)}:{_plain(p)}" for q, p in breaks)


# ---- rows ------------------------------------------------------------------------


def _whole(column: str, text: str) -> int:
    t = text.strip()
    if not _QTY_RE.fullmatch(t):
        raise PickerError(f"{column} is not a whole number {_got(text, 'a whole number >= 1, e.g. 10')}")
    n = int(t)
    if n < 1:
        raise PickerError(f"{column} must be at least 1 {_got(text, 'a whole number >= 1, e.g. 10')}")
    return n


def parse_item(cells: Mapping[str, str], supplier: str) -> tuple[CatalogItem | None, list[FieldError]]:
    """Validate one catalog row's raw text cells.

    Missing columns count as blank.  Returns the item (None when there are
    errors) and every problem found, each with its column.
    """
    raw = {c: ("" if cells.get(c) is None else str(cells.get(c))) for c in CATALOG_COLUMNS}
    errors: list[FieldError] = []
    sku = raw["sku"].strip()
    if not sku:
        errors.append(FieldError("sku", f"sku is required {_got(raw['sku'], 'the supplier item code, e.g. R-4K7-J')}"))
    elif len(sku) > MAX_TEXT:
        errors.append(FieldError("sku", f"sku too long {_got(raw['sku'][:20] + '...', f'at most {MAX_TEXT} characters')}"))
    # The part columns go through the stock's one validation path; qty and bin are placeholders
    # (a catalog has neither), so every error it reports is about a catalog column.
    part_cells = {c: raw[c] for c in ("kind", *ITEM_FIELDS)} | {"qty": "0", "bin": "catalog"}
    spec, _, part_errors = parse_part(part_cells)
    errors.extend(part_errors)
    pack = min_order = breaks = None
    try:
        pack = _whole("pack", raw["pack"]) if raw["pack"].strip() else 1
    except PickerError as e:
        errors.append(FieldError("pack", str(e)))
    try:
        min_order = _whole("min_order", raw["min_order"]) if raw["min_order"].strip() else pack
    except PickerError as e:
        errors.append(FieldError("min_order", str(e)))
    if not raw["prices"].strip():
        errors.append(FieldError("prices", f"prices is required {_got(raw['prices'], PRICES_EXPECTED)}"))
    else:
        try:
            breaks = parse_prices(raw["prices"])
        except PickerError as e:
            errors.append(FieldError("prices", str(e)))
    if breaks is not None and min_order is not None and breaks[0][0] > min_order:
        given = "min_order" if raw["min_order"].strip() else "min_order (default: pack)"
        errors.append(FieldError("prices", (
            f"the first price break is for {breaks[0][0]} units but {given} is {min_order}, so the price "
            f"of the smallest order is unknown {_got(raw['prices'], f'a first break QTY of at most {min_order}')}"
        )))  # fmt: skip
    if errors:
        return None, errors
    attrs = {f: getattr(spec, f) for f in ITEM_FIELDS}
    return CatalogItem(supplier, sku, spec.kind, attrs, pack, min_order, breaks), errors


@dataclass(frozen=True)
class CatalogRow:
    """One valid catalog row: its line number in the file and the item."""

    line: int
    item: CatalogItem


@dataclass(frozen=True)
class CatalogFile:
    """A validated catalog CSV of one supplier."""

    path: Path
    supplier: str
    rows: tuple[CatalogRow, ...]

    @property
    def items(self) -> tuple[CatalogItem, ...]:
        return tuple(r.item for r in self.rows)


def _nonblank_file(path: Path) -> None:
    """Refuse a missing or empty file with a catalog-specific message."""
    if path.is_file():
        try:
            empty = path.read_bytes().strip() == b""
        except OSError:
            return  # _read_table reports it
        if empty:
            raise PickerError(f"{path}: file is empty (expected a header line: {', '.join(CATALOG_REQUIRED)}, ...)")


def read_catalog_csv(path: str | os.PathLike, supplier: str) -> CatalogFile:
    """Read and validate a catalog CSV for ``supplier``; nothing is written anywhere.

    Raises
    ------
    PickerError
        Missing, empty or malformed file, or bad header or cells; the message has
        one line per problem, every bad row and column named.
    """
    path = Path(path)
    _nonblank_file(path)
    header, records = _read_table(path)
    errors = header_errors(header, records, CATALOG_COLUMNS, CATALOG_REQUIRED,
                            {c: f"{c} is a stock CSV column; a catalog has none" for c in _STOCK_ONLY})
    index = {name: i for i, name in reversed(list(enumerate(header))) if name in CATALOG_COLUMNS}
    rows: list[CatalogRow] = []
    first_line: dict[str, int] = {}
    for line, cells in records:
        item, problems = parse_item({name: cells[i] for name, i in index.items()}, supplier)
        sku = cells[index["sku"]].strip() if "sku" in index else ""
        if sku and sku in first_line:
            problems = [*problems, FieldError("sku", (
                f"sku already used in row {first_line[sku]} {_got(cells[index['sku']], 'a sku unique within the file')}"
            ))]  # fmt: skip
        elif sku:
            first_line[sku] = line
        if problems:
            errors.extend(f"row {line}, column {p.column}: {p.message}" for p in problems)
        else:
            rows.append(CatalogRow(line, item))
    raise_if_errors(path, errors)
    return CatalogFile(path, supplier, tuple(rows))


# ---- supplier names, charges and the demo catalogs ------------------------------


def check_supplier_name(text: str) -> str:
    """A supplier name: stripped, not blank, at most 64 characters."""
    t = (text or "").strip()
    if not t:
        expected = "a supplier name, e.g. Quillmoor Parts"
        raise PickerError(f"supplier name is blank {_got(text or '', expected)}")
    if len(t) > MAX_TEXT:
        raise PickerError(f"supplier name too long {_got(t[:20] + '...', f'at most {MAX_TEXT} characters')}")
    return t


def parse_order_charge(text: str) -> float:
    """An order charge: a plain number >= 0 (``0``, ``3.50``), no currency sign."""
    t = str(text).strip()
    if not _PRICE_RE.fullmatch(t) or not math.isfinite(float(t)):
        raise PickerError(f"bad order charge {_got(str(text), 'a plain number >= 0, e.g. 0 or 3.50')}")
    return float(t)


DEMO_SUPPLIERS_NAME = "demo_suppliers.csv"
_SUPPLIER_COLUMNS = ("supplier", "order_charge", "file")


def demo_data_path(name: str) -> Path:
    """A demo data file: the installed package copy, else the source tree's ``data/``."""
    packaged = resources.files("picker") / "data" / name
    if packaged.is_file():
        return Path(str(packaged))
    source = Path(picker.__file__).resolve().parents[1] / "data" / name
    if source.is_file():
        return source
    raise PickerError(f"demo data {name} not found (looked in {packaged} and {source})")


def read_supplier_list(path: str | os.PathLike) -> list[tuple[str, float, Path]]:
    """Rows of a supplier list CSV (``supplier, order_charge, file``; file relative to the list).

    Returns (name, order charge, catalog path) per row; PickerError naming row and column otherwise.
    """
    path = Path(path)
    header, records = _read_table(path)
    errors = [f"row 1, column {c}: required column missing (required: {', '.join(_SUPPLIER_COLUMNS)})"
              for c in _SUPPLIER_COLUMNS if c not in header]  # fmt: skip
    errors += [f"row 1, column {c}: unknown column (expected one of: {', '.join(_SUPPLIER_COLUMNS)})"
               for c in header if c not in _SUPPLIER_COLUMNS]  # fmt: skip
    out: list[tuple[str, float, Path]] = []
    if not errors:
        idx = {c: header.index(c) for c in _SUPPLIER_COLUMNS}
        for line, cells in records:
            row_errors = []
            try:
                name = check_supplier_name(cells[idx["supplier"]])
            except PickerError as e:
                row_errors.append(f"row {line}, column supplier: {e}")
            try:
                charge = parse_order_charge(cells[idx["order_charge"]])
            except PickerError as e:
                row_errors.append(f"row {line}, column order_charge: {e}")
            file = cells[idx["file"]].strip()
            if not file or "/" in file or "\\" in file:
                row_errors.append(f"row {line}, column file: bad file name {_got(file, 'a CSV file name beside the list')}")
            errors += row_errors
            if not row_errors:
                out.append((name, charge, path.parent / file))
    if errors:
        raise PickerError("\n".join([f"{path}: {len(errors)} problem(s)", *errors]))
    return out


def demo_suppliers() -> tuple[Supplier, ...]:
    """The invented demo suppliers with their catalogs, sorted by name; needs no store.

    Read from ``data/demo_suppliers.csv`` and the catalog files it names
    (what ``--catalog demo`` uses).
    """
    suppliers = []
    for name, charge, file in read_supplier_list(demo_data_path(DEMO_SUPPLIERS_NAME)):
        catalog = read_catalog_csv(file, name)
        suppliers.append(Supplier(name, charge, catalog.items))
    return tuple(sorted(suppliers, key=lambda s: s.name))
