"""Build jobs in the store: reserve (available = qty - reserved), cancel, done through the ledger, undo,
refusals that write nothing, the design's parts checked against the store, and the last find."""

import pytest
from sqlalchemy import func, select

from picker.builds.model import DESIGN_FORMAT
from picker.cli.find import load_drawer
from picker.errors import PickerError
from picker.store import LedgerEntry, Part, add_stock, change_qty, get_part, ledger_balance_ok, parse_part
from picker.store.builds import (
    DesignFieldError,
    ShortageError,
    cancel_build,
    done_build,
    get_build,
    last_find,
    list_builds,
    new_build,
    reserved_qty,
    save_last_find,
    undo_build,
)
from picker.store.models import BuildRow, LastFind, LastFindCandidate

# A common-emitter Colpitts (values of tests/search/test_find.py KNOWN); C1 and CC1 share a line on purpose.
VALUES = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE1": 100.0, "RE": 2.2e3, "C1": 100e-9, "L1": 1e-3, "C2": 47e-9,
          "CC1": 100e-9, "CC2": 1e-6, "CE": 1e-6}
STOCK = [  # kind, value text, qty, bin
    ("resistor", "33k", 10, "R-1"), ("resistor", "10k", 10, "R-2"), ("resistor", "2k2", 10, "R-3"),
    ("resistor", "100", 10, "R-4"), ("capacitor", "100n", 7, "C-1"), ("inductor", "1m", 4, "L-1"),
    ("capacitor", "47n", 10, "C-2"), ("capacitor", "1u", 10, "C-3"), ("capacitor", "22n", 10, "C-4"),
    ("capacitor", "25n", 10, "C-5"),
]


def _spec(kind, value, bin, **extra):
    cells = {"kind": kind, "qty": "0", "bin": bin} | extra
    if kind == "npn":
        cells |= {"name": value, "hfe_min": "100", "hfe_max": "300"}
    else:
        cells |= {"value": value, "tolerance": "5%"}
    s, _, errors = parse_part(cells)
    assert not errors, errors
    return s


@pytest.fixture
def ids(store):
    """Part ids by bin, after adding STOCK and an npn (5 on hand)."""
    out = {}
    with store.Session.begin() as s:
        for kind, value, qty, bin in STOCK + [("npn", "npn-test", 5, "Q-1")]:
            part, _ = add_stock(s, _spec(kind, value, bin), qty, "add")
            out[bin] = part.id
    return out


def design(ids, **parts_change):
    """A saved-design dict using the stock: RC and RE share the 2k2 line, C1 and CC1 the 100 nF one."""
    bins = {"R1": "R-1", "R2": "R-2", "RC": "R-3", "RE": "R-3", "RE1": "R-4", "C1": "C-1", "CC1": "C-1",
            "L1": "L-1", "C2": "C-2", "CC2": "C-3", "CE": "C-3", "Q1": "Q-1"}
    parts = {r: {"part_id": ids[b]} for r, b in bins.items()}
    parts.update(parts_change)
    return {"format": DESIGN_FORMAT, "topology": "colpitts-ce", "values": dict(VALUES),
            "npn": {"name": "npn-test", "hfe_min": 100, "hfe_max": 300}, "vcc_v": 12.0, "style": "breadboard",
            "temps_c": [0, 50], "nominal_c": 25, "target": {"freq_hz": 20e3, "tol": 0.01},
            "parts": {r: p for r, p in parts.items() if p is not None}}


def _qtys(s):
    return {p.id: p.qty for p in s.scalars(select(Part))}


def _ledger_rows(s):
    return s.scalar(select(func.count()).select_from(LedgerEntry))


def test_new_build_reserves_without_changing_quantities(store, ids):
    with store.Session.begin() as s:
        before = _qtys(s)
        rec = new_build(s, design(ids), 2, "  bench tone  ", user="ann")
    assert (rec.id, rec.name, rec.boards, rec.status, rec.user) == (1, "bench tone", 2, "reserved", "ann")
    # one line per part, in the order the design lists the parts; a part at two positions counts twice
    got = [(ln.bin, ln.designators, ln.qty) for ln in rec.lines]
    assert got == [("R-1", ("R1",), 2), ("R-2", ("R2",), 2), ("R-3", ("RC", "RE"), 4), ("R-4", ("RE1",), 2),
                   ("C-1", ("C1", "CC1"), 4), ("L-1", ("L1",), 2), ("C-2", ("C2",), 2), ("C-3", ("CC2", "CE"), 4),
                   ("Q-1", ("Q1",), 2)]
    c1 = next(ln for ln in rec.lines if ln.bin == "C-1")
    assert (c1.kind, c1.value, c1.qty_on_hand, c1.tolerance) == ("capacitor", pytest.approx(100e-9), 7, 0.05)
    with store.Session.begin() as s:
        assert _qtys(s) == before
        assert reserved_qty(s) == {ids["R-1"]: 2, ids["R-2"]: 2, ids["R-3"]: 4, ids["R-4"]: 2, ids["C-1"]: 4,
                                   ids["L-1"]: 2, ids["C-2"]: 2, ids["C-3"]: 4, ids["Q-1"]: 2}
        again = get_build(s, rec.id)
        assert again == rec and again.design == design(ids)
        assert [b.id for b in list_builds(s)] == [rec.id]
        assert ledger_balance_ok(s) == []


def test_shortage_names_every_short_part_and_writes_nothing(store, ids):
    with store.Session.begin() as s:
        new_build(s, design(ids), 1, "first")  # holds 2 of the 7 x 100 nF, 1 of the 4 x 1 mH
    with pytest.raises(ShortageError) as e:
        with store.Session.begin() as s:
            new_build(s, design(ids), 3, "second")  # 100 nF: needs 6, 5 available; 1 mH: needs 3, 3 available
    msg = str(e.value)
    assert "\n" not in msg
    assert f"part {ids['C-1']} (capacitor 100 nF in bin C-1) at C1,CC1 needs 6, 5 available" in msg
    assert "(7 on hand, 2 reserved by other builds): short by 1" in msg
    assert "L-1" not in msg and "R-3" not in msg  # parts with enough are not named
    with pytest.raises(ShortageError, match=r"1 mH in bin L-1\) at L1 needs 5, 3 available .*short by 2"):
        with store.Session.begin() as s:
            new_build(s, design(ids), 5, "third")
    with store.Session.begin() as s:
        assert [b.name for b in list_builds(s)] == ["first"]
        assert reserved_qty(s)[ids["C-1"]] == 2


def test_cancel_releases_the_reservation(store, ids):
    with store.Session.begin() as s:
        a = new_build(s, design(ids), 3, "a")  # 6 of 7 x 100 nF held
    with pytest.raises(ShortageError):
        with store.Session.begin() as s:
            new_build(s, design(ids), 1, "b")
    with store.Session.begin() as s:
        assert cancel_build(s, a.id).status == "cancelled"
    with store.Session.begin() as s:
        assert reserved_qty(s) == {}
        b = new_build(s, design(ids), 3, "b")
        assert _qtys(s)[ids["C-1"]] == 7 and b.status == "reserved"


def test_done_consumes_through_the_ledger_and_undo_compensates(store, ids):
    with store.Session.begin() as s:
        rec = new_build(s, design(ids), 2, "tone")
        before, rows = _qtys(s), _ledger_rows(s)
    with store.Session.begin() as s:
        done = done_build(s, rec.id)
    assert done.status == "done"
    with store.Session.begin() as s:
        after = _qtys(s)
        want = dict(before)
        for ln in rec.lines:
            want[ln.part_id] -= ln.qty
        assert after == want
        assert _ledger_rows(s) == rows + len(rec.lines)
        row = get_part(s, ids["R-3"]).ledger[-1]
        assert (row.delta, row.reason) == (-4, "build 1 done (tone, 2 board(s))")
        assert reserved_qty(s) == {}  # consumed, no longer held
        assert s.get(BuildRow, rec.id).done_at is not None
        assert ledger_balance_ok(s) == []
    with store.Session.begin() as s:
        assert undo_build(s, rec.id).status == "undone"
    with store.Session.begin() as s:
        assert _qtys(s) == before
        assert _ledger_rows(s) == rows + 2 * len(rec.lines)
        assert get_part(s, ids["R-3"]).ledger[-1].reason == "undo build 1 (tone, 2 board(s))"
        assert ledger_balance_ok(s) == []


@pytest.mark.parametrize("steps, action, status", [
    ((), "undo", "reserved"),
    (("done",), "done", "done"),
    (("done",), "cancel", "done"),
    (("cancel",), "done", "cancelled"),
    (("cancel",), "cancel", "cancelled"),
    (("done", "undo"), "undo", "undone"),
    (("done", "undo"), "done", "undone"),
])  # fmt: skip
def test_status_transitions_are_refused_with_the_status(store, ids, steps, action, status):
    fn = {"done": done_build, "cancel": cancel_build, "undo": undo_build}
    with store.Session.begin() as s:
        rec = new_build(s, design(ids), 1, "t")
    for step in steps:
        with store.Session.begin() as s:
            fn[step](s, rec.id)
    with store.Session.begin() as s:
        before, rows = _qtys(s), _ledger_rows(s)
    with pytest.raises(PickerError, match=f"build 1 \\(t\\) is {status}: only a .* build can be"):
        with store.Session.begin() as s:
            fn[action](s, rec.id)
    with store.Session.begin() as s:
        assert (_qtys(s), _ledger_rows(s), get_build(s, rec.id).status) == (before, rows, status)


def test_unknown_build_id(store, ids):
    with store.Session.begin() as s:
        with pytest.raises(PickerError, match="no build with id 4 \\(there are no builds yet"):
            get_build(s, 4)
        new_build(s, design(ids), 1, "t")
        with pytest.raises(PickerError, match="no build with id 4 \\(ids run 1..1"):
            done_build(s, 4)


def test_done_that_fails_midway_consumes_nothing(store, ids):
    """Stock taken by hand below the reservation: the build's last line cannot be consumed, so nothing is."""
    with store.Session.begin() as s:
        rec = new_build(s, design(ids), 2, "t")
        change_qty(s, get_part(s, ids["Q-1"]), -4, "dropped on the floor")  # 1 left, the build needs 2
        before, rows = _qtys(s), _ledger_rows(s)
    assert rec.lines[-1].bin == "Q-1"
    with pytest.raises(PickerError, match="below zero"):
        with store.Session.begin() as s:
            done_build(s, rec.id)
    with store.Session.begin() as s:
        assert (_qtys(s), _ledger_rows(s), get_build(s, rec.id).status) == (before, rows, "reserved")
        assert ledger_balance_ok(s) == []


def test_series_parallel_pair_takes_both_parts(store, ids):
    # C2 = 22 nF parallel 25 nF = 47 nF
    d = design(ids, C2={"part_id": ids["C-4"], "part2_id": ids["C-5"], "how": "parallel"})
    with store.Session.begin() as s:
        rec = new_build(s, d, 3, "pair")
        by_bin = {ln.bin: (ln.designators, ln.qty) for ln in rec.lines}
        assert by_bin["C-4"] == (("C2",), 3) and by_bin["C-5"] == (("C2",), 3) and "C-2" not in by_bin


@pytest.mark.parametrize("change, message", [
    ({"C2": {"part_id": 999}}, "parts.C2.part_id: no part with id 999 in the store"),
    ({"C2": {"part_id": "7"}}, "parts.C2.part_id: got '7'; expected a part id"),
    ({"C2": {"part_id": True}}, "parts.C2.part_id: got True"),
    ({"C2": 12}, "parts.C2: got 12"),
    ({"R9": {"part_id": 1}}, "parts.R9: not a position of colpitts-ce"),
    ({"C2": "BIN:L-1"}, "parts.C2: got 'BIN:L-1'"),
    ({"C2": "kind:L-1"}, "parts.C2.part_id: part {L-1} is a inductor, C2 takes a capacitor"),
    ({"C2": "id:C-4"}, "parts.C2: part {C-4} is 22 nF, but values.C2 is 47 nF"),
    ({"C2": "pair:series"}, "parts.C2: part {C-4} series {C-5} is 11.7 nF, but values.C2 is 47 nF"),
    ({"C2": "pair:sideways"}, "parts.C2.how: got 'sideways'"),
    ({"Q1": "kind:R-1"}, "parts.Q1.part_id: part {R-1} is a resistor, Q1 takes a npn"),
])  # fmt: skip
def test_bad_design_fields_are_named(store, ids, change, message):
    resolved = {}
    for ref, v in change.items():
        if isinstance(v, str) and ":" in v and not v.startswith("BIN"):
            what, bin = v.split(":")
            if what in ("kind", "id"):
                v = {"part_id": ids[bin]}
            else:
                v = {"part_id": ids["C-4"], "part2_id": ids["C-5"], "how": bin}
        resolved[ref] = v
    with pytest.raises(DesignFieldError) as e:
        with store.Session.begin() as s:
            new_build(s, design(ids, **resolved), 1, "bad")
    assert message.format(**{k: ids[k] for k in ids}) in str(e.value)
    with store.Session.begin() as s:
        assert list_builds(s) == []


def test_bad_design_shape_and_arguments(store, ids):
    d = design(ids)
    with store.Session.begin() as s:
        with pytest.raises(DesignFieldError, match="not a saved design"):
            new_build(s, {"topology": "colpitts-ce"}, 1, "x")
        with pytest.raises(DesignFieldError, match="topology: got 'pierce'"):
            new_build(s, d | {"topology": "pierce"}, 1, "x")
        with pytest.raises(DesignFieldError, match="parts: expected an object"):
            new_build(s, d | {"parts": {}}, 1, "x")
        with pytest.raises(DesignFieldError, match="values.C2: missing"):
            new_build(s, d | {"values": {r: v for r, v in VALUES.items() if r != "C2"}}, 1, "x")
        with pytest.raises(DesignFieldError,
                           match="parts.Q1.part_id: part .* is npn 'npn-test', the design's npn is 'npn-rf'"):
            new_build(s, d | {"npn": {"name": "npn-rf", "hfe_min": 50, "hfe_max": 100}}, 1, "x")
        for boards in (0, -1, 1.5, True):
            with pytest.raises(PickerError, match="--boards"):
                new_build(s, d, boards, "x")
        for name in ("", "   ", "a\nb", "x" * 201):
            with pytest.raises(PickerError, match="--name"):
                new_build(s, d, 1, name)
        assert list_builds(s) == []


def test_load_drawer_sees_only_available_stock(store, ids):
    with store.Session.begin() as s:
        full = load_drawer(s)
        new_build(s, design(ids), 2, "t")  # holds 4 of 7 x 100 nF, 2 of 4 x 1 mH, 2 of 5 npn
    with store.Session.begin() as s:
        held = load_drawer(s)
    caps, caps0 = held.lines["capacitor"], full.lines["capacitor"]
    q = dict(zip(caps.id.tolist(), caps.qty.tolist()))
    q0 = dict(zip(caps0.id.tolist(), caps0.qty.tolist()))
    assert q0[ids["C-1"]] == 7 and q[ids["C-1"]] == 3 and q[ids["C-4"]] == 10
    assert dict(zip(held.lines["inductor"].id.tolist(), held.lines["inductor"].qty.tolist())) == {ids["L-1"]: 2}
    assert [(n.part_id, n.qty) for n in held.npns] == [(ids["Q-1"], 3)]
    with store.Session.begin() as s:
        change_qty(s, get_part(s, ids["L-1"]), -2, "two coils lent out")  # 2 on hand, both reserved
        change_qty(s, get_part(s, ids["Q-1"]), -3, "three transistors lent out")
    with store.Session.begin() as s:
        gone = load_drawer(s)
    assert gone.lines["inductor"].n == 0  # nothing available: left out like a part with qty 0
    assert gone.npns == ()


def test_last_find_keeps_only_the_latest(store, ids):
    with store.Session.begin() as s:
        assert last_find(s) is None
        save_last_find(s, {"freq_hz": 1e3, "temps_c": (0.0, 50.0)}, [design(ids), design(ids) | {"style": "pcb"}])
    with store.Session.begin() as s:
        got = last_find(s)
        assert got["spec"] == {"freq_hz": 1e3, "temps_c": [0.0, 50.0]}
        assert [d["style"] for d in got["designs"]] == ["breadboard", "pcb"]
        assert got["created_at"].tzinfo is not None
        save_last_find(s, {"freq_hz": 2e3}, [design(ids) | {"style": "ideal"}])
    with store.Session.begin() as s:
        got = last_find(s)
        assert got["spec"] == {"freq_hz": 2e3} and [d["style"] for d in got["designs"]] == ["ideal"]
        assert s.scalar(select(func.count()).select_from(LastFind)) == 1
        assert s.scalar(select(func.count()).select_from(LastFindCandidate)) == 1


def test_design_fields_the_format_reader_does_not_check(store, ids):
    d = design(ids)
    with store.Session.begin() as s:
        with pytest.raises(DesignFieldError, match="part_info.C1: got 3"):
            new_build(s, d | {"part_info": {"C1": 3}}, 1, "x")
        with pytest.raises(DesignFieldError, match="part_info: got"):
            new_build(s, d | {"part_info": [1]}, 1, "x")
        with pytest.raises(DesignFieldError, match="not storable as JSON"):
            new_build(s, d | {"predicted": {"freq_hz": float("nan")}}, 1, "x")
        assert list_builds(s) == []
