"""``picker check`` end to end through the CLI (CliRunner, tmp_path stores), and the Bode helpers.

Outside references used here:
* the ideal LC resonance f = 1 / (2 pi sqrt(L C)) with C1, C2 in series (handbook formula);
* Thevenin bias with finite hFE, IE = (VTh - VBE) / (RE + RTh / (hFE + 1)) (handbook formula);
* the capacitive divider of a common-emitter Colpitts, feedback = C1 / C2 (handbook formula);
* the PNG file signature, 89 50 4E 47 0D 0A 1A 0A (PNG specification, ISO/IEC 15948).
"""

import json
import math
import re

import numpy as np
import pytest
from rich.console import Console

from picker.circuit.design import Design, complete_values
from picker.circuit.evaluate import check_design
from picker.circuit.topology import get_topology
from picker.cli.env import Env
from picker.report.bode import GID_MAG, GID_PHASE, bode_figure, loop_gain_curve, loop_split, plot_freqs
from cli_helpers import assert_user_error
from tests.server_db import store_exists

#: Relative tolerances, named in engineering terms.
FREQ_TOL = 0.005  # phase-zero frequency read off the plotted curve vs the engine's bisection
MARGIN_TOL = 0.02  # |T| interpolated at the crossing vs the engine's margin
BIAS_TOL = 0.01  # engine IE vs the Thevenin formula (the engine adds the Early effect)
IDEAL_TOL = 1e-9  # ideal LC frequency vs the closed form

BASE = ["check", "--topology", "colpitts-ce", "--part", "R1=8k2", "--part", "R2=1k5",
        "--part", "RE=1k2", "--part", "RC=1k"]


def check_json(run, *args, db=True):
    result = run(*args, "--json", db=db)
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def one_line_error(result, *fragments):
    assert_user_error(result, *fragments)
    assert len(result.stderr.strip().splitlines()) == 1, result.stderr


def add(run, *args):
    result = run("stock", "add", *args)
    assert result.exit_code == 0, result.stderr
    return int(re.search(r"part (\d+)", result.stdout)[1])


def default_design(name="colpitts-ce", **given):
    topo = get_topology(name)
    values, defaulted = complete_values(topo, given)
    return Design(name, values, defaulted=defaulted)


# ---- JSON ---------------------------------------------------------------------


def test_json_has_the_keys_and_numbers(run, db):
    d = check_json(run, *BASE)
    for key in ("freq_ideal_hz", "freq_small_signal_hz", "freq_hz", "margin", "growth_per_cycle",
                "amplitude_vpp", "supply_v"):
        assert isinstance(d[key], float) and math.isfinite(d[key]), key
    assert d["topology"] == "colpitts-ce" and isinstance(d["starts"], bool)
    assert d["style"] == "ideal" and d["supply_v"] == 12.0 and d["npn"] == "npn-generic"
    for key in ("vb_v", "ve_v", "vc_v", "ie_a", "vce_v"):
        assert isinstance(d["bias"][key], float), key
    assert all(set(w) == {"code", "message"} for w in d["warnings"])
    assert d["values"]["R1"] == 8200.0 and d["values"]["RE"] == 1200.0
    assert {"R1", "R2", "RE", "RC"}.isdisjoint(d["defaulted"]) and "C1" in d["defaulted"]
    assert not store_exists(db), "check must not create a store"

    # ideal LC frequency: handbook closed form with C1 and C2 in series
    v = d["values"]
    c = v["C1"] * v["C2"] / (v["C1"] + v["C2"])
    assert d["freq_ideal_hz"] == pytest.approx(1 / (2 * math.pi * math.sqrt(v["L1"] * c)), rel=IDEAL_TOL)
    # DC point: Thevenin bias with finite hFE (nominal hFE = sqrt(100 * 300) of the generic profile)
    b, hfe = d["bias"], math.sqrt(100 * 300)
    vth, rth = 12 * 1500 / 9700, 8200 * 1500 / 9700
    ie = (vth - b["vbe_v"]) / (1200 + rth / (hfe + 1))
    assert b["ie_a"] == pytest.approx(ie, rel=BIAS_TOL)


def test_json_matches_the_engine(run):
    d = check_json(run, *BASE, "--supply", "9V", "--style", "pcb")
    design = Design("colpitts-ce", complete_values(get_topology("colpitts-ce"),
                                                   {"R1": 8200, "R2": 1500, "RE": 1200, "RC": 1000})[0],
                    vcc_v=9.0, style="pcb")
    ev = check_design(design, (25.0,))
    assert d["supply_v"] == 9.0 and d["style"] == "pcb" and d["stray_f"] == 1e-12
    assert d["freq_hz"] == pytest.approx(ev.freq_hz, rel=1e-12)
    assert d["margin"] == pytest.approx(ev.margin, rel=1e-12)


def test_temperature_range_gives_corners(run):
    d = check_json(run, *BASE, "--temp", "0..50")
    assert d["temps_c"] == [25.0, 0.0, 50.0]
    assert sorted({c["temp_c"] for c in d["corners"]}) == [0.0, 25.0, 50.0] and len(d["corners"]) == 9
    assert d["margin_worst"] == pytest.approx(min(c["margin"] for c in d["corners"]))
    assert check_json(run, *BASE, "--temp", "30..60")["temps_c"] == [45.0, 30.0, 60.0]
    assert check_json(run, *BASE, "--temp", "-20..70")["temps_c"] == [25.0, -20.0, 70.0]


def test_stray_overrides_the_style(run):
    plain = check_json(run, *BASE)
    stray = check_json(run, *BASE, "--style", "breadboard", "--stray", "2p")
    assert stray["stray_f"] == 2e-12 and stray["style"] == "breadboard"
    assert stray["freq_hz"] != plain["freq_hz"]


# ---- user errors --------------------------------------------------------------


@pytest.mark.parametrize(
    "args, fragments",
    [
        (["--topology", "colpitts-ce", "--part", "C1=4.7kΩ"], ["C1=4.7kΩ", "unit Ω does not fit a capacitor"]),
        (["--topology", "colpitts-ce", "--part", "X9=1k"], ["X9=1k", "positions: R1, R2"]),
        (["--topology", "hartley", "--part", "K=1.5"], ["K=1.5", "[0, 1)"]),
        (["--topology", "hartley", "--part", "K=1"], ["K=1", "[0, 1)"]),
        (["--topology", "colpitts-ce", "--part", "R1"], ["'R1'", "REF=VALUE"]),
        (["--topology", "colpitts-ce", "--part", "RE=1k", "--part", "RE2=1k"], ["RE given twice"]),
        (["--topology", "colpitts-ce", "--part", "L1=id:999"], ["L1=id:999", "no store"]),
        (["--topology", "nope"], ["unknown topology", "colpitts-ce"]),
        (["--topology", "colpitts-ce", "--temp", "0..500"], ["--temp", "-55..150"]),
        (["--topology", "colpitts-ce", "--style", "veroboard"], ["--style", "perfboard"]),
        (["--topology", "colpitts-ce", "--supply", "12 A"], ["--supply"]),
        (["--topology", "colpitts-ce", "--npn", "npn-rf"], ["--npn npn-rf", "npn-generic"]),
        (["--topology", "colpitts-ce", "--plot", "out.pdf"], ["--plot", ".png"]),
    ],
)
def test_user_errors_are_one_line(run, db, args, fragments):
    one_line_error(run("check", *args), *fragments)
    assert not store_exists(db)


def test_missing_and_wrong_kind_store_ids(run):
    cap = add(run, "capacitor", "1n", "--qty", "5", "--bin", "C-1")
    one_line_error(run(*BASE, "--part", "L1=id:999"), "L1=id:999", "no part with id 999")
    one_line_error(run(*BASE, "--part", f"L1=id:{cap}"), f"part {cap} is a capacitor", "L1 takes an inductor")
    one_line_error(run(*BASE, "--npn", f"id:{cap}"), "not an npn")
    one_line_error(run(*BASE, "--part", "L1=id:x"), "id:N")


# ---- parts from the store ---------------------------------------------------


def test_store_capacitor_rating_gives_cap_voltage_warning(run):
    # C1 of the common-base Colpitts sits from the collector (about 12 V) to the emitter (about 2 V)
    low = add(run, "capacitor", "1n", "--qty", "5", "--bin", "C-1", "--voltage", "10V", "--dielectric", "C0G")
    high = add(run, "capacitor", "1n", "--qty", "5", "--bin", "C-2", "--voltage", "100V", "--dielectric", "C0G")
    args = ["check", "--topology", "colpitts-cb"]
    rated_low = check_json(run, *args, "--part", f"C1=id:{low}")
    assert any(w["code"] == "cap-voltage" and "C1" in w["message"] for w in rated_low["warnings"])
    assert rated_low["parts"]["C1"] == {"part_id": low, "bin": "C-1"}
    assert "C1" not in rated_low["defaulted"] and rated_low["values"]["C1"] == 1e-9
    for other in (["--part", f"C1=id:{high}"], ["--part", "C1=1n"]):
        assert not any(w["code"] == "cap-voltage" for w in check_json(run, *args, *other)["warnings"])


def test_store_inductor_dcr_is_used(run):
    lossy = add(run, "inductor", "100u", "--qty", "2", "--bin", "L-1", "--dcr", "20ohm")
    args = ["check", "--topology", "colpitts-cb"]
    ideal = check_json(run, *args, "--part", "L1=100u")
    stored = check_json(run, *args, "--part", f"L1=id:{lossy}")
    assert stored["values"]["L1"] == ideal["values"]["L1"] == 100e-6
    # a 20 ohm winding loads the tank: lower loaded Q and margin, and the hand gain uses it too
    assert stored["loaded_q"] < 0.8 * ideal["loaded_q"]
    assert stored["margin"] < 0.8 * ideal["margin"]
    assert stored["hand"]["gain"] < ideal["hand"]["gain"]


def test_npn_from_the_store(run):
    add(run, "npn", "npn-rf", "--qty", "3", "--bin", "Q-1", "--hfe-min", "60", "--hfe-max", "180",
        "--set", "ft_hz=1G")
    by_name = check_json(run, *BASE, "--npn", "npn-rf")
    assert by_name["npn"] == "npn-rf"
    assert sorted({c["hfe"] for c in by_name["corners"]}) == pytest.approx([60, math.sqrt(60 * 180), 180])
    first = check_json(run, *BASE)  # no --npn: the store's first npn profile
    assert first["npn"] == "npn-rf" and first["npn_part_id"] == by_name["npn_part_id"]
    assert check_json(run, *BASE, "--npn", "npn-generic")["npn"] == "npn-generic"
    assert check_json(run, *BASE, db=False)["npn"] == "npn-generic"  # no store at all
    one_line_error(run(*BASE, "--npn", "npn-xyz"), "--npn npn-xyz", "one of npn-rf, npn-generic")
    one_line_error(run(*BASE, "--npn", "id:5", db=False), "--npn id:5", "no store")


# ---- plot and deck -------------------------------------------------------------


def test_plot_writes_a_png(run, tmp_path):
    out = tmp_path / "bode.png"
    result = run(*BASE, "--plot", out)
    assert result.exit_code == 0, result.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert f"wrote Bode plot to {out}" in result.stdout


def test_loop_gain_curve_crosses_phase_zero_at_the_engines_frequency():
    design = default_design()
    ev = check_design(design)
    f = plot_freqs(ev)
    t = loop_gain_curve(design, f)
    assert t.shape == f.shape and np.iscomplexobj(t)
    cross = np.flatnonzero((np.sign(t.imag[:-1]) != np.sign(t.imag[1:])) & (t.real[:-1] > 0))
    assert cross.size >= 1
    k = cross[np.argmin(np.abs(f[cross] - ev.freq_loop_hz))]
    frac = t.imag[k] / (t.imag[k] - t.imag[k + 1])
    f0 = f[k] + frac * (f[k + 1] - f[k])
    assert f0 == pytest.approx(ev.freq_loop_hz, rel=FREQ_TOL)
    assert abs(t[k]) + frac * (abs(t[k + 1]) - abs(t[k])) == pytest.approx(ev.margin, rel=MARGIN_TOL)
    # the crossing sits close to the ideal LC resonance (handbook formula) for this lightly loaded tank
    assert f0 == pytest.approx(ev.freq_ideal_hz, rel=0.01)


def test_loop_split_against_the_capacitive_divider():
    design = default_design()
    ev = check_design(design)
    gain, feedback = loop_split(design, ev.freq_loop_hz)
    assert feedback == pytest.approx(design.values["C1"] / design.values["C2"], rel=0.05)
    assert gain * feedback == pytest.approx(ev.margin, rel=1e-9)
    assert all(math.isnan(x) for x in loop_split(design, float("nan")))


def test_figure_marks_the_crossing():
    design = default_design()
    ev = check_design(design)
    fig = bode_figure(design, ev)
    marks = {line.get_gid(): line for ax in fig.axes for line in ax.get_lines() if line.get_gid()}
    assert set(marks) == {GID_MAG, GID_PHASE}
    assert marks[GID_PHASE].get_xdata()[0] == ev.freq_loop_hz and marks[GID_PHASE].get_ydata()[0] == 0
    assert marks[GID_MAG].get_ydata()[0] == pytest.approx(20 * math.log10(ev.margin))


def test_figure_without_a_crossing_has_no_marker():
    design = default_design(RC=10.0)  # 10 ohm collector load: the loop never reaches phase zero
    ev = check_design(design)
    assert ev.margin == 0 and not np.isfinite(ev.freq_loop_hz)
    gids = {line.get_gid() for ax in bode_figure(design, ev).axes for line in ax.get_lines()}
    assert GID_PHASE not in gids and GID_MAG not in gids


def test_figure_marks_a_crossing_below_one():
    design = default_design(CC2=1e-12)  # 1 pF base coupling: a crossing, but far too little loop gain
    ev = check_design(design)
    assert 0 < ev.margin < 1 and not ev.starts
    gids = {line.get_gid() for ax in bode_figure(design, ev).axes for line in ax.get_lines()}
    assert {GID_PHASE, GID_MAG} <= gids


def test_spice_writes_a_deck(run, tmp_path):
    out = tmp_path / "osc.cir"
    result = run(*BASE, "--spice", out)
    assert result.exit_code == 0, result.stderr
    lines = out.read_text().splitlines()
    assert any(line.startswith("Q1 C B E ") for line in lines)
    assert any(line.startswith(".tran ") for line in lines)
    assert "R1 vcc B 8200" in lines and lines[-1] == ".end"


# ---- human output --------------------------------------------------------------


def wide_env():
    return Env(out=Console(width=200, highlight=False), err=Console(stderr=True, width=200))


def test_human_output_has_the_tables(run):
    result = run(*BASE, "--temp", "0..50", obj=wide_env())
    assert result.exit_code == 0, result.stderr
    out = result.stdout
    assert "Colpitts, common emitter · ideal build (0 F stray per node) · supply 12 V" in out and "npn npn-generic" in out
    assert "Hand method vs picker" in out
    for row in ("VB", "VE", "VC", "IE", "r'e (hand VT/IE) / 1/gm", "gain", "feedback ratio",
                "loop gain / margin", "f: ideal LC / running"):
        assert re.search(rf"│ {re.escape(row)} +│", out), row
    assert "defaulted: CE, CC1, C1, L1, C2, CC2" in out
    assert re.search(r"│ R1 +│ +8\.2 kΩ │ 8k2 +│ bias +│ given", out)
    assert "Corners" in out and "starts: yes" in out and "0 °C" in out and "50 °C" in out
    assert "tank-loading: " in out


def test_human_output_cautions_above_1_mhz(run):
    args = ["check", "--topology", "colpitts-cb", "--part", "L1=10u", "--part", "C1=100p", "--part", "C2=470p"]
    result = run(*args, obj=wide_env())
    assert result.exit_code == 0, result.stderr
    assert "radiated-rf: " in result.stdout and "regulations" in result.stdout
