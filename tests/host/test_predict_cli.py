"""`slipless predict`: the model's numbers (checked against references.md
sections 8 and 9), its assumptions and cautions, the heating warning, and one
clear line for bad options."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from rich.console import Console

from slipless.cli import build_parser, main
from slipless.cli.predict import run_predict

RIG = ["--inner-mm", "20", "--outer-mm", "40", "--cap-length-mm", "100", "--turns", "500",
       "--coil-length-mm", "200", "--coil-radius-mm", "50", "--amps", "2", "--rpm", "60"]


def predict_json(capsys: pytest.CaptureFixture[str], *args: str) -> dict:
    assert main(["predict", *args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_rig_values_match_the_worked_examples(capsys: pytest.CaptureFixture[str]) -> None:
    res = predict_json(capsys, *RIG, "--latitude-deg", "45")["results"]
    # references 8b [computed, scipy mu_0]: finite coil centre and long-coil value
    assert res["field_T"] == pytest.approx(5.619852e-3, rel=1e-6)
    assert res["field_long_solenoid_T"] == pytest.approx(6.283185e-3, rel=1e-6)
    # references 8c: vacuum cylinder a = 2 cm, b = 4 cm, L = 10 cm: 8.026074 pF
    assert res["capacitance_F"] == pytest.approx(8.026074e-12, rel=1e-6)
    # references 8a: V = w B (b^2 - a^2)/2 (8a.1 scaled by B: 37.70 uV at 10 mT)
    assert res["emf_V"] == pytest.approx(3.769911e-5 * 5.619852e-3 / 0.010, rel=1e-6)
    # references 8b [computed]: long-coil inductance 12.337 mH
    assert res["inductance_H"] == pytest.approx(12.337e-3, rel=1e-4)
    # references 8e [computed]: Omega sin 45 deg = 5.156304e-5 rad/s
    assert res["earth_rate_rad_s"] == pytest.approx(5.156304e-5, rel=1e-6)
    assert res["earth_fraction"] == pytest.approx(5.156304e-5 / (2 * 3.141592653589793), rel=1e-6)


def test_measured_field_and_worked_emf(capsys: pytest.CaptureFixture[str]) -> None:
    # references 8a.1: a = 2 cm, b = 4 cm, 10 mT, 1 rev/s -> 37.70 uV (no sharing, gain 1)
    res = predict_json(capsys, "--inner-mm", "20", "--outer-mm", "40", "--field-mT", "10",
                       "--amps", "2", "--rpm", "60")["results"]
    assert res["emf_V"] == pytest.approx(3.769911e-5, rel=1e-6)
    assert res["amp_output_V"] == res["emf_V"]
    assert "capacitance_F" not in res
    # references 8a.3 in rad/s: a = 1 cm, b = 3 cm, 0.1 T, 5 rev/s -> 1.256637 mV
    res = predict_json(capsys, "--inner-mm", "10", "--outer-mm", "30", "--field-mT", "100",
                       "--amps", "1", "--rad-per-s", str(5 * 2 * 3.141592653589793))["results"]
    assert res["emf_V"] == pytest.approx(1.256637e-3, rel=1e-6)


def test_charge_sharing_and_gain(capsys: pytest.CaptureFixture[str]) -> None:
    out = predict_json(capsys, *RIG, "--gain", "100", "--input-pF", "10")
    res = out["results"]
    c = res["capacitance_F"]
    # independent: charge conservation C V = (C + Cin) V_in
    assert res["amp_input_V"] * (c + 10e-12) == pytest.approx(res["emf_V"] * c, rel=1e-12)
    assert res["amp_output_V"] == pytest.approx(100 * res["amp_input_V"])
    # the slope `pulses` compares d with: output per ampere per rad/s
    assert res["slope_V_per_A_rad_s"] * 2 * 2 * 3.141592653589793 == pytest.approx(res["amp_output_V"])
    assert any("not a verdict" in a or "experiment tests" in a for a in out["assumptions"])


def test_readable_table_states_assumptions_and_cautions() -> None:
    console = Console(record=True, width=200)
    args = build_parser().parse_args(["predict", *RIG, "--coil-ohms", "4"])
    assert run_predict(args, console) == 0
    text = console.export_text()
    for words in ("field on the axis", "capacitance", "EMF between the cylinders",
                  "at the amplifier output", "Earth's rotation", "no latitude given",
                  "a model, not a verdict", "flyback diode", "licensed practice",
                  "rise time constant", "temperature rise"):
        assert words in text, words
    assert "warning: coil heating" not in text  # 8 W over 0.063 m^2: about 13 K


def test_heating_warning(capsys: pytest.CaptureFixture[str]) -> None:
    # 5 A in 4 ohm at duty 0.5: 50 W over 2 pi 0.05 m x 0.2 m -> ~80 K by the rule of thumb
    out = predict_json(capsys, *[a if a != "2" else "5" for a in RIG], "--coil-ohms", "4")
    assert out["results"]["coil_rise_K"] == pytest.approx(50 / (10 * 2 * 3.141592653589793 * 0.01))
    (warn,) = [w for w in out["warnings"] if w.startswith("coil heating")]
    assert "common practice" in warn and "40 K" in warn
    assert any("licensed practice" in c for c in out["cautions"])
    # measured field, no coil geometry: the power is stated and the missing inputs named
    out = predict_json(capsys, "--inner-mm", "20", "--outer-mm", "40", "--field-mT", "10",
                       "--amps", "5", "--rpm", "60", "--coil-ohms", "4")
    assert any("--coil-length-mm" in w for w in out["warnings"])


@pytest.mark.parametrize("args, says", [
    (["--inner-mm", "40", "--outer-mm", "20", "--field-mT", "1", "--amps", "1", "--rpm", "1"],
     "--inner-mm"),
    (["--inner-mm", "20", "--outer-mm", "40", "--amps", "1", "--rpm", "1"], "--turns"),
    (["--inner-mm", "20", "--outer-mm", "40", "--field-mT", "1", "--amps", "1"], "--rpm"),
    (["--inner-mm", "20", "--outer-mm", "40", "--field-mT", "1", "--amps", "1", "--rpm", "1",
      "--duty", "2"], "--duty"),
    (["--inner-mm", "20", "--outer-mm", "40", "--field-mT", "1", "--amps", "1", "--rpm", "1",
      "--input-pF", "5"], "--cap-length-mm"),
    (["--inner-mm", "20", "--outer-mm", "40", "--field-mT", "1", "--amps", "1", "--rpm", "1",
      "--latitude-deg", "100"], "--latitude-deg"),
])
def test_bad_inputs_give_one_line(capsys: pytest.CaptureFixture[str], args: list[str],
                                  says: str) -> None:
    assert main(["predict", *args]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and says in err and err.startswith("slipless: error:")


def test_bad_options_from_the_shell() -> None:
    r = subprocess.run([sys.executable, "-m", "slipless", "predict", "--inner-mm", "20",
                        "--outer-mm", "40", "--field-mT", "1", "--amps", "1", "--rpm", "1",
                        "--rad-per-s", "2"], capture_output=True, text=True, timeout=60)
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr
    r = subprocess.run([sys.executable, "-m", "slipless", "predict", "--inner-mm", "x"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 2 and r.stderr.count("\n") == 1
