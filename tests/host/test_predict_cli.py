"""`slipless predict`: the model's numbers (checked against references.md
sections 8 and 9), its amplifier modes, assumptions and cautions, the heating, fit and
speed warnings, strict JSON, and one clear line for bad options."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

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
    # references 8a: V = w B (b^2 - a^2)/2 (8a.1 scaled by B: 37.70 uV at 10 mT) from the centre
    assert res["emf_centre_V"] == pytest.approx(3.769911e-5 * 5.619852e-3 / 0.010, rel=1e-6)
    # the flux through the annulus averaged over the 100 mm capacitor: 0.6 % below
    # (test_predict_field.py checks the average against Biot-Savart integrals)
    assert res["emf_centre_over_mean"] == pytest.approx(1.0061, abs=1e-4)
    assert res["emf_V"] * res["emf_centre_over_mean"] == pytest.approx(res["emf_centre_V"])
    assert res["field_mean_T"] / res["field_T"] == pytest.approx(1 / 1.0061, abs=1e-4)
    # references 8b [computed]: long-coil inductance 12.337 mH; Nagaoka's K(0.5) = 0.8181
    # (Nagaoka's table [from memory], see test_predict_field.py)
    assert res["inductance_long_solenoid_H"] == pytest.approx(12.337e-3, rel=1e-4)
    assert res["nagaoka_K"] == pytest.approx(0.8181, abs=1e-4)
    assert res["inductance_H"] == pytest.approx(res["nagaoka_K"] * 12.337e-3, rel=1e-4)
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
    assert out["amplifier_mode"] == "voltage"
    assert any(n.startswith("amplifier: voltage amplifier") for n in out["notes"])


def test_charge_amplifier_mode(capsys: pytest.CaptureFixture[str]) -> None:
    out = predict_json(capsys, *RIG, "--feedback-pF", "4", "--gain", "10", "--input-pF", "30")
    res = out["results"]
    assert out["amplifier_mode"] == "charge"
    assert any(n.startswith("amplifier: charge amplifier") for n in out["notes"])
    # ideal charge amplifier: Vout = C x EMF / Cf (charge conservation onto Cf), then the gain
    assert res["amp_output_V"] == pytest.approx(10 * res["capacitance_F"] * res["emf_V"] / 4e-12,
                                                rel=1e-12)
    assert res["feedback_F"] == pytest.approx(4e-12) and "amp_input_V" not in res
    assert res["slope_V_per_A_rad_s"] * 2 * 2 * 3.141592653589793 == pytest.approx(res["amp_output_V"])
    assert any("--input-pF is not used" in w for w in out["warnings"])  # virtual earth
    assert any("virtual earth" in a for a in out["assumptions"])
    assert not any(a.startswith("induced charge shared") for a in out["assumptions"])


def test_the_earth_term_is_said_to_land_in_b(capsys: pytest.CaptureFixture[str]) -> None:
    res_doc = predict_json(capsys, *RIG, "--latitude-deg", "45")
    res = res_doc["results"]
    # its size in b: d x Omega sin(latitude), V per A (references 8e for the rate)
    assert res["earth_b_V_per_A"] == pytest.approx(res["slope_V_per_A_rad_s"] * 5.156304e-5, rel=1e-6)
    assert res["earth_amp_output_V"] == pytest.approx(res["earth_b_V_per_A"] * 2)
    (note,) = [n for n in res_doc["notes"] if "Earth" in n]
    assert "both field signs" in note and "field term b, not in d" in note
    console = Console(record=True, width=300)
    assert run_predict(build_parser().parse_args(["predict", *RIG]), console) == 0
    assert "field term b, not in d" in console.export_text()


def test_zero_rotation_gives_strict_json() -> None:
    # strict JSON (RFC 8259 has no NaN or Infinity): a parser that refuses them must read it
    r = subprocess.run([sys.executable, "-m", "slipless", "predict", *RIG[:-1], "0",
                        "--coil-ohms", "4", "--json"], capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr

    def refuse(constant: str) -> None:
        raise ValueError(constant)

    doc = json.loads(r.stdout, parse_constant=refuse)
    assert doc["results"]["earth_fraction"] is None  # no rotor rate to compare with
    assert doc["results"]["emf_V"] == 0.0 and doc["results"]["slope_V_per_A_rad_s"] > 0
    assert any("rotation rate is zero" in w for w in doc["warnings"])


def test_fit_warnings(capsys: pytest.CaptureFixture[str]) -> None:
    assert not predict_json(capsys, *RIG)["warnings"]
    wide = [*RIG, "--coil-radius-mm", "40"]  # the later option wins: R = b = 40 mm
    (warn,) = predict_json(capsys, *wide)["warnings"]
    assert "does not fit inside the coil" in warn
    long_cap = [*RIG, "--cap-length-mm", "600"]
    out = predict_json(capsys, *long_cap)
    (warn,) = out["warnings"]
    assert "fringe field" in warn and "2.72x" in warn
    assert out["results"]["emf_centre_over_mean"] == pytest.approx(2.7239, abs=1e-4)
    # an offset that pushes one end out of the coil
    (warn,) = predict_json(capsys, *RIG, "--cap-offset-mm", "60")["warnings"]
    assert "10 to 110 mm" in warn and "fringe field" in warn


def test_offset_capacitor(capsys: pytest.CaptureFixture[str]) -> None:
    mid = predict_json(capsys, *RIG)["results"]
    up = predict_json(capsys, *RIG, "--cap-offset-mm", "30")["results"]
    down = predict_json(capsys, *RIG, "--cap-offset-mm", "-30")["results"]
    assert up["emf_V"] == pytest.approx(down["emf_V"], rel=1e-9) and up["emf_V"] < mid["emf_V"]
    assert up["field_T"] == mid["field_T"]  # field_T stays the value at the coil centre


def test_rim_speed_warning_and_refusal(capsys: pytest.CaptureFixture[str]) -> None:
    fast = [a if a != "60" else "60000" for a in RIG]  # 1000 rev/s at b = 40 mm: 251 m/s
    out = predict_json(capsys, *fast)
    assert out["results"]["rim_speed_m_s"] == pytest.approx(2 * 3.141592653589793 * 1000 * 0.04)
    (warn,) = out["warnings"]
    assert warn.startswith("rim speed 251 m/s") and "common practice" in warn
    assert main(["predict", *[a if a != "60" else "600000" for a in RIG]]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "rim speed of 2513 m/s" in err


def test_amps_warning(capsys: pytest.CaptureFixture[str]) -> None:
    (warn,) = predict_json(capsys, *[a if a != "2" else "500" for a in RIG])["warnings"]
    assert warn.startswith("--amps 500") and "common practice" in warn


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
    (["--inner-mm", "20", "--outer-mm", "40", "--field-mT", "1", "--amps", "1", "--rpm", "1",
      "--feedback-pF", "5"], "--cap-length-mm"),
    ([*RIG, "--feedback-pF", "0"], "--feedback-pF"),
    (["--inner-mm", "20", "--outer-mm", "40", "--field-mT", "1", "--amps", "1", "--rpm", "1",
      "--cap-offset-mm", "5"], "--cap-offset-mm"),
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


@pytest.mark.parametrize("option, value", [
    ("--amps", "nan"), ("--rpm", "inf"), ("--rad-per-s", "-inf"), ("--inner-mm", "nan"),
    ("--field-mT", "inf"), ("--gain", "nan"), ("--input-pF", "inf"), ("--feedback-pF", "nan"),
    ("--coil-ohms", "inf"), ("--latitude-deg", "nan"), ("--duty", "nan"), ("--eps-r", "inf"),
    ("--cap-offset-mm", "-inf"), ("--turns", "inf")])
def test_non_finite_inputs_are_refused_from_the_shell(option: str, value: str) -> None:
    args = ["--inner-mm", "20", "--outer-mm", "40", "--cap-length-mm", "100", "--turns", "500",
            "--coil-length-mm", "200", "--coil-radius-mm", "50", "--amps", "2"]
    if option != "--rad-per-s":
        args += ["--rpm", "60"]
    if option in args:
        del args[args.index(option):args.index(option) + 2]
    args.append(f"{option}={value}")  # '=': argparse would take '-inf' for an option
    r = subprocess.run([sys.executable, "-m", "slipless", "predict", *args], capture_output=True,
                       text=True, timeout=60)
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr
    assert f"{option} must be a finite number" in r.stderr


def test_measured_field_with_the_coil_keeps_the_coil_profile(capsys: pytest.CaptureFixture[str]) -> None:
    coil = predict_json(capsys, *RIG)["results"]
    measured = predict_json(capsys, *RIG, "--field-mT", "6")["results"]
    assert measured["field_T"] == pytest.approx(6e-3)  # taken as the centre value on the axis
    assert measured["emf_centre_over_mean"] == pytest.approx(coil["emf_centre_over_mean"])
    assert measured["emf_V"] == pytest.approx(coil["emf_V"] * 6e-3 / coil["field_T"], rel=1e-12)


def test_pulses_reads_the_averaged_slope(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # the keys `slipless pulses --prediction` reads keep their meaning: predicted output per
    # (A x rad/s), now from the averaged flux, and the centre field per ampere
    from slipless.pulses.analysis import read_prediction

    out = predict_json(capsys, *RIG, "--gain", "100", "--input-pF", "10")
    path = tmp_path / "rig.json"
    path.write_text(json.dumps(out))
    res = out["results"]
    assert read_prediction(path) == (res["slope_V_per_A_rad_s"], res["field_T_per_A"])
    centre_slope = res["slope_V_per_A_rad_s"] * res["emf_centre_over_mean"]  # what it was
    assert centre_slope * 2 * 2 * 3.141592653589793 == pytest.approx(
        100 * res["amp_input_V"] * res["emf_centre_V"] / res["emf_V"])
