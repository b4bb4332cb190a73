"""The pulse reduction over runs of several captures.

Each capture is decoded on its own: two captures may reuse a board's run
numbers (a board restarts its count, or the same rig is recorded twice), and
one decode would merge their frames. Runs whose (board, run) repeats across
the selection are renumbered for the analysis, 1000 x the capture's place +
run, so its blocks and per-run rows keep them apart; `runs` says which is which.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from slipless.errors import InputError

RENUMBER = 1000  # 1000 x place + run: the capture and the run stay readable in the number


def pulse_runs_of(folder: Path, rows: Sequence[dict[str, Any]]
                  ) -> tuple[list[Any], list[dict[str, Any]]]:
    """(pulses_data.RunData of the catalogued runs given, and per run: capture,
    board, run and the run number the analysis uses)."""
    from slipless.run import open_run

    if not rows:
        raise InputError(f"{folder}: no catalogued runs chosen")
    captures = sorted({(r["capture"], r["mirror"]) for r in rows})
    chosen = {(r["capture"], r["board"], r["run"]) for r in rows}
    seen: dict[tuple[int, int], int] = {}
    for r in rows:
        seen[(r["board"], r["run"])] = seen.get((r["board"], r["run"]), 0) + 1
    runs, names = [], []
    for place, (capture, mirror) in enumerate(captures, 1):
        run = open_run([folder / capture], [] if mirror is None else [folder / mirror])
        for rd in run.pulse_runs():
            if (capture, rd.board, rd.run) not in chosen:
                continue
            as_run = rd.run + RENUMBER * place if seen[(rd.board, rd.run)] > 1 else rd.run
            names.append({"capture": capture, "board": rd.board, "run": rd.run,
                          "analysed_as_run": as_run})
            runs.append(dataclasses.replace(rd, run=as_run))
    return runs, names


def pulses_together(folder: Path, rows: Sequence[dict[str, Any]],
                    prediction: Path | None = None) -> tuple[Any, list[dict[str, Any]]]:
    """pulses.Analysis over the runs given, and which run is which."""
    from slipless.pulses.analysis import analyse
    from slipless.run import pulse_settings

    runs, names = pulse_runs_of(folder, rows)
    return analyse(runs, *pulse_settings(prediction=prediction)), names
