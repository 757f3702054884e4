"""CSV import and export of stock (pandas).

Import is atomic: :func:`read_stock_csv` validates every row and raises one
PickerError listing every bad field (``row N, column C: ...``, N = line number
in the file, the header being line 1) before anything touches the store;
:func:`plan_import` decides, against the store, which rows add a new part and
which merge into an existing one; :func:`apply_import` writes the plan inside
the caller's transaction.

Export writes the same columns; numbers are written in the shortest
engineering form that reads back to exactly the same float (falling back to
Python's shortest round-trip repr), so export -> import reproduces the store.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from picker import units
from picker.errors import PickerError
from picker.store.ledger import change_qty
from picker.store.models import Part
from picker.store.spec import COLUMN_UNITS, COLUMNS, REQUIRED, KINDS, PartSpec, parse_part, spec_of


@dataclass(frozen=True)
class StockRow:
    """One valid data row: its line number in the file, the part and the quantity."""

    line: int
    spec: PartSpec
    qty: int


@dataclass(frozen=True)
class StockFile:
    """A validated stock CSV."""

    path: Path
    rows: tuple[StockRow, ...]


def _read_table(path: Path) -> tuple[list[str], list[tuple[int, list[str]]]]:
    """Header cells and (line number, cells) of each non-blank record."""
    shown = str(path)
    if not path.exists():
        raise PickerError(f"file not found: {shown}")
    if path.is_dir():
        raise PickerError(f"{shown} is a directory, expected a CSV file")
    try:
        df = pd.read_csv(
            path, header=None, dtype=str, keep_default_na=False, skip_blank_lines=False,
            encoding="utf-8-sig",
        )
    except pd.errors.EmptyDataError:
        raise PickerError(f"{shown}: file is empty (expected a header line: {', '.join(REQUIRED)}, ...)") from None
    except pd.errors.ParserError as e:
        raise PickerError(f"{shown}: not a valid CSV file ({str(e).strip().splitlines()[-1]})") from None
    except UnicodeDecodeError as e:
        raise PickerError(f"{shown}: not a text CSV file (byte {e.start} is not UTF-8)") from None
    except OSError as e:
        raise PickerError(f"cannot read {shown}: {e.strerror or e}") from None
    records = df.fillna("").astype(str).values.tolist()
    header = [c.strip().lower() for c in records[0]]
    rows = []
    line = 1 + sum(c.count("\n") for c in records[0])
    for cells in records[1:]:
        line += 1
        if any(c.strip() for c in cells):
            rows.append((line, cells))
        line += sum(c.count("\n") for c in cells)  # quoted cells spanning lines
    return header, rows


def read_stock_csv(path: str | os.PathLike) -> StockFile:
    """Read and validate a stock CSV; nothing is written anywhere.

    Raises
    ------
    PickerError
        Missing, empty or malformed file, or bad header or cells; the message has
        one line per problem, every bad row and column named.
    """
    path = Path(path)
    header, records = _read_table(path)
    errors = header_errors(header, records, COLUMNS, REQUIRED)
    index = {name: i for i, name in reversed(list(enumerate(header))) if name in COLUMNS}
    rows: list[StockRow] = []
    for line, cells in records:
        spec, qty, problems = parse_part({name: cells[i] for name, i in index.items()})
        if problems:
            errors.extend(f"row {line}, column {p.column}: {p.message}" for p in problems)
        else:
            rows.append(StockRow(line, spec, qty))
    raise_if_errors(path, errors)
    return StockFile(path, tuple(rows))


def header_errors(header: list[str], records: list, columns, required, misplaced: dict | None = None) -> list[str]:
    """Problems of a CSV header (blank, unknown, repeated or missing columns) and of an empty
    body, one line each; ``misplaced`` maps a column name that belongs to another CSV format
    to the reason shown for it.  Shared by the stock and the catalog formats."""
    errors: list[str] = []
    accepted = ", ".join(columns)
    seen: set[str] = set()
    for i, name in enumerate(header, start=1):
        if name == "":
            errors.append(f"row 1, column {i}: blank column name (expected one of: {accepted})")
        elif misplaced and name in misplaced:
            errors.append(f"row 1, column {name}: unknown column ({misplaced[name]}; expected one of: {accepted})")
        elif name not in columns:
            errors.append(f"row 1, column {name}: unknown column (expected one of: {accepted})")
        elif name in seen:
            errors.append(f"row 1, column {name}: column appears twice")
        seen.add(name)
    for name in required:
        if name not in seen:
            errors.append(f"row 1, column {name}: required column missing (required: {', '.join(required)})")
    if not records and not errors:
        errors.append("no data rows after the header")
    return errors


def raise_if_errors(path: Path, errors: list[str]) -> None:
    """One PickerError listing every problem of the file (nothing has been written)."""
    if errors:
        n_bad = len({e.split(",")[0] for e in errors})
        raise PickerError(
            "\n".join([f"{path}: {len(errors)} problem(s) in {n_bad} row(s); nothing imported", *errors])
        )


@dataclass
class ImportAction:
    """What importing one row does: add a new part or merge into ``target``."""

    line: int
    spec: PartSpec
    qty: int
    target: int | None  # id of an existing part merged into, else None
    new_index: int | None  # which new part (0-based) for adds and merges within the file
    first: bool = True  # False: merges into a new part an earlier row of the file creates


@dataclass
class ImportPlan:
    """All actions of an import, in file order."""

    file: Path
    actions: list[ImportAction] = field(default_factory=list)

    @property
    def new_parts(self) -> int:
        return sum(1 for a in self.actions if a.target is None and a.first)

    @property
    def merged_rows(self) -> int:
        return sum(1 for a in self.actions if a.target is not None or not a.first)

    @property
    def pieces(self) -> int:
        return sum(a.qty for a in self.actions)

    def summary(self) -> dict:
        return {
            "file": str(self.file),
            "rows": len(self.actions),
            "new_parts": self.new_parts,
            "merged_rows": self.merged_rows,
            "merged_into_existing": sum(1 for a in self.actions if a.target is not None),
            "pieces": self.pieces,
        }


def plan_import(session: Session | None, stock: StockFile) -> ImportPlan:
    """Decide for each row: new part, merge into an existing part, or merge within the file.

    ``session`` None plans against an empty store (dry run on a store not created yet).
    """
    existing: dict[tuple, int] = {}
    if session is not None:
        kinds = {r.spec.kind for r in stock.rows}
        for part in session.scalars(select(Part).where(Part.kind.in_(kinds)).order_by(Part.id)):
            existing.setdefault(spec_of(part).key(), part.id)
    new: dict[tuple, int] = {}
    plan = ImportPlan(stock.path)
    for row in stock.rows:
        key = row.spec.key()
        if key in existing:
            plan.actions.append(ImportAction(row.line, row.spec, row.qty, existing[key], None))
        elif key in new:
            plan.actions.append(ImportAction(row.line, row.spec, row.qty, None, new[key], first=False))
        else:
            new[key] = len(new)
            plan.actions.append(ImportAction(row.line, row.spec, row.qty, None, new[key]))
    return plan


def apply_import(session: Session, plan: ImportPlan) -> list[int]:
    """Write the plan in the caller's transaction: one ledger row per CSV row.

    Returns
    -------
    list of int
        The part id each action went to, in plan order.
    """
    new_ids: dict[int, Part] = {}
    ids = []
    name = plan.file.name
    for a in plan.actions:
        if a.target is not None:
            part = session.get(Part, a.target)
        elif a.first:
            part = Part(**a.spec.as_dict(), qty=0)
            session.add(part)
            session.flush()
            new_ids[a.new_index] = part
        else:
            part = new_ids[a.new_index]
        change_qty(session, part, a.qty, f"import {name} row {a.line}")
        ids.append(part.id)
    return ids


# ---- export ----------------------------------------------------------------


def _plain(x: float) -> str:
    s = repr(float(x))
    return s[:-2] if s.endswith(".0") else s


def _exact(x: float, parse) -> str:
    """Shortest engineering text that ``parse`` reads back as exactly ``x``."""
    for digits in range(3, 18):
        s = units.format_eng(x, "", digits).replace("µ", "u").replace("μ", "u")
        try:
            if parse(s) == x:
                return s
        except PickerError:
            break
    return _plain(x)


def format_cell(column: str, value, kind: str) -> str:
    """Text of one exported cell; reads back to the identical value."""
    if value is None:
        return ""
    if column in ("kind", "bin", "dielectric", "name", "note"):
        return str(value)
    if column == "qty":
        return str(int(value))
    if column == "value":
        return _exact(value, lambda s: units.parse_value(s, kind))
    if column == "tolerance":
        for decimals in range(0, 16):
            s = f"{value * 100:.{decimals}f}".rstrip("0").rstrip(".") + "%"
            try:
                if units.parse_tolerance(s) == value:
                    return s
            except PickerError:
                pass
        return _plain(value)  # a bare fraction below 1 reads back as itself
    if column in ("unit_cost", "hfe_min", "hfe_max"):
        return _plain(value)
    if 0.01 <= abs(value) < 1000:
        return _plain(value)  # 0.25 (W), 0.65 (V), 63 (V) read better without a prefix
    unit = COLUMN_UNITS[column]
    return _exact(value, lambda s: units.parse_quantity(s, unit, what=column))


def export_rows(session: Session) -> list[list[str]]:
    """All parts as CSV cells (header not included), ordered by kind, bin, value, id."""
    from picker.store.query import natural_key  # avoid a cycle at import time

    parts = list(session.scalars(select(Part)))
    parts.sort(key=lambda p: (KINDS.index(p.kind), natural_key(p.bin), p.value or 0.0, p.name or "", p.id))
    return [[format_cell(c, getattr(p, c), p.kind) for c in COLUMNS] for p in parts]


def write_stock_csv(session: Session, target: str | os.PathLike, *, overwrite: bool = False) -> int:
    """Export every part to ``target`` (written atomically: temp file, then rename).

    Returns
    -------
    int
        Number of parts written.
    """
    target = Path(target)
    if target.exists() and not overwrite:
        raise PickerError(f"{target} already exists (use --force to overwrite)")
    if not target.parent.is_dir():
        raise PickerError(f"directory {target.parent} does not exist (export to {target})")
    rows = export_rows(session)
    df = pd.DataFrame(rows, columns=list(COLUMNS), dtype=str)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            df.to_csv(fh, index=False, lineterminator="\n")
        os.replace(tmp, target)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return len(rows)


def stock_csv_text(session: Session) -> str:
    """The export as text (for ``picker stock export -``)."""
    df = pd.DataFrame(export_rows(session), columns=list(COLUMNS), dtype=str)
    return df.to_csv(index=False, lineterminator="\n")
