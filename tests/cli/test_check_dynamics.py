"""``picker check``: the amplitude dynamics, the bursting remedy and ``--verify`` end to end.

The ngspice-backed cases need the simulator (Debian package); they fail on CI
without it and skip elsewhere, like tests/reference.
"""

import json
import os
import re

import pytest

from picker.sim import ngspice
from cli_helpers import assert_user_error
from tests.server_db import store_exists

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948)


def _json(run, *args):
    result = run("check", *args, "--json")
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def _need_ngspice():
    if ngspice.find_ngspice() is None:
        if os.environ.get("CI") == "true":
            pytest.fail(ngspice.NOT_INSTALLED)
        pytest.skip(ngspice.NOT_INSTALLED)


def test_json_reports_settling(run):
    d = _json(run, "--topology", "colpitts-ce", "--part", "RE1=100")
    assert d["amplitude_settles"] is True
    assert d["settle_time_s"] > 0 and d["burst_period_s"] is None
    assert d["dynamics"]["settles_all_corners"] is True
    assert d["remedies"] == []
    assert all(c["amplitude_settles"] is True for c in d["corners"])
    assert not any(w["code"] == "bursts" for w in d["warnings"])


def test_json_reports_bursting_with_remedies_from_the_e_series(run):
    d = _json(run, "--topology", "clapp")
    assert d["amplitude_settles"] is False
    assert d["settle_time_s"] is None and d["burst_period_s"] > 0
    assert any(w["code"] == "bursts" for w in d["warnings"])
    kinds = {r["kind"]: r for r in d["remedies"]}
    assert set(kinds) == {"degeneration", "bypass"}
    deg = kinds["degeneration"]
    assert deg["values"]["RE1"] >= deg["threshold"]["RE1"] > 0
    assert deg["margin_worst"] >= 2.0 and deg["source"].startswith("E-series")
    assert kinds["bypass"]["values"]["CE"] < 1e-6  # smaller than the 1 uF it has


def test_remedy_prefers_parts_on_hand(run):
    for kind, value, b in (("resistor", "56", "R-56"), ("resistor", "2k2", "R-22"), ("capacitor", "100n", "C-100n")):
        result = run("stock", "add", kind, value, "--qty", "10", "--bin", b)
        assert result.exit_code == 0, result.stderr
    d = _json(run, "--topology", "clapp")
    deg = next(r for r in d["remedies"] if r["kind"] == "degeneration")
    assert deg["values"] == {"RE1": 56.0, "RE": 2200.0}
    assert deg["on_hand"] == {"RE1": "R-56", "RE": "R-22"} and deg["source"] == "store"


def test_no_start_has_null_dynamics(run):
    d = _json(run, "--topology", "colpitts-ce", "--part", "RC=330", "--part", "RE1=220")
    assert d["starts"] is False and d["amplitude_settles"] is None and d["settle_time_s"] is None


def test_human_report_names_the_bursting_and_the_remedy(run):
    result = run("check", "--topology", "hartley")
    assert result.exit_code == 0, result.stderr
    out = re.sub(r"\s+", " ", result.stdout)
    assert "amplitude: bursts" in out and "remedy (split the emitter resistor): RE1 =" in out


@pytest.mark.parametrize(
    "args,fragments",
    [
        (["--verify-plot", "w.png"], ["--verify-plot", "needs --verify"]),
        (["--verify", "--verify-plot", "w.pdf"], ["--verify-plot", ".png"]),
        (["--min-margin", "0.5"], ["--min-margin", "at least 1", "'0.5'"]),
        (["--min-margin", "lots"], ["--min-margin", "'lots'"]),
    ],
)
def test_option_errors(run, db, args, fragments):
    assert_user_error(run("check", "--topology", "colpitts-ce", *args), *fragments)
    assert not store_exists(db)


def test_verify_without_ngspice_says_how_to_install(run, monkeypatch):
    monkeypatch.setattr(ngspice, "find_ngspice", lambda: None)
    assert_user_error(run("check", "--topology", "colpitts-ce", "--verify"), "--verify", "apt-get install ngspice")


# A 430 kHz Colpitts with a short bias time constant: a short transient.
FAST = ["--topology", "colpitts-ce", "--part", "L1=100u", "--part", "C1=1n5", "--part", "C2=15n",
        "--part", "CC1=10n", "--part", "CC2=10n", "--part", "CE=100n", "--part", "RE1=100"]


def test_verify_json_and_plot(run, tmp_path):
    _need_ngspice()
    png = tmp_path / "wave.png"
    d = _json(run, *FAST, "--verify", "--verify-plot", png)
    v = d["verified"]
    assert v["started"] and not v["bursts"] and v["settle_time_s"] is not None
    assert abs(v["freq_hz"] / d["freq_hz"] - 1) < 0.02
    assert abs(d["amplitude_vpp"] / v["amplitude_vpp"] - 1) < 0.25
    assert d["amplitude_settles"] is True
    assert png.read_bytes()[:8] == PNG_SIGNATURE and d["files"]["verify_plot"] == str(png)


def test_verify_human_table(run):
    _need_ngspice()
    result = run("check", *FAST, "--verify")
    assert result.exit_code == 0, result.stderr
    assert "Verified with ngspice" in result.stdout and "ngspice: simulating" in result.stdout
