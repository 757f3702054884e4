"""``picker check``: evaluate one design and report it (terminal, JSON, Bode plot, SPICE deck).

Thin layer: parse the options into a :class:`~picker.circuit.design.Design`,
read any ``id:N`` parts and the npn profile from the store, call
:func:`~picker.circuit.evaluate.check_design`, render through
:mod:`picker.report.check_report` / :mod:`picker.report.bode`.

Choices
-------
* ``--temp 0..50``: corners at both ends; the nominal temperature is 25 °C if
  the range holds it, else the range's midpoint.  ``--temp 40`` is one
  temperature (hFE corners only).
* Without ``--npn`` the store's first npn profile (lowest id) is used if a
  store exists; the store is then only read, never created.  With no store,
  or none in it, the built-in generic profile is used and the report says so.
  ``--npn npn-generic`` names the built-in profile when the store has no
  profile of that name.
* ``--style`` defaults to ``ideal`` (no stray capacitance); ``--stray``
  overrides the style's stray per node.
* ``--plot`` and ``--spice`` overwrite an existing file (they are outputs of
  this command); their folder must exist.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Annotated, Optional

import numpy as np
import typer
from sqlalchemy import select

from picker import units
from picker.circuit.design import STYLE_STRAY_F, Design, PartInfo, complete_values, style_stray_f
from picker.circuit.device import NpnProfile
from picker.circuit.checks import run_checks
from picker.circuit.evaluate import check_design
from picker.circuit.remedy import find_remedies
from picker.circuit.topology import Topology, get_topology, topology_names
from picker.cli.env import Env, get_env
from picker.cli.output import print_json, print_message
from picker.eseries import preferred_values
from picker.errors import PickerError
from picker.store import get_part
from picker.store.engine import display_url
from picker.store.models import Part

#: Temperatures accepted by --temp, degrees Celsius (common practice: the usual
#: operating range of small-signal silicon parts; the model is not trusted beyond).
TEMP_RANGE_C = (-55.0, 150.0)
NOMINAL_C = 25.0
_ID_RE = re.compile(r"^id:\s*(\S*)$", re.IGNORECASE)
_NPN_FIELDS = ("hfe_min", "hfe_max", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vceo_v", "pd_w")
_VALUE_EXAMPLES = {"resistor": "8k2", "capacitor": "4n7", "inductor": "100u", "coupling": "0.9"}


def register(parent: typer.Typer) -> None:
    """Attach ``picker check`` to the root app."""
    parent.command("check")(check)


# ---- parsing (text -> SI numbers) -------------------------------------------


@dataclass(frozen=True)
class PartArg:
    """One ``--part REF=VALUE`` after parsing: a value, or a store id to look up."""

    arg: str
    ref: str
    kind: str
    value: float | None = None
    part_id: int | None = None


def _a(noun: str) -> str:
    return f"{'an' if noun[:1] in 'aeiou' else 'a'} {noun}"


def _accepted(topo: Topology) -> str:
    return (f"expected REF=VALUE with REF one of {', '.join(topo.refs)} and VALUE such as "
            f"{', '.join(sorted(set(_VALUE_EXAMPLES[p.kind] for p in topo.positions)))} or id:N")


def parse_part_arg(topo: Topology, arg: str) -> PartArg:
    """Read one ``--part`` argument; PickerError naming the argument if it is bad."""
    ref_text, sep, text = arg.partition("=")
    if not sep or not ref_text.strip() or not text.strip():
        raise PickerError(f"--part {arg!r}: malformed ({_accepted(topo)})")
    try:
        pos = topo.position(ref_text)
    except PickerError as e:
        raise PickerError(f"--part {arg}: {e}") from None
    text = text.strip()
    m = _ID_RE.match(text)
    if m:
        if pos.kind == "coupling":
            raise PickerError(f"--part {arg}: {pos.ref} is a coupling coefficient, not a stored part "
                              f"(expected a plain number in [0, 1) such as 0.9)")
        if not m[1].isdigit():
            raise PickerError(f"--part {arg}: bad store id (got {text!r}; expected id:N with N a "
                              f"whole number, see 'picker stock list')")
        return PartArg(arg, pos.ref, pos.kind, part_id=int(m[1]))
    if pos.kind == "coupling":
        return PartArg(arg, pos.ref, pos.kind, value=_coupling(arg, text))
    try:
        value = units.parse_value(text, pos.kind)
    except PickerError as e:
        raise PickerError(f"--part {arg}: {pos.ref} is {_a(pos.kind)}: {e}") from None
    return PartArg(arg, pos.ref, pos.kind, value=value)


def _coupling(arg: str, text: str) -> float:
    try:
        k = float(text)
    except ValueError:
        k = float("nan")
    if not (math.isfinite(k) and 0.0 <= k < 1.0):
        raise PickerError(f"--part {arg}: coupling coefficient out of range (got {text!r}; expected a "
                          f"plain number in [0, 1): 0 for separate coils, near 1 for a tapped coil)")
    return k


def parse_parts(topo: Topology, args: list[str]) -> list[PartArg]:
    """All ``--part`` arguments; a designator given twice (aliases count) is refused."""
    out: dict[str, PartArg] = {}
    for arg in args:
        pa = parse_part_arg(topo, arg)
        if pa.ref in out:
            raise PickerError(f"--part {arg}: {pa.ref} given twice (first as {out[pa.ref].arg}); "
                              f"give each position once")
        out[pa.ref] = pa
    return list(out.values())


def parse_temps(text: str) -> tuple[float, tuple[float, ...]]:
    """``'25'`` or ``'0..50'`` -> (nominal, corner temperatures with the nominal first), °C."""
    lo_c, hi_c = TEMP_RANGE_C
    expected = f"a temperature in °C such as 25, or a range such as 0..50, within {lo_c:g}..{hi_c:g}"

    def one(t: str) -> float:
        t = t.strip().removesuffix("°C").removesuffix("C").strip()
        try:
            x = float(t)
        except ValueError:
            raise PickerError(f"--temp: cannot read a temperature (got {text!r}; expected {expected})") from None
        if not (math.isfinite(x) and lo_c <= x <= hi_c):
            raise PickerError(f"--temp: temperature out of range (got {text!r}; expected {expected})")
        return x

    if ".." in text:
        a, _, b = text.partition("..")
        lo, hi = one(a), one(b)
        if lo > hi:
            raise PickerError(f"--temp: range runs backwards (got {text!r}; expected low..high such as 0..50)")
        nominal = NOMINAL_C if lo <= NOMINAL_C <= hi else (lo + hi) / 2
        return nominal, tuple(dict.fromkeys((nominal, lo, hi)))
    t = one(text)
    return t, (t,)


def _option_quantity(option: str, text: str, unit: str, what: str, **kw) -> float:
    try:
        return units.parse_quantity(text, unit, what=what, **kw)
    except PickerError as e:
        raise PickerError(f"{option}: {e}") from None


def _output_path(option: str, path: Path | None, suffix: str | None) -> Path | None:
    if path is None:
        return None
    if suffix and path.suffix.lower() != suffix:
        raise PickerError(f"{option}: expected a {suffix} file name (got {str(path)!r})")
    if path.is_dir():
        raise PickerError(f"{option}: {path} is a folder (expected a file name)")
    if not path.parent.is_dir():
        raise PickerError(f"{option}: folder {path.parent} does not exist (for {path})")
    return path


# ---- store look-ups -----------------------------------------------------------


def _info(part: Part) -> PartInfo:
    return PartInfo(part_id=part.id, tolerance=part.tolerance, voltage_v=part.voltage_v,
                    power_w=part.power_w, dielectric=part.dielectric, dcr_ohm=part.dcr_ohm,
                    isat_a=part.isat_a, bin=part.bin)


def _profile(part: Part) -> NpnProfile:
    given = {f: getattr(part, f) for f in _NPN_FIELDS if getattr(part, f) is not None}
    return NpnProfile(name=part.name or f"npn id {part.id}", **given)


def _no_store(env: Env, what: str) -> PickerError:
    return PickerError(f"{what}: no store at {display_url(env.db_url)} (add parts with 'picker stock add' "
                       f"or 'picker stock import', or name a store with --db)")


def _store_parts(session, parts: list[PartArg]) -> dict[str, tuple[float, PartInfo]]:
    out = {}
    for pa in parts:
        if pa.part_id is None:
            continue
        try:
            part = get_part(session, pa.part_id)
        except PickerError as e:
            raise PickerError(f"--part {pa.arg}: {e}") from None
        if part.kind != pa.kind:
            raise PickerError(f"--part {pa.arg}: part {part.id} is {_a(part.kind)}, {pa.ref} takes "
                              f"{_a(pa.kind)} (see 'picker stock list --kind {pa.kind}')")
        out[pa.ref] = (float(part.value), _info(part))
    return out


def _store_npn(session, npn: str | None) -> tuple[tuple[NpnProfile, str, int | None] | None, list[str]]:
    """The npn profile named by ``npn`` (or the store's first) or None, and the stored profile names."""
    parts = list(session.scalars(select(Part).where(Part.kind == "npn").order_by(Part.id)))
    names = sorted({p.name for p in parts if p.name})
    if npn is None:
        if not parts:
            return None, names
        return (_profile(parts[0]), f"first npn in the store, id {parts[0].id}", parts[0].id), names
    m = _ID_RE.match(npn.strip())
    if m:
        if not m[1].isdigit():
            raise PickerError(f"--npn {npn}: bad store id (expected id:N or a profile name)")
        try:
            part = get_part(session, int(m[1]))
        except PickerError as e:
            raise PickerError(f"--npn {npn}: {e}") from None
        if part.kind != "npn":
            raise PickerError(f"--npn {npn}: part {part.id} is {_a(part.kind)}, not an npn "
                              f"(see 'picker stock list --kind npn')")
        return (_profile(part), f"store id {part.id}", part.id), names
    want = npn.strip().casefold()
    for part in parts:
        if (part.name or "").casefold() == want:
            return (_profile(part), f"store id {part.id}", part.id), names
    return None, names


def resolve_store(env: Env, parts: list[PartArg], npn: str | None):
    """Store values for ``id:N`` parts and the npn profile, read in one transaction.

    The store is opened with ``create=False``: a missing store is never created.

    Returns
    -------
    stored : dict
        ref -> (value in SI units, PartInfo) for the ``id:N`` parts.
    profile, source, npn_id : NpnProfile, str, int or None
        The transistor, where it came from (for the report), its store id.
    """
    store = env.store(create=False)
    found, stored, names = None, {}, []
    if store is None:
        first = next((pa for pa in parts if pa.part_id is not None), None)
        if first is not None:
            raise _no_store(env, f"--part {first.arg}")
        if npn is not None and _ID_RE.match(npn.strip()):
            raise _no_store(env, f"--npn {npn}")
    else:
        with store.Session.begin() as session:
            stored = _store_parts(session, parts)
            found, names = _store_npn(session, npn)
    if found is not None:
        return (stored, *found)
    generic = NpnProfile()
    if npn is None:
        why = "no store" if store is None else "no npn in the store"
        return stored, generic, f"built-in generic profile; {why}", None
    if npn.strip().casefold() == generic.name:
        return stored, generic, "built-in generic profile", None
    where = f"in {display_url(env.db_url)}" if store is not None else f"(no store at {display_url(env.db_url)})"
    raise PickerError(f"--npn {npn}: no npn profile of that name {where} "
                      f"(expected id:N or one of {', '.join(names + [generic.name])})")


# ---- the command -----------------------------------------------------------


def check(
    ctx: typer.Context,
    topology: Annotated[str, typer.Option("--topology", help=f"One of {', '.join(topology_names())}.")],
    part: Annotated[Optional[list[str]], typer.Option("--part", metavar="REF=VALUE",
        help="A position's value, e.g. R1=8k2, C1=4n7, L1=100u, K=0.9, or L1=id:17 for a part in the "
             "store (repeatable). Positions left out take the topology's default.")] = None,  # fmt: skip
    supply: Annotated[str, typer.Option("--supply", metavar="VOLTS", help="Supply voltage, e.g. 12 or 9V.")] = "12",
    npn: Annotated[Optional[str], typer.Option("--npn", metavar="NAME|id:N",
        help="npn profile from the store. Default: the store's first npn, else the built-in generic profile.")] = None,  # fmt: skip
    style: Annotated[str, typer.Option("--style", help=f"Build style: {', '.join(STYLE_STRAY_F)} (sets the stray capacitance).")] = "ideal",
    stray: Annotated[Optional[str], typer.Option("--stray", metavar="FARAD",
        help="Stray capacitance per node, e.g. 2p (overrides the style's).")] = None,  # fmt: skip
    temp: Annotated[str, typer.Option("--temp", metavar="C|LO..HI",
        help="Temperature in °C, or a range whose ends are corners (nominal 25 °C if inside, else the midpoint).")] = "25",  # fmt: skip
    plot: Annotated[Optional[Path], typer.Option("--plot", metavar="FILE.png", help="Write a Bode plot of the loop gain.")] = None,
    spice: Annotated[Optional[Path], typer.Option("--spice", metavar="FILE.cir", help="Write an ngspice deck (transient).")] = None,
    min_margin: Annotated[str, typer.Option("--min-margin", metavar="M",
        help="Worst-case margin a remedy for bursting must keep (default 2).")] = "2",  # fmt: skip
    verify: Annotated[bool, typer.Option("--verify", help="Also run the SPICE deck in ngspice and print what it does beside the prediction.")] = False,
    verify_plot: Annotated[Optional[Path], typer.Option("--verify-plot", metavar="FILE.png",
        help="With --verify: write the simulated tank waveform and its envelope.")] = None,  # fmt: skip
    as_json: Annotated[bool, typer.Option("--json", help="JSON on stdout, SI base units.")] = False,
) -> None:
    """Check one oscillator design: DC point, start-up margin, frequency, amplitude, ratings."""
    env = get_env(ctx)
    topo = get_topology(topology)
    parts = parse_parts(topo, part or [])
    vcc = _option_quantity("--supply", supply, "V", "supply voltage")
    style = style.strip().lower()
    try:
        style_stray_f(style)
    except PickerError as e:
        raise PickerError(f"--style: {e}") from None
    stray_f = None if stray is None else _option_quantity("--stray", stray, "F", "stray capacitance", allow_zero=True)
    nominal_c, temps = parse_temps(temp)
    plot = _output_path("--plot", plot, ".png")
    spice = _output_path("--spice", spice, None)
    verify_plot = _output_path("--verify-plot", verify_plot, ".png")
    if verify_plot is not None and not verify:
        raise PickerError("--verify-plot: needs --verify (the plot shows the simulated waveform)")
    margin_spec = _min_margin(min_margin)

    stored, profile, npn_source, npn_id = resolve_store(env, parts, npn)
    given = {pa.ref: pa.value for pa in parts if pa.value is not None}
    given.update({ref: v for ref, (v, _) in stored.items()})
    values, defaulted = complete_values(topo, given)
    design = Design(topology=topo.name, values=values, npn=profile, vcc_v=vcc, temp_c=nominal_c, style=style,
                    stray_f=stray_f, parts={ref: info for ref, (_, info) in stored.items()}, defaulted=defaulted)
    ev = check_design(design, temps)
    if ev.amplitude_settles is False or not ev.dynamics.get("settles_all_corners", True):
        ev = replace(ev, remedies=_remedies(env, design, margin_spec, temps))
        ev = replace(ev, warnings=run_checks(design, ev))
    verified = None
    if verify:
        from picker.sim.verify import require_ngspice
        from picker.sim.verify import transient_length_s as transient_length
        from picker.sim.verify import verify as run_verify

        require_ngspice()
        if not as_json:
            print_message(env, f"ngspice: simulating {units.format_eng(transient_length(ev), 's')} of the transient ...")
        verified = run_verify(design, ev)

    from picker.report import bode, check_report  # matplotlib loads only for check
    from picker.report.waveform import write_waveform_png

    files = {}
    if spice is not None:
        from picker.circuit.spice import deck

        _write(spice, deck(design), "--spice")
        files["spice"] = str(spice)
    if plot is not None:
        try:
            bode.write_bode_png(design, ev, plot)
        except OSError as e:
            raise PickerError(f"--plot: cannot write {plot} ({e.strerror or e})") from None
        files["plot"] = str(plot)

    if verify_plot is not None:
        try:
            write_waveform_png(verified, design, ev, verify_plot)
        except OSError as e:
            raise PickerError(f"--verify-plot: cannot write {verify_plot} ({e.strerror or e})") from None
        files["verify_plot"] = str(verify_plot)

    if as_json:
        data = ev.as_json()
        if verified is not None:
            data["verified"] = verified.as_json()
        data.update(style=style, stray_f=design.node_stray_f, supply_v=vcc, temps_c=list(temps),
                    npn=profile.name, npn_part_id=npn_id, npn_source=npn_source,
                    parts={ref: {"part_id": i.part_id, "bin": i.bin} for ref, i in design.parts.items()},
                    files=files)
        print_json(env, data)
        return
    split = bode.loop_split(design, ev.freq_loop_hz)
    env.out.print(check_report.check_report(design, ev, npn_source=npn_source, split=split,
                                            verified=None if verified is None else verified.as_json()))
    for what, path in (("SPICE deck", files.get("spice")), ("Bode plot", files.get("plot")),
                       ("waveform plot", files.get("verify_plot"))):
        if path:
            print_message(env, f"wrote {what} to {path}")


def _write(path: Path, text: str, option: str) -> None:
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as e:
        raise PickerError(f"{option}: cannot write {path} ({e.strerror or e})") from None


def _min_margin(text: str) -> float:
    try:
        m = float(text)
    except ValueError:
        m = float("nan")
    if not np.isfinite(m) or m < 1.0:
        raise PickerError(f"--min-margin: expected a number of at least 1 (got {text!r})")
    return m


#: Values a remedy may use when no store is open: E12 resistors and E6 capacitors (IEC 60063).
FALLBACK_SERIES = {"resistor": ("E12", 10.0, 1e6), "capacitor": ("E6", 1e-12, 1e-3)}


def _remedies(env: Env, design: Design, min_margin: float, temps) -> list[dict]:
    """Remedies for bursting from the parts on hand (their bins), else from E12/E6 values."""
    store = env.store(create=False)
    offered = {}
    bins: dict[str, dict[float, str]] = {"resistor": {}, "capacitor": {}}
    if store is not None:
        with store.Session.begin() as session:
            for kind in ("resistor", "capacitor"):
                rows = session.execute(select(Part.value, Part.bin).where(Part.kind == kind, Part.qty > 0)).all()
                offered[kind] = np.array(sorted({float(v) for v, _ in rows}))
                for v, b in rows:
                    bins[kind].setdefault(float(v), b)
    for kind, (series, lo, hi) in FALLBACK_SERIES.items():
        if offered.get(kind) is None or offered[kind].size == 0:
            offered[kind] = preferred_values(series, lo, hi)
            bins[kind] = {}
    found = find_remedies(design, min_margin, temps, offered["resistor"], offered["capacitor"])
    out = []
    for r in found:
        d = r.as_dict()
        d["on_hand"] = {ref: bins[design.topo.position(ref).kind].get(v) for ref, v in r.values.items()}
        d["source"] = "store" if bins["resistor"] or bins["capacitor"] else "E-series (no store)"
        out.append(d)
    return out
