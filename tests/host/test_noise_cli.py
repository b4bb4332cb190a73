"""`slipless noise` on the demo's capture (the demo's scenario: firmware, lossy
radio, recorder; a simulation of our own): strict JSON, the tables, the figure,
the stopped stretch's gyro noise against the rig's truth, and bad input as one
line and exit 2."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

import slipless.cli as cli
from slipless.sim.scenario import ScenarioConfig, build


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("noise-demo")
    sc = build(folder, ScenarioConfig(seed=1, seconds=60))
    pred = folder / "prediction.json"
    pred.write_text(json.dumps({"results": sc.rig.prediction()}))
    return {"capture": sc.capture, "mirror": sc.mirror, "prediction": pred, "folder": folder,
            "noise": sc.rig.gyro_noise_rad_s, "gyro_hz": sc.rig.gyro_rate_hz}  # type: ignore[dict-item]


def strict(text: str) -> dict:
    def no_constant(name: str) -> None:
        raise AssertionError(f"{name} in the JSON")

    return json.loads(text, parse_constant=no_constant)


def noise(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str, str]:
    code = cli.main(["noise", *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_json_on_the_demo(demo: dict, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = noise(capsys, str(demo["capture"]), "--mirror", str(demo["mirror"]),
                         "--prediction", str(demo["prediction"]), "--json")
    assert code == 0
    doc = strict(out)
    by_name = {s["name"]: s for s in doc["streams"]}
    assert set(by_name) == {"cap_amp", "coil_current", "gyro_z"}
    cap, gyro = by_name["cap_amp"], by_name["gyro_z"]
    assert (cap["rate_hz"], gyro["rate_hz"]) == (1000.0, 200.0)
    assert cap["spans"] == 1 and cap["samples"] == 60_000  # the mirror filled every gap
    assert cap["psd"]["nperseg"] == 4096 and cap["floor_unit"] == "V/sqrt(Hz)"
    a = cap["allan"]
    assert a["tau"][0] == pytest.approx(1e-3) and len(a["adev"]) == len(a["lo"]) == len(a["hi"])
    assert all(lo <= v <= hi for lo, v, hi in zip(a["lo"], a["adev"], a["hi"]))
    assert set(gyro["terms"]) == {"N", "B", "K"} and gyro["terms"]["B"]["deg_unit"] == "deg/h"
    s = doc["sensitivity"]
    res = json.loads(demo["prediction"].read_text())["results"]
    assert s["pulses"] == 12 and s["unit_d"] == "V/(A rad/s)"
    assert s["earth_b"] == pytest.approx(res["slope_V_per_A_rad_s"] * res["earth_rate_rad_s"])
    assert s["earth_run_s"] > 3.15e7 * 100  # centuries: honest about the Earth's term
    assert s["reach"][0]["d_min"] == pytest.approx(s["z"] * s["se_d"])


def test_radio_alone_has_gaps(demo: dict, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = noise(capsys, str(demo["capture"]), "--stream", "cap_amp", "--no-pulses",
                         "--json")
    doc = strict(out)
    (cap,) = doc["streams"]
    assert code == 0 and cap["spans"] > 1 and cap["samples"] < 60_000
    assert doc["sensitivity"] is None and doc["sensitivity_note"] == "not asked for"


def test_the_stopped_gyro_matches_the_rig(demo: dict, capsys: pytest.CaptureFixture[str]) -> None:
    # The first 10 s block is stopped: the gyro then shows its white noise (sd 0.02 rad/s
    # at 200 Hz in the rig) plus constants, so N = sd / sqrt(fs) and the one-sided floor
    # is sqrt(2) N [common practice].
    code, out, _ = noise(capsys, str(demo["capture"]), "--mirror", str(demo["mirror"]),
                         "--window", "0.2:9", "--stream", "gyro_z", "--no-pulses", "--json")
    (g,) = strict(out)["streams"]
    n_true = demo["noise"] / math.sqrt(demo["gyro_hz"])
    assert code == 0 and g["longest_s"] == pytest.approx(8.8, abs=0.01)
    assert g["terms"]["N"]["value"] == pytest.approx(n_true, rel=0.1)
    assert g["floor_asd"] == pytest.approx(math.sqrt(2) * n_true, rel=0.1)
    assert g["terms"]["N"]["deg_value"] == pytest.approx(n_true * 180 / math.pi * 60, rel=0.1)


def test_tables_and_figure(demo: dict, capsys: pytest.CaptureFixture[str]) -> None:
    png = demo["folder"] / "noise.png"
    code, out, _ = noise(capsys, str(demo["capture"]), "--mirror", str(demo["mirror"]),
                         "--prediction", str(demo["prediction"]), "--plot", str(png))
    assert code == 0
    for text in ("noise by stream", "gyro_z (1:2): overlapping Allan deviation",
                 "reach of the pulse fit", "Earth's rotation: its part of the field term b",
                 "b, not d", f"figure: {png}"):
        assert text in " ".join(out.split()), text
    assert png.read_bytes().startswith(b"\x89PNG\r\n\x1a\n")  # RFC 2083, section 3.1


@pytest.mark.parametrize("extra,message", [
    (["--band", "100:1"], "band 100:1 Hz: need 0 <= LOW < HIGH"),
    (["--band", "wide"], "--band 'wide': expected two numbers as A:B"),
    (["--window", "9:2"], "window 9:2 s: need START < END"),
    (["--stream", "nope"], "stream 'nope' not found (streams: cap_amp, coil_current, gyro_z)"),
    (["--nperseg", "4"], "--nperseg 4: give 16 or more"),
    (["--plot", "noise.txt"], "--plot noise.txt: name a .png, .svg or .pdf file"),
    (["--interval", "1.5"], "interval level 1.5"),
    (["--level", "0.2"], "level 0.2: give a confidence level"),
    (["--signal", "nope"], "nope"),
])
def test_bad_options(demo: dict, capsys: pytest.CaptureFixture[str], extra: list[str],
                     message: str) -> None:
    code, out, err = noise(capsys, str(demo["capture"]), *extra)
    assert code == 2 and out == ""
    assert err.startswith("slipless: error: ") and err.count("\n") == 1 and message in err


def test_bad_files(demo: dict, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    junk = tmp_path / "junk.slcap"
    junk.write_bytes(b"\x00\x01not a capture" * 50)
    bad_pred = tmp_path / "pred.json"
    bad_pred.write_text("{")
    for args in ([str(tmp_path / "missing.slcap")], [str(junk)],
                 [str(demo["capture"]), "--prediction", str(bad_pred)]):
        code, out, err = noise(capsys, *args)
        assert code == 2 and out == "" and err.startswith("slipless: error: "), args
        assert err.count("\n") == 1 and "Traceback" not in err


def test_the_python_api_the_report_uses(demo: dict) -> None:
    from slipless import noise
    from slipless.run import open_run

    run = open_run([demo["capture"]], [demo["mirror"]])
    result = noise.analyse(run, analysis=run.pulses(), prediction=demo["prediction"])
    doc = noise.summary(result)
    json.dumps(doc, allow_nan=False)  # strict JSON as it stands
    assert [s["name"] for s in doc["streams"]] == ["cap_amp", "coil_current", "gyro_z"]
    assert doc["sensitivity"]["pulses"] == 12
    assert noise.summary(run, pulses=False)["sensitivity"] is None  # a Run: analysed first
    fig = noise.figure(result)
    assert len(fig.axes) == 2 * 3 + 2  # spectrum and Allan deviation a stream, the reach
    import matplotlib.pyplot as plt

    plt.close(fig)
