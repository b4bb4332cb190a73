"""The report's board health: STATUS frames of known values, built with the
protocol's own encoder and read back through the real decoder, come out of
report.health as those values in the report's units (mV -> V, centi-degrees
-> degrees Celsius, bytes -> kB: SI prefixes, BIPM SI Brochure, 9th edition,
table 7), in board-time order, with battery 0 (no battery channel, see
firmware/hal.py) as unknown."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from slipless.protocol import wire
from slipless.report.health import MEASURES, section, series
from slipless.run import open_run

TICK_HZ = 1_000_000
# (board time s, battery mV, temperature centi-degC, free RAM B, queue high, dropped)
REPORTS = [(1.0, 3912, 2480, 91_000, 2, 0), (2.0, 3905, 2510, 90_500, 5, 0),
           (3.0, 3899, 2575, 90_250, 9, 4), (4.0, 0, 2600, 90_000, 9, 7)]


def _stream(path: Path) -> Path:
    enc = wire.Encoder(3, 5)
    streams = [(0, ord("h"), 0, 1000, 1.0, 0.0, "cap_amp", "V")]
    out = [enc.frame(enc.descriptor(0, TICK_HZ, (1, 0, 0), 5000, 1, streams))]
    out.append(enc.frame(enc.samples(0, 0, ord("h"), list(range(50)))))
    for t, bat, temp, ram, high, dropped in REPORTS:
        out.append(enc.frame(enc.status(int(t * TICK_HZ), bat, temp, ram, high, dropped, 0, 10)))
    out.append(enc.frame(enc.end(int(5 * TICK_HZ), 0, [(0, 50)])))
    path.write_bytes(b"".join(out))
    return path


@pytest.fixture(scope="module")
def status(tmp_path_factory: pytest.TempPathFactory) -> dict[str, np.ndarray]:
    return open_run([_stream(tmp_path_factory.mktemp("health") / "run.bin")]).status()


def test_series_are_the_status_values(status: dict[str, np.ndarray]) -> None:
    data = series(status)
    assert list(data) == [(3, 5)]
    per = data[(3, 5)]
    want = np.array(REPORTS, dtype=float)
    for m in MEASURES:
        t, v = per[m.field]
        np.testing.assert_allclose(t, want[:, 0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(per["battery_mv"][1][:3], want[:3, 1] / 1000, rtol=1e-12)
    assert np.isnan(per["battery_mv"][1][3])  # 0 mV: the board has no battery reading
    np.testing.assert_allclose(per["temp_cdeg"][1], want[:, 2] / 100, rtol=1e-12)
    np.testing.assert_allclose(per["free_ram"][1], want[:, 3] / 1000, rtol=1e-12)
    np.testing.assert_array_equal(per["queue_high"][1], want[:, 4])
    np.testing.assert_array_equal(per["dropped"][1], want[:, 5])


def test_section_table_and_figure(status: dict[str, np.ndarray]) -> None:
    html = section(status)
    assert "3.899 to 3.912" in html  # battery V, the unknown reading left out
    assert "24.8 to 26" in html and "90 to 91" in html and "0 to 7" in html
    assert html.count("<img") == 1 and "data:image/png;base64," in html


def test_no_status_says_so() -> None:
    assert "no STATUS frames" in section({})


def test_only_runs_with_samples(status: dict[str, np.ndarray]) -> None:
    # runs outside `only` are left out, unless nothing would be left
    assert "<td>3</td><td>5</td>" in section(status, only={(3, 5)})
    assert "<td>3</td><td>5</td>" in section(status, only={(9, 9)})
