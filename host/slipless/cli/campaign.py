"""`slipless campaign`: a catalogue of every run in a folder of captures, queried,
reduced together, reported on one page and archived."""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

from rich.console import Console

from slipless.decode.tables import FORMATS
from slipless.errors import InputError

# what `campaign list` shows; --json gives every column
LIST_COLUMNS = ("capture", "board", "run", "label", "first_utc", "duration_s",
                "loss_percent", "clock_bound_ms", "pulses", "d", "d_se")


def add_parser(sub: Any) -> None:
    p = sub.add_parser("campaign", help="a catalogue of every run in a folder of captures: "
                       "scan, list, reduce pulses together, report, export an archive")
    verbs = p.add_subparsers(dest="verb", required=True)
    s = verbs.add_parser("scan", help="catalogue new or changed captures (*.slcap, with the "
                         "*.mirror of the same name) into FOLDER/campaign.sqlite")
    s.add_argument("folder", type=Path, metavar="FOLDER")
    s.add_argument("--prediction", type=Path, metavar="FILE",
                   help="output of `slipless predict --json`: each run's d / model")
    s.add_argument("--again", action="store_true", help="decode unchanged captures too (after "
                   "a new --prediction or slipless release)")
    s.add_argument("--quiet", action="store_true", help="no line per capture")
    ls = verbs.add_parser("list", help="the catalogued runs")
    ls.add_argument("folder", type=Path, metavar="FOLDER")
    _where(ls)
    ls.add_argument("--json", action="store_true", help="every column, as JSON")
    e = verbs.add_parser("export", help="the catalogue and each capture's tables as Parquet, "
                         "with a manifest of SHA-256 sums and units")
    e.add_argument("folder", type=Path, metavar="FOLDER")
    e.add_argument("--out", type=Path, required=True, metavar="DIR")
    _where(e)
    u = verbs.add_parser("pulses", help="the pulse reduction over the selected runs together")
    u.add_argument("folder", type=Path, metavar="FOLDER")
    u.add_argument("--out", type=Path, required=True, metavar="DIR")
    _where(u)
    u.add_argument("--format", choices=FORMATS, default="csv", help="table format (default csv)")
    u.add_argument("--prediction", type=Path, metavar="FILE",
                   help="output of `slipless predict --json` to compare d with")
    u.add_argument("--no-plots", action="store_true", help="tables only")
    u.add_argument("--quiet", action="store_true", help="no report on the console")
    r = verbs.add_parser("report", help="one self-contained HTML page across the selected "
                         "runs: the runs, d per run with its interval, and combined")
    r.add_argument("folder", type=Path, metavar="FOLDER")
    r.add_argument("--out", type=Path, required=True, metavar="FILE.html")
    _where(r)
    r.add_argument("--prediction", type=Path, metavar="FILE",
                   help="output of `slipless predict --json`: the combined d against the model")
    r.add_argument("--title", default="slipless campaign report")


def _where(p: argparse.ArgumentParser) -> None:
    p.add_argument("--where", metavar="SQL", help="an SQL condition on the catalogue's columns, "
                   "e.g. \"loss_percent < 1 AND label LIKE 'bench%%'\"")


def run_campaign(args: argparse.Namespace, console: Console) -> int:
    return {"scan": _scan, "list": _list, "export": _export, "pulses": _pulses,
            "report": _report}[args.verb](
        args, console)


def _scan(args: argparse.Namespace, console: Console) -> int:
    from slipless.campaign import scan
    from slipless.cli.progress import bytes_progress

    def told(i: int, n: int, capture: str, what: str) -> None:
        if not args.quiet:
            console.print(f"[{i}/{n}] {capture}: {what}", highlight=False, markup=False)

    c = scan(args.folder, args.prediction, told, bytes_progress(None if args.quiet else console),
             args.again)
    if not (c.decoded or c.unchanged or c.failed):
        console.print(f"no captures (*.slcap) in {args.folder}", highlight=False)
    console.print(f"{c.decoded} decoded, {c.unchanged} unchanged, {len(c.failed)} unreadable, "
                  f"{c.forgotten} gone from the folder; {c.rows} runs (re)catalogued", highlight=False)
    return 0


def _list(args: argparse.Namespace, console: Console) -> int:
    from slipless.campaign import query
    from slipless.cli.text_tables import column, print_table, table

    rows = query(args.folder, args.where)
    if args.json:
        print(json.dumps(rows, indent=1))
        return 0
    t = table(f"{len(rows)} runs in {args.folder}")
    for name in LIST_COLUMNS:
        column(t, name, left=name in ("capture", "label", "first_utc"))
    for r in rows:
        t.add_row(*(_cell(r[n]) for n in LIST_COLUMNS))
    print_table(console, t)
    return 0


def _cell(v: Any) -> str:
    if v is None:
        return "-"
    return f"{v:.4g}" if isinstance(v, float) else str(v)


def _export(args: argparse.Namespace, console: Console) -> int:
    from slipless.campaign import export

    manifest = export(args.folder, args.out, args.where)
    console.print(f"archive written to {args.out}/ (manifest: {manifest.name})", highlight=False)
    return 0


def _pulses(args: argparse.Namespace, console: Console) -> int:
    from slipless.campaign import query
    from slipless.campaign.together import pulses_together
    from slipless.cli.pulses_text import print_report
    from slipless.pulses.report import write_outputs

    rows = query(args.folder, args.where)
    if not rows:
        raise InputError(f"{args.folder}: no catalogued runs" + (
            f" match {args.where!r}" if args.where else " (run `slipless campaign scan` first)"))
    result, names = pulses_together(args.folder, rows, args.prediction)
    paths = write_outputs(result, args.out, args.format, plots=not args.no_plots)
    which = args.out / "campaign_runs.json"
    which.write_text(json.dumps({"where": args.where, "runs": names}, indent=1) + "\n")
    if not args.quiet:
        print_report(result, console)
        for n in names:
            if n["analysed_as_run"] != n["run"]:
                console.print(f"note: {n['capture']} board {n['board']} run {n['run']} is "
                              f"run {n['analysed_as_run']} here (its number repeats)",
                              highlight=False)
        console.print(f"written to {args.out}/: {', '.join(p.name for p in [*paths, which])}",
                      highlight=False)
    return 0


def _report(args: argparse.Namespace, console: Console) -> int:
    from slipless.campaign import query
    from slipless.campaign.report import collect, write
    from slipless.cli.report import check_out

    check_out(args.out)
    rows = query(args.folder, args.where)
    if not rows:
        raise InputError(f"{args.folder}: no catalogued runs" + (
            f" match {args.where!r}" if args.where else " (run `slipless campaign scan` first)"))
    write(collect(args.folder, rows, args.where, args.prediction), args.out, args.title)
    console.print(f"campaign report written to {args.out}", highlight=False)
    return 0
