"""Coverage-guided fuzzing of one reader with atheris (libFuzzer), for `make fuzz`.

    python tests/fuzz/fuzz_<reader>.py CORPUS_DIR -max_total_time=60

The corpus folder is seeded with valid inputs (frames, a capture, a config,
commands) so mutation starts next to real data. A crash or a timeout (libFuzzer
-timeout: no input may take that long) fails the run and leaves the input in
crash-*/timeout-* files.
"""

from __future__ import annotations

import sys
from pathlib import Path

import atheris

sys.path.insert(0, str(Path(__file__).resolve().parent))

with atheris.instrument_imports(include=["slipless", "targets", "wire", "config", "commands",
                                         "auth", "board", "framer", "ring"]):
    import targets

    targets._firmware()  # the board's modules, imported here so they are instrumented
    import auth  # noqa: F401
    import board  # noqa: F401
    import commands  # noqa: F401
    import config  # noqa: F401

    import slipless.io.btsnoop  # noqa: F401
    import slipless.io.inputs  # noqa: F401


def seeds(name: str) -> list[bytes]:
    from slipless.protocol import wire
    from slipless.sim.board import SimConfig, simulate

    frames = b"".join(f for _, f in simulate(SimConfig(seconds=1, seed=1)))
    if name in ("deframe", "decoder", "mirror"):
        return [frames, frames[:500]]
    if name == "capture_records":
        return [frames[:1000]]
    if name == "capture":
        return [targets.capture_header()[8:]]
    if name == "config":
        return [(targets.REPO / "firmware" / "config.example.json").read_bytes(), b"{}"]
    if name == "commands":
        enc = wire.Encoder(0xFFFF, 0)
        from slipless.record import keys

        return [enc.frame(enc.start(1, 5, "x")), enc.frame(enc.ping(2, 7)),
                enc.frame(keys.Signer(targets.KEY).command(enc, wire.CMD_STOP, 3))]
    return [b""]


def fuzz(name: str) -> None:
    check = targets.ALL[name]
    args = [a for a in sys.argv[1:] if not a.startswith("-")]
    if args:  # seed the corpus folder once
        corpus = Path(args[0])
        corpus.mkdir(parents=True, exist_ok=True)
        if not any(corpus.iterdir()):
            for i, s in enumerate(seeds(name)):
                (corpus / f"seed-{i}").write_bytes(s)
    atheris.Setup(sys.argv, check)
    atheris.Fuzz()
