"""One decoded Run: every input read once, every analysis made from it.

    import slipless
    run = slipless.open(["run.slcap"], mirrors=["run.mirror"])
    run.loss()                      # the frame account per (board, run)
    run.align("aligned", grid="10ms")
    run.pulses()                    # per-condition contrasts and the fit
    run.report("report.html")
    run.to_pandas("samples")        # or run.samples(), run.events(), ... as numpy columns

`open` decodes the inputs (then the mirrors) in one pass through a sink that
feeds the loss facts, the clock facts and a compact sample store
(runstore.ChannelStore: 2 bytes a sample for an int16 stream), and, when
asked, the tables of `slipless decode` in the same pass. Each command is one
Run; the demo's whole analysis is one Run too.
"""

from __future__ import annotations

import copy
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from slipless.align.collect import AlignSink, Collected, _anchor
from slipless.decode.decoder import FATES, ORIGINS, Arrival, Decoder, RunState, Tee
from slipless.decode.store import ChannelStore, Columns
from slipless.decode.tables import TableSink
from slipless.errors import InputError
from slipless.io.inputs import Source, check_decoded, classify_all, feed_all
from slipless.io.pieces import TX_SOURCE_BASE
from slipless.loss.collect import CommandLog, Facts, LossSink, link_down
from slipless.protocol import wire

Key = tuple[int, int]
TABLES = ("samples", "events", "status", "frames", "timing", "streams")


class RunSink(Tee):
    """Hands every decoder call to the sinks the analyses read, and keeps the
    per-frame fates as compact columns."""

    def __init__(self, loss: LossSink, align: AlignSink, tables: TableSink | None,
                 hold: bool, keep_samples: bool = True) -> None:
        self.loss, self.align, self.tables = loss, align, tables
        super().__init__(*([loss, align] if hold else []), *([tables] if tables else []))
        # the sinks that take samples: without keep_samples the Run holds no channel stores
        self.sample_sinks = [s for s in self.sample_sinks if keep_samples or s is not align]
        self.hold = hold
        self.frames = Columns({"board": np.int32, "run": np.int32, "seq": np.int64,
                               "kind": np.int16, "fate": np.int8, "origin": np.int8,
                               "source": np.int32, "offset_B": np.int64, "rx_wall_ns": np.int64})
        self._fate = {f: i for i, f in enumerate(FATES)}
        self._origin = {o: i for i, o in enumerate(ORIGINS)}

    def frame(self, run: RunState, seq: int, kind: int, fate: str, offset: int, origin: str,
              arrival: Arrival) -> None:
        super().frame(run, seq, kind, fate, offset, origin, arrival)
        if self.hold:
            self.frames.append(run.board, run.run, seq, kind, self._fate.get(fate, -1),
                               self._origin.get(origin, -1), arrival.source if kind >= 0 else -1,
                               offset, arrival.wall_ns)

    def received_frames(self, run: RunState, seq0: int, offsets: np.ndarray, origin: str,
                        arrival: Arrival) -> None:
        super().received_frames(run, seq0, offsets, origin, arrival)
        if self.hold:  # the rows frame() keeps for each of them
            fate, how = self._fate["received"], self._origin.get(origin, -1)
            for q, offset in enumerate(offsets.tolist()):
                self.frames.append(run.board, run.run, seq0 + q, wire.SAMPLES, fate, how,
                                   arrival.source, offset, arrival.wall_ns)


@dataclass
class Run:
    """Decoded inputs: the decoder's per-run state and counters, and what every
    analysis reads. Made by `open`."""

    sources: list[Source]
    decoder: Decoder
    sink: RunSink
    resends: list[Any]
    link_down: list[Any]
    anchors: list[int | None]
    before_mirrors: Facts | None = None  # the loss facts of the inputs alone (open_run's
    # account_inputs): what the radio delivered before the mirror filled it in
    calibration: Any = None  # the calib.file.Calibration applied (calibrate())

    def metadata(self) -> list[dict[str, Any]]:
        """Per input: its path, kind and, for a capture, its header (label, operator,
        amplifier, rig, recorder, laptop, dates), `prediction` (the header's rig: the
        `slipless predict --json` document given to record, or None) and `boards`
        (per board that answered at connect: fw version, name, profile, config_sha,
        fw_sha and the rest of its `board` event, CAPTURE.md)."""
        from slipless.io.capture_meta import board_facts, capture_header

        out = []
        for s in self.sources:
            header = capture_header(s.path) if s.kind == "capture" else None
            out.append({"path": str(s.path), "kind": s.kind, "header": header,
                        "prediction": (header or {}).get("rig"),
                        "boards": board_facts(s.path) if header is not None else []})
        return out

    def calibrate(self, cal: Any) -> list[str]:
        """Apply a calibration (calib.file.Calibration, or a path to its file) to the
        channels: align, pulses and the report then read corrected values, and
        pulses adds its uncertainty to d's. Returns the streams calibrated."""
        from slipless.calib import apply, file

        if isinstance(cal, str | Path):
            cal = file.load(Path(cal))
        self.calibration = cal
        return apply.apply(self.channels, cal)

    # ---- what was decoded -------------------------------------------------------------
    @property
    def runs(self) -> dict[Key, RunState]:
        return self.decoder.runs

    @property
    def channels(self) -> dict[tuple[int, int, int], ChannelStore]:
        return self.sink.align.channels

    def channel(self, name: str, board: int | None = None, run: int | None = None) -> ChannelStore:
        """The one stream called `name` (of `board`, `run` when several runs have it)."""
        found = [ch for (b, r, _), ch in sorted(self.channels.items()) if ch.info.name == name
                 and board in (None, b) and run in (None, r)]
        if len(found) != 1:
            have = sorted({ch.info.name for ch in self.channels.values()})
            raise InputError(f"stream {name!r}: {'not found' if not found else 'in several runs'}"
                             f" (streams: {', '.join(have) or 'none'}; give board= and run=)")
        return found[0]

    @property
    def facts(self) -> Facts:
        """What the loss account reads (loss_collect.Facts)."""
        for run in self.decoder.runs.values():  # runs whose frames were all duplicates
            self.sink.loss.facts_for(run)
        return Facts(self.sink.loss.runs, self.decoder, self.resends, self.link_down, self.sources)

    @property
    def collected(self) -> Collected:
        """What the clock fit and the aligned tables read (align_collect.Collected)."""
        return Collected(self.decoder, self.sink.align, self.sources, self.anchors)

    # ---- analyses ---------------------------------------------------------------------
    def loss(self, angle_stream: str | None = None, index_marker: int | None = None,
             bins: int = 12, gmin: int | None = None) -> list[Any]:
        """The frame and sample account of every run (loss.RunAccount)."""
        from slipless.loss.account import GMIN, analyse

        return analyse(self.facts, angle_stream, index_marker, bins, GMIN if gmin is None else gmin)

    def loss_document(self, max_loss: float | None = None, **options: Any) -> dict[str, Any]:
        """`slipless loss --json` as a dict."""
        from slipless.loss.report import document

        return document(self.loss(**options), self.facts, max_loss)

    def align(self, out: Path | str, grid: str | int = "10ms", fmt: str = "csv",
              window_s: float = 600.0, asymmetry_s: float = 0.0) -> Any:
        """Fit every board clock and write the aligned tables and the grid (align.AlignResult).
        asymmetry_s: how much longer the least latency board -> laptop is than the
        other way (`align --asymmetry`)."""
        from slipless.align.aligned import align_collected
        from slipless.align.period import parse_period

        try:
            period = grid if isinstance(grid, int) else parse_period(grid)
        except ValueError as exc:
            raise InputError(f"grid: {exc}") from exc
        return align_collected(self.collected, Path(out), fmt, period, window_s, asymmetry_s)

    def clocks(self, window_s: float = 600.0, asymmetry_s: float = 0.0) -> dict[Key, Any]:
        """The clock model of every run (align.RunClock), nothing written."""
        from slipless.align.aligned import _extents, fit_run

        col = self.collected
        return {key: fit_run(col, key, ext, window_s, asymmetry_s)
                for key, ext in sorted(_extents(col).items())}

    def pulse_runs(self) -> list[Any]:
        """Every run as named series in board time (pulses_data.RunData)."""
        from slipless.pulses.data import runs_from_channels

        coil: dict[Key, list[tuple[int, int]]] = {}
        for b, r, _, tick, code, value in self.sink.align.events:
            if code == wire.EV_COIL:
                coil.setdefault((b, r), []).append((tick, value))
        return runs_from_channels(self.channels, coil,
                                  {k: r.tick_hz for k, r in self.decoder.runs.items()})

    def pulses(self, settings: Any = None, options: Any = None, **cli_options: Any) -> Any:
        """The pulse reduction (pulses.Analysis). settings/options as pulses.Settings and
        pulses.Options, or keyword arguments named as the command's options
        (signal="cap_amp", current="coil_current", prediction="prediction.json", ...)."""
        from slipless.pulses.analysis import analyse

        if settings is None or options is None:
            settings, options = pulse_settings(**cli_options)
        if options.calibration is not None:
            self.calibrate(options.calibration)
        return analyse(self.pulse_runs(), settings, options)

    def report(self, out: Path | str, prediction: Path | str | None = None,
               title: str = "slipless run report", subtitle: str = "",
               calibration: Path | str | None = None,
               streams: dict[str, Any] | None = None) -> Path:
        """The self-contained HTML report; returns its path. streams: the stream
        names as `slipless report --signal/--current/--rotation` take them."""
        from slipless.report.page import collect, write

        data = collect(self, None if prediction is None else Path(prediction),
                       None if calibration is None else Path(calibration), streams=streams)
        return Path(write(data, Path(out), title, subtitle))

    # ---- columns ----------------------------------------------------------------------
    def samples(self, board: int | None = None, run: int | None = None,
                stream: int | str | None = None) -> dict[str, np.ndarray]:
        """Sample columns (board, run, stream, name, seq, tick_us, board_time_s, raw, value,
        unit) for the channels chosen; every channel when none is named."""
        parts: list[dict[str, np.ndarray]] = []
        for (b, r, s), ch in sorted(self.channels.items()):
            if board not in (None, b) or run not in (None, r) or stream not in (None, s, ch.info.name):
                continue
            n, hz = ch.n, self.decoder.runs[(b, r)].tick_hz or 1_000_000
            tick = ch.ticks()
            parts.append({"board": np.full(n, b, np.int32), "run": np.full(n, r, np.int32),
                          "stream": np.full(n, s, np.int16),
                          "name": np.full(n, ch.info.name, object), "seq": ch.seqs(),
                          "tick_us": tick, "board_time_s": tick / hz, "raw": ch.raw_values(),
                          "value": ch.values(), "unit": np.full(n, ch.info.unit, object)})
        return _join(parts, ("board", "run", "stream", "name", "seq", "tick_us", "board_time_s",
                             "raw", "value", "unit"))

    def events(self) -> dict[str, np.ndarray]:
        """Event columns (board, run, seq, tick_us, board_time_s, event, code, value)."""
        ev = self.sink.align.events
        cols = _tuples(ev, ("board", "run", "seq", "tick_us", "code", "value"))
        cols["board_time_s"] = self._seconds(cols["board"], cols["run"], cols["tick_us"])
        cols["event"] = np.array([wire.EVENT_NAMES.get(int(c), f"code{c}") for c in cols["code"]],
                                 dtype=object)
        return cols

    def status(self) -> dict[str, np.ndarray]:
        """STATUS columns: board, run, seq and every STATUS field (wire.STATUS_FIELDS)."""
        rows = [(b, r, q, *(f[k] for k in wire.STATUS_FIELDS))
                for b, r, q, f in self.sink.align.status_rows]
        cols = _tuples(rows, ("board", "run", "seq", *wire.STATUS_FIELDS))
        cols["board_time_s"] = self._seconds(cols["board"], cols["run"], cols["tick"])
        return cols

    def frames(self) -> dict[str, np.ndarray]:
        """One row per frame the decoder accounted (received, duplicate, missing,
        corrupt): kind, fate and origin as codes with their names beside them."""
        cols = dict(self.sink.frames.arrays())
        cols["fate_name"] = np.array(FATES + ("",), dtype=object)[cols["fate"]]
        cols["origin_name"] = np.array(ORIGINS + ("",), dtype=object)[cols["origin"]]
        cols["kind_name"] = np.array([wire.KIND_NAMES.get(int(k), "") for k in cols["kind"]],
                                     dtype=object)
        return cols

    def streams(self) -> dict[str, np.ndarray]:
        rows = [(b, r, s, ch.info.name, ch.info.unit, ch.info.period_us, ch.info.scale,
                 ch.info.offset, ch.n) for (b, r, s), ch in sorted(self.channels.items())]
        return _tuples(rows, ("board", "run", "stream", "name", "unit", "period_us", "scale",
                              "offset", "samples"))

    def to_pandas(self, table: str = "samples") -> Any:
        """One table as a pandas DataFrame (pandas is an optional extra: pip install pandas)."""
        if table not in TABLES:
            raise InputError(f"table {table!r}: choose one of {', '.join(TABLES)}")
        try:
            import pandas as pd
        except ImportError as exc:
            raise InputError("to_pandas needs pandas: pip install pandas") from exc
        return pd.DataFrame(getattr(self, table)())

    def _seconds(self, board: np.ndarray, run: np.ndarray, tick: np.ndarray) -> np.ndarray:
        hz = np.array([self.decoder.runs[(int(b), int(r))].tick_hz or 1_000_000 if
                       (int(b), int(r)) in self.decoder.runs else 1_000_000
                       for b, r in zip(board, run)], dtype=np.float64)
        return tick / hz if tick.size else np.zeros(0)


def _tuples(rows: Sequence[tuple[Any, ...]], names: Sequence[str]) -> dict[str, np.ndarray]:
    if not rows:
        return {n: np.zeros(0, np.int64) for n in names}
    return {n: _column(list(col)) for n, col in zip(names, zip(*rows))}


def _column(values: list[Any]) -> np.ndarray:
    if all(isinstance(v, (int, np.integer)) for v in values):
        return np.array(values, dtype=np.int64)
    if all(isinstance(v, (int, float, np.number)) for v in values):
        return np.array(values, dtype=np.float64)
    return np.array(values, dtype=object)


def _join(parts: list[dict[str, np.ndarray]], names: Sequence[str]) -> dict[str, np.ndarray]:
    if not parts:
        return {n: np.zeros(0) for n in names}
    return {n: np.concatenate([p[n] for p in parts]) for n in names}


def pulse_settings(**options: Any) -> tuple[Any, Any]:
    """pulses.Settings and Options from keyword arguments named as the command's options."""
    from slipless.pulses.analysis import settings_from_args
    from slipless.pulses.options import namespace

    return settings_from_args(namespace(**options))


def open_run(inputs: Sequence[Path | str] | Path | str, mirrors: Sequence[Path | str] = (), *,
             tables: Path | str | None = None, table_format: str = "csv",
             angle_stream: str | None = None, progress: Any = None, hold: bool = True,
             keep_samples: bool = True, account_inputs: bool = False) -> Run:
    """Decode captures, btsnoop logs or raw streams (then the board's mirror
    files) once. progress: told of large inputs as they are read (an object
    with task(name, total) -> advance(n) and close(), as the command line's
    bar); tables: also write `slipless decode`'s tables into this
    folder in the same pass; hold=False keeps nothing but the decoder's
    counts (for writing tables in constant memory); keep_samples=False keeps
    no channel stores (the loss account needs none); account_inputs: also
    keep the loss facts of the inputs without the mirrors (Run.before_mirrors),
    taken from a copy of the decoder's state as the first mirror starts."""
    if isinstance(inputs, (str, Path)):
        inputs = [inputs]
    sources = classify_all([Path(p) for p in inputs], [Path(p) for p in mirrors])
    table_sink = None if tables is None else TableSink(Path(tables), table_format)
    align = AlignSink()
    sink = RunSink(LossSink(angle_stream), align, table_sink, hold, keep_samples)
    dec = Decoder(sink)
    commands = CommandLog()

    def tap(data: bytes, where: Arrival) -> None:
        if where.source >= TX_SOURCE_BASE:  # what the laptop wrote: its RESEND commands
            commands.feed(data, where)

    before: list[Facts] = []

    def on_source(i: int, src: Source) -> None:
        align.input = i
        commands.new_input()
        if account_inputs and src.kind == "mirror" and not before:
            before.append(_facts_so_far(dec, sink, sources[:i], commands))

    feed_all(dec, sources, progress, tap=tap if hold else None, on_source=on_source)
    if table_sink is not None:
        table_sink.close(list(dec.runs.values()), dec.missing, dec.corrupt_guess)
    check_decoded(dec, sources)
    align.seal()
    downs = ([d for src in sources if src.kind == "capture" for d in link_down(src.path)]
             if hold else [])
    anchors = [_anchor(src, i, align) for i, src in enumerate(sources)] if hold else []
    run = Run(sources, dec, sink, commands.resends, downs, anchors)
    if account_inputs:
        run.before_mirrors = before[0] if before else run.facts
        run.before_mirrors.link_down = downs
    return run


def _facts_so_far(dec: Decoder, sink: RunSink, sources: list[Source], commands: CommandLog
                  ) -> Facts:
    """Finish a copy of the decoder (its loss sink alone) as if the inputs ended here."""
    memo: dict[int, Any] = {}
    loss = copy.deepcopy(sink.loss, memo)
    memo[id(sink)] = loss  # the copy's decoder talks to the copied loss sink only
    dec2 = copy.deepcopy(dec, memo)
    dec2.finish()
    dec2.notes += [s.note for s in sources if s.note]
    for run in dec2.runs.values():
        loss.facts_for(run)
    return Facts(loss.runs, dec2, list(commands.resends), [], list(sources))
