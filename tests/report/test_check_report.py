"""The ``picker check`` renderers on a hand-made Evaluation (invented numbers, chosen so
every expected cell can be worked out on paper)."""

from dataclasses import replace

import pytest
from rich.console import Console

from picker.circuit.checks import Warning_
from picker.circuit.design import Design, PartInfo
from picker.circuit.device import NpnProfile
from picker.circuit.evaluate import Corner, Evaluation
from picker.report.check_report import (check_report, corners_table, defaulted_line, diff_pct, dynamics_line,
                                        hand_rows, hand_table, header, parts_table, remedy_lines, summary_line,
                                        warning_lines)

VALUES = {"R1": 8200.0, "R2": 1500.0, "RC": 1000.0, "RE": 1200.0, "CE": 1e-6, "CC1": 100e-9,
          "C1": 4.7e-9, "L1": 1e-3, "C2": 47e-9, "CC2": 100e-9}
DEFAULTED = ("CE", "CC1", "L1", "C2", "CC2")


def make_design(**kw) -> Design:
    base = dict(topology="colpitts-ce", values=VALUES, npn=NpnProfile(name="npn-test"), vcc_v=9.0,
                temp_c=25.0, style="pcb", defaulted=DEFAULTED,
                parts={"C1": PartInfo(part_id=7, voltage_v=50.0, bin="C-3")})
    base.update(kw)
    return Design(**base)


def make_eval(**kw) -> Evaluation:
    corners = [Corner(170.0, 25.0, 4.0, 80e3, 1.0e-3, True), Corner(100.0, 25.0, 3.5, 80.1e3, 0.98e-3, True),
               Corner(300.0, 25.0, 4.2, 79.9e3, 1.01e-3, True), Corner(100.0, 0.0, 2.5, 80.2e3, 0.95e-3, True)]
    base = dict(
        topology="colpitts-ce", values=VALUES, defaulted=DEFAULTED,
        freq_ideal_hz=76e3, freq_small_signal_hz=95e3, freq_loop_hz=76.76e3, freq_hz=77.52e3,
        margin=4.0, margin_worst=2.5, starts=True, growth_per_cycle=3.21, amplitude_vpp=6.4,
        clipped=False, saturated=False, divider_stiff=True, loaded_q=12.34,
        bias={"vb_v": 2.75, "ve_v": 2.1, "vc_v": 8.0, "vx_v": 2.1, "ie_a": 1e-3, "ic_a": 0.99e-3,
              "vce_v": 5.9, "vbe_v": 0.65, "gm_s": 0.04, "r_pi_ohm": 4000.0},
        hand={"vb_v": 2.8, "ve_v": 2.0, "vc_v": 8.0, "ie_a": 1.25e-3, "re_ohm": 20.0, "gain": 50.0,
              "feedback": 0.1, "loop_gain": 5.0, "freq_hz": 76e3},
        power_w={}, p_transistor_w=6e-3, coupling_reactance={}, corners=corners,
        warnings=[Warning_("cap-voltage", "C1 sees about 12 V against its 10 V rating")],
    )
    base.update(kw)
    return Evaluation(**base)


def text_of(renderable) -> str:
    console = Console(record=True, width=120, color_system=None)
    console.print(renderable)
    return console.export_text()


def flat(text: str) -> str:
    """The text with line breaks and runs of spaces folded to single spaces."""
    return " ".join(text.split())


def row_cells(text: str, first: str) -> list[str]:
    """Cells of the table row whose first cell is ``first`` (box-drawn with │)."""
    for line in text.splitlines():
        cells = [c.strip() for c in line.strip().strip("│").split("│")]
        if cells and cells[0] == first:
            return cells
    raise AssertionError(f"no row {first!r} in\n{text}")


def test_diff_pct():
    assert diff_pct(2.0, 2.5) == "+25.0 %"
    assert diff_pct(2.8, 2.75) == "-1.8 %"  # -0.05 / 2.8 = -1.786 %
    assert diff_pct(0.0, 1.0) == "—" and diff_pct(1.0, float("nan")) == "—"


def test_hand_rows():
    rows = {r[0]: r[1:] for r in hand_rows(make_eval(), split=(42.0, 0.0952))}
    assert rows["VB"] == ("2.8 V", "2.75 V", "-1.8 %")
    assert rows["VE"] == ("2 V", "2.1 V", "+5.0 %")
    assert rows["VC"] == ("8 V", "8 V", "+0.0 %")
    assert rows["IE"] == ("1.25 mA", "1 mA", "-20.0 %")
    assert rows["r'e (hand VT/IE) / 1/gm"] == ("20 Ω", "25 Ω", "+25.0 %")  # 1/gm = 1/0.04 S
    assert rows["gain"] == ("50", "42", "-16.0 %")
    assert rows["feedback ratio"] == ("0.1", "0.0952", "-4.8 %")
    assert rows["loop gain / margin"] == ("5", "4", "-20.0 %")
    assert rows["f: ideal LC / small-signal pole"] == ("76 kHz", "95 kHz", "+25.0 %")
    assert rows["f: ideal LC / loop phase zero"] == ("76 kHz", "76.76 kHz", "+1.0 %")
    assert rows["f: ideal LC / running"] == ("76 kHz", "77.52 kHz", "+2.0 %")
    no_split = {r[0]: r[1:] for r in hand_rows(make_eval())}
    assert no_split["gain"] == ("50", "—", "—")


def test_hand_table_renders_every_row():
    text = text_of(hand_table(make_eval(), split=(42.0, 0.0952)))
    assert "Hand method vs picker" in text
    assert row_cells(text, "IE") == ["IE", "1.25 mA", "1 mA", "-20.0 %"]
    assert row_cells(text, "loop gain / margin") == ["loop gain / margin", "5", "4", "-20.0 %"]


def test_parts_table_rows():
    text = text_of(parts_table(make_design()))
    assert row_cells(text, "R1") == ["R1", "8.2 kΩ", "8k2", "bias", "given"]
    assert row_cells(text, "C1") == ["C1", "4.7 nF", "4n7", "tank", "store id 7, bin C-3"]
    assert row_cells(text, "L1") == ["L1", "1 mH", "1m0", "tank", "default"]
    assert "RE1" not in text  # absent optional position


def test_parts_table_coupling_coefficient():
    values = {"R1": 33e3, "R2": 10e3, "RC": 2.2e3, "RE": 2.2e3, "CE": 1e-6, "CC1": 100e-9, "L1": 470e-6,
              "C1": 10e-9, "L2": 47e-6, "CC2": 100e-9, "K": 0.25}
    text = text_of(parts_table(Design("hartley", values)))
    assert row_cells(text, "K") == ["K", "0.25", "", "tank", "given"]


def test_header_and_defaulted_line():
    ev = make_eval()
    text = flat(text_of(header(make_design(), ev, "store id 4")))
    assert text == ("Colpitts, common emitter · pcb build (1 pF stray per node) · supply 9 V · npn npn-test "
                    "(store id 4) · 25 °C, corners 0 °C")
    assert text_of(defaulted_line(make_design())).startswith("defaulted: CE, CC1, L1, C2, CC2 (")
    assert "none" in text_of(defaulted_line(make_design(defaulted=())))


def test_summary_line():
    text = flat(text_of(summary_line(make_eval())))
    assert text == ("margin 4.00 nominal, 2.50 worst (4 corners) · starts: yes · growth ×3.21/cycle · "
                    "6.4 Vpp at the tank · loaded Q 12.3")
    stopped = flat(text_of(summary_line(make_eval(starts=False, margin=0.5, amplitude_vpp=0.0))))
    assert "margin 0.50 nominal" in stopped and "starts: no" in stopped and "· — at the tank" in stopped


def test_corners_table_marks_nominal_and_worst():
    text = text_of(corners_table(make_eval()))
    # the corners of make_eval carry no dynamics verdict: a dash
    assert row_cells(text, "nominal") == ["nominal", "170", "25 °C", "4.00", "80 kHz", "1 mA", "yes", "—"]
    assert row_cells(text, "worst") == ["worst", "100", "0 °C", "2.50", "80.2 kHz", "950 µA", "yes", "—"]


def test_dynamics_line_says_what_the_amplitude_does():
    ev = make_eval()
    assert text_of(dynamics_line(replace(ev, amplitude_settles=True, settle_time_s=2.5e-3))).strip() == \
        "amplitude: settles within 2.5 ms of a 1 mV start"
    bursting = text_of(dynamics_line(replace(ev, amplitude_settles=False, burst_period_s=1.2e-3)))
    assert "bursts" in bursting and "1.2 ms" in bursting
    assert "no oscillation" in text_of(dynamics_line(replace(ev, amplitude_settles=None)))


def test_remedy_lines_name_values_and_bins():
    ev = replace(make_eval(), amplitude_settles=False, remedies=[
        {"kind": "degeneration", "values": {"RE1": 47.0, "RE": 2200.0}, "threshold": {"RE1": 39.0, "RE": 2200.0},
         "margin_worst": 5.9, "on_hand": {"RE1": "R-47", "RE": None}}])
    text = " ".join(text_of(remedy_lines(make_design(), ev)).split())
    assert "RE1 = 47 Ω" in text and "RE = 2.2 kΩ" in text and "5.90" in text and "RE1 in bin R-47" in text
    assert remedy_lines(make_design(), make_eval()) is None


def test_warning_lines():
    assert text_of(warning_lines(make_eval())).strip() == "cap-voltage: C1 sees about 12 V against its 10 V rating"
    assert text_of(warning_lines(make_eval(warnings=[]))).strip() == "no warnings"


@pytest.mark.parametrize("given", [[], [Warning_("radiated-rf", "at 5 MHz the circuit can radiate ...")]])
def test_rf_caution_above_1_mhz_exactly_once(given):
    ev = make_eval(freq_hz=5e6, freq_ideal_hz=5e6, warnings=given)
    text = text_of(warning_lines(ev))
    assert text.count("radiated-rf:") == 1
    assert "radiated-rf" not in text_of(warning_lines(replace(ev, freq_hz=900e3, warnings=[])))


def test_whole_report_in_order():
    text = text_of(check_report(make_design(), make_eval(), npn_source="store id 4", split=(42.0, 0.0952)))
    order = ["Colpitts, common emitter", "Parts", "defaulted:", "Hand method vs picker", "margin 4.00",
             "Corners", "cap-voltage:"]
    positions = [text.index(s) for s in order]
    assert positions == sorted(positions)
