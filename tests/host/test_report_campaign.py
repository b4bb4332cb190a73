"""`slipless campaign report`: one self-contained page across a campaign's
runs. Captures are simulated runs of our own (sim.scenario), 60 s each.

Each run's d and the combined d are checked against an ordinary least-squares
fit of response = a + b s + c w + d s w done here with numpy.linalg.lstsq
over the same pulses (the factorial model of `slipless pulses`; least
squares: common practice)."""

from __future__ import annotations

import base64
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

from slipless.campaign import query, scan
from slipless.campaign.report import collect, combined_d, render
from slipless.campaign.together import pulse_runs_of
from slipless.cli import main
from slipless.sim.scenario import ScenarioConfig, build


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("camp_report")
    camp = root / "week"
    camp.mkdir()
    for seed in (1, 2):
        sim = root / f"sim{seed}"
        sim.mkdir()
        build(sim, ScenarioConfig(seed=seed, seconds=60))
        shutil.copy(sim / "run.slcap", camp / f"day{seed}.slcap")
    scan(camp)
    return camp


def _ols_d(pulses: list[tuple[float, float, float]]) -> float:
    s, w, y = (np.array(c) for c in zip(*pulses))
    x = np.column_stack([np.ones_like(s), s, w, s * w])
    return float(np.linalg.lstsq(x, y, rcond=None)[0][3])


def test_d_per_run_and_combined_are_least_squares(folder: Path) -> None:
    from slipless.pulses.analysis import analyse
    from slipless.run import pulse_settings

    rows = query(folder)
    rep = collect(folder, rows)
    assert len(rep.fits) == len(rows) == 2
    runs, _ = pulse_runs_of(folder, rows)
    every = []
    for rd, f in zip(runs, rep.fits):
        a = analyse([rd], *pulse_settings())
        mine = [(p.current_a, p.rotation_rad_s, p.response_v) for p in a.used]
        every += mine
        assert f.pulses == len(mine)
        assert f.d == pytest.approx(_ols_d(mine), rel=1e-9)
        assert f.low < f.d < f.high
    both = combined_d(rep)
    assert both is not None and both[1] < both[0] < both[2]
    assert both[0] == pytest.approx(_ols_d(every), rel=1e-9)
    assert len(rep.combined.used) == len(every)


def test_cli_page(folder: Path, tmp_path: Path) -> None:
    out = tmp_path / "camp.html"
    assert main(["campaign", "report", str(folder), "--out", str(out)]) == 0
    page = out.read_text()
    assert page.startswith("<!DOCTYPE html>")
    for sid in ("runs", "d", "safety"):
        assert f'<section id="{sid}">' in page
    assert "day1.slcap" in page and "day2.slcap" in page and "all together" in page
    assert "http://" not in page and "https://" not in page and "<script" not in page
    imgs = re.findall(r'src="data:image/png;base64,([^"]*)"', page)
    assert len(imgs) == page.count("<img") == 1
    assert base64.b64decode(imgs[0]).startswith(b"\x89PNG\r\n\x1a\n")  # RFC 2083, 3.1
    # the UTC span: the laptop's receive times of the first and the last frame
    assert re.search(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d to \d\d:\d\d:\d\d", page)


def test_where_narrows(folder: Path) -> None:
    rows = query(folder, "capture = 'day1.slcap'")
    page = render(collect(folder, rows, "capture = 'day1.slcap'"), "t", made="fixed")
    assert "day2.slcap" not in page and "1 runs of" in page


@pytest.mark.parametrize("case", ["no match", "not html", "no catalogue"])
def test_bad_input_one_line(folder: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str],
                            case: str) -> None:
    argv = {"no match": [str(folder), "--where", "board = 99", "--out", str(tmp_path / "c.html")],
            "not html": [str(folder), "--out", str(tmp_path / "c.txt")],
            "no catalogue": [str(tmp_path), "--out", str(tmp_path / "c.html")]}[case]
    assert main(["campaign", "report", *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("slipless: error:")
    assert not (tmp_path / "c.html").exists()
