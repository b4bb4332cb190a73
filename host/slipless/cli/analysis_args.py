"""Command-line options of `slipless predict` and `slipless pulses`.

Only argparse here, so building the parser stays quick; the commands
themselves (predict.py, pulses.py) are imported when they run.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from slipless.decode.tables import FORMATS
from slipless.pulses.options import DEFAULTS


def add_parsers(sub: Any) -> None:
    _predict(sub.add_parser(
        "predict", help="the model's field, capacitance, EMF and amplifier voltage for a rig"))
    _pulses(sub.add_parser(
        "pulses", help="coil pulses -> responses by field and rotation -> the field x rotation term"))


def _predict(p: argparse.ArgumentParser) -> None:
    cap = p.add_argument_group("capacitor")
    cap.add_argument("--inner-mm", type=float, required=True, help="inner cylinder radius a")
    cap.add_argument("--outer-mm", type=float, required=True, help="outer cylinder radius b")
    cap.add_argument("--cap-length-mm", type=float,
                     help="cylinder length (capacitance; the field is averaged over it)")
    cap.add_argument("--cap-offset-mm", type=float, default=0.0,
                     help="the capacitor's middle from the coil's centre along the axis (default 0)")
    cap.add_argument("--eps-r", type=float, default=1.0, help="relative permittivity (default 1)")
    coil = p.add_argument_group("field: the coil, or a measured field")
    coil.add_argument("--turns", type=float)
    coil.add_argument("--coil-length-mm", type=float)
    coil.add_argument("--coil-radius-mm", type=float)
    coil.add_argument("--field-mT", type=float,
                      help="measured field on the axis at the coil centre at --amps (a coil "
                      "given too sets the profile over the capacitor)")
    coil.add_argument("--amps", type=float, required=True, help="coil current")
    coil.add_argument("--coil-ohms", type=float, help="coil resistance (heating, time constant)")
    coil.add_argument("--duty", type=float, default=0.5,
                      help="fraction of time the coil is on (default 0.5: +, off, -, off)")
    rot = p.add_mutually_exclusive_group()
    rot.add_argument("--rpm", type=float, help="rotation rate (+ counter-clockwise seen from +z)")
    rot.add_argument("--rad-per-s", type=float, help="rotation rate in rad/s")
    amp = p.add_argument_group("amplifier and site")
    amp.add_argument("--gain", type=float, default=1.0,
                     help="voltage gain of the amplifier, or of any stage after a charge "
                     "amplifier (default 1)")
    amp.add_argument("--input-pF", type=float, default=0.0,
                     help="voltage amplifier: input capacitance incl. cables (default 0)")
    amp.add_argument("--feedback-pF", type=float,
                     help="a charge amplifier with this feedback capacitance: output C x EMF / Cf")
    amp.add_argument("--latitude-deg", type=float, help="for the Earth's rotation term")
    p.add_argument("--json", action="store_true", help="print JSON (for `slipless pulses --prediction`)")


def add_stream_options(p: argparse.ArgumentParser) -> None:
    """Which streams are the signal, the coil current and the rotation rate
    (`slipless pulses` and `slipless report`)."""
    ch = p.add_argument_group("channels")
    ch.add_argument("--signal", default=DEFAULTS["signal"], metavar="NAME", help="amplifier stream")
    ch.add_argument("--current", default=DEFAULTS["current"], metavar="NAME", help="coil current stream")
    ch.add_argument("--rotation", metavar="NAME",
                    help="rotation-rate stream in rad/s (default gyro_z or rotation_rate)")
    ch.add_argument("--rotation-rate", action="append", metavar="[BOARD:RUN=]RATE",
                    help="rate for runs without a rotation stream, rad/s or e.g. 60rpm (repeatable)")


STREAM_OPTIONS = ("signal", "current", "rotation", "rotation_rate")  # what add_stream_options sets


def _pulses(p: argparse.ArgumentParser) -> None:
    p.add_argument("inputs", nargs="+", type=Path, metavar="INPUT",
                   help="captures, raw streams, or folders written by `slipless decode`")
    p.add_argument("--out", type=Path, required=True, metavar="DIR", help="folder for tables and plots")
    p.add_argument("--mirror", type=Path, action="append", default=[], metavar="FILE",
                   help="the board's file mirror, merged after the inputs (repeatable)")
    p.add_argument("--format", choices=FORMATS, default="csv", help="table format (default csv)")
    add_stream_options(p)
    pu = p.add_argument_group("pulses and windows (defaults from the coil's measured rise time)")
    pu.add_argument("--pulses-from", choices=("auto", "events", "current"), default=DEFAULTS["pulses_from"],
                    help="coil events or the current threshold (default: events if any)")
    pu.add_argument("--on-amps", type=float, help="current threshold: pulse starts above")
    pu.add_argument("--off-amps", type=float, help="current threshold: pulse ends below")
    pu.add_argument("--settle-ms", type=float, help="left out after each switching (default 10 tau)")
    pu.add_argument("--baseline-ms", type=float, help="baseline before and after (default: fits the gap)")
    pu.add_argument("--plateau-ms", type=float, help="longest plateau used (default: all)")
    fit = p.add_argument_group("model")
    fit.add_argument("--by", choices=("current", "sign"), default=DEFAULTS["by"],
                     help="s in the fit: coil current in A (default) or field sign")
    fit.add_argument("--prediction", type=Path, metavar="FILE",
                     help="output of `slipless predict --json` to compare d with")
    fit.add_argument("--level", type=float, default=DEFAULTS["level"], help="confidence level (default 0.95)")
    fit.add_argument("--stopped-below", type=float, metavar="RAD_S",
                     help="rates below this count as stopped (default 0.05)")
    fit.add_argument("--errors", choices=("pulse", "block"), default=DEFAULTS["errors"],
                     help="interval errors: pulse-level HC2 (default) or block-level CR2, for "
                          "an artifact that drifts; both with Bell-McCaffrey df")
    fit.add_argument("--blocks", choices=("cycle", "run"), default=DEFAULTS["blocks"],
                     help="a block: one complete cycle of the conditions in time order "
                          "(default) or one run")
    fit.add_argument("--calibration", type=Path, metavar="FILE",
                     help="a calibration from `slipless calibrate`: streams corrected, its "
                          "scale uncertainties added to d's and d/model's")
    p.add_argument("--no-plots", action="store_true", help="tables only")
    p.add_argument("--quiet", action="store_true", help="no report on the console")

