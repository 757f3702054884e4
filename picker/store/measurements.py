"""Measurements of built boards (schema v5): record a reading, read the latest per board.

Every function runs in the caller's transaction.  A board measured twice keeps both
readings; :func:`latest_per_board` gives the newest of each board, which is what
``picker build retune`` fits.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from picker.errors import PickerError
from picker.store.builds import get_build
from picker.store.ledger import current_user
from picker.store.models import MeasurementRow

#: Builds that can have been built and so measured.
MEASURABLE = ("reserved", "done")


@dataclass(frozen=True)
class Measurement:
    id: int
    build_id: int
    board: int
    freq_hz: float
    amplitude_vpp: float | None
    created_at: dt.datetime
    user: str | None

    def as_json(self) -> dict:
        return {"id": self.id, "build_id": self.build_id, "board": self.board, "freq_hz": self.freq_hz,
                "amplitude_vpp": self.amplitude_vpp, "created_at": self.created_at.isoformat(), "user": self.user}


def _record(row: MeasurementRow) -> Measurement:
    return Measurement(row.id, row.build_id, row.board, row.freq_hz, row.amplitude_vpp, row.created_at, row.user)


def add_measurement(session: Session, build_id: int, freq_hz: float, amplitude_vpp: float | None = None,
                    board: int = 1, user: str | None = None) -> Measurement:
    """Record one reading of board ``board`` of build ``build_id``; PickerError for an unknown build,
    a board outside 1..boards, a cancelled or undone build, or a non-positive frequency."""
    record = get_build(session, build_id)
    if record.status not in MEASURABLE:
        raise PickerError(f"build {build_id} ({record.name}) is {record.status}: only a reserved or done build "
                          "has boards to measure")
    if not isinstance(board, int) or isinstance(board, bool) or not 1 <= board <= record.boards:
        raise PickerError(f"--board: build {build_id} has board(s) 1..{record.boards} (got {board!r})")
    if not (isinstance(freq_hz, (int, float)) and math.isfinite(freq_hz) and freq_hz > 0):
        raise PickerError(f"--freq: expected a frequency above 0 Hz (got {freq_hz!r})")
    if amplitude_vpp is not None and not (math.isfinite(amplitude_vpp) and amplitude_vpp >= 0):
        raise PickerError(f"--amplitude: expected a voltage of at least 0 V peak to peak (got {amplitude_vpp!r})")
    row = MeasurementRow(build_id=build_id, board=board, freq_hz=float(freq_hz),
                         amplitude_vpp=None if amplitude_vpp is None else float(amplitude_vpp),
                         created_at=dt.datetime.now(dt.timezone.utc), user=user or current_user(session))
    session.add(row)
    session.flush()
    return _record(row)


def list_measurements(session: Session, build_id: int) -> list[Measurement]:
    """Every reading of the build, oldest first (PickerError for an unknown build)."""
    get_build(session, build_id)
    rows = session.scalars(select(MeasurementRow).where(MeasurementRow.build_id == build_id)
                           .order_by(MeasurementRow.id))
    return [_record(r) for r in rows]


def latest_per_board(session: Session, build_id: int) -> list[Measurement]:
    """The newest reading of each measured board, by board number."""
    latest: dict[int, Measurement] = {}
    for m in list_measurements(session, build_id):
        latest[m.board] = m
    return [latest[b] for b in sorted(latest)]
