"""slipless campaign: scan, rescan, list, export, pulses over several captures.

Captures are simulated runs of our own (sim.scenario), 60 s each.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import shutil
import sqlite3
from pathlib import Path

import pytest
from rich.console import Console

from slipless.campaign import CATALOGUE, captures_in, export, query, scan
from slipless.errors import InputError, SliplessError
from slipless.sim.scenario import ScenarioConfig, build


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("campaign")
    camp = root / "week"
    (camp / "day2").mkdir(parents=True)
    for seed, dest in ((1, camp / "a"), (2, camp / "day2" / "b")):
        sim = root / f"sim{seed}"
        sim.mkdir()
        build(sim, ScenarioConfig(seed=seed, seconds=60))
        shutil.copy(sim / "run.slcap", dest.with_suffix(".slcap"))
        if seed == 1:  # b has no mirror beside it
            shutil.copy(sim / "run.mirror", dest.with_suffix(".mirror"))
    return camp


def cli(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    """The command as `slipless` runs it (through slipless.cli.main once registered)."""
    from slipless import cli as top

    if "campaign" in top.COMMANDS:
        rc = top.main(argv)
    else:  # not yet registered: the same parse, run and one-line error as main
        from slipless.cli.campaign import add_parser, run_campaign

        p = argparse.ArgumentParser(prog="slipless")
        add_parser(p.add_subparsers(dest="command", required=True))
        try:
            rc = run_campaign(p.parse_args(argv), Console(width=110))
        except SliplessError as exc:
            print(f"slipless: error: {exc}", file=__import__("sys").stderr)
            rc = 2
    out = capsys.readouterr()
    return rc, out.out, out.err


def test_scan_then_rescan(folder: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert [(c.name, m and m.name) for c, m in captures_in(folder)] == [
        ("a.slcap", "a.mirror"), ("b.slcap", None)]
    rc, out, _ = cli(["campaign", "scan", str(folder)], capsys)
    assert rc == 0 and "[1/2] a.slcap: decoded" in out and "[2/2] day2/b.slcap: decoded" in out
    told: list[tuple[int, int, str, str]] = []
    again = scan(folder, told=lambda *heard: told.append(heard))
    assert again.decoded == 0 and again.unchanged == 2  # same bytes: nothing decoded again
    assert told == [(1, 2, "a.slcap", "unchanged"), (2, 2, "day2/b.slcap", "unchanged")]
    rows = query(folder)
    assert [(r["capture"], r["board"], r["run"]) for r in rows] == [
        ("a.slcap", 1, 2), ("day2/b.slcap", 1, 2)]  # run 1 of each is idle: left out
    # the key is the capture's SHA-256 (hashlib as the reference)
    assert rows[0]["sha256"] == hashlib.sha256((folder / "a.slcap").read_bytes()).hexdigest()


def test_row_matches_the_run(folder: Path) -> None:
    from slipless.run import open_run

    scan(folder)
    row = query(folder, "capture = 'a.slcap'")[0]
    run = open_run([folder / "a.slcap"], [folder / "a.mirror"])
    doc = next(r for r in run.loss_document()["runs"] if (r["board"], r["run"]) == (1, 2))
    assert row["frames_expected"] == doc["frames_expected"]
    assert row["loss_percent"] == pytest.approx(100 * doc["loss_fraction"])
    assert row["clock_bound_ms"] == pytest.approx(1e3 * run.clocks()[(1, 2)].model.uncertainty_s)
    # the simulated board: cap_amp and coil_current every 1000 us, gyro_z every 5000 us
    assert row["streams"] == "cap_amp:1000, coil_current:1000, gyro_z:200"
    assert 59 < row["duration_s"] < 62 and row["first_utc"].endswith("+00:00")
    assert row["pulses"] > 0 and row["d"] is not None and row["d_se"] > 0
    assert row["d_unit"] == "V/(A rad/s)" and row["ratio"] is None  # no --prediction


def test_changed_capture_is_decoded_again(folder: Path, tmp_path: Path) -> None:
    camp = tmp_path / "c"
    camp.mkdir()
    shutil.copy(folder / "a.slcap", camp / "x.slcap")
    assert scan(camp).decoded == 1
    shutil.copy(folder / "a.mirror", camp / "x.mirror")  # a mirror arrives later
    assert scan(camp).decoded == 1
    (camp / "x.slcap").unlink()
    c = scan(camp)
    assert c.forgotten == 1 and query(camp) == []


def test_list_where_and_json(folder: Path, capsys: pytest.CaptureFixture[str]) -> None:
    scan(folder)
    rc, out, _ = cli(["campaign", "list", str(folder), "--where", "mirror IS NULL", "--json"],
                     capsys)
    assert rc == 0 and [r["capture"] for r in json.loads(out)] == ["day2/b.slcap"]
    rc, out, _ = cli(["campaign", "list", str(folder)], capsys)
    assert rc == 0 and "a.slcap" in out and "2 runs" in out


@pytest.mark.parametrize("where", ["nosuch > 1", "1); DROP TABLE runs; --", "board ="])
def test_bad_where_one_line(folder: Path, where: str, capsys: pytest.CaptureFixture[str]) -> None:
    scan(folder)
    rc, out, err = cli(["campaign", "list", str(folder), "--where", where], capsys)
    assert rc == 2 and err.startswith("slipless: error: --where") and err.count("\n") == 1
    assert len(query(folder)) == 2  # the catalogue is untouched (read-only connection)


def test_bad_folder_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    for verb in (["scan"], ["list"], ["export", "--out", str(tmp_path / "o")]):
        rc, _, err = cli(["campaign", verb[0], str(tmp_path / "none"), *verb[1:]], capsys)
        assert rc == 2 and err == f"slipless: error: {tmp_path / 'none'}: not a folder\n"
    rc, _, err = cli(["campaign", "list", str(tmp_path)], capsys)  # a folder never scanned
    assert rc == 2 and "no catalogue yet" in err and err.count("\n") == 1


def test_unreadable_capture_is_noted_not_fatal(folder: Path, tmp_path: Path) -> None:
    camp = tmp_path / "c"
    camp.mkdir()
    shutil.copy(folder / "a.slcap", camp / "good.slcap")
    (camp / "junk.slcap").write_bytes(b"not a capture at all")
    c = scan(camp)
    assert c.decoded == 1 and len(c.failed) == 1 and c.failed[0].startswith("junk.slcap: ")
    assert [r["capture"] for r in query(camp)] == ["good.slcap"]


def test_export_manifest_and_parquet(folder: Path, tmp_path: Path) -> None:
    import pyarrow.dataset as ds
    import pyarrow.parquet as pq

    scan(folder)
    out = tmp_path / "archive"
    manifest = json.loads(export(folder, out).read_text())
    files = {f["path"]: f for f in manifest["files"]}
    on_disk = {p.relative_to(out).as_posix() for p in out.rglob("*")
               if p.is_file() and p.name != "manifest.json"}
    assert set(files) == on_disk
    for path, f in files.items():  # hashlib's SHA-256 as the reference
        data = (out / path).read_bytes()
        assert f["sha256"] == hashlib.sha256(data).hexdigest() and f["size_B"] == len(data)
    cat = pq.read_table(out / "catalogue.parquet")
    assert cat.num_rows == 2 and cat.schema.field("loss_percent").metadata[b"unit"] == b"%"
    assert manifest["units"]["catalogue"]["clock_bound_ms"] == "ms"
    assert manifest["units"]["tables"]["samples"]["tick_us"] == "us"
    import duckdb  # a second Parquet reader

    got = duckdb.sql(f"SELECT capture, loss_percent FROM '{out / 'catalogue.parquet'}' "
                     "ORDER BY capture").fetchall()
    assert got == [(r["capture"], r["loss_percent"]) for r in query(folder)]
    samples = ds.dataset(out / "tables" / "a" / "samples", format="parquet",
                         partitioning="hive").to_table()
    assert samples.num_rows == query(folder, "capture = 'a.slcap'")[0]["samples"]


def test_export_where_and_bad_out(folder: Path, tmp_path: Path) -> None:
    scan(folder)
    manifest = json.loads(export(folder, tmp_path / "o", "capture LIKE 'day2/%'").read_text())
    assert {p["path"].split("/")[1] for p in manifest["files"] if "/" in p["path"]} == {"day2"}
    (tmp_path / "file").write_text("x")
    with pytest.raises(InputError, match="not a folder"):
        export(folder, tmp_path / "file")
    with pytest.raises(InputError, match="not empty"):  # nothing in it is overwritten
        export(folder, tmp_path / "o")
    with pytest.raises(InputError, match="not empty"):
        export(folder, folder)


def test_damaged_catalogue_one_line(folder: Path, tmp_path: Path,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    camp = tmp_path / "c"
    camp.mkdir()
    (camp / CATALOGUE).write_bytes(b"this is no database" * 100)
    for verb in ("scan", "list"):
        rc, _, err = cli(["campaign", verb, str(camp)], capsys)
        assert rc == 2 and "not a campaign catalogue" in err and err.count("\n") == 1


def test_pulses_over_captures(folder: Path, tmp_path: Path,
                              capsys: pytest.CaptureFixture[str]) -> None:
    scan(folder)
    rows = query(folder)
    rc, out, _ = cli(["campaign", "pulses", str(folder), "--out", str(tmp_path / "p"),
                      "--no-plots"], capsys)
    assert rc == 0
    summary = json.loads((tmp_path / "p" / "summary.json").read_text())
    assert summary["used"] == sum(r["pulses"] for r in rows)  # both captures' pulses together
    # both are board 1 run 2: kept apart as two runs
    assert sorted((r["board"], r["run"]) for r in summary["runs"]) == [(1, 1002), (1, 2002)]
    which = json.loads((tmp_path / "p" / "campaign_runs.json").read_text())["runs"]
    assert [(w["capture"], w["analysed_as_run"]) for w in which] == [
        ("a.slcap", 1002), ("day2/b.slcap", 2002)]
    assert "is run 1002 here" in out
    rc, _, err = cli(["campaign", "pulses", str(folder), "--out", str(tmp_path / "q"),
                      "--where", "board = 99"], capsys)
    assert rc == 2 and "no catalogued runs match" in err


def test_catalogue_is_plain_sqlite(folder: Path) -> None:
    scan(folder)
    con = sqlite3.connect(folder / CATALOGUE)  # any SQLite client can read it
    assert con.execute("SELECT count(*) FROM runs").fetchone() == (2,)
    con.close()


def relabelled(src: Path, dest: Path, **meta: object) -> None:
    """src's records under a header that says more (as `slipless record --label ...` writes)."""
    from slipless.io.capture import CaptureWriter, open_capture

    f, reader = open_capture(src)
    with f:
        w = CaptureWriter(dest, {**reader.meta, **meta})
        for rec in reader:
            w.write(rec.type, rec.source, rec.payload, rec.mono_ns, rec.wall_ns)
        w.close()


def test_header_fields_and_kept_rig(folder: Path, tmp_path: Path) -> None:
    from dataclasses import asdict

    from slipless.sim.scenario import rig_config

    rc = rig_config(ScenarioConfig(seed=1, seconds=60))  # the rig simulated for capture a
    rig = json.loads(json.dumps({"inputs": asdict(rc.rig_inputs()), "results": rc.prediction()},
                                default=float))
    camp = tmp_path / "c"
    camp.mkdir()
    relabelled(folder / "a.slcap", camp / "x.slcap", label="bench 3", operator="KT",
               amplifier="charge amp 10 pF", rig=rig)
    shutil.copy(folder / "a.mirror", camp / "x.mirror")
    scan(camp)
    row = query(camp)[0]
    assert (row["label"], row["operator"], row["amplifier"]) == ("bench 3", "KT", "charge amp 10 pF")
    assert row["ratio"] is not None and row["ratio_se"] > 0  # d / model from the kept rig
    plain = query(folder, "capture = 'a.slcap'")[0]
    assert row["d"] == pytest.approx(plain["d"])  # the same bytes: the same fit
    prediction = tmp_path / "p.json"
    prediction.write_text(json.dumps(rig))
    assert scan(camp, prediction).decoded == 0  # unchanged: not decoded again...
    assert scan(camp, prediction, again=True).decoded == 1  # ...unless asked
    assert query(camp)[0]["ratio"] == pytest.approx(row["ratio"])
