"""`slipless.open`: one decoding pass gives every table and every analysis,
and every command decodes its inputs exactly once."""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import numpy as np
import pytest

import slipless
from slipless.cli import main
from slipless.errors import InputError
from slipless.io.inputs import decode_passes
from slipless.sim.scenario import ScenarioConfig, build


@pytest.fixture(scope="module")
def scenario(tmp_path_factory: pytest.TempPathFactory):
    return build(tmp_path_factory.mktemp("run"), ScenarioConfig(seed=3, seconds=60))


@pytest.fixture(scope="module")
def decoded(scenario, tmp_path_factory: pytest.TempPathFactory):
    tables = tmp_path_factory.mktemp("tables") / "t"
    before = decode_passes()
    run = slipless.open([scenario.capture], mirrors=[scenario.mirror], tables=tables,
                        table_format="parquet")
    assert decode_passes() - before == 1
    return run, tables


def test_columns_match_the_tables_read_by_duckdb(decoded) -> None:
    """The Run's sample columns against the Parquet dataset written in the same pass,
    read back by DuckDB (an independent Parquet reader, Apache Parquet format)."""
    run, tables = decoded
    mine = run.to_pandas("samples").sort_values(["board", "run", "stream", "tick_us"])
    theirs = duckdb.sql(
        f"SELECT board, run, stream, seq, tick_us, raw, value FROM read_parquet("
        f"'{tables}/samples/**/*.parquet', hive_partitioning = true) "
        "ORDER BY board, run, stream, tick_us").df()
    # one row per (stream, tick): a tick decoded twice (rare) keeps its first copy in the Run
    theirs = theirs.drop_duplicates(["board", "run", "stream", "tick_us"], keep="first")
    assert len(mine) == len(theirs) > 100_000
    for col in ("board", "run", "stream", "seq", "tick_us", "raw"):
        assert np.array_equal(mine[col].to_numpy(np.int64), theirs[col].to_numpy(np.int64)), col
    assert np.array_equal(mine["value"].to_numpy(), theirs["value"].to_numpy())
    ev = run.events()
    n_events = duckdb.sql(f"SELECT count(*) FROM read_parquet('{tables}/events/**/*.parquet', "
                          "hive_partitioning = true)").fetchall()[0][0]
    assert ev["tick_us"].size == n_events and "coil" in set(ev["event"])


def test_frames_status_and_streams(decoded) -> None:
    run, _ = decoded
    fr = run.frames()
    key = max(run.runs, key=lambda k: run.runs[k].received)
    st = run.runs[key]
    mine = (fr["board"] == key[0]) & (fr["run"] == key[1])
    assert int(np.sum(mine & (fr["fate_name"] == "received"))) == st.received
    assert int(np.sum(mine & (fr["fate_name"] == "duplicate"))) == st.duplicates
    assert set(fr["origin_name"][mine & (fr["fate"] >= 0)]) <= {"radio", "resend", "mirror", ""}
    assert run.status()["battery_mv"].size > 0
    names = set(run.streams()["name"])
    assert {"cap_amp", "coil_current"} <= names
    ch = run.channel("cap_amp", board=key[0], run=key[1])
    assert ch.n == int(run.streams()["samples"][list(run.streams()["name"]).index("cap_amp")])


def test_analyses_equal_the_commands(decoded, scenario, tmp_path: Path, capsys) -> None:
    run, _ = decoded
    assert main(["loss", str(scenario.capture), "--mirror", str(scenario.mirror), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == run.loss_document()
    result = run.align(tmp_path / "api", grid="10ms")
    assert main(["align", str(scenario.capture), "--mirror", str(scenario.mirror), "--out",
                 str(tmp_path / "cli"), "--grid", "10ms", "--quiet"]) == 0
    for name in ("clock.json", "grid.csv", "samples.csv"):
        assert (tmp_path / "api" / name).read_bytes() == (tmp_path / "cli" / name).read_bytes()
    assert result.grid_rows > 0
    a = run.pulses()
    assert len(a.used) > 0 and "d" in a.fit.names
    page = run.report(tmp_path / "r.html", title="api")
    assert page.exists() and "<section id=\"conditions\">" in page.read_text()


@pytest.mark.parametrize("command", ["decode", "loss", "align", "pulses", "report"])
def test_every_command_decodes_once(command: str, scenario, tmp_path: Path, capsys) -> None:
    argv = {"decode": ["--out", str(tmp_path / "d"), "--quiet"], "loss": ["--json"],
            "align": ["--out", str(tmp_path / "a"), "--grid", "10ms", "--quiet"],
            "pulses": ["--out", str(tmp_path / "p"), "--quiet", "--no-plots"],
            "report": ["--out", str(tmp_path / "r.html")]}[command]
    before = decode_passes()
    assert main([command, str(scenario.capture), "--mirror", str(scenario.mirror), *argv]) == 0
    capsys.readouterr()
    assert decode_passes() - before == 1


def test_bad_use_is_one_clear_error(decoded, tmp_path: Path) -> None:
    run, _ = decoded
    with pytest.raises(InputError, match="no such file"):
        slipless.open(tmp_path / "nothing.slcap")
    with pytest.raises(InputError, match="choose one of"):
        run.to_pandas("gossip")
    with pytest.raises(InputError, match="not found"):
        run.channel("no_such_stream")
    with pytest.raises(InputError, match="grid"):
        run.align(tmp_path / "x", grid="often")


def test_pulse_defaults_are_the_commands() -> None:
    """The Run and the report build the pulses options from pulses/options.py; the
    command line declares them from there too, so the two cannot drift apart."""
    from slipless.cli import build_parser
    from slipless.pulses.options import DEFAULTS, namespace

    args = vars(build_parser().parse_args(["pulses", "x.slcap", "--out", "y"]))
    assert {k: args[k] for k in DEFAULTS} == DEFAULTS
    with pytest.raises(InputError, match="no option"):
        namespace(signall="cap_amp")
