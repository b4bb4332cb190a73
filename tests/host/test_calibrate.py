"""`slipless calibrate` on a bench run whose truth is known, and the file it writes.

The run (a scenario of our own, built with the wire encoder): a charge
amplifier with an offset, a known charge step q = C x V through a calibration
capacitor (the definition of capacitance, Q = C V), and a gyro with a bias and
a scale error on a rotor that stands, turns and stands, with an index sensor
giving one marker a revolution. Checked against that truth within the
measurement's own standard errors; the bias with the Earth's rate about the
vertical taken off (WGS 84 rate x sin latitude).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from slipless.calib import apply, file
from slipless.cli import main
from slipless.model import physics
from slipless.protocol import wire
from slipless.run import open_run

H = 0x68
HZ = 1_000_000
CAP_PERIOD, GYRO_PERIOD = 1000, 5000  # 1 kHz, 200 Hz
TRUTH = {"offset_v": -0.012, "gain_v_per_c": 1.0e11, "cal_pf": 10.0, "step_v": 0.5, "step_at": 20.0,
         "bias": 0.004, "scale": 1.02, "lat": 48.0}  # scale: true rate = scale x (reading - bias)
SECONDS = 60.0


def _rate(t: np.ndarray) -> np.ndarray:
    """Still 0-15 s, spin up to 2 pi rad/s by 17 s, turn until 45 s, down by 47 s, still."""
    return 2 * math.pi * np.clip(np.minimum((t - 15) / 2, (47 - t) / 2), 0, 1)


@pytest.fixture(scope="module")
def bench(tmp_path_factory: pytest.TempPathFactory) -> Path:
    rng = np.random.default_rng(7)
    enc = wire.Encoder(3, 1)
    streams = [(0, H, 0, CAP_PERIOD, 1e-4, 0.0, "cap_amp", "V"),
               (1, H, 0, GYRO_PERIOD, 1e-3, 0.0, "gyro_z", "rad/s")]
    out = [enc.frame(enc.descriptor(0, HZ, (0, 4, 0), 5000, 2, streams))]
    t_cap = np.arange(int(SECONDS * HZ / CAP_PERIOD)) * CAP_PERIOD / HZ
    q = TRUTH["cal_pf"] * 1e-12 * TRUTH["step_v"]
    cap = TRUTH["offset_v"] + TRUTH["gain_v_per_c"] * q * (t_cap >= TRUTH["step_at"])
    cap = np.round((cap + rng.normal(0, 2e-3, t_cap.size)) / 1e-4).astype(np.int16)
    t_g = np.arange(int(SECONDS * HZ / GYRO_PERIOD)) * GYRO_PERIOD / HZ
    earth = physics.earth_vertical_rate(TRUTH["lat"])
    reading = (_rate(t_g) + earth) / TRUTH["scale"] + TRUTH["bias"] + rng.normal(0, 0.01, t_g.size)
    gyro = np.round(reading / 1e-3).astype(np.int16)
    per = wire.max_samples(H)
    jobs = []
    for sid, vals, period in ((0, cap, CAP_PERIOD), (1, gyro, GYRO_PERIOD)):
        for i in range(0, vals.size, per):
            jobs.append((i * period, sid, vals[i : i + per]))
    # index markers: each time the true angle passes a whole turn
    fine = np.arange(0, SECONDS, 1e-4)
    angle = np.cumsum(_rate(fine)) * 1e-4
    turns = np.flatnonzero(np.diff(np.floor(angle / (2 * math.pi))) > 0) + 1
    marks = [(int(fine[k] * HZ), -1, None) for k in turns]
    for tick, sid, vals in sorted(jobs + marks, key=lambda j: j[0]):
        if sid < 0:
            out.append(enc.frame(enc.events([(tick, wire.EV_MARKER, 1)])))
        else:
            out.append(enc.frame(enc.samples(sid, tick, H, vals.tolist())))
    path = tmp_path_factory.mktemp("cal") / "bench.bin"
    path.write_bytes(b"".join(out))
    return path


def test_calibrate_recovers_the_truth(bench: Path, tmp_path: Path) -> None:
    cal_path = tmp_path / "cal.json"
    assert main(["calibrate", str(bench), "--out", str(cal_path), "--zero", "cap_amp@2:18",
                 "--step", "cap_amp", "--step-pF", "10", "--step-volts", "0.5",
                 "--step-tolerance", "0", "--gyro", "gyro_z", "--index-marker", "1",
                 "--latitude-deg", "48"]) == 0
    doc = json.loads(cal_path.read_text())
    assert doc["format"] == "slipless-calibration" and doc["board"] == 3
    cal = file.load(cal_path)
    cap, gyro, amp = cal.streams["cap_amp"], cal.streams["gyro_z"], cal.amplifier
    assert amp is not None
    assert abs(cap.offset - TRUTH["offset_v"]) < 4 * cap.offset_se + 1e-4  # + one count
    assert abs(amp.gain_v_per_c - TRUTH["gain_v_per_c"]) < 4 * amp.gain_se
    assert amp.gain_se / amp.gain_v_per_c < 0.01
    assert abs(gyro.bias - TRUTH["bias"]) < 4 * gyro.bias_se + 5e-4
    assert abs(gyro.scale - TRUTH["scale"]) < 4 * gyro.scale_se + 2e-3
    assert "index marker 1" in doc["streams"]["gyro_z"]["from"]


def test_applied_calibration_corrects_values_once(bench: Path, tmp_path: Path) -> None:
    cal_path = tmp_path / "cal.json"
    main(["calibrate", str(bench), "--out", str(cal_path), "--gyro", "gyro_z",
          "--index-marker", "1", "--latitude-deg", "48"])
    cal = file.load(cal_path)
    run = open_run([bench])
    ch = run.channel("gyro_z")
    before = ch.values()
    assert apply.apply(run.channels, cal) == ["gyro_z"]
    assert apply.apply(run.channels, cal) == []  # once only
    g = cal.streams["gyro_z"]
    assert np.allclose(ch.values(), (before - g.bias) * g.scale)
    t = ch.ticks() / HZ
    turning = (t > 20) & (t < 42)
    assert abs(ch.values()[turning].mean() - 2 * math.pi) < 0.01  # the true rate back
    rel = apply.d_relative_se(cal, "cap_amp", "gyro_z")
    assert rel["total"] == pytest.approx(g.scale_se / g.scale)


def test_d_and_ratio_uncertainty_add_in_quadrature() -> None:
    """JCGM 100:2008 (GUM) 5.1.6: relative uncertainties of a product or quotient
    add in quadrature."""
    cal = file.Calibration(streams={"sig": file.StreamCal(scale=2.0, scale_se=0.06),
                                    "rate": file.StreamCal(scale=1.0, scale_se=0.04)},
                           amplifier=file.AmpCal("sig", 1e11, 2e9))
    assert apply.d_relative_se(cal, "sig", "rate")["total"] == pytest.approx(0.05)
    assert apply.ratio_se(1.0, 0.0, cal, "sig", "rate") == pytest.approx(math.hypot(0.05, 0.02))
    assert apply.d_relative_se(None, "sig", "rate") == {"total": 0.0}


@pytest.mark.parametrize("text, says", [
    ("{", "line 1"),
    ('{"format": "other"}', "not a slipless calibration"),
    ('{"format": "slipless-calibration", "version": 9}', "version 9"),
    ('{"format": "slipless-calibration", "version": 1, "streams": {"a": {"scale": 0}}}', "scale is 0"),
    ('{"format": "slipless-calibration", "version": 1, "streams": {"a": {"bias": "x"}}}',
     "finite number"),
    ('{"format": "slipless-calibration", "version": 1, "streams": {"a": {"gain": 1}}}',
     "unknown key"),
])
def test_bad_calibration_files_are_one_line_errors(tmp_path: Path, text: str, says: str) -> None:
    p = tmp_path / "cal.json"
    p.write_text(text)
    with pytest.raises(Exception) as err:
        file.load(p)
    assert says in str(err.value) and "\n" not in str(err.value)


@pytest.mark.parametrize("args, says", [
    ([], "nothing to measure"),
    (["--zero", "cap_amp"], "NAME@T0:T1"),
    (["--zero", "nope@1:2"], "no stream 'nope'"),
    (["--step", "cap_amp", "--step-volts", "1"], "--step-pF"),
    (["--gyro", "gyro_z", "--index-marker", "9"], "index markers"),
])
def test_calibrate_bad_requests(bench: Path, tmp_path: Path, args: list[str], says: str,
                                capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "cal.json"
    assert main(["calibrate", str(bench), "--out", str(out), *args]) == 2
    err = capsys.readouterr().err
    assert says in err and err.count("\n") == 1 and not out.exists()


def test_align_applies_the_calibration(tmp_path: Path) -> None:
    """align --calibration: the aligned samples' values are the corrected ones."""
    import csv

    from slipless.sim.scenario import ScenarioConfig, build

    sc = build(tmp_path, ScenarioConfig(seed=4, seconds=60))
    cal = file.Calibration(streams={"cap_amp": file.StreamCal(offset=0.25, scale=2.0)}, board=None)
    file.save(cal, tmp_path / "cal.json")
    for name, extra in (("plain", []), ("cal", ["--calibration", str(tmp_path / "cal.json")])):
        assert main(["align", str(sc.capture), "--grid", "100ms", "--out", str(tmp_path / name),
                     "--quiet", *extra]) == 0
    rows = {}
    for name in ("plain", "cal"):
        with (tmp_path / name / "samples.csv").open() as f:
            rows[name] = [r for r in csv.DictReader(f) if r["name"] == "cap_amp"]
    assert len(rows["plain"]) == len(rows["cal"]) > 1000
    for a, b in zip(rows["plain"][:500], rows["cal"][:500]):
        assert float(b["value"]) == pytest.approx((float(a["value"]) - 0.25) * 2.0, abs=1e-9)


def test_pulses_carry_the_calibration_into_d_and_the_ratio(tmp_path: Path) -> None:
    """A gyro reading 2 % low (scale 1.02) makes d 2 % smaller once corrected
    (d is per rad/s); the calibration's scale errors join d's and d/model's
    in quadrature (JCGM 100:2008 5.1.6)."""
    from dataclasses import asdict

    from slipless.sim.scenario import ScenarioConfig, build

    sc = build(tmp_path, ScenarioConfig(seed=6, seconds=120))
    pred = tmp_path / "prediction.json"
    pred.write_text(json.dumps({"inputs": asdict(sc.rig.rig_inputs()),
                                "results": sc.rig.prediction()}, default=float))
    cal = file.Calibration(streams={"gyro_z": file.StreamCal(scale=1.02, scale_se=0.01),
                                    "cap_amp": file.StreamCal(scale=1.0, scale_se=0.03)})
    file.save(cal, tmp_path / "cal.json")
    out = {}
    for name, extra in (("plain", []), ("cal", ["--calibration", str(tmp_path / "cal.json")])):
        assert main(["pulses", str(sc.capture), "--mirror", str(sc.mirror), "--out",
                     str(tmp_path / name), "--prediction", str(pred), "--no-plots", "--quiet",
                     *extra]) == 0
        out[name] = json.loads((tmp_path / name / "summary.json").read_text())
    d0, d1 = out["plain"]["fit"]["d"]["estimate"], out["cal"]["fit"]["d"]["estimate"]
    assert d1 == pytest.approx(d0 / 1.02, rel=2e-3)
    c = out["cal"]["calibration"]
    rel = math.hypot(0.01 / 1.02, 0.03)
    assert c["d_relative_se"]["total"] == pytest.approx(rel)
    assert c["d_se"] == pytest.approx(math.hypot(c["d_se_fit"], abs(d1) * rel))
    m0, m1 = out["plain"]["model"], out["cal"]["model"]
    assert m1["ratio_se"] > m0["ratio_se"]
    assert out["plain"]["calibration"] is None


def test_pulses_refuse_a_calibration_for_decoded_folders(tmp_path: Path,
                                                          capsys: pytest.CaptureFixture[str]) -> None:
    file.save(file.Calibration(), tmp_path / "cal.json")
    (tmp_path / "tables").mkdir()
    code = main(["pulses", str(tmp_path / "tables"), "--out", str(tmp_path / "o"),
                 "--calibration", str(tmp_path / "cal.json")])
    assert code == 2 and "--calibration applies to captures" in capsys.readouterr().err
